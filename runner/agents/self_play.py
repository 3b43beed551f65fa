"""Negamax search: plans every move by self-play Monte Carlo tree search on the game's rules.

The agent does not learn its moves: at each real step it searches the two-player game from the current position
with `runner.planning.negamax.uct_search` (the search plays both sides, so the opponent inside the environment is
never consulted) and plays the most visited move, or with probability epsilon a uniformly random legal move.
It still keeps a Q-table, updated by one-step Q-learning from the real transitions (maximising over legal moves
only), so the single-agent view's values can be compared with those of the other kinds. Evaluation runs the same
search without the epsilon moves and leaves the counters and the Q-table alone.

It needs the game's rules (`env.unwrapped.game_rules()`, passed to `setup` as `rules` by the trial runner): an
environment without them (e.g. a grid map) cannot be searched as a game.
"""

from __future__ import annotations

import numpy as np
from numba import njit

from runner.agents.base import TabularAgent
from runner.agents.common import ALPHA, EPSILON, GAMMA
from runner.errors import EnvironmentSourceError
from runner.params import PLANNING_BUDGET, Param
from runner.planning.negamax import make_search_arrays, most_visited, random_legal_move, uct_search
from runner.streams import uniform
from runner.tags import AgentTags

__all__ = ["NegamaxSearch"]

_SIMULATIONS, _EXPLORATION, _EPSILON, _ALPHA, _GAMMA = range(5)
_Q, _NEXT, _TERMINAL, _TERMINAL_VALUE, _VISITS, _VALUE_SUM, _PROVEN, _PATH, _COUNTS = range(9)

SIMULATIONS = Param(
    "simulations", "int", 1000, "search simulations per move (real or evaluation)", low=1, role=PLANNING_BUDGET
)
EXPLORATION = Param(
    "exploration", "float", 1.4, "UCT exploration constant c in -mean + c sqrt(ln N / n); values lie in [-1, 1]", low=0
)


@njit(cache=True)
def _search(arrays, hyper, state, stream):
    """Search from `state` with the agent's budget; fills the root move counts in `arrays[_COUNTS]`."""
    search = (arrays[_VISITS], arrays[_VALUE_SUM], arrays[_PROVEN], arrays[_PATH])
    return uct_search(
        arrays[_NEXT],
        arrays[_TERMINAL],
        arrays[_TERMINAL_VALUE],
        state,
        np.int64(hyper[_SIMULATIONS]),
        hyper[_EXPLORATION],
        search,
        arrays[_COUNTS],
        stream,
    )


@njit(cache=True)
def negamax_act(arrays, hyper, state, rng):
    """Search, then the most visited move, or with probability epsilon a uniformly random legal move.

    The search always runs (even before an epsilon move) so that planning updates are exactly simulations per
    real step. A position without legal moves gives action 0 (the game is over there anyway).
    """
    _search(arrays, hyper, state, rng)
    if uniform(rng) < hyper[_EPSILON]:
        a = random_legal_move(arrays[_NEXT], state, rng)
        return a if a >= 0 else 0
    return most_visited(arrays[_NEXT], state, arrays[_COUNTS], rng)


@njit(cache=True)
def negamax_greedy(arrays, hyper, state, rng):
    """The evaluation move: the same search, the most visited move, no epsilon; counters and Q-table untouched
    (only the search's scratch arrays change)."""
    _search(arrays, hyper, state, rng)
    return most_visited(arrays[_NEXT], state, arrays[_COUNTS], rng)


@njit(cache=True)
def negamax_observe(arrays, hyper, counters, state, action, reward, next_state, terminated, rng):
    """One Q-learning update over legal moves from the real transition; count it and the move's simulations."""
    q = arrays[_Q]
    next_position = arrays[_NEXT]
    target = reward
    if not terminated:
        best = -np.inf
        for a in range(q.shape[1]):
            if next_position[next_state, a] >= 0 and q[next_state, a] > best:
                best = q[next_state, a]
        if best > -np.inf:
            target += hyper[_GAMMA] * best
    q[state, action] += hyper[_ALPHA] * (target - q[state, action])
    counters[0] += 1
    counters[1] += np.int64(hyper[_SIMULATIONS])


