"""Dyna-Q: Q-learning plus n planning updates per real step, replayed from a learned last-outcome model."""

import numpy as np
from numba import njit

from runner.agents.base import TabularAgent
from runner.agents.common import ALPHA, EPSILON, GAMMA, INITIAL_Q
from runner.agents.kernels import epsilon_greedy, q_learning_update
from runner.models.bin_prediction import add_bin_centre, own_bin_centre
from runner.models.table_error import true_mean_reward, true_probability
from runner.params import PLANNING_BUDGET, Param
from runner.streams import below
from runner.tags import AgentTags

__all__ = ["DynaQ", "last_outcome_arrays", "last_outcome_prediction", "record_last_outcome"]

_ALPHA, _GAMMA, _EPSILON, _PLANNING = 0, 1, 2, 3
_Q, _NEXT, _REWARD, _TERMINAL, _SEEN, _SEEN_LIST, _N_SEEN = range(7)


@njit(cache=True)
def dyna_q_act(arrays, hyper, state, rng):
    """Epsilon-greedy on the Q-table."""
    return epsilon_greedy(arrays[_Q], state, hyper[_EPSILON], rng)


@njit(cache=True)
def dyna_q_plan(arrays, hyper, counters, n_updates, rng):
    """Replay n uniformly chosen previously seen (state, action) pairs through the model."""
    q = arrays[_Q]
    n_actions = q.shape[1]
    n_seen = arrays[_N_SEEN][0]
    for _ in range(n_updates):
        pair = arrays[_SEEN_LIST][below(rng, n_seen)]
        s = pair // n_actions
        a = pair % n_actions
        q_learning_update(
            q,
            s,
            a,
            arrays[_REWARD][s, a],
            arrays[_NEXT][s, a],
            arrays[_TERMINAL][s, a] != 0,
            hyper[_ALPHA],
            hyper[_GAMMA],
        )
    counters[1] += n_updates


def last_outcome_arrays(n_states: int, n_actions: int, initial_q: float) -> tuple[np.ndarray, ...]:
    """Q-table plus the last-outcome model: next state, reward and ended flag per pair, and the pairs seen so far
    (flags, a list in the order first seen, its length). Dyna-Q+ and prioritized sweeping extend this tuple."""
    return (
        np.full((n_states, n_actions), initial_q, dtype=np.float64),
        np.zeros((n_states, n_actions), dtype=np.int64),
        np.zeros((n_states, n_actions), dtype=np.float64),
        np.zeros((n_states, n_actions), dtype=np.uint8),
        np.zeros((n_states, n_actions), dtype=np.uint8),
        np.zeros(n_states * n_actions, dtype=np.int64),
        np.zeros(1, dtype=np.int64),
    )


@njit(cache=True)
def record_last_outcome(arrays, state, action, reward, next_state, terminated):
    """Remember the latest outcome of a (state, action) pair, listing the pair the first time it is seen."""
    arrays[_NEXT][state, action] = next_state
    arrays[_REWARD][state, action] = reward
    arrays[_TERMINAL][state, action] = 1 if terminated else 0
    if arrays[_SEEN][state, action] == 0:
        arrays[_SEEN][state, action] = 1
        arrays[_SEEN_LIST][arrays[_N_SEEN][0]] = state * arrays[_Q].shape[1] + action
        arrays[_N_SEEN][0] += 1


@njit(cache=True)
def dyna_q_observe(arrays, hyper, counters, state, action, reward, next_state, terminated, rng):
    """Direct update, model update (last outcome seen), then the planning budget."""
    q_learning_update(arrays[_Q], state, action, reward, next_state, terminated, hyper[_ALPHA], hyper[_GAMMA])
    counters[0] += 1
    record_last_outcome(arrays, state, action, reward, next_state, terminated)
    counters[2] += 1
    dyna_q_plan(arrays, hyper, counters, np.int64(hyper[_PLANNING]), rng)


@njit(cache=True)
def dyna_q_model_error(arrays, table):
    """Mean total-variation distance of the last-outcome model to the true table, and mean absolute reward
    error, over the (state, action) pairs seen so far (NaN before any)."""
    n_states, n_actions = arrays[_Q].shape
    n_seen = arrays[_N_SEEN][0]
    if n_seen == 0:
        return np.nan, np.nan
    tv = 0.0
    reward_error = 0.0
    for i in range(n_seen):
        pair = arrays[_SEEN_LIST][i]
        s = pair // n_actions
        a = pair % n_actions
        learned = n_states if arrays[_TERMINAL][s, a] != 0 else arrays[_NEXT][s, a]
        tv += 1.0 - true_probability(table, pair, learned, n_states)
        reward_error += abs(arrays[_REWARD][s, a] - true_mean_reward(table, pair))
    return tv / n_seen, reward_error / n_seen


@njit(cache=True)
def last_outcome_prediction(arrays, state, action, grid, out):
    """Predicted next observation on bins (into `out`) and reward: the centre of the remembered next bin and the
    remembered reward (see `runner.models.bin_prediction`; an unseen or ending pair predicts its own bin)."""
    own_bin_centre(out, state, grid)
    if arrays[_SEEN][state, action] == 0:
        return 0.0
    if arrays[_TERMINAL][state, action] == 0:
        out[:] = 0.0
        add_bin_centre(out, arrays[_NEXT][state, action], 1.0, grid)
    return arrays[_REWARD][state, action]


class DynaQ(TabularAgent):
    """Tabular Dyna-Q with a deterministic last-outcome model and a planning budget per real step."""

    tags = AgentTags(learned_model="table")

    kind = "dyna_q"
    summary = "Q-learning plus n simulated updates per real step from a learned last-outcome model"
    source = "Sutton (1990); Sutton & Barto (2018), section 8.2"
    schema = (
        ALPHA,
        GAMMA,
        EPSILON,
        INITIAL_Q,
        Param(
            "planning_steps",
            "int",
            5,
            "simulated updates per real step (n; 0 gives Q-learning)",
            low=0,
            role=PLANNING_BUDGET,
        ),
    )

    def make_arrays(self, n_states, n_actions):
        return last_outcome_arrays(n_states, n_actions, self._params["initial_q"])

    def make_hyper(self):
        p = self._params
        return [p["alpha"], p["gamma"], p["epsilon"], float(p["planning_steps"])]

    def counter_problems(self, real_steps):
        c = self.counters()
        n = self._params["planning_steps"]
        problems = super().counter_problems(real_steps)
        if c["real_updates"] != real_steps or c["model_updates"] != real_steps:
            problems.append(f"real and model updates should both equal real steps {real_steps}: {c}")
        if c["planning_updates"] != n * c["real_updates"]:
            problems.append(f"planning_updates {c['planning_updates']} != n x real_updates = {n * c['real_updates']}")
        return problems

    act_kernel = staticmethod(dyna_q_act)
    observe_kernel = staticmethod(dyna_q_observe)
    model_error_kernel = staticmethod(dyna_q_model_error)
    predict_kernel = staticmethod(last_outcome_prediction)
