"""Linear Q-learning from an experience-replay buffer (Lin 1992): the model-free counterpart of linear Dyna at the
same number of value updates.

Each real step makes the semi-gradient Q-learning update of `linear_q_learning` from the real transition, stores
it (observation, action, reward, next observation, whether it ended the episode) in a circular buffer of the last
`buffer_size` real transitions, then makes `replays` more updates from stored transitions drawn uniformly (the
one just stored included, as `replay_q_learning` does); replays count as planning updates. Features are computed
again when a transition is replayed (the buffer keeps observations, which are fewer numbers than tiles' index
and value pairs). `replays: 0` draws nothing and is `linear_q_learning` bit for bit.
"""

import numpy as np
from numba import njit

from runner.agents.common import replay_counter_problems
from runner.agents.linear import LINEAR_SCHEMA, LinearAgent, linear_q_act, linear_q_update
from runner.agents.linear_kernels import (
    IDX,
    LINEAR_ARRAYS,
    VAL,
    W,
    features_into,
    observation_values,
    remember_next,
    semi_gradient_update,
)
from runner.params import PLANNING_BUDGET, Param
from runner.streams import below

__all__ = ["LinearReplayQLearning", "linear_replay_update"]

_ALPHA, _GAMMA, _EPSILON, _REPLAYS = range(4)
_OBS, _ACTIONS, _REWARDS, _NEXT, _ENDED, _FILL = range(LINEAR_ARRAYS, LINEAR_ARRAYS + 6)  # _FILL: (count, slot)


@njit(cache=True)
def linear_replay_update(arrays, hyper, i):
    """A semi-gradient Q-learning update from stored transition i (scratch rows 0 and 1 only, so the features
    cached for the next real update stay)."""
    target = arrays[_REWARDS][i]
    if arrays[_ENDED][i] == 0:
        target += hyper[_GAMMA] * np.max(observation_values(arrays, arrays[_NEXT][i], 1))
    n = features_into(arrays, arrays[_OBS][i], 0)
    semi_gradient_update(arrays[W], arrays[_ACTIONS][i], arrays[IDX][0], arrays[VAL][0], n, target, hyper[_ALPHA])


@njit(cache=True)
def linear_replay_observe(arrays, hyper, counters, state, action, reward, next_state, terminated, rng):
    """Learn from the real transition, store it, then replay uniformly drawn stored transitions."""
    linear_q_update(arrays, hyper, counters, state, action, reward, next_state, terminated)
    remember_next(arrays, next_state, terminated)
    fill = arrays[_FILL]
    slot = fill[1]
    arrays[_OBS][slot] = state
    arrays[_ACTIONS][slot] = action
    arrays[_REWARDS][slot] = reward
    arrays[_NEXT][slot] = next_state
    arrays[_ENDED][slot] = 1 if terminated else 0
    fill[1] = (slot + 1) % arrays[_ACTIONS].shape[0]
    fill[0] = min(fill[0] + 1, arrays[_ACTIONS].shape[0])
    replays = np.int64(hyper[_REPLAYS])
    for _ in range(replays):
        linear_replay_update(arrays, hyper, below(rng, fill[0]))
    counters[1] += replays


class LinearReplayQLearning(LinearAgent):
    """Linear Q-learning plus uniform replays from a buffer of recent real transitions."""

    kind = "linear_replay_q_learning"
    summary = "linear Q-learning plus k uniform replays per real step from a buffer of recent real transitions"
    source = "Lin (1992); Sutton & Barto (2018), sections 8.2 and 11.1 (the model-free contrast to linear Dyna)"
    schema = (
        *LINEAR_SCHEMA,
        Param(
            "buffer_size", "int", 100_000, "real transitions kept for replay (oldest dropped first)", low=1, high=10**7
        ),
        Param(
            "replays",
            "int",
            5,
            "replayed updates per real step (k; 0 gives linear_q_learning)",
            low=0,
            role=PLANNING_BUDGET,
        ),
    )

    def make_arrays(self, n_states, n_actions):
        size = self._params["buffer_size"]
        return (
            *super().make_arrays(n_states, n_actions),
            np.zeros((size, n_states)),
            np.zeros(size, dtype=np.int64),
            np.zeros(size),
            np.zeros((size, n_states)),
            np.zeros(size, dtype=np.uint8),
            np.zeros(2, dtype=np.int64),
        )

    def make_hyper(self):
        return [*super().make_hyper(), float(self._params["replays"])]

    def counter_problems(self, real_steps):
        problems = super().counter_problems(real_steps)
        return problems + replay_counter_problems(self.counters(), real_steps, self._params["replays"])

    act_kernel = staticmethod(linear_q_act)
    observe_kernel = staticmethod(linear_replay_observe)
