"""Classic-control dynamics and the crane in jax.numpy, for the neural kinds' compiled trials (`runner.neural.trial`).

Each environment is three pure functions of the shape of the numba kernels (`runner.envs.dynamics`), so they run
inside `lax.scan` and batch with `vmap`:

- `reset(key, params) -> state` draws the start state from a `jax.random` key;
- `step(state, action, params) -> (next_state, reward, terminated)` for an integer action, or for box actions
  (Pendulum-v1, the continuous crane) a float array of shape (action_size,), as the numba kernels take it;
- `observation(state, params) -> obs`, what gymnasium returns, rounded to float32.

States and parameters are float64 (the parameter vectors are the numba modules' `default_params`, at the same
positions), so trials must run with 64-bit types enabled (`jax.enable_x64(True)`, as `runner.neural.trial` does).
Every expression keeps gymnasium's order of operations; XLA's own sine, cosine and power may differ from libm in
the last bits, so these agree with gymnasium's `env.step` to about 1e-12 relative per step rather than bit for bit
(tested in `tests/test_neural_dynamics.py`). Truncation at the step limit is the caller's.
"""

from __future__ import annotations

from collections.abc import Callable
from typing import NamedTuple

import jax
import jax.numpy as jnp

from runner.envs.dynamics import acrobot as acrobot_ids
from runner.envs.dynamics import cartpole as cartpole_ids
from runner.envs.dynamics import crane as crane_ids
from runner.envs.dynamics import mountain_car as mountain_car_ids
from runner.envs.dynamics import pendulum as pendulum_ids

__all__ = ["JaxDynamics", "jax_dynamics"]


class JaxDynamics(NamedTuple):
    """The three functions of one environment."""

    reset: Callable[[jax.Array, jax.Array], jax.Array]
    step: Callable[[jax.Array, jax.Array, jax.Array], tuple[jax.Array, jax.Array, jax.Array]]
    observation: Callable[[jax.Array, jax.Array], jax.Array]


def _uniform(key: jax.Array, shape: tuple[int, ...], low: jax.Array, high: jax.Array) -> jax.Array:
    """low + (high - low) * u with u uniform in [0, 1), in float64 (numpy's Generator.uniform formula)."""
    return low + (high - low) * jax.random.uniform(key, shape, jnp.float64)


def _f32(x: jax.Array) -> jax.Array:
    return x.astype(jnp.float32)


def _cartpole_reset(key: jax.Array, p: jax.Array) -> jax.Array:
    c = cartpole_ids
    return _uniform(key, (4,), p[c.LOW], p[c.HIGH])


def _cartpole_step(state: jax.Array, action: jax.Array, p: jax.Array) -> tuple[jax.Array, jax.Array, jax.Array]:
    c = cartpole_ids
    x, x_dot, theta, theta_dot = state[0], state[1], state[2], state[3]
    force = jnp.where(action == 1, p[c.FORCE_MAG], -p[c.FORCE_MAG])
    costheta = jnp.cos(theta)
    sintheta = jnp.sin(theta)
    temp = (force + p[c.POLEMASS_LENGTH] * (theta_dot * theta_dot) * sintheta) / p[c.TOTAL_MASS]
    thetaacc = (p[c.GRAVITY] * sintheta - costheta * temp) / (
        p[c.LENGTH] * (4.0 / 3.0 - p[c.MASSPOLE] * (costheta * costheta) / p[c.TOTAL_MASS])
    )
    xacc = temp - p[c.POLEMASS_LENGTH] * thetaacc * costheta / p[c.TOTAL_MASS]
    tau = p[c.TAU]
    x = x + tau * x_dot
    x_dot = x_dot + tau * xacc
    theta = theta + tau * theta_dot
    theta_dot = theta_dot + tau * thetaacc
    terminated = (x < -p[c.X_LIMIT]) | (x > p[c.X_LIMIT]) | (theta < -p[c.THETA_LIMIT]) | (theta > p[c.THETA_LIMIT])
    return jnp.stack([x, x_dot, theta, theta_dot]), jnp.float64(1.0), terminated


