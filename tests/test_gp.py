"""The Gaussian-process dynamics model of `runner.neural.gp`: posterior and marginal likelihood against
scikit-learn, hyperparameter fitting, point selection, and one-step prediction of a smooth system."""

import numpy as np
import pytest

jax = pytest.importorskip("jax")
import jax.numpy as jnp  # noqa: E402
from sklearn.gaussian_process import GaussianProcessRegressor  # noqa: E402
from sklearn.gaussian_process.kernels import RBF, ConstantKernel, WhiteKernel  # noqa: E402

from runner.neural.gp import (  # noqa: E402
    GaussianProcessModel,
    GPHyper,
    choose_points,
    fit_hyper,
    log_marginal_likelihood,
    posterior,
    posterior_predict,
    rbf_kernel,
)
from runner.neural.model import ActionEncoding, Transitions  # noqa: E402

LENGTH_SCALES = np.array([0.7, 1.9, 0.4])
SIGNAL, NOISE = 1.6, 0.05


def _random_data(seed, n=40, d=3):
    rng = np.random.default_rng(seed)
    x = rng.uniform(-2, 2, (n, d))
    y = np.sin(x @ rng.normal(size=d)) + 0.1 * rng.normal(size=n)
    return x, y, rng.uniform(-2.5, 2.5, (25, d))


def _sklearn_gp(length_scales, signal, noise):
    kernel = ConstantKernel(signal) * RBF(length_scale=length_scales) + WhiteKernel(noise)
    return GaussianProcessRegressor(kernel=kernel, optimizer=None, alpha=0.0)


_posterior, _predict, _lml = jax.jit(posterior), jax.jit(posterior_predict), jax.jit(log_marginal_likelihood)


def _hyper(length_scales, signal, noise):
    return GPHyper(jnp.asarray(length_scales), jnp.asarray(signal), jnp.asarray(noise))


def test_posterior_with_fixed_hyperparameters_equals_scikit_learn():
    """Reference: scikit-learn's `GaussianProcessRegressor(kernel=ConstantKernel * RBF + WhiteKernel,
    optimizer=None, alpha=0)`. Its `predict(return_std=True)` evaluates `kernel_.diag(X)`, in which the
    WhiteKernel adds its noise level, while the WhiteKernel adds nothing between test and training points: so its
    std is that of a noisy observation, sqrt(latent variance + noise), our predictive variance."""
    x, y, xs = _random_data(0)
    reference = _sklearn_gp(LENGTH_SCALES, SIGNAL, NOISE).fit(x, y)
    ref_mean, ref_std = reference.predict(xs, return_std=True)
    with jax.enable_x64(True):
        hyper = _hyper(LENGTH_SCALES, SIGNAL, NOISE)
        mean, latent = _predict(hyper, _posterior(hyper, jnp.asarray(x), jnp.asarray(y)), jnp.asarray(xs))
        np.testing.assert_allclose(np.asarray(mean), ref_mean, rtol=1e-9, atol=1e-10)
        np.testing.assert_allclose(np.asarray(latent) + NOISE, ref_std**2, rtol=1e-8, atol=1e-10)


def test_log_marginal_likelihood_equals_scikit_learn_at_the_same_hyperparameters():
    """Reference: scikit-learn's `GaussianProcessRegressor.log_marginal_likelihood(theta)`, theta being the log of
    (constant, length scales..., noise level) in the kernel's order."""
    x, y, _ = _random_data(1)
    reference = _sklearn_gp(LENGTH_SCALES, SIGNAL, NOISE).fit(x, y)
    rng = np.random.default_rng(2)
    with jax.enable_x64(True):
        for _ in range(3):
            scales, signal, noise = rng.uniform(0.3, 3.0, 3), rng.uniform(0.5, 2.0), rng.uniform(0.01, 0.3)
            theta = np.log(np.concatenate([[signal], scales, [noise]]))
            ours = _lml(_hyper(scales, signal, noise), jnp.asarray(x), jnp.asarray(y))
            assert float(ours) == pytest.approx(reference.log_marginal_likelihood(theta), rel=1e-10)


