"""Run a compiled environment one step at a time from Python, with gymnasium's episode bookkeeping (for tests).

`DynamicsStepper` calls the kernels directly (each call crosses from Python into compiled code, so it is slow
next to a compiled loop) and adds what gymnasium's wrappers add: a step counter and truncation at the spec's
`step_limit`, also on a terminating step, as `gymnasium.wrappers.TimeLimit` does.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from runner.envs.dynamics import dynamics_kernels, dynamics_spec
from runner.streams import as_stream

__all__ = ["DynamicsStepper"]


class DynamicsStepper:
    """A compiled environment driven from Python: `reset()` and `step(action)` like a gymnasium environment."""

    def __init__(self, env_id: str, seed: int | np.random.SeedSequence | np.ndarray, **options: Any) -> None:
        self.spec = dynamics_spec(env_id)
        self._reset, self._step, self._observation = dynamics_kernels(env_id)
        self.params = self.spec.default_params(**options)
        self.stream = as_stream(seed)
        self.state = np.zeros(self.spec.state_size)
        self.steps = 0
        self._obs = np.zeros(self.spec.obs_size)

    def observation(self) -> np.ndarray:
        """A copy of the current observation (float32 values held as float64)."""
        self._observation(self.state, self.params, self._obs)
        return self._obs.copy()

    def reset(self) -> np.ndarray:
        """Draw a start state from the stream; return its observation."""
        self._reset(self.state, self.params, self.stream)
        self.steps = 0
        return self.observation()

    def step(self, action: int | np.ndarray) -> tuple[np.ndarray, float, bool, bool]:
        """(observation, reward, terminated, truncated) after one step."""
        if self.spec.action_kind == "discrete":
            kernel_action: int | np.ndarray = int(action)
        else:
            kernel_action = np.asarray(action, dtype=np.float64).reshape(self.spec.action_size)
        reward, terminated = self._step(self.state, kernel_action, self.params, self.state)
        self.steps += 1
        return self.observation(), float(reward), bool(terminated), self.steps >= self.spec.step_limit
