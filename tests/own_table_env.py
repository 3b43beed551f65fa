"""A parcel chute of our own that exposes its transition table in gymnasium's toy-text form (used by tests).

A parcel sits at one of `length` stations of a sorting chute. Action 0 nudges it one station on (it sticks and
stays put with probability `stick`), action 1 waits. Reaching the last station drops it into the bin: reward 1,
episode over. `LeakyChute` pays double at the bin without saying so in its table, so its steps leave the table.
"""

import gymnasium as gym
import numpy as np


class ParcelChute(gym.Env):
    """A table-stepped chute: `step` samples exactly from `P`."""

    def __init__(self, length: int = 5, stick: float = 0.25) -> None:
        self.observation_space = gym.spaces.Discrete(length)
        self.action_space = gym.spaces.Discrete(2)
        last = length - 1
        self.P = {s: {0: [], 1: [(1.0, s, 0.0, False)]} for s in range(length)}
        for s in range(length):
            on = min(s + 1, last)
            self.P[s][0] = [(1.0 - stick, on, float(on == last), on == last), (stick, s, 0.0, False)]
        self.initial_state_distrib = np.zeros(length)
        self.initial_state_distrib[:2] = 0.5
        self.state = 0

    def reset(self, *, seed=None, options=None):
        super().reset(seed=seed)
        self.state = int(self.np_random.choice(self.observation_space.n, p=self.initial_state_distrib))
        return self.state, {}

    def step(self, action):
        outcomes = self.P[self.state][int(action)]
        pick = self.np_random.choice(len(outcomes), p=[o[0] for o in outcomes])
        _, self.state, reward, terminated = outcomes[pick]
        return self.state, self._paid(reward), terminated, False, {}

    def _paid(self, reward: float) -> float:
        return reward


class LeakyChute(ParcelChute):
    """Pays 2 at the bin while its table says 1: a class whose steps do not follow its own table."""

    def _paid(self, reward: float) -> float:
        return 2.0 * reward
