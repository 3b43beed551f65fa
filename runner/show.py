"""`stepmeter show`: re-run one stored trial and print its spec, its rows and, on grid maps, what it learned.

The stored spec is checked first (`runner.trust.check_stored_spec`: it must hash to its id; code outside
stepmeter only with `--trust-code`). The trial is re-run on the path it was stored from, so its rows can be
compared with the stored ones bit for bit, and the agent's final action values are drawn on the map as the
greedy policy (one arrow per cell) with the learned state values (the largest action value of each cell).
"""

from __future__ import annotations

import json
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from runner.analysis.frames import open_store
from runner.envs.grid import parse_grid_map
from runner.envs.sources import build_env
from runner.metrics import INT_COLUMNS, METRIC_COLUMNS, TIMING_COLUMNS
from runner.rerun import compare_rows, select_trials
from runner.schedule import warm_up
from runner.trial import run_trial
from runner.trust import check_stored_spec
from runner.wording import number

__all__ = ["ARROWS", "ShownTrial", "policy_map", "show_trial"]

ARROWS = "^>v<"
"""The greedy action drawn in a cell: north, east, south, west (the grid maps' action order)."""
_LAKE_ARROWS = "<v>^"
"""FrozenLake's action order: left, down, right, up."""
_TIED = "?"
"""A cell whose action values all tie (never learned there): no preferred action to draw."""
_SHOWN_COLUMNS = (
    "real_steps",
    "episodes",
    "eval_return",
    "reward_earned",
    "real_updates",
    "planning_updates",
    "model_tv_error",
    "env_phase",
)


@dataclass
class ShownTrial:
    """One re-run trial: who it is, its spec, its fresh rows, the comparison with the stored rows, its values."""

    trial_id: str
    label: str
    trial_path: str
    spec: dict
    rows: dict[str, np.ndarray]
    difference: str | None
    final_values: np.ndarray | None

    def text(self) -> str:
        """Everything `stepmeter show` prints, as one text."""
        lines = [f"trial {self.trial_id}: {self.label} ({self.trial_path} path)", "", "spec:"]
        lines += ["  " + line for line in json.dumps(self.spec, indent=2, sort_keys=True).splitlines()]
        lines += ["", "rows (one per evaluation point):", *rows_table(self.rows), ""]
        verdict = "the same as the stored rows, bit for bit" if self.difference is None else self.difference
        lines.append(f"re-run rows: {verdict}")
        drawing = self.drawing()
        if drawing:
            lines += ["", *drawing]
        return "\n".join(lines)

    def drawing(self) -> list[str]:
        """The greedy policy and learned values on the map of the trial's last phase (grid maps and FrozenLake)."""
        layout = _layout(self.spec.get("env", {}), int(self.rows["env_phase"][-1]))
        if layout is None or self.final_values is None:
            return []
        rows, arrows_of, fixed, which, cells = layout
        arrows, values = policy_map(rows, self.final_values, arrows=arrows_of, fixed=fixed)
        return [
            f"greedy policy at the end, on the {which} (^ > v < the best action; ? where all actions tie; {cells}):",
            *("  " + line for line in arrows),
            "",
            "learned state values at the end (the best action value of each cell):",
            *("  " + line for line in values),
        ]


def _layout(env: dict, phase: int) -> tuple[tuple[str, ...], str, str, str, str] | None:
    """Map rows, arrows in action order, cells drawn as themselves, which map, and what the cells mean; None for
    environments that are not drawn on a map."""
    if env.get("source") == "grid":
        maps = [env["map"], *(change["map"] for change in env.get("changes") or [])]
        which = f"map of phase {phase} (after {phase} of {len(maps) - 1} changes)" if len(maps) > 1 else "map"
        return parse_grid_map(maps[phase]), ARROWS, "#GX", which, "# wall, G goal, X hazard"
    if env.get("source") == "gym" and str(env.get("id", "")).startswith("FrozenLake"):
        built = build_env(env)
        try:
            desc = built.unwrapped.desc
        finally:
            built.close()
        rows = tuple("".join(cell.decode() for cell in row) for row in desc)
        return rows, _LAKE_ARROWS, "HG", f"{env['id']} lake", "H hole, G goal"
    return None


