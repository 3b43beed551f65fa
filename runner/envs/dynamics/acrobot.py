"""Acrobot-v1 as compiled kernels, reproducing gymnasium's `AcrobotEnv` (classic_control/acrobot.py) bit for bit.

State: (theta1, theta2, dtheta1, dtheta2) in float64; the observation is (cos theta1, sin theta1, cos theta2,
sin theta2, dtheta1, dtheta2) rounded to float32. Actions 0, 1, 2 apply torque -1, 0, +1 at the joint between
the links (no torque noise, gymnasium's default). One classic fourth-order Runge-Kutta step of 0.2 s over the
equations of motion with gymnasium's default `book_or_nips = "book"` (the form of Sutton & Barto's book and its
Java code); then both angles wrapped into [-pi, pi] and the velocities bounded by 4 pi and 9 pi. Reward -1 per
step and 0 on the terminating one; termination when -cos(theta1) - cos(theta1 + theta2) > 1. The start state is
uniform in [-0.1, 0.1) per coordinate, rounded to float32 (gymnasium stores it as float32). Every expression keeps
gymnasium's order of floating-point operations, including C `pow` for its numpy-scalar squares.
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit

from runner.envs.dynamics._shared import as_f32, c_square, uniform_between

__all__ = ["PARAMS", "default_params", "observation", "reset", "step"]

PARAMS = (
    "dt",
    "link_length_1",
    "link_mass_1",
    "link_mass_2",
    "link_com_pos_1",
    "link_com_pos_2",
    "link_moi",
    "max_vel_1",
    "max_vel_2",
    "gravity",
    "reset_low",
    "reset_high",
    "square_exponent",
    "link_com_pos_1_squared",
    "link_length_1_squared",
    "link_com_pos_2_squared",
)
"""Positions in the params vector; the values are gymnasium's class attributes of the same names (gravity is the
literal 9.8 of its `_dsdt`); `square_exponent` is 2.0, read at run time so `pow` stays a libm call; the squares of
constants are computed once with Python's `**`, as `_dsdt` computes them on every call."""

DT, L1, M1, M2, LC1, LC2, MOI, MAX_VEL_1, MAX_VEL_2, GRAVITY, LOW, HIGH, SQUARE, LC1_SQ, L1_SQ, LC2_SQ = range(
    len(PARAMS)
)


def default_params() -> np.ndarray:
    """Gymnasium's class constants of `AcrobotEnv`."""
    values = {
        "dt": 0.2,
        "link_length_1": 1.0,
        "link_mass_1": 1.0,
        "link_mass_2": 1.0,
        "link_com_pos_1": 0.5,
        "link_com_pos_2": 0.5,
        "link_moi": 1.0,
        "max_vel_1": 4 * math.pi,
        "max_vel_2": 9 * math.pi,
        "gravity": 9.8,
        "reset_low": -0.1,
        "reset_high": 0.1,
        "square_exponent": 2.0,
    }
    values["link_com_pos_1_squared"] = values["link_com_pos_1"] ** 2
    values["link_length_1_squared"] = values["link_length_1"] ** 2
    values["link_com_pos_2_squared"] = values["link_com_pos_2"] ** 2
    return np.array([values[name] for name in PARAMS], dtype=np.float64)


@njit(cache=True, error_model="numpy", inline="always")
def reset(state, params, stream):
    """Draw each coordinate uniform in [reset_low, reset_high), rounded to float32 as gymnasium stores it."""
    for i in range(4):
        state[i] = as_f32(uniform_between(stream, params[LOW], params[HIGH]))