class NegamaxSearch(TabularAgent):
    """Self-play UCT search with negamax backups on the game's rules, plus a Q-table learned from real steps."""

    kind = "negamax_search"
    summary = "plans every move by self-play Monte Carlo tree search (UCT, negamax backups) on the game's rules"
    source = "Kocsis & Szepesvari (2006); Winands, Bjornsson & Saito (2008); Sutton & Barto (2018), section 8.11"
    schema = (SIMULATIONS, EXPLORATION, EPSILON, ALPHA, GAMMA)

    tags = AgentTags(needs=("rules",))
    """This kind searches a game tree, so `setup` requires the environment's game rules."""

    def setup(
        self,
        n_states: int,
        n_actions: int,
        stream: int | np.random.SeedSequence | np.ndarray,
        table: tuple | None = None,
        rules: tuple | None = None,
    ) -> None:
        """As `TabularAgent.setup`, but `rules` (the environment's `game_rules()`) are required and must match
        the environment's sizes."""
        if rules is None:
            raise EnvironmentSourceError(
                f"{self.kind} searches the game tree, so it needs an environment that gives its game rules "
                "(env.unwrapped.game_rules(), e.g. runner.envs.takeaway:TakeAwayGame); this one gives none"
            )
        next_position = np.asarray(rules[0])
        if next_position.shape != (int(n_states), int(n_actions)):
            raise EnvironmentSourceError(
                f"{self.kind}: the game rules cover {next_position.shape[0]} positions x {next_position.shape[1]} "
                f"moves, but the environment has {n_states} states x {n_actions} actions"
            )
        super().setup(n_states, n_actions, stream, table, rules)

    def make_arrays(self, n_states: int, n_actions: int) -> tuple[np.ndarray, ...]:
        next_position, is_terminal, terminal_value = self.rules_[0], self.rules_[1], self.rules_[2]
        return (
            np.zeros((n_states, n_actions), dtype=np.float64),
            np.ascontiguousarray(next_position, dtype=np.int64),
            np.ascontiguousarray(is_terminal, dtype=np.bool_),
            np.ascontiguousarray(terminal_value, dtype=np.float64),
            *make_search_arrays(n_states),
            np.zeros(n_actions, dtype=np.float64),
        )

    def make_hyper(self) -> list[float]:
        p = self._params
        return [float(p["simulations"]), p["exploration"], p["epsilon"], p["alpha"], p["gamma"]]

    def search(self, state: int, stream: np.ndarray) -> tuple[np.ndarray, float]:
        """Run one search from `state` with the evaluation settings; (root move visit counts, root value).

        Draws from `stream` only; counters and Q-table are left alone.
        """
        value = _search(self.arrays_, self.hyper_, int(state), stream)
        return self.arrays_[_COUNTS].copy(), float(value)

    def counter_problems(self, real_steps: int) -> list[str]:
        c = self.counters()
        n = self._params["simulations"]
        problems = super().counter_problems(real_steps)
        if c["real_updates"] != real_steps:
            problems.append(f"real_updates {c['real_updates']} != real steps {real_steps}")
        if c["planning_updates"] != n * c["real_updates"]:
            problems.append(
                f"planning_updates {c['planning_updates']} != simulations x real_updates = {n * c['real_updates']}"
            )
        if c["model_updates"]:
            problems.append(f"a search on the given rules counted model updates: {c['model_updates']}")
        return problems

    act_kernel = staticmethod(negamax_act)
    observe_kernel = staticmethod(negamax_observe)
    greedy_kernel = staticmethod(negamax_greedy)
