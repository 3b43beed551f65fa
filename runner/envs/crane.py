"""The warehouse's overhead crane: a trolley on a rail carries a load on a cable to a loading bay.

Physics (a cart with a pendulum hanging below it). Trolley of mass M at position x on a straight horizontal rail,
pushed by a horizontal force F; a point load of mass m on a massless rigid cable of length L, at angle theta from
the downward vertical (positive when the load is ahead of the trolley, towards +x). The load sits at
(x + L sin theta, -L cos theta). With T = (M + m) x_dot^2 / 2 + m L x_dot theta_dot cos theta + m L^2 theta_dot^2 / 2
and V = -m g L cos theta, Lagrange's equations with viscous rail friction b (on x) and swing damping c (on theta)
give

    (M + m) x_ddot + m L cos(theta) theta_ddot - m L theta_dot^2 sin(theta) = F - b x_dot
    m L cos(theta) x_ddot + m L^2 theta_ddot + m g L sin(theta)            = -c theta_dot

and, solved for the accelerations (r1, r2 the right-hand sides after moving the velocity and gravity terms over:
r1 = F - b x_dot + m L theta_dot^2 sin theta, r2 = -c theta_dot - m g L sin theta),

    x_ddot     = (r1 - cos(theta) r2 / L) / (M + m sin^2 theta)
    theta_ddot = ((M + m) r2 / (m L) - cos(theta) r1) / (L (M + m sin^2 theta)).

Source: Lagrange's equations as in Goldstein, Poole & Safko, Classical Mechanics, 3rd ed. (2002), section 1.4
(from memory); the same system with the pendulum upright is the cart-pendulum of Ogata, Modern Control Engineering,
5th ed. (2010), chapter 3 (from memory); hanging below, gravity's sign flips. The derivation above is complete,
so it can be checked without the books; the tests check its consequences (energy and horizontal momentum are
conserved without push, friction and damping; small swings have period 2 pi sqrt(L / g) with the trolley held).
Linearised about rest with the trolley free, the swing's angular frequency is sqrt((M + m) g / (M L)).

Integration: the classic fourth-order Runge-Kutta method with a fixed step dt = 0.05 s and the force held over the
step. Why RK4 and not semi-implicit Euler: the kinetic energy depends on theta (the mass matrix is not constant),
so the semi-implicit Euler update in velocities is not symplectic here and would not buy its usual energy
behaviour, while RK4's error after a fixed time falls as dt^4 (tested: the energy and momentum errors shrink at
least 16-fold when dt halves; measured about 31-fold and 16-fold), and gymnasium's Acrobot uses the same method.
After each step theta is wrapped into [-pi, pi].

Task. Actions: 0 push left, 1 no push, 2 push right (force push_force), or with `continuous=True` a Box action in
[-1, 1] (clipped) scaling push_force. Observation: (x, x_dot, theta, theta_dot) as float32. Reward per step:
-1 - swing_cost theta^2 (time costs, and so does a swinging load). The episode terminates when the load is
delivered: |x + L sin theta - bay_position| <= bay_tolerance, |theta| <= swing_tolerance, |x_dot| and
|L theta_dot| <= speed_tolerance; or when the trolley leaves the rail [0, rail_length], which also costs
crash_penalty (500 by default, the step limit, so a crash is never cheaper than running out of time). It is
truncated after `step_limit` steps. Resets draw through gymnasium's `np_random`: trolley at rest uniform in
[start_low, start_high), load at rest at an angle uniform in [-start_swing, start_swing).

The compiled kernels of `runner.envs.dynamics.crane` compute the same steps (registered as
"stepmeter/OverheadCrane-v0" and "stepmeter/OverheadCraneContinuous-v0" beside the classic-control dynamics, and
with gymnasium under the same ids when this module is imported), and so do the jax.numpy functions of
`runner.neural.dynamics` under both ids (the neural kinds' compiled trials; the continuous crane's box is the
fraction of push_force, so its force lies in [-push_force, push_force]). In an experiment: `entry: runner.envs.crane:
OverheadCrane` with any of the keyword options below under `options`.
"""

from __future__ import annotations

import math
from typing import Any, ClassVar

import gymnasium as gym
import numpy as np

from runner.envs.dynamics.crane import DEFAULTS
from runner.errors import EnvironmentSourceError

__all__ = ["OverheadCrane", "crane_energy", "crane_momentum"]

