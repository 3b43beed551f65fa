"""The overhead crane (`runner.envs.crane.OverheadCrane`) as compiled kernels of the classic-control shape.

State (x, x_dot, theta, theta_dot): trolley position on the rail and its velocity, cable angle from the downward
vertical and its rate. The equations, their source and the reward are in `runner.envs.crane`'s docstring; this
module computes exactly the same floating-point operations in the same order as the Python class (tested step for
step). `action` is an int (0 push left, 1 none, 2 push right) or, for the continuous crane, a float64 array of
shape (1,) whose entry, clipped to [-1, 1], scales the push force.
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit, types
from numba.extending import overload

from runner.envs.dynamics._shared import as_f32, uniform_between

__all__ = ["DEFAULTS", "PARAMS", "default_params", "observation", "outcome", "push_fraction", "reset", "step"]

DEFAULTS = {
    "trolley_mass": 20.0,
    "load_mass": 30.0,
    "cable_length": 2.0,
    "gravity": 9.81,
    "push_force": 25.0,
    "dt": 0.05,
    "rail_friction": 0.0,
    "swing_damping": 0.0,
    "rail_length": 10.0,
    "bay_position": 8.0,
    "bay_tolerance": 0.1,
    "swing_tolerance": 0.05,
    "speed_tolerance": 0.1,
    "swing_cost": 5.0,
    "crash_penalty": 500.0,
    "start_low": 0.5,
    "start_high": 1.5,
    "start_swing": 0.05,
}
"""The crane's physical and task constants (SI units), as `OverheadCrane`'s keyword options."""

PARAMS = tuple(DEFAULTS)
"""Positions in the params vector."""

(
    TROLLEY_MASS,
    LOAD_MASS,
    CABLE_LENGTH,
    GRAVITY,
    PUSH_FORCE,
    DT,
    RAIL_FRICTION,
    SWING_DAMPING,
    RAIL_LENGTH,
    BAY_POSITION,
    BAY_TOLERANCE,
    SWING_TOLERANCE,
    SPEED_TOLERANCE,
    SWING_COST,
    CRASH_PENALTY,
    START_LOW,
    START_HIGH,
    START_SWING,
) = range(len(PARAMS))


def default_params(**options: float) -> np.ndarray:
    """The params vector: `DEFAULTS` with the given options replaced (unknown names are a TypeError)."""
    unknown = sorted(set(options) - set(DEFAULTS))
    if unknown:
        raise TypeError(f"unknown crane option(s) {unknown}; known: {', '.join(PARAMS)}")
    values = {**DEFAULTS, **options}
    return np.array([float(values[name]) for name in PARAMS], dtype=np.float64)


@njit(cache=True, error_model="numpy", inline="always")
def reset(state, params, stream):
    """Trolley at rest uniform in [start_low, start_high); load at rest at an angle uniform in +-start_swing."""
    state[0] = uniform_between(stream, params[START_LOW], params[START_HIGH])
    state[1] = 0.0
    state[2] = uniform_between(stream, -params[START_SWING], params[START_SWING])
    state[3] = 0.0


def push_fraction(action):
    """The push as a fraction of `push_force` in [-1, 1]: -1, 0, 1 for actions 0, 1, 2, or a box action clipped."""
    raise NotImplementedError("push_fraction is resolved inside compiled code")


@overload(push_fraction)
def _push_fraction(action):
    if isinstance(action, types.Integer):
        return lambda action: float(action - 1)
    if isinstance(action, types.Array):
        return lambda action: min(max(action[0], -1.0), 1.0)
    return None


@njit(cache=True, error_model="numpy")
def _accelerations(params, force, x_dot, theta, theta_dot):
    """(x_ddot, theta_ddot) of the trolley and the cable under a horizontal force on the trolley."""
    big_m, m, length, g = params[TROLLEY_MASS], params[LOAD_MASS], params[CABLE_LENGTH], params[GRAVITY]
    s = math.sin(theta)
    c = math.cos(theta)
    r1 = force - params[RAIL_FRICTION] * x_dot + m * length * theta_dot * theta_dot * s
    r2 = -params[SWING_DAMPING] * theta_dot - m * g * length * s
    den = big_m + m * s * s
    x_ddot = (r1 - c * r2 / length) / den
    theta_ddot = ((big_m + m) * r2 / (m * length) - c * r1) / (length * den)
    return x_ddot, theta_ddot


@njit(cache=True, error_model="numpy")
def _wrap_angle(theta):
    """theta brought into [-pi, pi] by whole turns."""
    while theta > math.pi:
        theta -= 2.0 * math.pi
    while theta < -math.pi:
        theta += 2.0 * math.pi
    return theta


@njit(cache=True, error_model="numpy")
def _rk4(params, force, x, v, theta, omega):
    """One classic fourth-order Runge-Kutta step of dt with the force held constant."""
    h = params[DT]
    half = h / 2.0
    a1, b1 = _accelerations(params, force, v, theta, omega)
    v2, t2, w2 = v + half * a1, theta + half * omega, omega + half * b1
    a2, b2 = _accelerations(params, force, v2, t2, w2)
    v3, t3, w3 = v + half * a2, theta + half * w2, omega + half * b2
    a3, b3 = _accelerations(params, force, v3, t3, w3)
    v4, t4, w4 = v + h * a3, theta + h * w3, omega + h * b3
    a4, b4 = _accelerations(params, force, v4, t4, w4)
    sixth = h / 6.0
    x_new = x + sixth * (v + 2.0 * v2 + 2.0 * v3 + v4)
    v_new = v + sixth * (a1 + 2.0 * a2 + 2.0 * a3 + a4)
    theta_new = theta + sixth * (omega + 2.0 * w2 + 2.0 * w3 + w4)
    omega_new = omega + sixth * (b1 + 2.0 * b2 + 2.0 * b3 + b4)
    return x_new, v_new, _wrap_angle(theta_new), omega_new


@njit(cache=True, error_model="numpy")
def outcome(params, x, v, theta, omega):
    """(reward, terminated) of arriving in a state: -1 - swing_cost theta^2 a step; the load delivered at rest
    (within the bay's tolerance, small swing and speeds) or the trolley off the rail (minus crash_penalty) ends it."""
    reward = -1.0 - params[SWING_COST] * theta * theta
    if x < 0.0 or x > params[RAIL_LENGTH]:
        return reward - params[CRASH_PENALTY], True
    load_x = x + params[CABLE_LENGTH] * math.sin(theta)
    delivered = (
        abs(load_x - params[BAY_POSITION]) <= params[BAY_TOLERANCE]
        and abs(theta) <= params[SWING_TOLERANCE]
        and abs(v) <= params[SPEED_TOLERANCE]
        and abs(params[CABLE_LENGTH] * omega) <= params[SPEED_TOLERANCE]
    )
    return reward, delivered


@njit(cache=True, error_model="numpy", inline="always")
def step(state, action, params, out_state):
    """One RK4 step under `action`; writes `out_state` (may be `state`). Returns (reward, terminated)."""
    force = push_fraction(action) * params[PUSH_FORCE]
    x, v, theta, omega = _rk4(params, force, state[0], state[1], state[2], state[3])
    out_state[0] = x
    out_state[1] = v
    out_state[2] = theta
    out_state[3] = omega
    return outcome(params, x, v, theta, omega)


@njit(cache=True, error_model="numpy", inline="always")
def observation(state, params, out_obs):
    """The crane's observation: the state rounded to float32."""
    for i in range(4):
        out_obs[i] = as_f32(state[i])
