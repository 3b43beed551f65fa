"""Certainty-equivalence: learn count-based transition and mean-reward models, plan by value iteration."""

import numpy as np
from numba import njit

from runner.agents.base import TabularAgent
from runner.agents.common import EPSILON, GAMMA
from runner.agents.kernels import epsilon_greedy
from runner.models.bin_prediction import add_bin_centre, own_bin_centre
from runner.models.table_error import true_mean_reward, true_probability
from runner.params import Param
from runner.planning.value_iteration import sweep_until_converged
from runner.tags import AgentTags

__all__ = ["CertaintyEquivalence", "count_model_arrays", "count_model_prediction", "expected_bin_centre"]

_GAMMA, _EPSILON, _TOL, _MAX_SWEEPS, _REPLAN, _UNVISITED, _OPTIMISTIC, _KNOWN_AFTER = range(8)
_Q, _V, _SUCC, _WEIGHT, _N_SUCC, _VISITS, _REWARD_SUM, _SINCE = range(8)
_UNVISITED_CODES = {"optimistic": 0, "self_loop": 1}


def count_model_arrays(n_states: int, n_actions: int, max_successors: int, start_value: float) -> tuple:
    """The arrays of a count model with value iteration: Q, V, successor lists and weights, their lengths,
    visits, reward sums and the steps since the last plan."""
    width = min(max_successors, n_states + 1)
    return (
        np.full((n_states, n_actions), start_value, dtype=np.float64),
        np.zeros(n_states + 1, dtype=np.float64),
        np.zeros((n_states, n_actions, width), dtype=np.int64),
        np.zeros((n_states, n_actions, width), dtype=np.float64),
        np.zeros((n_states, n_actions), dtype=np.int64),
        np.zeros((n_states, n_actions), dtype=np.float64),
        np.zeros((n_states, n_actions), dtype=np.float64),
        np.zeros(1, dtype=np.int64),
    )


@njit(cache=True)
def certainty_equivalence_act(arrays, hyper, state, rng):
    """Epsilon-greedy on the Q-table of the last plan."""
    return epsilon_greedy(arrays[_Q], state, hyper[_EPSILON], rng)


@njit(cache=True)
def certainty_equivalence_observe(arrays, hyper, counters, state, action, reward, next_state, terminated, rng):
    """Count the transition into the model; every k real steps re-plan by value iteration."""
    n_states = arrays[_Q].shape[0]
    target = n_states if terminated else next_state
    succ = arrays[_SUCC]
    n = arrays[_N_SUCC][state, action]
    slot = -1
    for j in range(n):
        if succ[state, action, j] == target:
            slot = j
            break
    if slot < 0:
        if n == succ.shape[2]:
            raise ValueError("more distinct next states for one (state, action) than max_successors")
        slot = n
        succ[state, action, slot] = target
        arrays[_N_SUCC][state, action] = n + 1
    arrays[_WEIGHT][state, action, slot] += 1.0
    arrays[_VISITS][state, action] += 1.0
    arrays[_REWARD_SUM][state, action] += reward
    counters[2] += 1
    since = arrays[_SINCE]
    since[0] += 1
    replan = since[0] >= hyper[_REPLAN]
    if hyper[_REPLAN] == 0:  # replan only when a pair has just become known (R-max)
        replan = arrays[_VISITS][state, action] == hyper[_KNOWN_AFTER]
    if replan:
        since[0] = 0
        _, backups = sweep_until_converged(
            arrays[_Q],
            arrays[_V],
            succ,
            arrays[_WEIGHT],
            arrays[_N_SUCC],
            arrays[_VISITS],
            arrays[_REWARD_SUM],
            hyper[_GAMMA],
            hyper[_TOL],
            np.int64(hyper[_MAX_SWEEPS]),
            np.int64(hyper[_UNVISITED]),
            hyper[_OPTIMISTIC],
            hyper[_KNOWN_AFTER],
        )
        counters[1] += backups


@njit(cache=True)
def certainty_equivalence_model_error(arrays, table):
    """Mean total-variation distance of the count model to the true table, and mean absolute reward error,
    over the (state, action) pairs visited so far (NaN before any)."""
    n_states, n_actions = arrays[_Q].shape
    visits = arrays[_VISITS]
    tv = 0.0
    reward_error = 0.0
    visited = 0
    for s in range(n_states):
        for a in range(n_actions):
            total = visits[s, a]
            if total == 0.0:
                continue
            pair = s * n_actions + a
            overlap = 0.0
            for j in range(arrays[_N_SUCC][s, a]):
                learned = arrays[_WEIGHT][s, a, j] / total
                overlap += min(learned, true_probability(table, pair, arrays[_SUCC][s, a, j], n_states))
            tv += 1.0 - overlap
            reward_error += abs(arrays[_REWARD_SUM][s, a] / total - true_mean_reward(table, pair))
            visited += 1
    if visited == 0:
        return np.nan, np.nan
    return tv / visited, reward_error / visited