_POSITIVE = ("trolley_mass", "load_mass", "cable_length", "gravity", "dt", "rail_length", "bay_tolerance")
_NON_NEGATIVE = (
    "push_force",
    "rail_friction",
    "swing_damping",
    "swing_tolerance",
    "speed_tolerance",
    "swing_cost",
    "crash_penalty",
    "start_swing",
)


class OverheadCrane(gym.Env):
    """An overhead crane: bring the load on the cable to the loading bay and stop it swinging (see the module)."""

    metadata: ClassVar[dict[str, Any]] = {"render_modes": []}

    def __init__(self, continuous: bool = False, step_limit: int = 500, **options: float) -> None:
        unknown = sorted(set(options) - set(DEFAULTS))
        if unknown:
            raise TypeError(f"unknown OverheadCrane option(s) {unknown}; known: {', '.join(DEFAULTS)}")
        values = {**DEFAULTS, **{k: float(v) for k, v in options.items()}}
        _check(values, step_limit)
        self.options = values
        self.continuous = bool(continuous)
        self.step_limit = int(step_limit)
        if self.continuous:
            self.action_space: gym.Space = gym.spaces.Box(-1.0, 1.0, shape=(1,), dtype=np.float32)
        else:
            self.action_space = gym.spaces.Discrete(3)
        rail = values["rail_length"]
        high = np.array([1.5 * rail, np.inf, math.pi, np.inf], dtype=np.float32)
        low = np.array([-0.5 * rail, -np.inf, -math.pi, -np.inf], dtype=np.float32)
        self.observation_space = gym.spaces.Box(low, high, dtype=np.float32)
        self.state: tuple[float, float, float, float] | None = None
        self.steps = 0

    def reset(self, *, seed: int | None = None, options: dict[str, Any] | None = None) -> tuple[np.ndarray, dict]:
        """Trolley and load at rest near the left end of the rail, the load slightly off the vertical."""
        super().reset(seed=seed)
        o = self.options
        x = float(self.np_random.uniform(o["start_low"], o["start_high"]))
        theta = float(self.np_random.uniform(-o["start_swing"], o["start_swing"]))
        self.state = (x, 0.0, theta, 0.0)
        self.steps = 0
        return self._observation(), {}

    def step(self, action: Any) -> tuple[np.ndarray, float, bool, bool, dict]:
        """Push (or not) for dt seconds; (observation, reward, terminated, truncated, info)."""
        if self.state is None:
            raise RuntimeError("call reset before step")
        if self.continuous:
            fraction = min(max(float(np.asarray(action, dtype=np.float64).reshape(-1)[0]), -1.0), 1.0)
        else:
            if not self.action_space.contains(action):
                raise ValueError(f"action must be 0, 1 or 2 (push left, none, right), got {action!r}")
            fraction = float(int(action) - 1)
        force = fraction * self.options["push_force"]
        self.state = self._rk4(force, *self.state)
        self.steps += 1
        reward, terminated, delivered = self._outcome(*self.state)
        truncated = self.steps >= self.step_limit
        return self._observation(), reward, terminated, truncated, {"delivered": delivered}

    def _observation(self) -> np.ndarray:
        return np.array(self.state, dtype=np.float32)

    def _accelerations(self, force: float, x_dot: float, theta: float, theta_dot: float) -> tuple[float, float]:
        """(x_ddot, theta_ddot) from the equations of the module docstring."""
        o = self.options
        big_m, m, length, g = o["trolley_mass"], o["load_mass"], o["cable_length"], o["gravity"]
        s = math.sin(theta)
        c = math.cos(theta)
        r1 = force - o["rail_friction"] * x_dot + m * length * theta_dot * theta_dot * s
        r2 = -o["swing_damping"] * theta_dot - m * g * length * s
        den = big_m + m * s * s
        return (r1 - c * r2 / length) / den, ((big_m + m) * r2 / (m * length) - c * r1) / (length * den)

    def _rk4(self, force: float, x: float, v: float, theta: float, omega: float) -> tuple[float, float, float, float]:
        """One classic fourth-order Runge-Kutta step of dt, the force held; theta wrapped into [-pi, pi]."""
        h = self.options["dt"]
        half = h / 2.0
        a1, b1 = self._accelerations(force, v, theta, omega)
        v2, t2, w2 = v + half * a1, theta + half * omega, omega + half * b1
        a2, b2 = self._accelerations(force, v2, t2, w2)
        v3, t3, w3 = v + half * a2, theta + half * w2, omega + half * b2
        a3, b3 = self._accelerations(force, v3, t3, w3)
        v4, t4, w4 = v + h * a3, theta + h * w3, omega + h * b3
        a4, b4 = self._accelerations(force, v4, t4, w4)
        sixth = h / 6.0
        theta_new = theta + sixth * (omega + 2.0 * w2 + 2.0 * w3 + w4)
        while theta_new > math.pi:
            theta_new -= 2.0 * math.pi
        while theta_new < -math.pi:
            theta_new += 2.0 * math.pi
        return (
            x + sixth * (v + 2.0 * v2 + 2.0 * v3 + v4),
            v + sixth * (a1 + 2.0 * a2 + 2.0 * a3 + a4),
            theta_new,
            omega + sixth * (b1 + 2.0 * b2 + 2.0 * b3 + b4),
        )

    def _outcome(self, x: float, v: float, theta: float, omega: float) -> tuple[float, bool, bool]:
        """(reward, terminated, delivered) on arriving in a state."""
        o = self.options
        reward = -1.0 - o["swing_cost"] * theta * theta
        if x < 0.0 or x > o["rail_length"]:
            return reward - o["crash_penalty"], True, False
        delivered = (
            abs(x + o["cable_length"] * math.sin(theta) - o["bay_position"]) <= o["bay_tolerance"]
            and abs(theta) <= o["swing_tolerance"]
            and abs(v) <= o["speed_tolerance"]
            and abs(o["cable_length"] * omega) <= o["speed_tolerance"]
        )
        return reward, delivered, delivered


