"""The ensemble of probabilistic networks of `runner.neural.ensemble` (Chua et al. 2018): its loss against the
Gaussian density, the soft bounds, what it learns from data of a known function with known noise, bootstrapped
members, sampling, and seeding."""

from dataclasses import replace

import numpy as np
import pytest

jax = pytest.importorskip("jax")
import jax.numpy as jnp  # noqa: E402
from jax.flatten_util import ravel_pytree  # noqa: E402
from scipy.stats import norm  # noqa: E402

from runner.neural.ensemble import EnsembleModel, bounded_logvar, gaussian_nll  # noqa: E402
from runner.neural.model import ActionEncoding, Transitions  # noqa: E402

NOISE_SD = 0.1
MODEL = EnsembleModel(ActionEncoding(2), hidden=(32, 32), epochs=30)


def _truth(states, actions):
    """A system of ours: s' = s + 0.5 sin(2 s) + 0.2 (a - 0.5), r = s^2 / 4, both with noise sd 0.1."""
    return states + 0.5 * np.sin(2 * states) + 0.2 * (actions[:, None] - 0.5), states[:, 0] ** 2 / 4


def _data(seed, n=2000):
    rng = np.random.default_rng(seed)
    states, actions = rng.uniform(-2, 2, (n, 1)), rng.integers(0, 2, n)
    next_mean, reward_mean = _truth(states, actions)
    noisy = next_mean + NOISE_SD * rng.normal(size=(n, 1)), reward_mean + NOISE_SD * rng.normal(size=n)
    return Transitions(states, actions, *noisy)


@pytest.fixture(scope="module")
def fitted():
    return MODEL.fit(_data(0), jax.random.key(0))


def test_loss_is_twice_the_negative_gaussian_log_density_less_the_constant():
    """Reference: scipy.stats.norm.logpdf."""
    rng = np.random.default_rng(1)
    mean, logvar, target = rng.normal(size=(3, 4, 5))
    want = np.sum(-2 * norm.logpdf(target, mean, np.exp(logvar / 2)) - np.log(2 * np.pi), axis=-1)
    np.testing.assert_allclose(np.asarray(gaussian_nll(mean, logvar, target)), want, rtol=1e-5)


def test_soft_bounds_keep_the_log_variance_between_them_and_leave_the_middle_alone():
    """Within [-10, 0.5 + softplus(-10.5)], rising, and near the identity well inside (the formula of PETS,
    appendix A.1, worked out: softplus(x) = log(1 + e^x))."""
    raw = jnp.linspace(-40.0, 40.0, 801)
    bounded = np.asarray(bounded_logvar(raw, jnp.asarray(-10.0), jnp.asarray(0.5)))
    assert np.all(bounded >= -10.0) and np.all(bounded <= 0.5 + np.log1p(np.exp(-10.5)) + 1e-6)
    assert np.all(np.diff(bounded) >= 0)
    middle = np.abs(np.asarray(raw) + 5.0) < 1.0
    np.testing.assert_allclose(bounded[middle], np.asarray(raw)[middle], atol=0.02)  # softplus(-4.5) is 0.011


def test_learns_the_function_and_its_noise(fitted):
    """With 2,000 transitions (tolerances ours): the mixture mean within half the noise sd of the true function
    (root mean square over a grid), and each member's predicted noise variance within 30% of the true 0.01."""
    states, actions = np.linspace(-2, 2, 201)[:, None], np.arange(201) % 2
    next_mean, reward_mean = _truth(states, actions)
    pred = jax.jit(MODEL.predict)(fitted, states, actions)
    assert np.sqrt(np.mean((np.asarray(pred.next_state_mean) - next_mean) ** 2)) < NOISE_SD / 2
    assert np.sqrt(np.mean((np.asarray(pred.reward_mean) - reward_mean) ** 2)) < NOISE_SD / 2
    each = MODEL.member_predict(fitted, states, actions)
    for variance in (each.next_state_var, each.reward_var):
        assert np.mean(variance) == pytest.approx(NOISE_SD**2, rel=0.3)


