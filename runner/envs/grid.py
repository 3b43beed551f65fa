"""Text grid maps declared in an experiment, built as gymnasium environments with a known transition table.

Cells: `.` floor, `#` wall or shelving, `S` start (several allowed: uniform), `G` goal (ends the episode),
`~` slippery floor (a move slips sideways with probability `slip`), `X` hazard (penalty; ends the episode
when `hazard_ends`). Actions: 0 north, 1 east, 2 south, 3 west. Bumping into a wall or the edge stays put.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import ClassVar

import gymnasium as gym
import numpy as np

__all__ = ["CELL_MEANINGS", "GridMapError", "GridSpec", "GridWorld", "parse_grid_map"]

CELL_MEANINGS = {
    ".": "floor",
    "#": "wall or shelving (cannot be entered)",
    "S": "start cell (several: chosen uniformly)",
    "G": "goal (reward goal_reward, ends the episode)",
    "~": "slippery floor (a move from it slips sideways with probability slip)",
    "X": "hazard (reward hazard_penalty; ends the episode when hazard_ends)",
}
_MOVES = ((-1, 0), (0, 1), (1, 0), (0, -1))


class GridMapError(ValueError):
    """A grid map's text is malformed; `row` is the 0-based map row at fault, or None."""

    def __init__(self, message: str, row: int | None = None) -> None:
        super().__init__(message)
        self.row = row


@dataclass(frozen=True)
class GridSpec:
    """A parsed grid map with its rewards and dynamics settings."""

    rows: tuple[str, ...]
    slip: float = 0.0
    step_reward: float = 0.0
    goal_reward: float = 1.0
    hazard_penalty: float = -1.0
    hazard_ends: bool = True

    @property
    def shape(self) -> tuple[int, int]:
        return len(self.rows), len(self.rows[0])


def parse_grid_map(text: str) -> tuple[str, ...]:
    """Split and check a map: rectangular, known cells, at least one start and one goal.

    Blank lines are ignored; a GridMapError's `row` is the index of the offending line in `text.splitlines()`.
    """
    numbered = [(i, line.strip()) for i, line in enumerate(text.splitlines()) if line.strip()]
    if not numbered:
        raise GridMapError("the map is empty; expected rows of cells such as 'S..#G'")
    width = len(numbered[0][1])
    for k, (i, row) in enumerate(numbered):
        if len(row) != width:
            raise GridMapError(f"map row {k + 1} has {len(row)} cells, expected {width} like row 1", row=i)
        for ch in row:
            if ch not in CELL_MEANINGS:
                known = " ".join(repr(c) for c in CELL_MEANINGS)
                raise GridMapError(f"map row {k + 1} has unknown cell {ch!r}; expected one of {known}", row=i)
    rows = tuple(row for _, row in numbered)
    joined = "".join(rows)
    if "S" not in joined:
        raise GridMapError("the map has no start cell 'S'")
    if "G" not in joined:
        raise GridMapError("the map has no goal cell 'G'")
    return rows


def transition_table(spec: GridSpec) -> dict[int, dict[int, list[tuple[float, int, float, bool]]]]:
    """The table P[s][a] = [(probability, next state, reward, terminated), ...] with merged outcomes."""
    n_rows, n_cols = spec.shape
    cells = "".join(spec.rows)
    table: dict[int, dict[int, list[tuple[float, int, float, bool]]]] = {}
    for s, cell in enumerate(cells):
        table[s] = {}
        r, c = divmod(s, n_cols)
        for a in range(4):
            if cell in "G#" or (cell == "X" and spec.hazard_ends):
                table[s][a] = [(1.0, s, 0.0, True)]
                continue
            if cell == "~" and spec.slip > 0:
                outcomes = [(1.0 - spec.slip, a), (spec.slip / 2, (a + 1) % 4), (spec.slip / 2, (a + 3) % 4)]
            else:
                outcomes = [(1.0, a)]
            merged: dict[int, float] = {}
            for prob, direction in outcomes:
                dr, dc = _MOVES[direction]
                nr, nc = r + dr, c + dc
                if not (0 <= nr < n_rows and 0 <= nc < n_cols) or cells[nr * n_cols + nc] == "#":
                    nr, nc = r, c
                nxt = nr * n_cols + nc
                merged[nxt] = merged.get(nxt, 0.0) + prob
            entries = []
            for nxt, prob in merged.items():
                target = cells[nxt]
                if target == "G":
                    entries.append((prob, nxt, spec.goal_reward, True))
                elif target == "X":
                    entries.append((prob, nxt, spec.hazard_penalty, spec.hazard_ends))
                else:
                    entries.append((prob, nxt, spec.step_reward, False))
            table[s][a] = entries
    return table