def test_masked_rows_change_nothing():
    """Padding rows (mask false, any values) leave the likelihood and the posterior of the real rows as they are."""
    x, y, xs = _random_data(3, n=20)
    rng = np.random.default_rng(4)
    x_pad, y_pad = np.vstack([x, rng.normal(size=(7, 3))]), np.concatenate([y, rng.normal(size=7)])
    mask = jnp.asarray(np.arange(27) < 20)
    with jax.enable_x64(True):
        hyper = _hyper(LENGTH_SCALES, SIGNAL, NOISE)
        plain = _lml(hyper, jnp.asarray(x), jnp.asarray(y))
        padded = _lml(hyper, jnp.asarray(x_pad), jnp.asarray(y_pad), mask)
        assert float(padded) == pytest.approx(float(plain), rel=1e-12)
        want = _predict(hyper, _posterior(hyper, jnp.asarray(x), jnp.asarray(y)), jnp.asarray(xs))
        got = _predict(hyper, _posterior(hyper, jnp.asarray(x_pad), jnp.asarray(y_pad), mask), jnp.asarray(xs))
        for a, b in zip(want, got, strict=True):
            np.testing.assert_allclose(np.asarray(b), np.asarray(a), rtol=1e-9, atol=1e-12)


def test_fitting_raises_the_marginal_likelihood_and_recovers_a_known_length_scale():
    """Data drawn from a GP prior with length scales (0.6, 4.0), signal variance 1 and noise variance 0.01
    (common practice for checking a fit: recover the generating hyperparameters; tolerances ours: a factor of
    1.5 on the relevant length scale, the irrelevant one at least twice as long, the noise within a factor 3)."""
    rng = np.random.default_rng(5)
    n = 120
    x = rng.uniform(-2, 2, (n, 2))
    with jax.enable_x64(True):
        cov = np.asarray(rbf_kernel(jnp.asarray(x), jnp.asarray(x), jnp.array([0.6, 4.0]), 1.0)) + 0.01 * np.eye(n)
        y = np.linalg.cholesky(cov) @ rng.normal(size=n)
        start = _hyper(np.array([1.5, 1.5]), 0.5, 0.2)
        fitted = jax.jit(fit_hyper)(jnp.asarray(x), jnp.asarray(y), jnp.ones(n, bool), start, 300, 0.05, 1e-4)
        before = _lml(start, jnp.asarray(x), jnp.asarray(y))
        after = _lml(fitted, jnp.asarray(x), jnp.asarray(y))
    assert float(after) > float(before) + 10
    relevant, irrelevant = np.asarray(fitted.length_scales)
    assert 0.6 / 1.5 < relevant < 0.6 * 1.5
    assert irrelevant > 2 * relevant
    assert 0.01 / 3 < float(fitted.noise_var) < 0.01 * 3


def test_point_selection():
    """recent: the last rows; uniform: a seeded subset; spread: farthest-point traversal from the last row."""
    line = np.linspace(0.0, 1.0, 11)[:, None][[5, 0, 10, 3, 7, 2, 8, 6, 1, 9, 4]]
    key = jax.random.key(0)
    assert choose_points(line, 20, "spread", key).tolist() == list(range(11))
    assert choose_points(line, 4, "recent", key).tolist() == [7, 8, 9, 10]
    first, again = choose_points(line, 4, "uniform", key), choose_points(line, 4, "uniform", key)
    assert np.array_equal(first, again) and len(set(first.tolist())) == 4
    draws = {tuple(choose_points(line, 4, "uniform", jax.random.key(k))) for k in range(5)}
    assert len(draws) > 1
    # the last row sits at 0.4; the farthest is 1.0 (row 2), then 0.0 (row 1), then 0.7 (row 4, ties to the earlier)
    assert choose_points(line, 4, "spread", key).tolist() == [1, 2, 4, 10]


def _smooth_system(seed, n, box=False):
    """A smooth two-dimensional system (ours): s' = s + 0.1 sin(2 s) + 0.05 u, r = cos(s_0), noise sd 0.01."""
    rng = np.random.default_rng(seed)
    states = rng.uniform(-1.5, 1.5, (n, 2))
    actions = rng.uniform(-1, 1, (n, 1)) if box else rng.integers(0, 3, n)
    push = actions[:, :1] if box else (actions[:, None] - 1.0)
    next_states = states + 0.1 * np.sin(2 * states) + 0.05 * push + 0.01 * rng.normal(size=(n, 2))
    rewards = np.cos(states[:, 0]) + 0.01 * rng.normal(size=n)
    return Transitions(states, actions, next_states, rewards)


