"""The compiled classic-control dynamics against gymnasium itself: registry, step-for-step agreement, start states.

Reference for every check here: gymnasium's own environments (`gymnasium.make(id)`, their `unwrapped.state`, `step`
and `reset`) and gymnasium's registry (`gymnasium.spec(id)`), plus `scipy.stats.ks_2samp` for the start-state
distributions.
"""

from __future__ import annotations

import gymnasium as gym
import numpy as np
import pytest
from numba import literally, njit
from scipy import stats

from runner.envs.dynamics import DYNAMICS, dynamics_spec
from runner.envs.dynamics._shared import c_square
from runner.envs.dynamics.compiled import env_observation, env_reset, env_step
from runner.envs.dynamics.stepper import DynamicsStepper
from runner.errors import UnknownKindError
from runner.streams import new_stream

CLASSIC = ("CartPole-v1", "MountainCar-v0", "MountainCarContinuous-v0", "Acrobot-v1", "Pendulum-v1")
MIN_STEPS = 10_000
RESETS = 2_000


def gym_start_state(env_id: str, state: np.ndarray) -> np.ndarray:
    """The kernel's start state as gymnasium's `reset` stores it (Acrobot: float32; the others: float64)."""
    if env_id == "Acrobot-v1":
        return state[:4].astype(np.float32)
    if env_id == "MountainCarContinuous-v0":
        return np.array(state[:2], dtype=np.float64)
    return np.array(state, dtype=np.float64)


def choose_action(env_id: str, state: np.ndarray, pumping: bool, rng: np.random.Generator) -> int | np.ndarray:
    """A random action, or in `pumping` episodes (90% of their steps) a simple controller that reaches the
    terminal states random actions seldom reach: balancing the pole, rocking the car, pumping the arm."""
    spec = DYNAMICS[env_id]
    controlled = pumping and rng.random() < 0.9
    if spec.action_kind == "discrete":
        if controlled and env_id == "CartPole-v1":
            return int(state[2] + 0.3 * state[3] + 0.01 * state[0] + 0.1 * state[1] > 0)
        if controlled and env_id == "MountainCar-v0":
            return 2 if state[1] >= 0 else 0
        if controlled and env_id == "Acrobot-v1":
            return 2 if state[3] > 0 else 0
        return int(rng.integers(spec.action_size))
    low, high = spec.action_low, spec.action_high
    if rng.random() < 0.05:  # the bounds themselves: a float32 bound is not clipped, a value past it is
        return np.array([low if rng.random() < 0.5 else high], dtype=np.float32)
    if controlled and env_id == "MountainCarContinuous-v0":
        direction = 1.0 if state[1] > 0 or (state[1] == 0 and rng.random() < 0.5) else -1.0
        return np.array([direction * rng.uniform(0.5, 1.5)], dtype=np.float32)
    return np.array([rng.uniform(1.5 * low, 1.5 * high)], dtype=np.float32)  # a third outside the box


@pytest.mark.parametrize("env_id", CLASSIC)
def test_registry_matches_gymnasium(env_id: str) -> None:
    """Reference: gymnasium's registry (`gymnasium.spec`) and the environment's declared spaces."""
    spec = dynamics_spec(env_id)
    registered = gym.spec(env_id)
    assert spec.step_limit == registered.max_episode_steps
    assert spec.reward_threshold == registered.reward_threshold
    assert spec.entry_point == registered.entry_point
    env = gym.make(env_id)
    assert spec.obs_size == env.observation_space.shape[0]
    if spec.action_kind == "discrete":
        assert isinstance(env.action_space, gym.spaces.Discrete)
        assert spec.action_size == env.action_space.n
    else:
        assert isinstance(env.action_space, gym.spaces.Box)
        assert (spec.action_size,) == env.action_space.shape
        assert (spec.action_low, spec.action_high) == (env.action_space.low[0], env.action_space.high[0])
    env.close()


def test_unknown_id_suggests_close_ones() -> None:
    with pytest.raises(UnknownKindError, match="did you mean 'CartPole-v1'"):
        dynamics_spec("CartPole-v0")


@pytest.mark.parametrize("env_id", CLASSIC)
def test_kernels_match_gymnasium_step_for_step(env_id: str) -> None:
    """Reference: gymnasium's environment stepped from the kernel's start states with the same actions.

    At least 10,000 steps over many episodes; half the episodes take random actions, half mostly follow a simple
    controller so that terminations and the clipping branches are reached too.
    """
    spec = DYNAMICS[env_id]
    kernel = DynamicsStepper(env_id, 20_261_202)
    env = gym.make(env_id)
    env.reset(seed=7)
    rng = np.random.default_rng(11)
    k_states, g_states, k_obs, g_obs, k_out, g_out, actions = [], [], [], [], [], [], []
    episodes = 0
    while len(k_states) < MIN_STEPS:
        kernel.reset()
        env.reset()
        env.unwrapped.state = gym_start_state(env_id, kernel.state)
        pumping = episodes % 2 == 1
        episodes += 1
        while True:
            action = choose_action(env_id, kernel.state, pumping, rng)
            obs, reward, terminated, truncated = kernel.step(action)
            g_ob, g_reward, g_terminated, g_truncated, _ = env.step(action)
            g_state = np.asarray(env.unwrapped.state, dtype=np.float64)
            k_states.append(kernel.state[: g_state.shape[0]].copy())
            g_states.append(g_state)
            k_obs.append(obs)
            g_obs.append(np.asarray(g_ob, dtype=np.float64))
            k_out.append((reward, terminated, truncated))
            g_out.append((float(g_reward), bool(g_terminated), bool(g_truncated)))
            actions.append(np.asarray(action, dtype=np.float64).reshape(-1)[0])
            if terminated or truncated or g_terminated or g_truncated:
                break
    env.close()
    np.testing.assert_allclose(np.array(k_states), np.array(g_states), rtol=1e-9, atol=1e-12)
    np.testing.assert_allclose(np.array(k_obs), np.array(g_obs), rtol=1e-6, atol=1e-7)
    assert k_out == g_out  # rewards, termination and truncation exactly
    outcomes = np.array(k_out)
    ended = int(outcomes[:, 1].sum())
    cut = int(outcomes[:, 2].sum())
    assert episodes >= 10 and ended + cut >= episodes
    assert cut > 0  # every id reaches its step limit sometimes
    if env_id != "Pendulum-v1":  # Pendulum never terminates
        assert ended > 0
    if spec.action_kind == "box":
        acted = np.array(actions)
        assert (acted < spec.action_low).any() and (acted > spec.action_high).any()
        assert (acted == spec.action_low).any() and (acted == spec.action_high).any()
    if env_id.startswith("MountainCar"):  # the left wall stops the car
        assert (np.array(g_states)[:, 0] <= -1.2).any()