class GridWorld(gym.Env):
    """A grid map as a gymnasium environment; `P` and `initial_state_distrib` expose its table.

    `changes` lists maps of the same size that replace the map after given numbers of real steps
    (`[{"at": 3000, "map": "..."}]`); the trial runner calls `set_phase` at those steps, on the training and the
    evaluation copy alike. Phase 0 is the first map.
    """

    metadata: ClassVar[dict] = {"render_modes": ["ansi"]}

    def __init__(
        self,
        map: str,
        slip: float = 0.0,
        step_reward: float = 0.0,
        goal_reward: float = 1.0,
        hazard_penalty: float = -1.0,
        hazard_ends: bool = True,
        changes: list[dict] | None = None,
        render_mode: str | None = None,
    ) -> None:
        maps = [map, *(change["map"] for change in changes or [])]
        self.change_steps = tuple(int(change["at"]) for change in changes or [])
        self._phases = [
            GridSpec(parse_grid_map(text), slip, step_reward, goal_reward, hazard_penalty, hazard_ends) for text in maps
        ]
        shapes = {spec.shape for spec in self._phases}
        if len(shapes) != 1:
            raise GridMapError(f"every changed map must keep the first map's size {self._phases[0].shape}")
        n_rows, n_cols = self._phases[0].shape
        self.observation_space = gym.spaces.Discrete(n_rows * n_cols)
        self.action_space = gym.spaces.Discrete(4)
        self.render_mode = render_mode
        self.set_phase(0)
        self.s = int(np.flatnonzero(self.initial_state_distrib)[0])

    @property
    def n_phases(self) -> int:
        """How many maps the environment goes through (1 when it never changes)."""
        return len(self._phases)

    def set_phase(self, phase: int) -> None:
        """Switch to map number `phase`; the agent stays in its cell."""
        self.phase = phase
        self.spec_ = self._phases[phase]
        n_rows, n_cols = self.spec_.shape
        cells = "".join(self.spec_.rows)
        self.P = transition_table(self.spec_)
        starts = [i for i, ch in enumerate(cells) if ch == "S"]
        self.initial_state_distrib = np.zeros(n_rows * n_cols)
        self.initial_state_distrib[starts] = 1.0 / len(starts)

    def reset(self, *, seed: int | None = None, options: dict | None = None):
        super().reset(seed=seed)
        self.s = int(self.np_random.choice(self.initial_state_distrib.size, p=self.initial_state_distrib))
        return self.s, {"prob": 1.0}

    def step(self, action: int):
        outcomes = self.P[self.s][int(action)]
        if len(outcomes) == 1:
            prob, nxt, reward, terminated = outcomes[0]
        else:
            probs = np.array([o[0] for o in outcomes])
            prob, nxt, reward, terminated = outcomes[int(self.np_random.choice(len(outcomes), p=probs))]
        self.s = nxt
        return nxt, reward, terminated, False, {"prob": prob}

    def render(self) -> str:
        n_cols = self.spec_.shape[1]
        cells = ["".join(row) for row in self.spec_.rows]
        r, c = divmod(self.s, n_cols)
        line = cells[r]
        cells[r] = line[:c] + "@" + line[c + 1 :]
        return "\n".join(cells)
