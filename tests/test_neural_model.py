"""The learned-model interface of `runner.neural.model`: action encoding, transitions checks, scalers, and the
contract both models keep (fit, predict, sample; pure functions usable in one jitted rollout; seeded)."""

from functools import partial

import gymnasium as gym
import numpy as np
import pytest

jax = pytest.importorskip("jax")
import jax.numpy as jnp  # noqa: E402
from jax.flatten_util import ravel_pytree  # noqa: E402

from runner.neural.ensemble import EnsembleModel  # noqa: E402
from runner.neural.gp import GaussianProcessModel  # noqa: E402
from runner.neural.model import (  # noqa: E402
    ActionEncoding,
    Transitions,
    action_encoding,
    check_transitions,
    fit_scaler,
)

MODELS = {
    "gp": lambda encoding: GaussianProcessModel(encoding, max_points=32, iterations=20),
    # 50 and 60 rows: fewer than one minibatch of 64, so every step trains on a partly padded batch
    "ensemble": lambda encoding: EnsembleModel(encoding, members=3, hidden=(16,), epochs=5, batch_size=64),
}


def test_action_encoding_of_gymnasium_spaces():
    discrete = action_encoding(gym.spaces.Discrete(4))
    box = action_encoding(gym.spaces.Box(-1.0, 1.0, shape=(2,)))
    assert (discrete.width, box.width) == (4, 2)
    np.testing.assert_array_equal(np.asarray(discrete.encode(jnp.array([2, 0]), jnp.float32)), np.eye(4)[[2, 0]])
    np.testing.assert_array_equal(np.asarray(box.encode(jnp.array([[0.5, -1.0]]), jnp.float32)), [[0.5, -1.0]])
    with pytest.raises(ValueError, match="Discrete or one-dimensional Box actions"):
        action_encoding(gym.spaces.Box(-1.0, 1.0, shape=(2, 2)))


def test_scaler_is_the_mean_and_standard_deviation_and_a_constant_column_is_only_centred():
    """Reference: numpy's mean and std (population, ddof 0)."""
    columns = np.column_stack([np.arange(10.0), np.full(10, 3.0)])
    scaler = fit_scaler(columns)
    np.testing.assert_array_equal(scaler.mean, columns.mean(axis=0))
    np.testing.assert_array_equal(scaler.scale, [np.std(np.arange(10.0)), 1.0])


@pytest.mark.parametrize(
    ("change", "message"),
    [
        ({"next_states": np.zeros((5, 3))}, r"states and next_states of one shape \(n, ds\)"),
        ({"rewards": np.zeros(4)}, r"rewards \(n,\), got \(5, 2\), \(5, 2\) and \(4,\)"),
        ({"actions": np.zeros(5)}, "discrete actions must be n = 5 integers, got float64"),
        ({"states": np.full((5, 2), np.nan)}, "states holds values that are not finite"),
    ],
)
def test_bad_transitions_are_one_clear_line(change, message):
    data = Transitions(np.zeros((5, 2)), np.zeros(5, int), np.zeros((5, 2)), np.zeros(5))._replace(**change)
    with pytest.raises(ValueError, match=message):
        check_transitions(data, ActionEncoding(2))


def test_box_actions_of_the_wrong_width_are_one_clear_line():
    data = Transitions(np.zeros((5, 2)), np.zeros((5, 2)), np.zeros((5, 2)), np.zeros(5))
    with pytest.raises(ValueError, match=r"Box actions must have shape \(5, 1\), got \(5, 2\)"):
        check_transitions(data, ActionEncoding(box_dim=1))


def _data(seed, n=50):
    rng = np.random.default_rng(seed)
    states, actions = rng.uniform(-1, 1, (n, 3)), rng.integers(0, 2, n)
    next_states = states + 0.1 * np.tanh(states) + 0.05 * actions[:, None]
    return Transitions(states, actions, next_states, states[:, 0] - states[:, 2])


@partial(jax.jit, static_argnums=0)
def _imagine(model, params, key, start, actions):
    """A model-agnostic rollout, as Dyna rollouts and model-predictive control will run one."""

    def step(state, inputs):
        action, step_key = inputs
        next_state, reward = model.sample(params, step_key, state[None], action[None])
        return next_state[0], reward[0]

    return jax.lax.scan(step, start, (actions, jax.random.split(key, actions.shape[0])))


@pytest.mark.parametrize("kind", sorted(MODELS))
def test_both_models_keep_the_contract(kind):
    model = MODELS[kind](ActionEncoding(2))
    data = _data(0)
    params = model.fit(data, jax.random.key(0))
    pred = jax.jit(model.predict)(params, data.states[:7], data.actions[:7])
    assert [a.shape for a in pred] == [(7, 3), (7, 3), (7,), (7,)]
    assert all(a.dtype == jnp.zeros(1).dtype for a in jax.tree.leaves(pred))
    assert np.all(np.asarray(pred.next_state_var) > 0) and np.all(np.asarray(pred.reward_var) > 0)
    final, rewards = _imagine(model, params, jax.random.key(1), jnp.zeros(3), jnp.array([0, 1, 1, 0]))
    assert final.shape == (3,) and rewards.shape == (4,) and np.all(np.isfinite(rewards))
    again = model.fit(data, jax.random.key(0))
    assert np.array_equal(ravel_pytree(params)[0], ravel_pytree(again)[0])
    refit = model.fit(_data(1, n=60), jax.random.key(2), previous=params)
    assert ravel_pytree(refit)[0].shape == ravel_pytree(params)[0].shape
