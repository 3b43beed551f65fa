"""Prioritized sweeping: plan backwards from surprises, updating the pairs whose values would change most.

A deterministic last-outcome model (as in Dyna-Q) plus predecessor lists; pairs wait in an indexed max-heap keyed
by the size of their pending update, and each real step spends a budget of n updates from the top of the heap.
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
from runner.agents.priority_queue import queue_pop, queue_raise
from runner.params import PLANNING_BUDGET, Param
from runner.tags import AgentTags

__all__ = ["PrioritizedSweeping"]

_ALPHA, _GAMMA, _EPSILON, _BUDGET, _THETA = range(5)
_Q, _NEXT, _REWARD, _TERMINAL, _SEEN, _SEEN_LIST, _N_SEEN, _PRED, _N_PRED, _HEAP, _POS, _PRI, _SIZE = range(13)


@njit(cache=True)
def _priority(arrays, gamma, s, a):
    q = arrays[_Q]
    target = arrays[_REWARD][s, a]
    if arrays[_TERMINAL][s, a] == 0:
        target += gamma * np.max(q[arrays[_NEXT][s, a]])
    return abs(target - q[s, a])


@njit(cache=True)
def prioritized_sweeping_act(arrays, hyper, state, rng):
    """Epsilon-greedy on the Q-table."""
    return epsilon_greedy(arrays[_Q], state, hyper[_EPSILON], rng)


@njit(cache=True)
def prioritized_sweeping_observe(arrays, hyper, counters, state, action, reward, next_state, terminated, rng):
    """Update the model and predecessor lists, queue the pair by its surprise, then spend the update budget."""
    q = arrays[_Q]
    n_actions = q.shape[1]
    alpha, gamma, theta = hyper[_ALPHA], hyper[_GAMMA], hyper[_THETA]
    pair = state * n_actions + action
    record_last_outcome(arrays, state, action, reward, next_state, terminated)
    if not terminated:
        preds, n_pred = arrays[_PRED], arrays[_N_PRED]
        known = False
        for j in range(n_pred[next_state]):
            if preds[next_state, j] == pair:
                known = True
                break
        if not known:
            if n_pred[next_state] == preds.shape[1]:
                raise ValueError("more predecessors of one state than max_predecessors")
            preds[next_state, n_pred[next_state]] = pair
            n_pred[next_state] += 1
    counters[2] += 1
    queue = (arrays[_HEAP], arrays[_POS], arrays[_PRI], arrays[_SIZE])
    priority = _priority(arrays, gamma, state, action)
    if priority > theta:
        queue_raise(*queue, pair, priority)
    budget = np.int64(hyper[_BUDGET])
    done = 0
    while done < budget and queue[3][0] > 0:
        top = queue_pop(*queue)
        s = top // n_actions
        a = top % n_actions
        q_learning_update(
            q, s, a, arrays[_REWARD][s, a], arrays[_NEXT][s, a], arrays[_TERMINAL][s, a] != 0, alpha, gamma
        )
        done += 1
        for j in range(arrays[_N_PRED][s]):
            before = arrays[_PRED][s, j]
            bs = before // n_actions
            ba = before % n_actions
            if arrays[_NEXT][bs, ba] != s or arrays[_TERMINAL][bs, ba] != 0:
                continue  # the model's last outcome of that pair no longer leads here
            p = _priority(arrays, gamma, bs, ba)
            if p > theta:
                queue_raise(*queue, before, p)
    counters[1] += done


class PrioritizedSweeping(TabularAgent):
    """Tabular prioritized sweeping with a deterministic model and a per-step update budget."""

    tags = AgentTags(learned_model="table")

    kind = "prioritized_sweeping"
    summary = "model-based updates ordered by priority |expected change|, spreading backwards through predecessors"
    source = "Moore & Atkeson (1993); Peng & Williams (1993); Sutton & Barto (2018), section 8.4"
    schema = (
        ALPHA,
        GAMMA,
        EPSILON,
        INITIAL_Q,
        Param("planning_steps", "int", 5, "queued updates per real step at most (n)", low=0, role=PLANNING_BUDGET),
        Param("theta", "float", 1e-4, "smallest priority that enters the queue", low=0.0),
        Param("max_predecessors", "int", 64, "(state, action) pairs remembered as leading into one state", low=1),
    )

    def make_arrays(self, n_states, n_actions):
        pairs = n_states * n_actions
        return (
            *last_outcome_arrays(n_states, n_actions, self._params["initial_q"]),
            np.zeros((n_states, min(self._params["max_predecessors"], pairs)), dtype=np.int64),
            np.zeros(n_states, dtype=np.int64),
            np.zeros(pairs, dtype=np.int64),
            np.full(pairs, -1, dtype=np.int64),
            np.zeros(pairs, dtype=np.float64),
            np.zeros(1, dtype=np.int64),
        )

    def make_hyper(self):
        p = self._params
        return [p["alpha"], p["gamma"], p["epsilon"], float(p["planning_steps"]), p["theta"]]

    def counter_problems(self, real_steps):
        c = self.counters()
        problems = super().counter_problems(real_steps)
        if c["real_updates"] != 0:
            problems.append(
                f"real transitions only update the model and queue, yet real_updates is {c['real_updates']}"
            )
        if c["model_updates"] != real_steps:
            problems.append(f"model_updates {c['model_updates']} != real steps {real_steps}")
        if c["planning_updates"] > self._params["planning_steps"] * real_steps:
            problems.append(f"planning_updates {c['planning_updates']} exceed the budget n x real steps")
        return problems

    act_kernel = staticmethod(prioritized_sweeping_act)
    observe_kernel = staticmethod(prioritized_sweeping_observe)
    model_error_kernel = staticmethod(dyna_q_model_error)
    predict_kernel = staticmethod(last_outcome_prediction)
