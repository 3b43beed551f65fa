"""A take-away game (normal-play Nim) seen by one learning agent, with the opponent folded into the dynamics.

Positions are heap sizes `(h_0, ..., h_{k-1})` with `0 <= h_i <= heaps[i]`, encoded as one integer in mixed radix
(`position = sum h_i * stride_i`, `stride_0 = 1`, `stride_{i+1} = stride_i * (heaps[i] + 1)`), so position 0 is
the empty board. A move takes `count` objects (1..the heap's size) from one heap; action
`a = heap * max_heap + (count - 1)`. Whoever takes the last object wins.

The agent is player 0 and always moves first from the start position. After each legal move of the agent the
opponent (player 1) replies at once inside `step`, so every observation that is not the end of the game is a
position with the agent to move. Rewards: +1 when the agent takes the last object, -1 when the opponent does,
`illegal_reward` for an illegal action (taking more than the heap holds, or from an empty heap), which leaves
the position unchanged and does not pass the turn, 0 otherwise.

Because the opponent is a fixed policy, the agent's view is a Markov decision process whose table `P` (with the
opponent's reply distribution folded in) and `initial_state_distrib` are exposed as in gymnasium's toy-text
environments, and `step` draws from exactly that distribution. `game_rules()` gives the bare two-player rules as
arrays, for players that search the game tree in compiled code.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any, ClassVar

import gymnasium as gym
import numpy as np

__all__ = ["OPPONENTS", "RULE_FIELDS", "STARTS", "TakeAwayGame", "nim_sum"]

OPPONENTS = ("random", "optimal")
"""`random`: a uniformly random legal move; `optimal`: a move to a position whose heaps XOR to 0 when there is one
(the first such heap in heap order), else one object from the largest heap (the first largest)."""

STARTS = ("heaps", "random")
"""`heaps`: every episode starts from the full heaps; `random`: uniform over all non-empty positions."""

RULE_FIELDS = ("next_position", "is_terminal", "terminal_value", "sizes")
"""Order of the arrays in `game_rules()`."""

_AGENT, _OPPONENT = 0, 1
Outcome = tuple[float, int, float, bool]


def nim_sum(sizes: Sequence[int] | np.ndarray) -> int:
    """Bitwise XOR of the heap sizes (0 means the player to move loses against best play)."""
    total = 0
    for h in sizes:
        total ^= int(h)
    return total


class TakeAwayGame(gym.Env):
    """Normal-play take-away game against a fixed opponent, table-backed (`P`, `initial_state_distrib`)."""

    metadata: ClassVar[dict[str, Any]] = {"render_modes": ["ansi"]}

    def __init__(
        self,
        heaps: Sequence[int] = (3, 4, 5),
        opponent: str = "random",
        illegal_reward: float = -1.0,
        start: str = "heaps",
        render_mode: str | None = None,
    ) -> None:
        heaps = list(heaps)
        if not heaps or any(isinstance(h, bool) or not isinstance(h, int) or h < 1 for h in heaps):
            raise ValueError(f"heaps must be a non-empty list of whole numbers >= 1, got {heaps!r}")
        if opponent not in OPPONENTS:
            raise ValueError(f"opponent must be one of {OPPONENTS}, got {opponent!r}")
        if start not in STARTS:
            raise ValueError(f"start must be one of {STARTS}, got {start!r}")
        if render_mode is not None and render_mode not in self.metadata["render_modes"]:
            raise ValueError(f"render_mode must be None or 'ansi', got {render_mode!r}")
        self.heaps = tuple(heaps)
        self.opponent = opponent
        self.illegal_reward = float(illegal_reward)
        self.start = start
        self.render_mode = render_mode
        self.max_heap = max(heaps)
        self.n_heaps = len(heaps)
        self.strides = np.cumprod([1] + [h + 1 for h in heaps[:-1]]).astype(np.int64)
        self.n_positions = int(np.prod([h + 1 for h in heaps]))
        self.n_moves = self.n_heaps * self.max_heap
        self.observation_space = gym.spaces.Discrete(self.n_positions)
        self.action_space = gym.spaces.Discrete(self.n_moves)

        positions = np.arange(self.n_positions, dtype=np.int64)
        self.sizes_of = (positions[:, None] // self.strides[None, :]) % (np.array(heaps, dtype=np.int64) + 1)
        """Heap sizes of every position, shape (n_positions, n_heaps)."""
        heap_of = np.arange(self.n_moves) // self.max_heap
        count_of = np.arange(self.n_moves) % self.max_heap + 1
        legal = count_of[None, :] <= self.sizes_of[:, heap_of]
        self.next_position = np.where(legal, positions[:, None] - count_of * self.strides[heap_of], -1)
        """Position after each move, -1 where the move is illegal; shape (n_positions, n_moves)."""
        self.is_terminal = self.sizes_of.sum(axis=1) == 0

        self.P = {s: {a: self._outcomes(s, a) for a in range(self.n_moves)} for s in range(self.n_positions)}
        self.initial_state_distrib = np.zeros(self.n_positions)
        if start == "heaps":
            self.initial_state_distrib[self.position_of(heaps)] = 1.0
        else:
            self.initial_state_distrib[~self.is_terminal] = 1.0 / (self.n_positions - 1)
        self.s = self.position_of(heaps)

    def position_of(self, sizes: Sequence[int]) -> int:
        """The integer position of a list of heap sizes."""
        if len(sizes) != self.n_heaps or any(not 0 <= int(h) <= cap for h, cap in zip(sizes, self.heaps, strict=True)):
            raise ValueError(f"heap sizes {list(sizes)} do not fit heaps {list(self.heaps)}")
        return int(np.dot(np.asarray(sizes, dtype=np.int64), self.strides))

    def heap_sizes(self, position: int) -> tuple[int, ...]:
        """The heap sizes of an integer position."""
        return tuple(int(h) for h in self.sizes_of[position])

    def legal_moves(self, position: int) -> np.ndarray:
        """The legal actions at a position, in increasing order."""
        return np.flatnonzero(self.next_position[position] >= 0)

    def optimal_reply(self, position: int) -> int:
        """The optimal opponent's action: to XOR 0 when possible (first such heap), else one from the largest."""
        sizes = self.sizes_of[position]
        total = nim_sum(sizes)
        if total:
            for heap, h in enumerate(sizes):
                if int(h) ^ total < h:
                    return heap * self.max_heap + int(h - (int(h) ^ total)) - 1
        return int(np.argmax(sizes)) * self.max_heap

    def reply_distribution(self, position: int) -> list[tuple[float, int]]:
        """(probability, opponent action) of the opponent's replies at a non-terminal position."""
        if self.opponent == "optimal":
            return [(1.0, self.optimal_reply(position))]
        moves = self.legal_moves(position)
        return [(1.0 / moves.size, int(m)) for m in moves]

    def _outcomes(self, s: int, a: int) -> list[Outcome]:
        """P[s][a]: the agent's move, then the opponent's reply distribution (outcomes in reply order)."""
        if self.is_terminal[s]:
            return [(1.0, s, 0.0, True)]
        moved = int(self.next_position[s, a])
        if moved < 0:
            return [(1.0, s, self.illegal_reward, False)]
        if self.is_terminal[moved]:
            return [(1.0, moved, 1.0, True)]
        out = []
        for prob, reply in self.reply_distribution(moved):
            after = int(self.next_position[moved, reply])
            ended = bool(self.is_terminal[after])
            out.append((prob, after, -1.0 if ended else 0.0, ended))
        return out

    def game_rules(self) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
        """The two-player rules as arrays (see `RULE_FIELDS`), independent of the opponent.

        `next_position[pos, action]` (int64, -1 illegal), `is_terminal[pos]` (bool: no objects left),
        `terminal_value[pos]` (float64: the game's value at a terminal position for the player to move there,
        -1 under normal play since the previous player took the last object; 0 elsewhere) and
        `sizes = [n_positions, n_actions]` (int64).
        """
        terminal_value = np.where(self.is_terminal, -1.0, 0.0)
        sizes = np.array([self.n_positions, self.n_moves], dtype=np.int64)
        return (
            np.ascontiguousarray(self.next_position, dtype=np.int64),
            self.is_terminal.astype(np.bool_),
            terminal_value.astype(np.float64),
            sizes,
        )

    def reset(self, *, seed: int | None = None, options: dict | None = None) -> tuple[int, dict[str, Any]]:
        super().reset(seed=seed)
        self.s = int(self.np_random.choice(self.n_positions, p=self.initial_state_distrib))
        return self.s, {"player": _AGENT, "opponent_action": -1}

    def step(self, action: int) -> tuple[int, float, bool, bool, dict[str, Any]]:
        """The agent's move and, unless it ended the game or was illegal, the opponent's reply."""
        a = int(action)
        if not 0 <= a < self.n_moves:
            raise ValueError(f"action {action!r} is outside 0..{self.n_moves - 1}")
        info: dict[str, Any] = {"player": _AGENT, "opponent_action": -1}
        if self.is_terminal[self.s]:
            return self.s, 0.0, True, False, info
        moved = int(self.next_position[self.s, a])
        if moved < 0:
            return self.s, self.illegal_reward, False, False, info
        if self.is_terminal[moved]:
            self.s = moved
            info["player"] = _OPPONENT
            return moved, 1.0, True, False, info
        if self.opponent == "optimal":
            reply = self.optimal_reply(moved)
        else:
            moves = self.legal_moves(moved)
            reply = int(moves[int(self.np_random.integers(moves.size))])
        self.s = int(self.next_position[moved, reply])
        info["opponent_action"] = reply
        ended = bool(self.is_terminal[self.s])
        return self.s, -1.0 if ended else 0.0, ended, False, info

    def render(self) -> str | None:
        """The heap sizes as text, e.g. '3 4 5', in 'ansi' mode."""
        if self.render_mode != "ansi":
            return None
        return " ".join(str(h) for h in self.heap_sizes(self.s))