def policy_map(
    rows: tuple[str, ...], values: np.ndarray, *, arrows: str = ARROWS, fixed: str = "#GX"
) -> tuple[list[str], list[str]]:
    """The greedy action of every cell drawn on the map, and the learned state values laid out like the map.

    Parameters
    ----------
    rows : tuple of str
        The map, one string per row.
    values : ndarray of shape (n_rows * n_cols, n_actions)
        Action values per cell (row-major) and action.
    arrows : str
        The arrow of each action, in action order (grid maps: north, east, south, west).
    fixed : str
        Cells drawn as themselves, with no arrow: walls (no value shown), goals and hazards or holes.
    """
    width = len(rows[0])
    cells = "".join(rows)
    drawn, numbers = [], []
    state_values = values.max(axis=1)
    shown = [f"{v:.2f}" for v in state_values]
    pad = max(len(text) for text in shown)
    for r in range(len(rows)):
        line, value_line = [], []
        for c in range(width):
            s = r * width + c
            cell = cells[s]
            if cell in fixed:
                line.append(cell)
                value_line.append((" " if cell == "#" else cell).rjust(pad))
                continue
            row_values = values[s]
            best = np.flatnonzero(row_values == row_values.max())
            line.append(_TIED if best.size == row_values.size else arrows[int(best[0])])
            value_line.append(shown[s].rjust(pad))
        drawn.append("".join(line))
        numbers.append(" ".join(value_line))
    return drawn, numbers


def rows_table(rows: dict[str, np.ndarray]) -> list[str]:
    """The shown metric columns as an aligned text table, whole numbers with thousands separators."""
    columns = [c for c in _SHOWN_COLUMNS if c in rows]
    cells = [
        ["n/a" if not np.isfinite(v) else number(v) if name in INT_COLUMNS else f"{v:.4g}" for v in rows[name].tolist()]
        for name in columns
    ]
    widths = [max(len(name), *(len(t) for t in column)) for name, column in zip(columns, cells, strict=True)]
    lines = ["  " + "  ".join(name.rjust(w) for name, w in zip(columns, widths, strict=True))]
    for i in range(len(cells[0]) if cells else 0):
        lines.append("  " + "  ".join(column[i].rjust(w) for column, w in zip(cells, widths, strict=True)))
    return lines


def show_trial(folder: str | Path, given_id: str, *, trust_code: bool = False) -> ShownTrial:
    """Re-run the stored trial `given_id` (an id or a unique prefix) of `folder` and compare its rows."""
    (trial_id,) = select_trials(folder, [given_id], None, False, 0)
    compared = [c for c in METRIC_COLUMNS if c not in TIMING_COLUMNS]
    with open_store(folder) as store:
        spec_text, path, env, agent, seed = store.query(
            "SELECT spec, trial_path, env_label, agent_label, seed FROM trials WHERE trial_id = ?", (trial_id,)
        )[0]
        spec = json.loads(spec_text)
        check_stored_spec(trial_id, spec, trust_code=trust_code, where=str(folder))
        stored = np.array(
            store.query(f"SELECT {', '.join(compared)} FROM metrics WHERE trial_id = ? ORDER BY point", (trial_id,)),
            dtype=np.float64,
        )
    warm_up([(spec, path)])
    result = run_trial(spec, path)
    fresh = np.column_stack([result.rows[c] for c in compared])
    return ShownTrial(
        trial_id=trial_id,
        label=f"{env} / {agent} / seed {seed}",
        trial_path=result.trial_path,
        spec=spec,
        rows=result.rows,
        difference=compare_rows(stored, fresh, compared),
        final_values=result.final_values,
    )