@njit(cache=True)
def count_model_prediction(arrays, state, action, grid, out):
    """Predicted next observation on bins (into `out`) and reward: the expected bin centre under the counted
    next-bin distribution, and the mean reward (see `runner.models.bin_prediction`)."""
    return expected_bin_centre(
        arrays[_SUCC],
        arrays[_WEIGHT],
        arrays[_N_SUCC],
        arrays[_VISITS],
        arrays[_REWARD_SUM][state, action],
        state,
        action,
        grid,
        out,
    )


@njit(cache=True)
def expected_bin_centre(succ, weight, n_succ, visits, reward_sum, state, action, grid, out):
    """The expected centre of the next bin under counted successors (ended episodes left out), and the mean
    reward `reward_sum / visits`; an unseen pair, or one seen only to end, predicts its own bin's centre."""
    own_bin_centre(out, state, grid)
    total = visits[state, action]
    if total == 0.0:
        return 0.0
    n_states = succ.shape[0]
    going_on = 0.0
    for j in range(n_succ[state, action]):
        if succ[state, action, j] != n_states:
            going_on += weight[state, action, j]
    if going_on > 0.0:
        out[:] = 0.0
        for j in range(n_succ[state, action]):
            if succ[state, action, j] != n_states:
                add_bin_centre(out, succ[state, action, j], weight[state, action, j] / going_on, grid)
    return reward_sum / total


class CertaintyEquivalence(TabularAgent):
    """Model-based agent that trusts its maximum-likelihood model and solves it by value iteration."""

    tags = AgentTags(learned_model="table")

    kind = "certainty_equivalence"
    summary = "count-based transition and mean-reward model, value iteration re-planned every k real steps"
    source = "Sutton & Barto (2018), sections 6.3 (certainty-equivalence estimate) and 8.1"
    schema = (
        GAMMA,
        EPSILON,
        Param("replan_every", "int", 1, "real steps between value-iteration runs (k)", low=1),
        Param(
            "tolerance", "float", 1e-4, "stop sweeping when no state value moves more than this", low=0.0, low_open=True
        ),
        Param("max_sweeps", "int", 50, "cap on value-iteration sweeps per re-plan", low=1),
        Param(
            "unvisited",
            "choice",
            "optimistic",
            "value of never-tried (state, action) pairs",
            choices=("optimistic", "self_loop"),
        ),
        Param("optimistic_value", "float", 1.0, "Q-value given to never-tried pairs when unvisited is optimistic"),
        Param("max_successors", "int", 32, "distinct next states remembered per (state, action)", low=1),
    )

    def make_arrays(self, n_states, n_actions):
        p = self._params
        start = p["optimistic_value"] if p["unvisited"] == "optimistic" else 0.0
        return count_model_arrays(n_states, n_actions, p["max_successors"], start)

    def make_hyper(self):
        p = self._params
        return [
            p["gamma"],
            p["epsilon"],
            p["tolerance"],
            float(p["max_sweeps"]),
            float(p["replan_every"]),
            float(_UNVISITED_CODES[p["unvisited"]]),
            p["optimistic_value"],
            1.0,
        ]

    def transition_estimate(self) -> np.ndarray:
        """Learned P(next | state, action) as an array of shape (n_states, n_actions, n_states + 1).

        The last column is the probability that the episode ends; rows of unvisited pairs are zero.
        """
        _, _, succ, weight, n_succ, visits, _, _ = self.arrays_
        n_states, n_actions = visits.shape
        out = np.zeros((n_states, n_actions, n_states + 1))
        for s in range(n_states):
            for a in range(n_actions):
                for j in range(n_succ[s, a]):
                    out[s, a, succ[s, a, j]] += weight[s, a, j]
                if visits[s, a] > 0:
                    out[s, a] /= visits[s, a]
        return out

    def counter_problems(self, real_steps):
        c = self.counters()
        problems = super().counter_problems(real_steps)
        if c["real_updates"] != 0:
            problems.append(f"values are only planned, yet real_updates is {c['real_updates']}")
        if c["model_updates"] != real_steps:
            problems.append(f"model_updates {c['model_updates']} != real steps {real_steps}")
        per_sweep = self.n_states_ * self.n_actions_
        if c["planning_updates"] % per_sweep:
            problems.append(f"planning_updates {c['planning_updates']} is not whole sweeps of {per_sweep} backups")
        replans = self.replans_made(real_steps)
        if not replans <= c["planning_updates"] // per_sweep <= replans * self._params["max_sweeps"]:
            problems.append(f"{c['planning_updates'] // per_sweep} sweeps for {replans} re-plans is outside the cap")
        return problems

    def replans_made(self, real_steps: int) -> int:
        """How many times value iteration ran after `real_steps` observed steps."""
        return real_steps // self._params["replan_every"]

    act_kernel = staticmethod(certainty_equivalence_act)
    observe_kernel = staticmethod(certainty_equivalence_observe)
    model_error_kernel = staticmethod(certainty_equivalence_model_error)
    predict_kernel = staticmethod(count_model_prediction)
