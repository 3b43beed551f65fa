"""Held-out errors of learned dynamics models (`runner.neural.model_error`) against the contract's definition
(`runner.models.held_out.model_errors`), and the predicted spread and 95% coverage beside them: honest for a
model that knows the true noise, overconfident for one that claims a tenth of it, close to honest for a fitted GP
and ensemble."""

from dataclasses import dataclass
from typing import Any

import gymnasium as gym
import numpy as np
import pytest

jax = pytest.importorskip("jax")
import jax.numpy as jnp  # noqa: E402

from runner.models.held_out import collect_held_out, model_errors  # noqa: E402
from runner.neural.ensemble import EnsembleModel  # noqa: E402
from runner.neural.gp import GaussianProcessModel  # noqa: E402
from runner.neural.model import ActionEncoding, Prediction, Transitions  # noqa: E402
from runner.neural.model_error import held_out_honesty, predictor  # noqa: E402

NOISE = 0.02
_THREE_ACTIONS = ActionEncoding(3)


def _mean_step(state, action):
    """A trolley of ours on a damped track: position += 0.1 velocity; velocity = 0.9 velocity + 0.1 push."""
    x, v = state[..., 0], state[..., 1]
    return np.stack([x + 0.1 * v, 0.9 * v + 0.1 * (action - 1)], axis=-1), -(x**2)


class Trolley(gym.Env):
    """The trolley with Gaussian noise of sd 0.02 on both state dimensions and on the reward; never ends."""

    def __init__(self):
        self.observation_space = gym.spaces.Box(-np.inf, np.inf, shape=(2,), dtype=np.float64)
        self.action_space = gym.spaces.Discrete(3)

    def reset(self, *, seed=None, options=None):
        super().reset(seed=seed)
        self._s = self.np_random.uniform(-1, 1, 2)
        return self._s.copy(), {}

    def step(self, action):
        mean, reward = _mean_step(self._s, int(action))
        self._s = mean + NOISE * self.np_random.normal(size=2)
        return self._s.copy(), float(reward + NOISE * self.np_random.normal()), False, False, {}


@dataclass(frozen=True)
class TrueModel:
    """The trolley's own dynamics as a learned model would state them, its noise sd multiplied by `confidence`
    (1: honest; 0.1: claims a tenth of the noise)."""

    confidence: float = 1.0
    encoding: ActionEncoding = _THREE_ACTIONS

    def fit(self, data: Transitions, key: jax.Array, previous: Any = None) -> jax.Array:
        return jnp.zeros(())

    def predict(self, params, states, actions):
        x, v = states[:, 0], states[:, 1]
        mean = jnp.stack([x + 0.1 * v, 0.9 * v + 0.1 * (actions - 1)], axis=-1)
        var = (self.confidence * NOISE) ** 2 + params
        return Prediction(mean, jnp.full_like(mean, var), -(x**2), jnp.full_like(x, var))

    def sample(self, params, key, states, actions):
        pred = self.predict(params, states, actions)
        a, b = jax.random.split(key)
        return (
            pred.next_state_mean + jnp.sqrt(pred.next_state_var) * jax.random.normal(a, pred.next_state_mean.shape),
            pred.reward_mean + jnp.sqrt(pred.reward_var) * jax.random.normal(b, pred.reward_mean.shape),
        )


@pytest.fixture(scope="module")
def held():
    return collect_held_out(Trolley(), np.random.SeedSequence(0), sequences=100, length=20)


def _transitions(seed, n):
    rng = np.random.default_rng(seed)
    states, actions = rng.uniform(-1.2, 1.2, (n, 2)), rng.integers(0, 3, n)
    mean, reward = _mean_step(states, actions)
    return Transitions(states, actions, mean + NOISE * rng.normal(size=(n, 2)), reward + NOISE * rng.normal(size=n))


def _same_errors(model, params, held):
    """The batched errors equal the contract's one-call-per-transition definition (up to float32 rounding: one
    row and a batch of rows take different summation orders)."""
    got = held_out_honesty(model, params, held, jax.random.key(0), particles=10)
    want = model_errors(predictor(model, params), held)
    np.testing.assert_allclose(
        [got.one_step, got.reward, got.open_loop[5], got.open_loop[20]], want, rtol=2e-5, atol=1e-5
    )
    return got