@pytest.mark.parametrize("env_id", CLASSIC)
def test_start_states_match_gymnasium_reset(env_id: str) -> None:
    """Reference: gymnasium's `reset` (2,000 seeded resets), compared per state dimension with scipy.stats.ks_2samp;
    dimensions gymnasium starts at a constant (the cars' velocity) must be that constant."""
    kernel = DynamicsStepper(env_id, 5)
    ours = np.array([(kernel.reset(), kernel.state[:4].copy())[1] for _ in range(RESETS)])
    env = gym.make(env_id)
    env.reset(seed=13)
    theirs = np.array([np.asarray((env.reset(), env.unwrapped.state)[1], dtype=np.float64) for _ in range(RESETS)])
    env.close()
    for dim in range(theirs.shape[1]):
        if np.ptp(theirs[:, dim]) == 0.0:
            assert np.all(ours[:, dim] == theirs[0, dim])
        else:
            assert stats.ks_2samp(ours[:, dim], theirs[:, dim]).pvalue > 0.01, f"dimension {dim}"


@njit(cache=True)
def _compiled_rollout(env_id, params, stream, actions, states, rewards, observations):
    """Reset, then step through `actions`, resetting after each end; the dispatch by id under test."""
    state = np.empty(states.shape[1])
    obs = np.empty(observations.shape[1])
    env_reset(literally(env_id), state, params, stream)
    for t in range(actions.shape[0]):
        reward, terminated = env_step(literally(env_id), state, actions[t], params, state)
        env_observation(literally(env_id), state, params, obs)
        states[t] = state
        observations[t] = obs
        rewards[t] = reward
        if terminated:
            env_reset(literally(env_id), state, params, stream)


DISPATCH_FAST = ("CartPole-v1", "stepmeter/OverheadCraneContinuous-v0")
"""One discrete and one box id run in the fast suite; each id compiles its own loop (seconds), so the rest are slow."""


@pytest.mark.parametrize(
    "env_id",
    [i if i in DISPATCH_FAST else pytest.param(i, marks=pytest.mark.slow) for i in sorted(DYNAMICS)],
)
def test_dispatch_by_id_runs_the_same_kernels(env_id: str) -> None:
    """A compiled loop calling the kernels through `env_reset`/`env_step`/`env_observation` by id walks the same
    trajectory as the kernels called one by one from Python."""
    spec = DYNAMICS[env_id]
    n = 300
    rng = np.random.default_rng(3)
    if spec.action_kind == "discrete":
        actions = rng.integers(spec.action_size, size=n)
        step_actions = [int(a) for a in actions]
    else:
        actions = rng.uniform(spec.action_low, spec.action_high, size=(n, spec.action_size))
        step_actions = list(actions)
    states = np.zeros((n, spec.state_size))
    observations = np.zeros((n, spec.obs_size))
    rewards = np.zeros(n)
    _compiled_rollout(env_id, spec.default_params(), new_stream(9), actions, states, rewards, observations)
    stepper = DynamicsStepper(env_id, 9)
    stepper.reset()
    for t, action in enumerate(step_actions):
        obs, reward, terminated, _ = stepper.step(action)
        np.testing.assert_array_equal(stepper.state, states[t])
        np.testing.assert_array_equal(obs, observations[t])
        assert reward == rewards[t]
        if terminated:
            stepper.reset()


@njit(cache=True)
def _squares(x, two, out):
    for i in range(x.shape[0]):
        out[i] = c_square(x[i], two)  # `two` given at run time, as the kernels read it from params


def test_c_square_is_numpys_scalar_power() -> None:
    """Reference: numpy's float64 scalar `x ** 2` (C's pow), which the kernels must reproduce to the last bit;
    plain `x * x` differs from it on a few hundred of these values, so the check can fail."""
    rng = np.random.default_rng(17)
    x = np.concatenate(
        [
            rng.normal(size=150_000) * 5.0,
            np.ldexp(rng.uniform(0.5, 1.0, 150_000), rng.integers(-600, 600, 150_000)),
            np.array([0.0, -0.0, 1.0, -3.0, 2.0**-500, 2.0**-530, 2.0**600, np.inf, -np.inf]),
        ]
    )
    ours = np.empty_like(x)
    _squares(x, 2.0, ours)
    with np.errstate(over="ignore"):  # 2^600 squared overflows to inf on both sides
        theirs = np.array([np.float64(v) ** 2 for v in x])
        plain = x * x
    np.testing.assert_array_equal(ours, theirs)
    assert (plain != theirs).sum() > 100
