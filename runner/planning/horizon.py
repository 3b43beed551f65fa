"""The best any agent can do on a known transition table: the yardsticks that thresholds are checked against.

`best_return` is the largest expected undiscounted return of an episode cut after `horizon` steps, from the
start distribution (finite-horizon backward induction: the optimal policy may depend on the steps left).
`best_earning_rate` is the largest long-run reward per real step when every ended episode restarts from the
start distribution, as while learning (the gain of that continuing process, by relative value iteration).
Both assume the start distribution reaches every state that matters, as in the maps and tables stepmeter runs.
"""

from __future__ import annotations

import numpy as np

from runner.envs.table import TransitionTable

__all__ = ["best_earning_rate", "best_return"]


def _probabilities(cdf: np.ndarray, offsets: np.ndarray) -> np.ndarray:
    """Outcome probabilities from the table's cumulative ones (each group restarts at 0)."""
    previous = np.r_[0.0, cdf[:-1]]
    starts = offsets[:-1][np.diff(offsets) > 0]
    previous[starts] = 0.0
    return cdf - previous


def _backup(table: TransitionTable, probs: np.ndarray, values: np.ndarray, ended: float) -> np.ndarray:
    """max over actions of expected reward plus the value of the next state (`ended` after a terminal step)."""
    following = np.where(table.terminated, ended, values[table.next_state])
    per_pair = np.add.reduceat(probs * (table.reward + following), table.offsets[:-1])
    return per_pair.reshape(table.n_states, table.n_actions).max(axis=1)


def best_return(table: TransitionTable, horizon: int) -> float:
    """Largest expected undiscounted return from the start distribution within `horizon` steps.

    Also capped by the table's own step limit when it has one (an episode is cut at whichever comes first).
    """
    if horizon < 1:
        raise ValueError(f"horizon must be at least 1, got {horizon}")
    steps = min(horizon, table.step_limit) if table.step_limit else horizon
    probs = _probabilities(table.cdf, table.offsets)
    start = _probabilities(table.start_cdf, np.array([0, table.start_cdf.size]))
    values = np.zeros(table.n_states)
    for _ in range(steps):
        values = _backup(table, probs, values, 0.0)
    return float(start @ values)


def best_earning_rate(table: TransitionTable, tol: float = 1e-10, max_sweeps: int = 100_000) -> float:
    """Largest long-run reward per step when ended episodes restart from the start distribution.

    Relative value iteration on the aperiodic (lazy) version of the process, which stays put with probability
    one half and so has half the gain: each state's per-sweep value growth converges to its gain; sweeps stop
    once no growth changes by more than `tol`, and the answer is twice the start distribution's growth. The
    table's step limit is ignored (it can only cut episodes short).
    """
    probs = _probabilities(table.cdf, table.offsets)
    start = _probabilities(table.start_cdf, np.array([0, table.start_cdf.size]))
    values = np.zeros(table.n_states)
    growth = np.full(table.n_states, np.inf)
    for _ in range(max_sweeps):
        updated = 0.5 * values + 0.5 * _backup(table, probs, values, float(start @ values))
        previous, growth = growth, updated - values
        values = updated - updated.min()
        if np.abs(growth - previous).max() < tol:
            break
    return float(2.0 * (start @ growth))