@njit(cache=True, error_model="numpy", inline="always")
def _dsdt(params, a, theta1, theta2, dtheta1, dtheta2):
    """Time derivative of the state under torque `a` (gymnasium's `_dsdt`, book dynamics).

    Inlined into `step` by numba: as a call, LLVM kept it out of line, and the four calls of each step, each
    passing the params array, took about an eighth of the step's time (measured with
    `benchmarks/dynamics_speed.py`)."""
    m1, m2, l1, lc1, lc2 = params[M1], params[M2], params[L1], params[LC1], params[LC2]
    i1 = params[MOI]
    i2 = params[MOI]
    g = params[GRAVITY]
    two = params[SQUARE]
    lc1_sq, l1_sq, lc2_sq = params[LC1_SQ], params[L1_SQ], params[LC2_SQ]
    cos2 = math.cos(theta2)  # gymnasium evaluates cos(theta2) twice and sin(theta2) three times: same values
    sin2 = math.sin(theta2)
    d1 = m1 * lc1_sq + m2 * (l1_sq + lc2_sq + 2 * l1 * lc2 * cos2) + i1 + i2
    d2 = m2 * (lc2_sq + l1 * lc2 * cos2) + i2
    phi2 = m2 * lc2 * g * math.cos(theta1 + theta2 - math.pi / 2.0)
    phi1 = (
        -m2 * l1 * lc2 * c_square(dtheta2, two) * sin2
        - 2 * m2 * l1 * lc2 * dtheta2 * dtheta1 * sin2
        + (m1 * lc1 + m2 * l1) * g * math.cos(theta1 - math.pi / 2)
        + phi2
    )
    ddtheta2 = (a + d2 / d1 * phi1 - m2 * l1 * lc2 * c_square(dtheta1, two) * sin2 - phi2) / (
        m2 * lc2_sq + i2 - c_square(d2, two) / d1
    )
    ddtheta1 = -(d2 * ddtheta2 + phi1) / d1
    return dtheta1, dtheta2, ddtheta1, ddtheta2


@njit(cache=True, error_model="numpy")
def _wrap(x, m, big_m):
    """Wrap x into [m, big_m] by whole turns (gymnasium's `wrap`)."""
    diff = big_m - m
    while x > big_m:
        x = x - diff
    while x < m:
        x = x + diff
    return x


@njit(cache=True, error_model="numpy", inline="always")
def step(state, action, params, out_state):
    """One RK4 step of dt under the torque of `action`; writes `out_state` (may be `state`).

    Returns (reward, terminated).
    """
    torque = -1.0 if action == 0 else (0.0 if action == 1 else 1.0)
    y0, y1, y2, y3 = state[0], state[1], state[2], state[3]
    dt = params[DT] - 0.0
    dt2 = dt / 2.0
    # the torque rides along as a fifth coordinate whose derivative is 0.0: torque + h * 0.0 == torque
    a0, b0, c0, e0 = _dsdt(params, torque, y0, y1, y2, y3)
    a1, b1, c1, e1 = _dsdt(params, torque, y0 + dt2 * a0, y1 + dt2 * b0, y2 + dt2 * c0, y3 + dt2 * e0)
    a2, b2, c2, e2 = _dsdt(params, torque, y0 + dt2 * a1, y1 + dt2 * b1, y2 + dt2 * c1, y3 + dt2 * e1)
    a3, b3, c3, e3 = _dsdt(params, torque, y0 + dt * a2, y1 + dt * b2, y2 + dt * c2, y3 + dt * e2)
    h = dt / 6.0
    n0 = y0 + h * (a0 + 2 * a1 + 2 * a2 + a3)
    n1 = y1 + h * (b0 + 2 * b1 + 2 * b2 + b3)
    n2 = y2 + h * (c0 + 2 * c1 + 2 * c2 + c3)
    n3 = y3 + h * (e0 + 2 * e1 + 2 * e2 + e3)
    n0 = _wrap(n0, -math.pi, math.pi)
    n1 = _wrap(n1, -math.pi, math.pi)
    n2 = min(max(n2, -params[MAX_VEL_1]), params[MAX_VEL_1])
    n3 = min(max(n3, -params[MAX_VEL_2]), params[MAX_VEL_2])
    out_state[0] = n0
    out_state[1] = n1
    out_state[2] = n2
    out_state[3] = n3
    terminated = -math.cos(n0) - math.cos(n1 + n0) > 1.0
    return (0.0 if terminated else -1.0), terminated


@njit(cache=True, error_model="numpy", inline="always")
def observation(state, params, out_obs):
    """The observation gymnasium returns: cosines and sines of both angles, then both velocities, in float32."""
    out_obs[0] = as_f32(math.cos(state[0]))
    out_obs[1] = as_f32(math.sin(state[0]))
    out_obs[2] = as_f32(math.cos(state[1]))
    out_obs[3] = as_f32(math.sin(state[1]))
    out_obs[4] = as_f32(state[2])
    out_obs[5] = as_f32(state[3])