def test_a_model_with_the_true_noise_is_honest(held):
    """Tolerances: the one-step coverage of 4,000 values within 0.95 +- 0.02 (3 binomial standard errors); the
    k-step coverage of 200 values from 50 particles (whose spread is itself estimated) within 0.88..0.99; spread
    and error within 10% of each other."""
    model = TrueModel()
    _same_errors(model, jnp.zeros(()), held)
    got = held_out_honesty(model, jnp.zeros(()), held, jax.random.key(1), particles=50)
    assert got.one_step_coverage == pytest.approx(0.95, abs=0.02)
    assert got.reward_coverage == pytest.approx(0.95, abs=0.02)
    assert got.one_step_spread == pytest.approx(got.one_step, rel=0.1)
    for k in (5, 20):
        assert 0.88 <= got.open_loop_coverage[k] <= 0.99
        assert got.open_loop_spread[k] == pytest.approx(got.open_loop[k], rel=0.15)
    assert got.open_loop[20] > got.open_loop[5] > got.one_step  # the noise accumulates


def test_an_overconfident_model_is_caught(held):
    """Claiming a tenth of the noise: the spread is a tenth of the error and few values fall inside the interval
    (for a normal error, P(|Z| < 0.196) = 0.155)."""
    got = held_out_honesty(TrueModel(confidence=0.1), jnp.zeros(()), held, jax.random.key(2), particles=50)
    assert got.one_step_spread == pytest.approx(got.one_step / 10, rel=0.1)
    assert got.one_step_coverage < 0.25
    assert got.open_loop_coverage[20] < 0.4


def test_a_fitted_gp_is_nearly_honest(held):
    """Tolerances ours: coverage 0.85..0.99 and spread within a factor 1.4 of the error, from 120 of 300
    transitions chosen spread out."""
    model = GaussianProcessModel(ActionEncoding(3), max_points=120, selection="spread")
    params = model.fit(_transitions(1, 300), jax.random.key(3))
    got = _same_errors(model, params, held)
    assert 0.85 <= got.one_step_coverage <= 0.99
    assert 1 / 1.4 < got.one_step_spread / got.one_step < 1.4
    assert got.one_step < 0.2  # in units of each dimension's spread


@pytest.mark.slow
def test_a_fitted_ensemble_is_nearly_honest(held):
    """Tolerances ours, as for the GP, after 2,000 transitions."""
    model = EnsembleModel(ActionEncoding(3), hidden=(32, 32), epochs=40)
    params = model.fit(_transitions(4, 2000), jax.random.key(4))
    got = _same_errors(model, params, held)
    assert 0.85 <= got.one_step_coverage <= 0.99
    assert 1 / 1.4 < got.one_step_spread / got.one_step < 1.4


def test_box_actions_and_runs_shorter_than_the_horizon():
    """Box actions go through as values; a horizon longer than every run is not measured (NaN), as in the
    contract's definition."""
    env = gym.wrappers.TimeLimit(LineTrolley(), max_episode_steps=4)
    short = collect_held_out(env, np.random.SeedSequence(5), sequences=10, length=20)
    model = GaussianProcessModel(ActionEncoding(box_dim=1), max_points=60, iterations=30)
    rng = np.random.default_rng(6)
    states, actions = rng.uniform(-1, 1, (60, 1)), rng.uniform(-1, 1, (60, 1))
    params = model.fit(Transitions(states, actions, states + 0.1 * actions, -(states[:, 0] ** 2)), jax.random.key(7))
    got = _same_errors(model, params, short)
    assert np.isnan(got.open_loop[5]) and np.isnan(got.open_loop_coverage[20])
    assert np.isfinite(got.one_step) and 0 <= got.one_step_coverage <= 1


class LineTrolley(gym.Env):
    """A one-dimensional trolley pushed by a force in [-1, 1]: x' = x + 0.1 u, reward -x^2, no noise."""

    def __init__(self):
        self.observation_space = gym.spaces.Box(-np.inf, np.inf, shape=(1,), dtype=np.float64)
        self.action_space = gym.spaces.Box(-1.0, 1.0, shape=(1,), dtype=np.float64)

    def reset(self, *, seed=None, options=None):
        super().reset(seed=seed)
        self._x = self.np_random.uniform(-1, 1, 1)
        return self._x.copy(), {}

    def step(self, action):
        reward = -float(self._x[0] ** 2)
        self._x = self._x + 0.1 * np.asarray(action, dtype=np.float64).reshape(1)
        return self._x.copy(), reward, False, False, {}
