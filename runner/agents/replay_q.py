"""Q-learning from an experience-replay buffer: the model-free counterpart of Dyna-Q at the same update count.

Each real step makes one Q-learning update from the real transition and `replays` more from transitions drawn
uniformly from a circular buffer of the last `buffer_size` real transitions (replays count as planning updates).
"""

import numpy as np
from numba import njit

from runner.agents.base import TabularAgent
from runner.agents.common import ALPHA, EPSILON, GAMMA, INITIAL_Q, replay_counter_problems
from runner.agents.kernels import epsilon_greedy, q_learning_update
from runner.params import PLANNING_BUDGET, Param
from runner.streams import below
from runner.tags import AgentTags

__all__ = ["ReplayQLearning"]

_ALPHA, _GAMMA, _EPSILON, _REPLAYS = 0, 1, 2, 3
_Q, _STATES, _ACTIONS, _REWARDS, _NEXT, _ENDED, _FILL = range(7)  # _FILL: (stored count, next slot)


@njit(cache=True)
def replay_q_act(arrays, hyper, state, rng):
    """Epsilon-greedy on the Q-table."""
    return epsilon_greedy(arrays[_Q], state, hyper[_EPSILON], rng)


@njit(cache=True)
def replay_q_observe(arrays, hyper, counters, state, action, reward, next_state, terminated, rng):
    """Store the transition, learn from it, then replay uniformly drawn stored transitions."""
    q = arrays[_Q]
    alpha, gamma = hyper[_ALPHA], hyper[_GAMMA]
    fill = arrays[_FILL]
    capacity = arrays[_STATES].shape[0]
    slot = fill[1]
    arrays[_STATES][slot] = state
    arrays[_ACTIONS][slot] = action
    arrays[_REWARDS][slot] = reward
    arrays[_NEXT][slot] = next_state
    arrays[_ENDED][slot] = 1 if terminated else 0
    fill[1] = (slot + 1) % capacity
    if fill[0] < capacity:
        fill[0] += 1
    q_learning_update(q, state, action, reward, next_state, terminated, alpha, gamma)
    counters[0] += 1
    replays = np.int64(hyper[_REPLAYS])
    for _ in range(replays):
        i = below(rng, fill[0])
        q_learning_update(
            q,
            arrays[_STATES][i],
            arrays[_ACTIONS][i],
            arrays[_REWARDS][i],
            arrays[_NEXT][i],
            arrays[_ENDED][i] != 0,
            alpha,
            gamma,
        )
    counters[1] += replays


class ReplayQLearning(TabularAgent):
    """Q-learning plus uniform replays from a buffer of recent real transitions."""

    tags = AgentTags()

    kind = "replay_q_learning"
    summary = "Q-learning plus k uniform replays per real step from a buffer of recent real transitions"
    source = "Lin (1992); Sutton & Barto (2018), section 8.2 (the model-free contrast to Dyna)"
    schema = (
        ALPHA,
        GAMMA,
        EPSILON,
        INITIAL_Q,
        Param(
            "buffer_size", "int", 10_000, "real transitions kept for replay (oldest dropped first)", low=1, high=10**7
        ),
        Param("replays", "int", 5, "replayed updates per real step (k)", low=0, role=PLANNING_BUDGET),
    )

    def make_arrays(self, n_states, n_actions):
        size = self._params["buffer_size"]
        return (
            np.full((n_states, n_actions), self._params["initial_q"], dtype=np.float64),
            np.zeros(size, dtype=np.int64),
            np.zeros(size, dtype=np.int64),
            np.zeros(size, dtype=np.float64),
            np.zeros(size, dtype=np.int64),
            np.zeros(size, dtype=np.uint8),
            np.zeros(2, dtype=np.int64),
        )

    def make_hyper(self):
        p = self._params
        return [p["alpha"], p["gamma"], p["epsilon"], float(p["replays"])]

    def counter_problems(self, real_steps):
        problems = super().counter_problems(real_steps)
        return problems + replay_counter_problems(self.counters(), real_steps, self._params["replays"])

    act_kernel = staticmethod(replay_q_act)
    observe_kernel = staticmethod(replay_q_observe)
