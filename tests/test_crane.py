"""The overhead crane: its compiled kernel against the Python class, its physics, and the gymnasium API."""

from __future__ import annotations

import math

import gymnasium as gym
import numpy as np
import pytest
from gymnasium.utils.env_checker import check_env

from runner.envs.crane import OverheadCrane, crane_energy, crane_momentum
from runner.envs.dynamics import dynamics_spec
from runner.envs.dynamics.stepper import DynamicsStepper
from runner.envs.sources import build_env
from runner.errors import EnvironmentSourceError


@pytest.mark.parametrize("continuous", [False, True])
def test_kernel_and_class_agree_step_for_step(continuous: bool) -> None:
    """The compiled kernel and the Python class from the same start states under the same actions (5,000+ steps)."""
    env_id = "stepmeter/OverheadCraneContinuous-v0" if continuous else "stepmeter/OverheadCrane-v0"
    kernel = DynamicsStepper(env_id, 21)
    env = OverheadCrane(continuous=continuous)
    env.reset(seed=4)
    rng = np.random.default_rng(8)
    ours, theirs, k_out, c_out = [], [], [], []
    delivered = 0
    while len(ours) < 5_000:
        kernel.reset()
        env.reset()
        env.state = tuple(float(v) for v in kernel.state)
        while True:
            # mostly rightward pushes so that episodes run long and some reach the far end of the rail
            if continuous:
                action: int | np.ndarray = rng.uniform(-1.2, 1.5, size=1)
            else:
                action = int(rng.choice(3, p=[0.25, 0.25, 0.5]))
            _, reward, terminated, truncated = kernel.step(action)
            _, c_reward, c_terminated, c_truncated, info = env.step(action)
            ours.append(kernel.state.copy())
            theirs.append(np.array(env.state))
            k_out.append((reward, terminated, truncated))
            c_out.append((c_reward, c_terminated, c_truncated))
            delivered += info["delivered"]
            if terminated or truncated:
                break
    np.testing.assert_allclose(np.array(ours), np.array(theirs), rtol=1e-12, atol=1e-12)
    assert k_out == c_out
    assert any(out[1] for out in k_out)  # some episodes end by leaving the rail


def test_delivery_and_crash_end_the_episode() -> None:
    env = OverheadCrane()
    env.reset(seed=0)
    o = env.options
    env.state = (o["bay_position"], 0.0, 0.0, 0.0)  # the load hangs still over the bay
    _, reward, terminated, truncated, info = env.step(1)
    assert terminated and info["delivered"] and not truncated
    assert reward == -1.0
    env.state = (o["rail_length"] - 0.01, 2.0, 0.0, 0.0)  # about to run off the rail's end
    _, reward, terminated, _, info = env.step(2)
    assert terminated and not info["delivered"]
    assert reward < -o["crash_penalty"]


def test_truncated_at_the_step_limit() -> None:
    env = OverheadCrane(step_limit=3)
    env.reset(seed=0)
    flags = [env.step(1)[3] for _ in range(3)]
    assert flags == [False, False, True]


@pytest.mark.filterwarnings("ignore:.*infinity")  # the velocities are unbounded by design; the checker only warns
@pytest.mark.parametrize("continuous", [False, True])
def test_passes_gymnasiums_env_checker(continuous: bool) -> None:
    """Reference: gymnasium.utils.env_checker.check_env, on the class and through gymnasium.make of its id."""
    check_env(OverheadCrane(continuous=continuous), skip_render_check=True)
    env_id = "stepmeter/OverheadCraneContinuous-v0" if continuous else "stepmeter/OverheadCrane-v0"
    made = gym.make(env_id)
    check_env(made.unwrapped, skip_render_check=True)
    assert isinstance(made.action_space, gym.spaces.Box if continuous else gym.spaces.Discrete)


def test_seeded_resets_repeat() -> None:
    first = OverheadCrane().reset(seed=12)[0]
    again = OverheadCrane().reset(seed=12)[0]
    other = OverheadCrane().reset(seed=13)[0]
    np.testing.assert_array_equal(first, again)
    assert not np.array_equal(first, other)


def test_builds_from_an_experiments_entry_key() -> None:
    """The `entry:` environment source of an experiment builds it, with options and a step limit."""
    env = build_env(
        {
            "source": "entry",
            "entry": "runner.envs.crane:OverheadCrane",
            "options": {"cable_length": 3.0},
            "step_limit": 4,
        }
    )
    env.reset(seed=1)
    assert env.unwrapped.options["cable_length"] == 3.0
    assert [env.step(2)[3] for _ in range(4)][-1] is True