@pytest.mark.parametrize("box", [False, True], ids=["discrete", "box"])
def test_one_step_prediction_of_a_smooth_system(box):
    """Tolerances ours: held-out errors within 3x the noise sd (0.01), the predicted variance within a factor 3 of
    the noise variance, and the fitted arrays in JAX's default float type."""
    model = GaussianProcessModel(ActionEncoding(box_dim=1) if box else ActionEncoding(3), max_points=120)
    params = model.fit(_smooth_system(0, 150, box), jax.random.key(0))
    assert params.posterior.x.dtype == jnp.zeros(1).dtype
    test = _smooth_system(1, 200, box)
    pred = jax.jit(model.predict)(params, test.states, test.actions)
    error = np.asarray(pred.next_state_mean) - test.next_states
    assert np.sqrt(np.mean(error**2)) < 3 * 0.01
    assert np.sqrt(np.mean((np.asarray(pred.reward_mean) - test.rewards) ** 2)) < 3 * 0.01
    assert 0.01**2 / 3 < float(np.median(pred.next_state_var)) < 3 * 0.01**2


def test_predict_and_sample_run_inside_jitted_code_and_samples_follow_the_prediction():
    model = GaussianProcessModel(ActionEncoding(3), max_points=120)
    params = model.fit(_smooth_system(2, 80), jax.random.key(1))

    @jax.jit
    def rollout(params, key, state):
        def step(s, k):
            nxt, reward = model.sample(params, k, s[None], jnp.array([2]))
            return nxt[0], reward[0]

        return jax.lax.scan(step, state, jax.random.split(key, 5))

    final, rewards = rollout(params, jax.random.key(2), jnp.zeros(2))
    again = rollout(params, jax.random.key(2), jnp.zeros(2))
    assert final.shape == (2,) and rewards.shape == (5,)
    assert np.array_equal(np.asarray(final), np.asarray(again[0]))
    states = jnp.tile(jnp.array([[0.3, -0.2]]), (20000, 1))
    draws, rewards = jax.jit(model.sample)(params, jax.random.key(3), states, jnp.zeros(20000, int))
    pred = model.predict(params, states[:1], jnp.zeros(1, int))
    # sampling error of a mean of 20,000 normal draws is sd / 141; of a variance about variance / 70
    np.testing.assert_allclose(np.mean(draws, axis=0), pred.next_state_mean[0], atol=5 * 0.02 / 141)
    np.testing.assert_allclose(np.var(draws, axis=0), pred.next_state_var[0], rtol=5 / 70)
    assert np.var(rewards) == pytest.approx(float(pred.reward_var[0]), rel=5 / 70)


def test_refitting_from_previous_params_with_no_iterations_keeps_their_hyperparameters():
    data = _smooth_system(3, 60)
    params = GaussianProcessModel(ActionEncoding(3), max_points=120).fit(data, jax.random.key(4))
    again = GaussianProcessModel(ActionEncoding(3), max_points=120, iterations=0).fit(
        data, jax.random.key(5), previous=params
    )
    for a, b in zip(params.hyper, again.hyper, strict=True):
        np.testing.assert_allclose(np.asarray(b), np.asarray(a), rtol=1e-6)
    same = GaussianProcessModel(ActionEncoding(3), max_points=120).fit(data, jax.random.key(4))
    assert all(np.array_equal(a, b) for a, b in zip(jax.tree.leaves(params), jax.tree.leaves(same), strict=True))


def test_bad_settings_and_transitions_are_one_clear_line():
    with pytest.raises(ValueError, match="selection must be one of recent, uniform, spread, got 'best'"):
        GaussianProcessModel(ActionEncoding(2), selection="best")
    data = _smooth_system(4, 10)
    with pytest.raises(ValueError, match=r"discrete actions must lie in \[0, 2\), got 0..2"):
        GaussianProcessModel(ActionEncoding(2)).fit(data, jax.random.key(0))
    with pytest.raises(ValueError, match="rewards"):
        GaussianProcessModel(ActionEncoding(3)).fit(data._replace(rewards=data.rewards[:5]), jax.random.key(0))
