"""Q-learning: one-step off-policy value updates from real transitions only (the model-free reference)."""

import numpy as np
from numba import njit

from runner.agents.base import TabularAgent
from runner.agents.common import ALPHA, EPSILON, GAMMA, INITIAL_Q, model_free_counter_problems
from runner.agents.kernels import epsilon_greedy, q_learning_update

__all__ = ["QLearning"]

_ALPHA, _GAMMA, _EPSILON = 0, 1, 2


@njit(cache=True)
def q_learning_act(arrays, hyper, state, rng):
    """Epsilon-greedy on the Q-table."""
    return epsilon_greedy(arrays[0], state, hyper[_EPSILON], rng)


@njit(cache=True)
def q_learning_observe(arrays, hyper, counters, state, action, reward, next_state, terminated, rng):
    """One Q-learning update from the real transition."""
    q_learning_update(arrays[0], state, action, reward, next_state, terminated, hyper[_ALPHA], hyper[_GAMMA])
    counters[0] += 1


class QLearning(TabularAgent):
    """Tabular Q-learning with epsilon-greedy behaviour."""

    kind = "q_learning"
    summary = "model-free one-step Q-learning from real transitions"
    source = "Watkins (1989); Sutton & Barto (2018), section 6.5"
    schema = (ALPHA, GAMMA, EPSILON, INITIAL_Q)

    def make_arrays(self, n_states, n_actions):
        return (np.full((n_states, n_actions), self._params["initial_q"], dtype=np.float64),)

    def make_hyper(self):
        p = self._params
        return [p["alpha"], p["gamma"], p["epsilon"]]

    def counter_problems(self, real_steps):
        return super().counter_problems(real_steps) + model_free_counter_problems(self.counters(), real_steps)

    act_kernel = staticmethod(q_learning_act)
    observe_kernel = staticmethod(q_learning_observe)