def test_bad_options_get_one_line() -> None:
    with pytest.raises(EnvironmentSourceError, match=r"'cable_length' must be > 0 \(got -1.0\)"):
        OverheadCrane(cable_length=-1.0)
    with pytest.raises(EnvironmentSourceError, match="'bay_position' must lie on the rail"):
        OverheadCrane(bay_position=12.0)
    with pytest.raises(TypeError, match="unknown OverheadCrane option"):
        OverheadCrane(cable_lenght=3.0)


def _coast(dt: float, seconds: float, start: tuple[float, float, float, float], **options: float) -> OverheadCrane:
    """The crane left alone (no push, no friction, no damping) for `seconds` from `start`."""
    env = OverheadCrane(dt=dt, step_limit=10**9, **options)
    env.reset(seed=0)
    env.state = start
    for _ in range(round(seconds / dt)):
        env.step(1)
    return env


def test_energy_and_momentum_are_conserved_to_the_integrators_error() -> None:
    """With no push, friction or damping the Lagrangian's energy and the horizontal momentum are constants of the
    motion. RK4 is a fourth-order method (Hairer, Norsett & Wanner, Solving Ordinary Differential Equations I,
    section II.1, from memory): the errors after a fixed time shrink by at least 2^4 when the step halves."""
    start = (5.0, 0.0, 0.5, 0.0)  # a swing of about 29 degrees, everything at rest
    errors = {}
    for dt in (0.05, 0.025):
        env = _coast(dt, 10.0, start)
        o = env.options
        energy0 = crane_energy(o, *start[1:])
        momentum_scale = (o["trolley_mass"] + o["load_mass"]) * abs(env.state[1])
        errors[dt] = (
            abs(crane_energy(o, *env.state[1:]) - energy0) / abs(energy0),
            abs(crane_momentum(o, *env.state[1:]) - crane_momentum(o, *start[1:])) / momentum_scale,
        )
        assert abs(env.state[1]) > 0.1  # the trolley did move: the exchange of momentum happened
    energy, momentum = errors[0.05]
    assert energy < 1e-4 and momentum < 1e-4
    assert errors[0.05][0] / errors[0.025][0] > 16 * 0.9
    assert errors[0.05][1] / errors[0.025][1] > 16 * 0.9


def _swing_period(env_options: dict[str, float], seconds: float = 30.0) -> float:
    """Mean time between upward zero crossings of theta for a 0.01 rad swing, crossings located linearly."""
    dt = 0.01
    env = OverheadCrane(dt=dt, step_limit=10**9, **env_options)
    env.reset(seed=0)
    env.state = (5.0, 0.0, 0.01, 0.0)
    crossings = []
    previous = env.state[2]
    for i in range(1, round(seconds / dt) + 1):
        env.step(1)
        theta = env.state[2]
        if previous < 0.0 <= theta:
            crossings.append((i - 1 + previous / (previous - theta)) * dt)
        previous = theta
    assert len(crossings) >= 5
    return (crossings[-1] - crossings[0]) / (len(crossings) - 1)


def test_small_swings_have_the_pendulums_period() -> None:
    """With the trolley held (a trolley 10^8 times heavier than the load), small swings have the simple pendulum's
    period 2 pi sqrt(L / g) (Halliday, Resnick & Walker, Fundamentals of Physics, chapter on oscillations, the
    simple pendulum; from memory). With the trolley free the period is 2 pi sqrt(M L / ((M + m) g)), from the
    linearised equations of `runner.envs.crane`'s docstring."""
    length, g = 2.0, 9.81
    held = _swing_period({"trolley_mass": 3e9, "load_mass": 30.0, "cable_length": length, "gravity": g})
    assert held == pytest.approx(2 * math.pi * math.sqrt(length / g), rel=1e-4)
    free = _swing_period({"trolley_mass": 20.0, "load_mass": 30.0, "cable_length": length, "gravity": g})
    assert free == pytest.approx(2 * math.pi * math.sqrt(20.0 * length / (50.0 * g)), rel=1e-4)


@pytest.mark.parametrize("continuous", [False, True])
def test_registered_dynamics_match_the_class(continuous: bool) -> None:
    spec = dynamics_spec("stepmeter/OverheadCraneContinuous-v0" if continuous else "stepmeter/OverheadCrane-v0")
    env = OverheadCrane(continuous=continuous)
    assert spec.entry_point == "runner.envs.crane:OverheadCrane"
    assert (spec.obs_size,) == env.observation_space.shape and spec.state_size == 4
    assert spec.step_limit == env.step_limit
    if continuous:
        assert spec.action_kind == "box" and (spec.action_size,) == env.action_space.shape
        assert (spec.action_low, spec.action_high) == (env.action_space.low[0], env.action_space.high[0])
    else:
        assert spec.action_kind == "discrete" and spec.action_size == env.action_space.n
