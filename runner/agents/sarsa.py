"""Sarsa and Expected Sarsa: on-policy one-step updates from real transitions only."""

import numpy as np
from numba import njit

from runner.agents.base import TabularAgent
from runner.agents.common import ALPHA, EPSILON, GAMMA, INITIAL_Q, model_free_counter_problems
from runner.agents.kernels import epsilon_greedy

__all__ = ["ExpectedSarsa", "Sarsa"]

_ALPHA, _GAMMA, _EPSILON = 0, 1, 2
_Q, _NEXT = 0, 1  # _NEXT holds (state, action) chosen for the next step, or (-1, -1)


@njit(cache=True)
def sarsa_act(arrays, hyper, state, rng):
    """The action already chosen for this state by the last update, else a fresh epsilon-greedy one."""
    pending = arrays[_NEXT]
    if pending[0] == state:
        pending[0] = -1
        return pending[1]
    return epsilon_greedy(arrays[_Q], state, hyper[_EPSILON], rng)


@njit(cache=True)
def sarsa_observe(arrays, hyper, counters, state, action, reward, next_state, terminated, rng):
    """Choose the next action now and back up towards its value (no bootstrap when the episode ended)."""
    q = arrays[_Q]
    target = reward
    if terminated:
        arrays[_NEXT][0] = -1
    else:
        following = epsilon_greedy(q, next_state, hyper[_EPSILON], rng)
        arrays[_NEXT][0] = next_state
        arrays[_NEXT][1] = following
        target += hyper[_GAMMA] * q[next_state, following]
    q[state, action] += hyper[_ALPHA] * (target - q[state, action])
    counters[0] += 1


@njit(cache=True)
def expected_value(q_row, epsilon):
    """Value of a state under the epsilon-greedy policy, with the greedy share split among tied actions."""
    n = q_row.shape[0]
    best = np.max(q_row)
    ties = 0
    for v in q_row:
        if v == best:
            ties += 1
    value = 0.0
    for v in q_row:
        share = epsilon / n
        if v == best:
            share += (1.0 - epsilon) / ties
        value += share * v
    return value


@njit(cache=True)
def expected_sarsa_act(arrays, hyper, state, rng):
    """Epsilon-greedy on the Q-table."""
    return epsilon_greedy(arrays[_Q], state, hyper[_EPSILON], rng)


@njit(cache=True)
def expected_sarsa_observe(arrays, hyper, counters, state, action, reward, next_state, terminated, rng):
    """Back up towards the expected value of the next state under the behaviour policy."""
    q = arrays[_Q]
    target = reward
    if not terminated:
        target += hyper[_GAMMA] * expected_value(q[next_state], hyper[_EPSILON])
    q[state, action] += hyper[_ALPHA] * (target - q[state, action])
    counters[0] += 1


class _OnPolicyTD(TabularAgent):
    schema = (ALPHA, GAMMA, EPSILON, INITIAL_Q)

    def make_arrays(self, n_states, n_actions):
        return (
            np.full((n_states, n_actions), self._params["initial_q"], dtype=np.float64),
            np.full(2, -1, dtype=np.int64),
        )

    def make_hyper(self):
        p = self._params
        return [p["alpha"], p["gamma"], p["epsilon"]]

    def counter_problems(self, real_steps):
        return super().counter_problems(real_steps) + model_free_counter_problems(self.counters(), real_steps)


class Sarsa(_OnPolicyTD):
    """Tabular Sarsa: the next action is chosen when the transition is learned, and then taken."""

    kind = "sarsa"
    summary = "model-free on-policy one-step Sarsa from real transitions"
    source = "Rummery & Niranjan (1994); Sutton & Barto (2018), section 6.4"
    act_kernel = staticmethod(sarsa_act)
    observe_kernel = staticmethod(sarsa_observe)


class ExpectedSarsa(_OnPolicyTD):
    """Tabular Expected Sarsa: backs up the expected next value under the epsilon-greedy policy."""

    kind = "expected_sarsa"
    summary = "model-free one-step Expected Sarsa from real transitions"
    source = "van Seijen et al. (2009); Sutton & Barto (2018), section 6.6"
    act_kernel = staticmethod(expected_sarsa_act)
    observe_kernel = staticmethod(expected_sarsa_observe)
