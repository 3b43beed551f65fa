"""MountainCar-v0 as compiled kernels, reproducing gymnasium's `MountainCarEnv` (classic_control/mountain_car.py).

State: (position, velocity) in float64; the observation is the state rounded to float32. Actions 0, 1, 2 push
left, not at all, right (force 0.001); gravity term -0.0025 cos(3 position); velocity clipped to +-0.07, position
clipped to [-1.2, 0.6], velocity set to 0 when the car sits at the left wall moving left. Reward -1 per step;
termination when position >= 0.5 and velocity >= goal_velocity (0). The start position is uniform in
[-0.6, -0.4), the start velocity 0. Every expression keeps gymnasium's order of floating-point operations.
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit

from runner.envs.dynamics._shared import as_f32, uniform_between

__all__ = ["PARAMS", "default_params", "observation", "reset", "step"]

PARAMS = (
    "min_position",
    "max_position",
    "max_speed",
    "goal_position",
    "goal_velocity",
    "force",
    "gravity",
    "reset_low",
    "reset_high",
)
"""Positions in the params vector; the values are gymnasium's attributes of the same names."""

MIN_POSITION, MAX_POSITION, MAX_SPEED, GOAL_POSITION, GOAL_VELOCITY, FORCE, GRAVITY, LOW, HIGH = range(len(PARAMS))


def default_params(goal_velocity: float = 0.0) -> np.ndarray:
    """Gymnasium's constants; `goal_velocity` is `MountainCarEnv`'s keyword of the same name."""
    values = {
        "min_position": -1.2,
        "max_position": 0.6,
        "max_speed": 0.07,
        "goal_position": 0.5,
        "goal_velocity": float(goal_velocity),
        "force": 0.001,
        "gravity": 0.0025,
        "reset_low": -0.6,
        "reset_high": -0.4,
    }
    return np.array([values[name] for name in PARAMS], dtype=np.float64)


@njit(cache=True, error_model="numpy", inline="always")
def reset(state, params, stream):
    """Draw the start position uniform in [reset_low, reset_high); the car starts at rest."""
    state[0] = uniform_between(stream, params[LOW], params[HIGH])
    state[1] = 0.0


@njit(cache=True, error_model="numpy", inline="always")
def step(state, action, params, out_state):
    """One step under push `action` (0 left, 1 none, 2 right); writes `out_state` (may be `state`).

    Returns (reward, terminated).
    """
    position, velocity = state[0], state[1]
    velocity += (action - 1) * params[FORCE] + math.cos(3 * position) * (-params[GRAVITY])
    velocity = min(max(velocity, -params[MAX_SPEED]), params[MAX_SPEED])
    position += velocity
    position = min(max(position, params[MIN_POSITION]), params[MAX_POSITION])
    if position == params[MIN_POSITION] and velocity < 0:
        velocity = 0.0
    out_state[0] = position
    out_state[1] = velocity
    terminated = position >= params[GOAL_POSITION] and velocity >= params[GOAL_VELOCITY]
    return -1.0, terminated


@njit(cache=True, error_model="numpy", inline="always")
def observation(state, params, out_obs):
    """The observation gymnasium returns: the state rounded to float32."""
    out_obs[0] = as_f32(state[0])
    out_obs[1] = as_f32(state[1])
