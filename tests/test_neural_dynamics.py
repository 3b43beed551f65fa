"""The JAX dynamics of `runner.neural.dynamics` against gymnasium's own environments, step for step.

Reference: gymnasium's `env.step` (CartPole-v1, MountainCar-v0, Acrobot-v1, Pendulum-v1, with `unwrapped.state`
set to each state) and our crane's Python class `runner.envs.crane.OverheadCrane` (its `step`, discrete and
continuous), on states visited by random and pumping actions and on random actions (box actions drawn beyond their
bounds, so the clipping is exercised); Pendulum-v1 also on random states beyond its speed limit; start states
against gymnasium's `reset` by a two-sample Kolmogorov-Smirnov test (`scipy.stats.ks_2samp`).
"""

from __future__ import annotations

import gymnasium as gym
import numpy as np
import pytest
from scipy import stats

jax = pytest.importorskip("jax")

from runner.envs.dynamics import DYNAMICS  # noqa: E402
from runner.neural import JAX_DYNAMICS_IDS  # noqa: E402
from runner.neural.dynamics import jax_dynamics  # noqa: E402

STEPS = 4_000


def _pump(env_id: str, state: np.ndarray) -> int | np.ndarray:
    """Balance the pole; rock the car, the arm, the crane's trolley, the pendulum."""
    if env_id == "CartPole-v1":
        return int(state[2] + 0.3 * state[3] > 0)
    if env_id == "Acrobot-v1":
        return 2 if state[3] > 0 else 0
    if env_id == "Pendulum-v1":
        return np.array([2.0 if state[1] >= 0 else -2.0], dtype=np.float32)
    if env_id == "stepmeter/OverheadCraneContinuous-v0":
        return np.array([1.0 if state[1] >= 0 else -1.0], dtype=np.float32)
    return 2 if state[1] >= 0 else 0


def _random_action(space: gym.Space, rng: np.random.Generator) -> int | np.ndarray:
    """A uniform discrete action, or a box action drawn from 1.5 times the box (so clipping happens)."""
    if isinstance(space, gym.spaces.Discrete):
        return int(rng.integers(space.n))
    return rng.uniform(1.5 * space.low, 1.5 * space.high).astype(np.float32)


def _visited(env_id: str, rng: np.random.Generator) -> tuple[np.ndarray, ...]:
    """(states, actions, next states, rewards, terminated, observations) of a gymnasium walk with random actions,
    every other episode pushed by a simple controller towards the terminal states random actions seldom reach."""
    env = gym.make(env_id).unwrapped
    env.reset(seed=int(rng.integers(2**31)))
    states, actions, nexts, rewards, ended, observations = [], [], [], [], [], []
    pumping = False
    for _ in range(STEPS):
        state = np.array(env.state, dtype=np.float64)
        pump = pumping and rng.random() < 0.9
        action = _pump(env_id, state) if pump else _random_action(env.action_space, rng)
        obs, reward, terminated, _, _ = env.step(action)
        states.append(state)
        actions.append(action)
        nexts.append(np.array(env.state, dtype=np.float64))
        rewards.append(float(reward))
        ended.append(bool(terminated))
        observations.append(np.asarray(obs))
        if terminated or rng.random() < 0.003:
            env.reset()
            pumping = not pumping
    env.close()
    return tuple(np.array(v) for v in (states, actions, nexts, rewards, ended, observations))


@pytest.mark.parametrize("env_id", JAX_DYNAMICS_IDS)
def test_steps_match_the_reference_environment(env_id: str) -> None:
    states, actions, nexts, rewards, ended, observations = _visited(env_id, np.random.default_rng(5))
    params = DYNAMICS[env_id].default_params()
    dynamics = jax_dynamics(env_id)
    with jax.enable_x64(True):
        step = jax.jit(jax.vmap(dynamics.step, in_axes=(0, 0, None)))
        observe = jax.jit(jax.vmap(dynamics.observation, in_axes=(0, None)))
        got_states, got_rewards, got_ended = step(states, actions, params)
        got_obs = observe(got_states, params)
    np.testing.assert_allclose(np.asarray(got_states), nexts, rtol=1e-9, atol=1e-12)
    np.testing.assert_allclose(np.asarray(got_rewards), rewards, rtol=1e-9, atol=1e-12)
    assert np.array_equal(np.asarray(got_ended), ended)
    np.testing.assert_allclose(np.asarray(got_obs), observations, rtol=1e-6, atol=1e-7)
    assert np.asarray(got_obs).dtype == np.float32
    if env_id != "Pendulum-v1":
        assert ended.sum() >= 5, "the walk should reach terminal states"


def test_pendulum_matches_gymnasium_on_random_states_and_torques() -> None:
    """Gymnasium's `PendulumEnv.step` (gymnasium/envs/classic_control/pendulum.py) from random states, speeds
    beyond max_speed 8 and torques beyond max_torque 2, so both clips act; to 1e-9 relative (the brief: 1e-6)."""
    rng = np.random.default_rng(11)
    n = 3000
    states = np.column_stack([rng.uniform(-3 * np.pi, 3 * np.pi, n), rng.uniform(-10.0, 10.0, n)])
    actions = rng.uniform(-4.0, 4.0, (n, 1)).astype(np.float32)
    env = gym.make("Pendulum-v1").unwrapped
    env.reset(seed=0)
    nexts, rewards, observations = [], [], []
    for state, action in zip(states, actions, strict=True):
        env.state = state.copy()
        obs, reward, terminated, _, _ = env.step(action)
        assert not terminated
        nexts.append(np.array(env.state, dtype=np.float64))
        rewards.append(float(reward))
        observations.append(obs)
    env.close()
    params = DYNAMICS["Pendulum-v1"].default_params()
    dynamics = jax_dynamics("Pendulum-v1")
    with jax.enable_x64(True):
        got_states, got_rewards, got_ended = jax.jit(jax.vmap(dynamics.step, in_axes=(0, 0, None)))(
            states, actions, params
        )
        got_obs = jax.jit(jax.vmap(dynamics.observation, in_axes=(0, None)))(got_states, params)
    nexts = np.array(nexts)
    assert np.abs(nexts[:, 1]).max() == 8.0 and np.abs(actions).max() > 2.0, "both clips should act"
    np.testing.assert_allclose(np.asarray(got_states), nexts, rtol=1e-9, atol=1e-12)
    np.testing.assert_allclose(np.asarray(got_rewards), rewards, rtol=1e-9, atol=1e-12)
    assert not np.asarray(got_ended).any()
    np.testing.assert_allclose(np.asarray(got_obs), np.array(observations), rtol=1e-6, atol=1e-7)


@pytest.mark.parametrize("env_id", JAX_DYNAMICS_IDS)
def test_start_states_match_the_reference_reset(env_id: str) -> None:
    params = DYNAMICS[env_id].default_params()
    with jax.enable_x64(True):
        keys = jax.random.split(jax.random.key(3), 1000)
        ours = np.asarray(jax.jit(jax.vmap(jax_dynamics(env_id).reset, in_axes=(0, None)))(keys, params))
    env = gym.make(env_id).unwrapped
    theirs = []
    for seed in range(1000):
        env.reset(seed=seed)
        theirs.append(np.array(env.state, dtype=np.float64))
    env.close()
    theirs = np.array(theirs)
    for dim in range(ours.shape[1]):
        if np.ptp(theirs[:, dim]) == 0:
            assert np.all(ours[:, dim] == theirs[0, dim])
        else:
            assert stats.ks_2samp(ours[:, dim], theirs[:, dim]).pvalue > 0.001, dim
