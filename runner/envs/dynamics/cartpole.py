"""CartPole-v1 as compiled kernels, reproducing gymnasium's `CartPoleEnv` (classic_control/cartpole.py) bit for bit.

State: (x, x_dot, theta, theta_dot) in float64, as gymnasium holds it; the observation is that state rounded to
float32. Actions 0 (push left) and 1 (push right) with a force of 10 N; explicit Euler steps of 0.02 s (gymnasium's
default `kinematics_integrator = "euler"`); reward 1.0 on every step, the terminating one included
(`sutton_barto_reward=False`, the default); termination when |x| > 2.4 or |theta| > 12 degrees. The start state is
uniform in [-0.05, 0.05) per dimension. Every expression keeps gymnasium's order of floating-point operations.
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit

from runner.envs.dynamics._shared import as_f32, uniform_between

__all__ = ["PARAMS", "default_params", "observation", "reset", "step"]

PARAMS = (
    "gravity",
    "masscart",
    "masspole",
    "total_mass",
    "length",
    "polemass_length",
    "force_mag",
    "tau",
    "theta_threshold_radians",
    "x_threshold",
    "reset_low",
    "reset_high",
)
"""Positions in the params vector; the values are gymnasium's attributes of the same names."""

(GRAVITY, MASSCART, MASSPOLE, TOTAL_MASS, LENGTH, POLEMASS_LENGTH, FORCE_MAG, TAU, THETA_LIMIT, X_LIMIT, LOW, HIGH) = (
    range(len(PARAMS))
)


def default_params() -> np.ndarray:
    """Gymnasium's constants, derived ones computed as `CartPoleEnv.__init__` computes them."""
    gravity, masscart, masspole, length, force_mag = 9.8, 1.0, 0.1, 0.5, 10.0
    values = {
        "gravity": gravity,
        "masscart": masscart,
        "masspole": masspole,
        "total_mass": masspole + masscart,
        "length": length,
        "polemass_length": masspole * length,
        "force_mag": force_mag,
        "tau": 0.02,
        "theta_threshold_radians": 12 * 2 * math.pi / 360,
        "x_threshold": 2.4,
        "reset_low": -0.05,
        "reset_high": 0.05,
    }
    return np.array([values[name] for name in PARAMS], dtype=np.float64)


@njit(cache=True, error_model="numpy", inline="always")
def reset(state, params, stream):
    """Draw the start state: each of the four coordinates uniform in [reset_low, reset_high)."""
    for i in range(4):
        state[i] = uniform_between(stream, params[LOW], params[HIGH])


@njit(cache=True, error_model="numpy", inline="always")
def step(state, action, params, out_state):
    """One Euler step under push `action` (0 left, 1 right); writes `out_state` (may be `state`).

    Returns (reward, terminated).
    """
    x, x_dot, theta, theta_dot = state[0], state[1], state[2], state[3]
    force = params[FORCE_MAG] if action == 1 else -params[FORCE_MAG]
    costheta = math.cos(theta)
    sintheta = math.sin(theta)
    temp = (force + params[POLEMASS_LENGTH] * (theta_dot * theta_dot) * sintheta) / params[TOTAL_MASS]
    thetaacc = (params[GRAVITY] * sintheta - costheta * temp) / (
        params[LENGTH] * (4.0 / 3.0 - params[MASSPOLE] * (costheta * costheta) / params[TOTAL_MASS])
    )
    xacc = temp - params[POLEMASS_LENGTH] * thetaacc * costheta / params[TOTAL_MASS]
    tau = params[TAU]
    x = x + tau * x_dot
    x_dot = x_dot + tau * xacc
    theta = theta + tau * theta_dot
    theta_dot = theta_dot + tau * thetaacc
    out_state[0] = x
    out_state[1] = x_dot
    out_state[2] = theta
    out_state[3] = theta_dot
    terminated = (
        x < -params[X_LIMIT] or x > params[X_LIMIT] or theta < -params[THETA_LIMIT] or theta > params[THETA_LIMIT]
    )
    return 1.0, terminated


@njit(cache=True, error_model="numpy", inline="always")
def observation(state, params, out_obs):
    """The observation gymnasium returns: the state rounded to float32."""
    for i in range(4):
        out_obs[i] = as_f32(state[i])
