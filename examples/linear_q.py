"""A user's own agent for stepmeter, in plain numpy: linear Q-learning on one-hot bins of each dimension.

Use it in an experiment as `kind: linear_q:LinearQ` with this folder on the import path
(`PYTHONPATH=examples stepmeter run ...`), or check it with `runner.checks.check_agent("linear_q:LinearQ")`.

Features: each observation dimension is cut into `tiles` equal bins over its bounds (unbounded sides clipped at
+-`clip`), one-hot per dimension, plus a bias; Q(s, a) = w[a] . phi(s), learned by semi-gradient Q-learning
(Sutton & Barto 2018, sections 9.5 and 10.1). A box action space is acted on through `action_levels` evenly
spaced values per dimension (one-dimensional boxes only).
"""

from __future__ import annotations

import numpy as np

from runner.params import Param
from runner.tags import AgentTags


class LinearQ:
    """Linear Q-learning with per-dimension one-hot features; epsilon-greedy behaviour."""

    summary = "semi-gradient Q-learning, linear in per-dimension one-hot bins (an example of your own agent)"
    source = "Sutton & Barto (2018), sections 9.5 and 10.1"
    schema = (
        Param(
            "alpha",
            "float",
            0.1,
            "step size, divided by the number of active features",
            low=0.0,
            high=1.0,
            low_open=True,
        ),
        Param("gamma", "float", 0.99, "discount factor", low=0.0, high=1.0),
        Param("epsilon", "float", 0.1, "probability of a uniform random action", low=0.0, high=1.0),
        Param("tiles", "int", 10, "bins per observation dimension", low=1, high=1000),
        Param("clip", "float", 5.0, "where unbounded observation dimensions are clipped", low=0.0, low_open=True),
        Param("action_levels", "int", 5, "values tried per box action dimension", low=2, high=100),
    )
    tags = AgentTags(observations=("box",), actions=("discrete", "box"), compiled=False)

    def __init__(self, **params):
        self.params = params

    def get_params(self):
        return dict(self.params)

    def setup(self, observation_space, action_space, rng):
        p = self.params
        self.rng = rng
        self.low = np.maximum(np.asarray(observation_space.low, dtype=np.float64), -p["clip"])
        self.high = np.minimum(np.asarray(observation_space.high, dtype=np.float64), p["clip"])
        if hasattr(action_space, "n"):
            self.actions = list(range(int(action_space.n)))
        else:
            levels = np.linspace(float(action_space.low[0]), float(action_space.high[0]), p["action_levels"])
            self.actions = [np.array([v], dtype=action_space.dtype) for v in levels]
        self.weights = np.zeros((len(self.actions), self.low.size * p["tiles"] + 1))
        self.updates = 0

    def _features(self, obs):
        p = self.params
        scaled = (np.clip(obs, self.low, self.high) - self.low) / (self.high - self.low)
        index = np.minimum((scaled * p["tiles"]).astype(np.int64), p["tiles"] - 1)
        phi = np.zeros(self.weights.shape[1])
        phi[np.arange(self.low.size) * p["tiles"] + index] = 1.0
        phi[-1] = 1.0
        return phi

    def _best(self, phi):
        return int(np.argmax(self.weights @ phi))

    def act(self, obs):
        if self.rng.random() < self.params["epsilon"]:
            return self.actions[int(self.rng.integers(len(self.actions)))]
        values = self.weights @ self._features(obs)
        ties = np.flatnonzero(values == values.max())
        return self.actions[int(ties[self.rng.integers(ties.size)])]

    def greedy_action(self, obs):
        return self.actions[self._best(self._features(obs))]

    def observe(self, obs, action, reward, next_obs, terminated, truncated):
        p = self.params
        a = self._index(action)
        phi = self._features(obs)
        target = reward if terminated else reward + p["gamma"] * float(np.max(self.weights @ self._features(next_obs)))
        error = target - float(self.weights[a] @ phi)
        self.weights[a] += p["alpha"] / phi.sum() * error * phi
        self.updates += 1

    def _index(self, action):
        if isinstance(self.actions[0], int):
            return int(action)
        return int(np.argmin([abs(float(v[0]) - float(np.asarray(action).ravel()[0])) for v in self.actions]))

    def counters(self):
        return {"real_updates": self.updates, "planning_updates": 0, "model_updates": 0}

    def counter_problems(self, real_steps):
        return [] if self.updates == real_steps else [f"real_updates {self.updates} != real steps {real_steps}"]