def _mountain_car_reset(key: jax.Array, p: jax.Array) -> jax.Array:
    m = mountain_car_ids
    return jnp.stack([_uniform(key, (), p[m.LOW], p[m.HIGH]), jnp.float64(0.0)])


def _mountain_car_step(state: jax.Array, action: jax.Array, p: jax.Array) -> tuple[jax.Array, jax.Array, jax.Array]:
    m = mountain_car_ids
    position, velocity = state[0], state[1]
    velocity = velocity + ((action - 1) * p[m.FORCE] + jnp.cos(3 * position) * (-p[m.GRAVITY]))
    velocity = jnp.minimum(jnp.maximum(velocity, -p[m.MAX_SPEED]), p[m.MAX_SPEED])
    position = position + velocity
    position = jnp.minimum(jnp.maximum(position, p[m.MIN_POSITION]), p[m.MAX_POSITION])
    velocity = jnp.where((position == p[m.MIN_POSITION]) & (velocity < 0), 0.0, velocity)
    terminated = (position >= p[m.GOAL_POSITION]) & (velocity >= p[m.GOAL_VELOCITY])
    return jnp.stack([position, velocity]), jnp.float64(-1.0), terminated


def _acrobot_reset(key: jax.Array, p: jax.Array) -> jax.Array:
    a = acrobot_ids
    return _uniform(key, (4,), p[a.LOW], p[a.HIGH]).astype(jnp.float32).astype(jnp.float64)


def _acrobot_dsdt(p: jax.Array, torque: jax.Array, y: tuple[jax.Array, ...]) -> tuple[jax.Array, ...]:
    """Gymnasium's `_dsdt` (book dynamics), the squares of numpy scalars as powers."""
    a = acrobot_ids
    theta1, theta2, dtheta1, dtheta2 = y
    m1, m2, l1, lc1, lc2 = p[a.M1], p[a.M2], p[a.L1], p[a.LC1], p[a.LC2]
    i1 = i2 = p[a.MOI]
    g = p[a.GRAVITY]
    cos2 = jnp.cos(theta2)
    sin2 = jnp.sin(theta2)
    d1 = m1 * p[a.LC1_SQ] + m2 * (p[a.L1_SQ] + p[a.LC2_SQ] + 2 * l1 * lc2 * cos2) + i1 + i2
    d2 = m2 * (p[a.LC2_SQ] + l1 * lc2 * cos2) + i2
    phi2 = m2 * lc2 * g * jnp.cos(theta1 + theta2 - jnp.pi / 2.0)
    phi1 = (
        -m2 * l1 * lc2 * dtheta2**2 * sin2
        - 2 * m2 * l1 * lc2 * dtheta2 * dtheta1 * sin2
        + (m1 * lc1 + m2 * l1) * g * jnp.cos(theta1 - jnp.pi / 2)
        + phi2
    )
    ddtheta2 = (torque + d2 / d1 * phi1 - m2 * l1 * lc2 * dtheta1**2 * sin2 - phi2) / (
        m2 * p[a.LC2_SQ] + i2 - d2**2 / d1
    )
    ddtheta1 = -(d2 * ddtheta2 + phi1) / d1
    return dtheta1, dtheta2, ddtheta1, ddtheta2


def _wrap(x: jax.Array, low: float, high: float) -> jax.Array:
    """x brought into [low, high] by whole periods, one subtraction at a time (gymnasium's `wrap`)."""
    diff = high - low
    x = jax.lax.while_loop(lambda v: v > high, lambda v: v - diff, x)
    return jax.lax.while_loop(lambda v: v < low, lambda v: v + diff, x)