def crane_energy(options: dict[str, float], x_dot: float, theta: float, theta_dot: float) -> float:
    """Kinetic plus potential energy T + V of the module docstring (zero potential at the trolley's height)."""
    big_m, m, length, g = options["trolley_mass"], options["load_mass"], options["cable_length"], options["gravity"]
    kinetic = (
        0.5 * (big_m + m) * x_dot**2
        + m * length * x_dot * theta_dot * math.cos(theta)
        + 0.5 * m * length**2 * theta_dot**2
    )
    return kinetic - m * g * length * math.cos(theta)


def crane_momentum(options: dict[str, float], x_dot: float, theta: float, theta_dot: float) -> float:
    """Horizontal momentum (M + m) x_dot + m L theta_dot cos theta, conserved when no horizontal force acts."""
    m, length = options["load_mass"], options["cable_length"]
    return (options["trolley_mass"] + m) * x_dot + m * length * theta_dot * math.cos(theta)


def _check(values: dict[str, float], step_limit: int) -> None:
    """Refuse physically meaningless options with one line naming the option."""
    for name in _POSITIVE:
        if not values[name] > 0.0:
            raise EnvironmentSourceError(f"OverheadCrane option {name!r} must be > 0 (got {values[name]!r})")
    for name in _NON_NEGATIVE:
        if not values[name] >= 0.0:
            raise EnvironmentSourceError(f"OverheadCrane option {name!r} must be >= 0 (got {values[name]!r})")
    rail = values["rail_length"]
    if not 0.0 < values["bay_position"] < rail:
        raise EnvironmentSourceError(
            f"OverheadCrane option 'bay_position' must lie on the rail (0, {rail!r}) (got {values['bay_position']!r})"
        )
    if not 0.0 <= values["start_low"] < values["start_high"] <= rail:
        raise EnvironmentSourceError(
            "OverheadCrane options 'start_low' < 'start_high' must lie on the rail "
            f"[0, {rail!r}] (got {values['start_low']!r}, {values['start_high']!r})"
        )
    if isinstance(step_limit, bool) or not isinstance(step_limit, int) or step_limit < 1:
        raise EnvironmentSourceError(
            f"OverheadCrane option 'step_limit' must be a whole number >= 1 (got {step_limit!r})"
        )


def _register_with_gymnasium() -> None:
    """Make `gymnasium.make("stepmeter/OverheadCrane-v0")` (and the continuous id) work once this module is imported."""
    for env_id, kwargs in (
        ("stepmeter/OverheadCrane-v0", {}),
        ("stepmeter/OverheadCraneContinuous-v0", {"continuous": True}),
    ):
        if env_id not in gym.registry:
            gym.register(env_id, entry_point="runner.envs.crane:OverheadCrane", kwargs=kwargs)


_register_with_gymnasium()
