"""MountainCarContinuous-v0 as compiled kernels, reproducing gymnasium's `Continuous_MountainCarEnv`
(classic_control/continuous_mountain_car.py) bit for bit.

Gymnasium keeps this environment's state in float64 after `reset` and in float32 after every `step`, and numpy 2
computes a float32 scalar with a Python float in float32 (NEP 50). So the kernel's state has three entries:
(position, velocity, held_in_float32), the last 0.0 after reset and 1.0 after a step, and each operation
rounds as numpy does for the types gymnasium holds at that moment. The action is rounded to float32 first, as a
value of the float32 action space; the force is that action clipped to [-1, 1] (a clipped force is a Python
float in gymnasium, an unclipped one a float32, and they round differently). Velocity += force * 0.0015 -
0.0025 cos(3 position), clipped to +-0.07; position clipped to [-1.2, 0.6], velocity 0 at the left wall moving
left. Reward: 100 on reaching position >= 0.45 with velocity >= 0 (termination), minus 0.1 action^2 on every
step (of the unclipped action, as gymnasium does). Start position uniform in [-0.6, -0.4), velocity 0.
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit

from runner.envs.dynamics._shared import as_f32, c_square, uniform_between

__all__ = ["PARAMS", "default_params", "observation", "reset", "step"]

PARAMS = (
    "min_action",
    "max_action",
    "min_position",
    "max_position",
    "max_speed",
    "goal_position",
    "goal_velocity",
    "power",
    "gravity",
    "reset_low",
    "reset_high",
    "square_exponent",
)
"""Positions in the params vector; the values are gymnasium's attributes of the same names (gravity is the literal
0.0025 of its `step`); `square_exponent` is 2.0, read at run time so `pow` stays a libm call."""

(
    MIN_ACTION,
    MAX_ACTION,
    MIN_POSITION,
    MAX_POSITION,
    MAX_SPEED,
    GOAL_POSITION,
    GOAL_VELOCITY,
    POWER,
    GRAVITY,
    LOW,
    HIGH,
    SQUARE,
) = range(len(PARAMS))


def default_params(goal_velocity: float = 0.0) -> np.ndarray:
    """Gymnasium's constants; `goal_velocity` is `Continuous_MountainCarEnv`'s keyword of the same name."""
    values = {
        "min_action": -1.0,
        "max_action": 1.0,
        "min_position": -1.2,
        "max_position": 0.6,
        "max_speed": 0.07,
        "goal_position": 0.45,
        "goal_velocity": float(goal_velocity),
        "power": 0.0015,
        "gravity": 0.0025,
        "reset_low": -0.6,
        "reset_high": -0.4,
        "square_exponent": 2.0,
    }
    return np.array([values[name] for name in PARAMS], dtype=np.float64)


@njit(cache=True, error_model="numpy", inline="always")
def reset(state, params, stream):
    """Draw the start position uniform in [reset_low, reset_high); at rest; state held in float64."""
    state[0] = uniform_between(stream, params[LOW], params[HIGH])
    state[1] = 0.0
    state[2] = 0.0


@njit(cache=True, error_model="numpy")
def _above(value, is_f32, bound):
    """`value > bound` as numpy compares it: a float32 value against a Python float rounds the bound to float32."""
    return value > (as_f32(bound) if is_f32 else bound)


@njit(cache=True, error_model="numpy")
def _below(value, is_f32, bound):
    """`value < bound`, rounding the bound as `_above` does."""
    return value < (as_f32(bound) if is_f32 else bound)


@njit(cache=True, error_model="numpy", inline="always")
def step(state, action, params, out_state):
    """One step under force `action[0]` (rounded to float32); writes `out_state` (may be `state`).

    Returns (reward, terminated).
    """
    position, velocity, state_f32 = state[0], state[1], state[2] != 0.0
    act = as_f32(action[0])
    # force = min(max(action[0], min_action), max_action): a float32 unless clipped to a Python float bound
    if act < params[MIN_ACTION]:
        push = params[MIN_ACTION] * params[POWER]
        push_f32 = False
    elif act > params[MAX_ACTION]:
        push = params[MAX_ACTION] * params[POWER]
        push_f32 = False
    else:
        push = as_f32(act * as_f32(params[POWER]))
        push_f32 = True
    # velocity += force * power - 0.0025 * math.cos(3 * position)
    slope = params[GRAVITY] * math.cos(as_f32(3 * position) if state_f32 else 3 * position)
    change = as_f32(push - as_f32(slope)) if push_f32 else push - slope
    velocity = as_f32(velocity + as_f32(change)) if state_f32 else velocity + change
    velocity_f32 = state_f32
    if _above(velocity, velocity_f32, params[MAX_SPEED]):
        velocity, velocity_f32 = params[MAX_SPEED], False
    if _below(velocity, velocity_f32, -params[MAX_SPEED]):
        velocity, velocity_f32 = -params[MAX_SPEED], False
    # position += velocity: float32 when the state is (a Python float velocity is rounded to float32 first)
    position = as_f32(position + as_f32(velocity)) if state_f32 else position + velocity
    position_f32 = state_f32
    if _above(position, position_f32, params[MAX_POSITION]):
        position, position_f32 = params[MAX_POSITION], False
    if _below(position, position_f32, params[MIN_POSITION]):
        position, position_f32 = params[MIN_POSITION], False
    at_wall = position == (as_f32(params[MIN_POSITION]) if position_f32 else params[MIN_POSITION])
    if at_wall and velocity < 0:
        velocity, velocity_f32 = 0.0, False
    goal = as_f32(params[GOAL_POSITION]) if position_f32 else params[GOAL_POSITION]
    goal_velocity = as_f32(params[GOAL_VELOCITY]) if velocity_f32 else params[GOAL_VELOCITY]
    terminated = position >= goal and velocity >= goal_velocity
    reward = 100.0 if terminated else 0.0
    reward -= c_square(act, params[SQUARE]) * 0.1
    out_state[0] = as_f32(position)
    out_state[1] = as_f32(velocity)
    out_state[2] = 1.0
    return reward, terminated


@njit(cache=True, error_model="numpy", inline="always")
def observation(state, params, out_obs):
    """The observation gymnasium returns: (position, velocity) rounded to float32."""
    out_obs[0] = as_f32(state[0])
    out_obs[1] = as_f32(state[1])