def _acrobot_step(state: jax.Array, action: jax.Array, p: jax.Array) -> tuple[jax.Array, jax.Array, jax.Array]:
    a = acrobot_ids
    torque = jnp.where(action == 0, -1.0, jnp.where(action == 1, 0.0, 1.0))
    y = (state[0], state[1], state[2], state[3])
    dt = p[a.DT]
    dt2 = dt / 2.0
    k1 = _acrobot_dsdt(p, torque, y)
    k2 = _acrobot_dsdt(p, torque, tuple(yi + dt2 * ki for yi, ki in zip(y, k1, strict=True)))
    k3 = _acrobot_dsdt(p, torque, tuple(yi + dt2 * ki for yi, ki in zip(y, k2, strict=True)))
    k4 = _acrobot_dsdt(p, torque, tuple(yi + dt * ki for yi, ki in zip(y, k3, strict=True)))
    h = dt / 6.0
    n = [yi + h * (a1 + 2 * a2 + 2 * a3 + a4) for yi, a1, a2, a3, a4 in zip(y, k1, k2, k3, k4, strict=True)]
    n0 = _wrap(n[0], -jnp.pi, jnp.pi)
    n1 = _wrap(n[1], -jnp.pi, jnp.pi)
    n2 = jnp.minimum(jnp.maximum(n[2], -p[a.MAX_VEL_1]), p[a.MAX_VEL_1])
    n3 = jnp.minimum(jnp.maximum(n[3], -p[a.MAX_VEL_2]), p[a.MAX_VEL_2])
    terminated = -jnp.cos(n0) - jnp.cos(n1 + n0) > 1.0
    return jnp.stack([n0, n1, n2, n3]), jnp.where(terminated, 0.0, -1.0), terminated


def _acrobot_observation(state: jax.Array, p: jax.Array) -> jax.Array:
    values = [jnp.cos(state[0]), jnp.sin(state[0]), jnp.cos(state[1]), jnp.sin(state[1]), state[2], state[3]]
    return _f32(jnp.stack(values))


def _crane_reset(key: jax.Array, p: jax.Array) -> jax.Array:
    c = crane_ids
    first, second = jax.random.split(key)
    x = _uniform(first, (), p[c.START_LOW], p[c.START_HIGH])
    theta = _uniform(second, (), -p[c.START_SWING], p[c.START_SWING])
    return jnp.stack([x, jnp.float64(0.0), theta, jnp.float64(0.0)])


def _crane_accelerations(p: jax.Array, force: jax.Array, x_dot, theta, theta_dot) -> tuple[jax.Array, jax.Array]:
    c = crane_ids
    big_m, m, length, g = p[c.TROLLEY_MASS], p[c.LOAD_MASS], p[c.CABLE_LENGTH], p[c.GRAVITY]
    s = jnp.sin(theta)
    co = jnp.cos(theta)
    r1 = force - p[c.RAIL_FRICTION] * x_dot + m * length * theta_dot * theta_dot * s
    r2 = -p[c.SWING_DAMPING] * theta_dot - m * g * length * s
    den = big_m + m * s * s
    x_ddot = (r1 - co * r2 / length) / den
    theta_ddot = ((big_m + m) * r2 / (m * length) - co * r1) / (length * den)
    return x_ddot, theta_ddot


def _crane_step(state: jax.Array, action: jax.Array, p: jax.Array) -> tuple[jax.Array, jax.Array, jax.Array]:
    """Push left, none or right for actions 0, 1, 2."""
    return _crane_pushed(state, (action - 1).astype(jnp.float64), p)


def _continuous_crane_step(state: jax.Array, action: jax.Array, p: jax.Array) -> tuple[jax.Array, jax.Array, jax.Array]:
    """Push with the fraction `action[0]` of push_force, clipped to [-1, 1] (in float64, as the Python class)."""
    return _crane_pushed(state, jnp.clip(action[0].astype(jnp.float64), -1.0, 1.0), p)


