"""A trivial task with a box observation: walk a line east to its end (the contract checks' corridor for agents
that take boxes).

The position x in [0, 1] starts at 0; each step moves it by 0.25 east or west (`continuous=True`: by 0.25 x the
action in [-1, 1]) plus uniform noise of +-`noise`, clipped to the line. Reaching x >= 1 gives reward 1 and ends
the episode; every other step gives 0.
"""

from __future__ import annotations

from typing import Any

import gymnasium as gym
import numpy as np

__all__ = ["LineWalk"]

_STEP = 0.25


class LineWalk(gym.Env):
    """Walk east along [0, 1] to the end; observations are the position as a one-number box."""

    metadata: dict[str, Any] = {"render_modes": []}  # noqa: RUF012  (gymnasium's attribute)

    def __init__(self, continuous: bool = False, noise: float = 0.02) -> None:
        self.continuous = bool(continuous)
        self.noise = float(noise)
        self.observation_space = gym.spaces.Box(0.0, 1.0, shape=(1,), dtype=np.float64)
        self.action_space = (
            gym.spaces.Box(-1.0, 1.0, shape=(1,), dtype=np.float64) if self.continuous else gym.spaces.Discrete(2)
        )
        self._x = 0.0

    def reset(self, *, seed: int | None = None, options: dict[str, Any] | None = None) -> tuple[np.ndarray, dict]:
        super().reset(seed=seed)
        self._x = 0.0
        return np.array([self._x]), {}

    def step(self, action: Any) -> tuple[np.ndarray, float, bool, bool, dict]:
        if self.continuous:
            move = _STEP * float(np.clip(np.asarray(action, dtype=np.float64).reshape(-1)[0], -1.0, 1.0))
        else:
            move = _STEP if int(action) == 1 else -_STEP
        move += float(self.np_random.uniform(-self.noise, self.noise))
        self._x = min(1.0, max(0.0, self._x + move))
        done = self._x >= 1.0 - 1e-9
        return np.array([self._x]), 1.0 if done else 0.0, done, False, {}
