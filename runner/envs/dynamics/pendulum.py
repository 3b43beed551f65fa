"""Pendulum-v1 as compiled kernels, reproducing gymnasium's `PendulumEnv` (classic_control/pendulum.py) bit for bit.

State: (theta, theta_dot) in float64; the observation is (cos theta, sin theta, theta_dot) rounded to float32.
The action is a torque, rounded to float32 (a value of the float32 action space) and clipped to [-2, 2]. Cost
angle_normalize(theta)^2 + 0.1 theta_dot^2 + 0.001 u^2 (the last term in float32, as numpy computes a float32
with a Python float), reward its negative; theta_dot += (3 g / (2 l) sin(theta) + 3 / (m l^2) u) dt, clipped to
+-8; theta += theta_dot dt (semi-implicit Euler, dt = 0.05). No termination. Start state uniform in
[-pi, pi) x [-1, 1). Every expression keeps gymnasium's order of floating-point operations.
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit

from runner.envs.dynamics._shared import as_f32, c_powf, c_square, uniform_between

__all__ = ["PARAMS", "default_params", "observation", "reset", "step"]

PARAMS = (
    "max_speed",
    "max_torque",
    "dt",
    "g",
    "m",
    "l",
    "reset_theta",
    "reset_theta_dot",
    "square_exponent",
    "gravity_gain",
    "torque_gain",
)
"""Positions in the params vector; the values are gymnasium's attributes of the same names; `reset_*` are its
DEFAULT_X and DEFAULT_Y; `square_exponent` is 2.0, read at run time so `pow` stays a libm call;
`gravity_gain` = 3 g / (2 l) and `torque_gain` = 3.0 / (m l**2) are computed once in Python, as `step` computes
them on every call."""

MAX_SPEED, MAX_TORQUE, DT, G, M, L, RESET_THETA, RESET_THETA_DOT, SQUARE, GRAVITY_GAIN, TORQUE_GAIN = range(len(PARAMS))


def default_params(g: float = 10.0) -> np.ndarray:
    """Gymnasium's constants; `g` is `PendulumEnv`'s keyword of the same name."""
    values = {
        "max_speed": 8.0,
        "max_torque": 2.0,
        "dt": 0.05,
        "g": float(g),
        "m": 1.0,
        "l": 1.0,
        "reset_theta": math.pi,
        "reset_theta_dot": 1.0,
        "square_exponent": 2.0,
    }
    values["gravity_gain"] = 3 * values["g"] / (2 * values["l"])
    values["torque_gain"] = 3.0 / (values["m"] * values["l"] ** 2)
    return np.array([values[name] for name in PARAMS], dtype=np.float64)


@njit(cache=True, error_model="numpy", inline="always")
def reset(state, params, stream):
    """Draw theta uniform in [-pi, pi) and theta_dot uniform in [-1, 1), in that order."""
    state[0] = uniform_between(stream, -params[RESET_THETA], params[RESET_THETA])
    state[1] = uniform_between(stream, -params[RESET_THETA_DOT], params[RESET_THETA_DOT])


@njit(cache=True, error_model="numpy")
def _angle_normalize(x):
    """((x + pi) % (2 pi)) - pi, with Python's (and numpy's) sign rule for %."""
    return ((x + math.pi) % (2 * math.pi)) - math.pi


@njit(cache=True, error_model="numpy", inline="always")
def step(state, action, params, out_state):
    """One step under torque `action[0]`; writes `out_state` (may be `state`). Returns (reward, terminated)."""
    th, thdot = state[0], state[1]
    dt, two = params[DT], params[SQUARE]
    u = min(max(as_f32(action[0]), -params[MAX_TORQUE]), params[MAX_TORQUE])
    control_cost = as_f32(as_f32(0.001) * c_powf(u, two))
    costs = c_square(_angle_normalize(th), two) + 0.1 * c_square(thdot, two) + control_cost
    drive = as_f32(as_f32(params[TORQUE_GAIN]) * u)
    newthdot = thdot + (params[GRAVITY_GAIN] * math.sin(th) + drive) * dt
    newthdot = min(max(newthdot, -params[MAX_SPEED]), params[MAX_SPEED])
    newth = th + newthdot * dt
    out_state[0] = newth
    out_state[1] = newthdot
    return -costs, False


@njit(cache=True, error_model="numpy", inline="always")
def observation(state, params, out_obs):
    """The observation gymnasium returns: (cos theta, sin theta, theta_dot) rounded to float32."""
    out_obs[0] = as_f32(math.cos(state[0]))
    out_obs[1] = as_f32(math.sin(state[0]))
    out_obs[2] = as_f32(state[1])