def _crane_pushed(state: jax.Array, fraction: jax.Array, p: jax.Array) -> tuple[jax.Array, jax.Array, jax.Array]:
    """One RK4 step of the crane under the force fraction * push_force."""
    c = crane_ids
    force = fraction * p[c.PUSH_FORCE]
    x, v, theta, omega = state[0], state[1], state[2], state[3]
    h = p[c.DT]
    half = h / 2.0
    a1, b1 = _crane_accelerations(p, force, v, theta, omega)
    v2, t2, w2 = v + half * a1, theta + half * omega, omega + half * b1
    a2, b2 = _crane_accelerations(p, force, v2, t2, w2)
    v3, t3, w3 = v + half * a2, theta + half * w2, omega + half * b2
    a3, b3 = _crane_accelerations(p, force, v3, t3, w3)
    v4, t4, w4 = v + h * a3, theta + h * w3, omega + h * b3
    a4, b4 = _crane_accelerations(p, force, v4, t4, w4)
    sixth = h / 6.0
    x = x + sixth * (v + 2.0 * v2 + 2.0 * v3 + v4)
    v_new = v + sixth * (a1 + 2.0 * a2 + 2.0 * a3 + a4)
    theta = _wrap(theta + sixth * (omega + 2.0 * w2 + 2.0 * w3 + w4), -jnp.pi, jnp.pi)
    omega = omega + sixth * (b1 + 2.0 * b2 + 2.0 * b3 + b4)
    reward = -1.0 - p[c.SWING_COST] * theta * theta
    crashed = (x < 0.0) | (x > p[c.RAIL_LENGTH])
    load_x = x + p[c.CABLE_LENGTH] * jnp.sin(theta)
    delivered = (
        (jnp.abs(load_x - p[c.BAY_POSITION]) <= p[c.BAY_TOLERANCE])
        & (jnp.abs(theta) <= p[c.SWING_TOLERANCE])
        & (jnp.abs(v_new) <= p[c.SPEED_TOLERANCE])
        & (jnp.abs(p[c.CABLE_LENGTH] * omega) <= p[c.SPEED_TOLERANCE])
    )
    reward = jnp.where(crashed, reward - p[c.CRASH_PENALTY], reward)
    return jnp.stack([x, v_new, theta, omega]), reward, crashed | delivered


def _pendulum_reset(key: jax.Array, p: jax.Array) -> jax.Array:
    q = pendulum_ids
    high = jnp.stack([p[q.RESET_THETA], p[q.RESET_THETA_DOT]])
    return _uniform(key, (2,), -high, high)


def _pendulum_step(state: jax.Array, action: jax.Array, p: jax.Array) -> tuple[jax.Array, jax.Array, jax.Array]:
    """Gymnasium's `PendulumEnv.step`: the torque is a float32 (the action space's type) clipped in float32, its
    cost and drive computed in float32 (a float32 with a Python float), everything else in float64."""
    q = pendulum_ids
    th, thdot = state[0], state[1]
    limit = _f32(p[q.MAX_TORQUE])
    u = jnp.minimum(jnp.maximum(_f32(action[0]), -limit), limit)
    control_cost = jnp.float32(0.001) * (u * u)
    angle = jnp.remainder(th + jnp.pi, 2 * jnp.pi) - jnp.pi
    costs = angle * angle + 0.1 * (thdot * thdot) + control_cost.astype(jnp.float64)
    drive = (_f32(p[q.TORQUE_GAIN]) * u).astype(jnp.float64)
    newthdot = thdot + (p[q.GRAVITY_GAIN] * jnp.sin(th) + drive) * p[q.DT]
    newthdot = jnp.minimum(jnp.maximum(newthdot, -p[q.MAX_SPEED]), p[q.MAX_SPEED])
    newth = th + newthdot * p[q.DT]
    return jnp.stack([newth, newthdot]), -costs, jnp.bool_(False)


def _pendulum_observation(state: jax.Array, p: jax.Array) -> jax.Array:
    return _f32(jnp.stack([jnp.cos(state[0]), jnp.sin(state[0]), state[1]]))


def _state_observation(state: jax.Array, p: jax.Array) -> jax.Array:
    return _f32(state)


_DYNAMICS = {
    "CartPole-v1": JaxDynamics(_cartpole_reset, _cartpole_step, _state_observation),
    "MountainCar-v0": JaxDynamics(_mountain_car_reset, _mountain_car_step, _state_observation),
    "Acrobot-v1": JaxDynamics(_acrobot_reset, _acrobot_step, _acrobot_observation),
    "Pendulum-v1": JaxDynamics(_pendulum_reset, _pendulum_step, _pendulum_observation),
    "stepmeter/OverheadCrane-v0": JaxDynamics(_crane_reset, _crane_step, _state_observation),
    "stepmeter/OverheadCraneContinuous-v0": JaxDynamics(_crane_reset, _continuous_crane_step, _state_observation),
}


def jax_dynamics(env_id: str) -> JaxDynamics:
    """The JAX functions of an environment id listed in `runner.neural.JAX_DYNAMICS_IDS`."""
    return _DYNAMICS[env_id]
