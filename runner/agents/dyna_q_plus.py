"""Dyna-Q+: Dyna-Q whose planning adds an exploration bonus kappa * sqrt(tau) for pairs untried for tau steps.

As in Sutton & Barto (2018), section 8.3: when a state is first reached, its untried actions enter the model as
leading back to the same state with reward 0, so planning can consider them; the bonus grows with the real
steps since each pair was last tried in the real environment.
"""

import numpy as np
from numba import njit

from runner.agents.base import TabularAgent
from runner.agents.common import ALPHA, EPSILON, GAMMA, INITIAL_Q
from runner.agents.dyna_q import (
    dyna_q_model_error,
    last_outcome_arrays,
    last_outcome_prediction,
    record_last_outcome,
)
from runner.agents.kernels import epsilon_greedy, q_learning_update
from runner.params import PLANNING_BUDGET, Param
from runner.streams import below
from runner.tags import AgentTags

__all__ = ["DynaQPlus"]

_ALPHA, _GAMMA, _EPSILON, _PLANNING, _KAPPA = range(5)
_Q, _NEXT, _REWARD, _TERMINAL, _SEEN, _SEEN_LIST, _N_SEEN, _LAST_TRIED, _STATE_KNOWN, _CLOCK = range(10)


@njit(cache=True)
def dyna_q_plus_act(arrays, hyper, state, rng):
    """Epsilon-greedy on the Q-table."""
    return epsilon_greedy(arrays[_Q], state, hyper[_EPSILON], rng)


@njit(cache=True)
def dyna_q_plus_observe(arrays, hyper, counters, state, action, reward, next_state, terminated, rng):
    """Direct update, model update (untried actions of a new state as zero-reward self-loops), then planning
    with the bonus kappa * sqrt(real steps since the pair was last tried)."""
    q = arrays[_Q]
    alpha, gamma, kappa = hyper[_ALPHA], hyper[_GAMMA], hyper[_KAPPA]
    clock = arrays[_CLOCK]
    clock[0] += 1
    q_learning_update(q, state, action, reward, next_state, terminated, alpha, gamma)
    counters[0] += 1
    if arrays[_STATE_KNOWN][state] == 0:
        arrays[_STATE_KNOWN][state] = 1
        for other in range(q.shape[1]):
            if arrays[_SEEN][state, other] == 0 and other != action:
                record_last_outcome(arrays, state, other, 0.0, state, False)
    record_last_outcome(arrays, state, action, reward, next_state, terminated)
    arrays[_LAST_TRIED][state, action] = clock[0]
    counters[2] += 1
    n_updates = np.int64(hyper[_PLANNING])
    n_actions = q.shape[1]
    n_seen = arrays[_N_SEEN][0]
    for _ in range(n_updates):
        pair = arrays[_SEEN_LIST][below(rng, n_seen)]
        s = pair // n_actions
        a = pair % n_actions
        tau = clock[0] - arrays[_LAST_TRIED][s, a]
        bonus = kappa * np.sqrt(tau)
        q_learning_update(
            q, s, a, arrays[_REWARD][s, a] + bonus, arrays[_NEXT][s, a], arrays[_TERMINAL][s, a] != 0, alpha, gamma
        )
    counters[1] += n_updates


class DynaQPlus(TabularAgent):
    """Dyna-Q with an exploration bonus in planning, for environments that change."""

    tags = AgentTags(learned_model="table")

    kind = "dyna_q_plus"
    summary = "Dyna-Q whose planning rewards pairs untried for tau real steps with kappa * sqrt(tau)"
    source = "Sutton (1990); Sutton & Barto (2018), section 8.3"
    schema = (
        ALPHA,
        GAMMA,
        EPSILON,
        INITIAL_Q,
        Param("planning_steps", "int", 5, "simulated updates per real step (n)", low=0, role=PLANNING_BUDGET),
        Param("kappa", "float", 1e-3, "size of the exploration bonus kappa * sqrt(tau)", low=0.0),
    )

    def make_arrays(self, n_states, n_actions):
        return (
            *last_outcome_arrays(n_states, n_actions, self._params["initial_q"]),
            np.zeros((n_states, n_actions), dtype=np.int64),
            np.zeros(n_states, dtype=np.uint8),
            np.zeros(1, dtype=np.int64),
        )

    def make_hyper(self):
        p = self._params
        return [p["alpha"], p["gamma"], p["epsilon"], float(p["planning_steps"]), p["kappa"]]

    def counter_problems(self, real_steps):
        c = self.counters()
        n = self._params["planning_steps"]
        problems = super().counter_problems(real_steps)
        if c["real_updates"] != real_steps or c["model_updates"] != real_steps:
            problems.append(f"real and model updates should both equal real steps {real_steps}: {c}")
        if c["planning_updates"] != n * real_steps:
            problems.append(f"planning_updates {c['planning_updates']} != n x real steps = {n * real_steps}")
        return problems

    act_kernel = staticmethod(dyna_q_plus_act)
    observe_kernel = staticmethod(dyna_q_plus_observe)
    model_error_kernel = staticmethod(dyna_q_model_error)
    predict_kernel = staticmethod(last_outcome_prediction)