def test_members_differ_most_where_there_were_no_data(fitted):
    """Bootstraps and initial weights differ, so members disagree a little on the data and more far from them."""
    inside = MODEL.member_predict(fitted, np.linspace(-2, 2, 50)[:, None], np.zeros(50, int))
    outside = MODEL.member_predict(fitted, np.linspace(5, 6, 50)[:, None], np.zeros(50, int))
    spread_inside = float(np.mean(np.std(inside.next_state_mean, axis=0)))
    assert spread_inside > 0
    assert float(np.mean(np.std(outside.next_state_mean, axis=0))) > 3 * spread_inside
    nets = [ravel_pytree(jax.tree.map(lambda a, e=e: a[e], fitted.members.nets))[0] for e in range(MODEL.members)]
    assert all(not np.array_equal(nets[0], other) for other in nets[1:])


def test_mixture_is_the_law_of_total_variance(fitted):
    states, actions = np.array([[0.3], [-1.0]]), np.array([0, 1])
    each, mix = MODEL.member_predict(fitted, states, actions), MODEL.predict(fitted, states, actions)
    means, variances = np.asarray(each.next_state_mean), np.asarray(each.next_state_var)
    np.testing.assert_allclose(np.asarray(mix.next_state_var), variances.mean(0) + means.var(0), rtol=1e-6)


def test_sampling_follows_the_chosen_members(fitted):
    """`sample_members` draws from the named member's Gaussian; `sample` picks members uniformly, so its draws
    follow the mixture (5 standard errors of 20,000 draws)."""
    count = 20_000
    states, actions = np.full((count, 1), 0.5), np.ones(count, int)
    each = MODEL.member_predict(fitted, states[:1], actions[:1])
    draws, _ = jax.jit(MODEL.sample_members)(fitted, jax.random.key(2), states, actions, jnp.full(count, 3))
    assert float(np.mean(draws)) == pytest.approx(float(each.next_state_mean[3, 0, 0]), abs=5 * NOISE_SD / 141)
    assert float(np.var(draws)) == pytest.approx(float(each.next_state_var[3, 0, 0]), rel=5 / 70)
    mix = MODEL.predict(fitted, states[:1], actions[:1])
    draws, rewards = jax.jit(MODEL.sample)(fitted, jax.random.key(3), states, actions)
    assert float(np.mean(draws)) == pytest.approx(float(mix.next_state_mean[0, 0]), abs=5 * NOISE_SD / 141)
    assert float(np.var(rewards)) == pytest.approx(float(mix.reward_var[0]), rel=5 / 70)


def test_same_seed_same_params_bit_for_bit_and_other_seeds_differ(fitted):
    data = _data(0)
    again, other = MODEL.fit(data, jax.random.key(0)), MODEL.fit(data, jax.random.key(1))
    flat, flat_again, flat_other = (np.asarray(ravel_pytree(p)[0]) for p in (fitted, again, other))
    assert np.array_equal(flat, flat_again)
    assert not np.array_equal(flat, flat_other)


def test_padding_rows_never_train_and_a_fit_continues_from_previous_params():
    """1,500 rows padded to 2,048 (the fixture's compiled program): zero epochs leave the fresh members as they
    are, and one epoch from them moves them."""
    data = _data(4, n=1500)
    untrained = replace(MODEL, epochs=0).fit(data, jax.random.key(5))
    fresh = MODEL.init_members(jax.random.split(jax.random.key(5), 3)[0], 3, 2)
    assert np.array_equal(ravel_pytree(untrained.members)[0], ravel_pytree(fresh)[0])
    trained = replace(MODEL, epochs=1).fit(data, jax.random.key(6), previous=untrained)
    assert not np.array_equal(ravel_pytree(trained.members)[0], ravel_pytree(fresh)[0])
    assert np.all(np.isfinite(ravel_pytree(trained)[0]))


def test_bad_settings_are_one_clear_line():
    with pytest.raises(ValueError, match="activation must be one of elu, relu, swish, tanh, got 'sigmoid'"):
        EnsembleModel(ActionEncoding(2), activation="sigmoid")
    with pytest.raises(ValueError, match="members and batch_size must be >= 1"):
        EnsembleModel(ActionEncoding(2), members=0)
