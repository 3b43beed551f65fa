"""The linear-Gaussian model agent: its posterior against scikit-learn's ridge and the closed form, its
predictions, its normal draws, and planning 0 equal to linear Q-learning."""

import numpy as np
from scipy import stats
from sklearn.linear_model import Ridge

from runner.agents import make_agent
from runner.agents.linear_gaussian import posterior_update, predictive, standard_normal
from runner.metrics import TIMING_COLUMNS
from runner.streams import new_stream
from runner.trial import run_trial
from runner.trial_spec import TrialSpec

PRIOR_VAR, NOISE_VAR = 2.0, 0.3


def _posterior(phi, y):
    """Condition the compiled posterior (one action) on the rows of phi and y, one at a time."""
    k, m = phi.shape[1], y.shape[1]
    cov, mean = np.eye(k)[None] * PRIOR_VAR, np.zeros((1, k, m))
    idx = np.arange(k)
    for t in range(phi.shape[0]):
        posterior_update(cov, mean, 0, idx, phi[t], k, y[t], NOISE_VAR, np.zeros(k), np.zeros(m))
    return cov, mean


def test_posterior_mean_is_the_ridge_solution():
    """sklearn.linear_model.Ridge(alpha = noise variance / prior variance, no intercept) on random data: the
    Bayesian linear regression's posterior mean (Bishop 2006, eq. 3.53-3.54 with an isotropic prior)."""
    rng = np.random.default_rng(0)
    phi, y = rng.normal(size=(80, 6)), rng.normal(size=(80, 3))
    _, mean = _posterior(phi, y)
    ridge = Ridge(alpha=NOISE_VAR / PRIOR_VAR, fit_intercept=False).fit(phi, y)
    assert np.allclose(mean[0], ridge.coef_.T, rtol=0, atol=1e-10)


def test_posterior_covariance_and_predictive_variance_are_the_closed_form():
    """Sigma = (I / prior_var + Phi^T Phi / noise_var)^-1 and the predictive variance noise_var + phi^T Sigma phi
    (Bishop 2006, eq. 3.54 and 3.59), computed with numpy.linalg.inv."""
    rng = np.random.default_rng(1)
    phi, y = rng.normal(size=(50, 5)), rng.normal(size=(50, 2))
    cov, mean = _posterior(phi, y)
    closed = np.linalg.inv(np.eye(5) / PRIOR_VAR + phi.T @ phi / NOISE_VAR)
    assert np.allclose(cov[0], closed, rtol=0, atol=1e-10)
    for x in rng.normal(size=(10, 5)):
        out = np.zeros(2)
        variance = predictive(cov, mean, 0, np.arange(5), x, 5, NOISE_VAR, np.zeros(5), out)
        assert np.isclose(variance, NOISE_VAR + x @ closed @ x, rtol=1e-10)
        assert np.allclose(out, x @ mean[0], rtol=0, atol=1e-12)


def test_predicts_a_linear_system_from_raw_features():
    """s' = A s + c with small noise, reward = s . v: with raw features (s, 1) the predictive mean recovers both."""
    agent = make_agent("linear_gaussian", {"features": {"kind": "raw"}, "planning_steps": 0, "noise_var": 1e-4})
    agent.setup(2, 2, 0, bounds=(np.full(2, -1.0), np.ones(2)))
    rng = np.random.default_rng(2)
    a, c, v = np.array([[0.9, 0.1], [-0.2, 0.8]]), np.array([0.05, -0.02]), np.array([1.0, -2.0])
    for _ in range(400):
        s = rng.uniform(-1, 1, size=2)
        agent.observe(s, 1, float(s @ v), a @ s + c + 1e-3 * rng.normal(size=2), False)
    s = np.array([0.3, -0.4])
    nxt, reward = agent.predict(s, 1)
    assert np.allclose(nxt, a @ s + c, atol=1e-2) and abs(reward - s @ v) < 1e-2
    assert agent.end_probability(s, 1) < 1e-2


def test_normal_draws_pass_a_ks_test():
    """Box-Muller draws from the compiled stream against scipy.stats.norm (scipy.stats.kstest)."""
    stream = new_stream(3)
    draws = np.array([standard_normal(stream) for _ in range(5000)])
    assert stats.kstest(draws, "norm").pvalue > 0.01


def test_planning_zero_is_linear_q_learning_bit_for_bit():
    """On both trial paths (the model's error columns aside: only the model agent measures them)."""
    env = {"source": "gym", "id": "stepmeter/OverheadCrane-v0", "options": {}, "step_limit": 100}
    common = {"alpha": 0.3, "gamma": 0.99, "epsilon": 0.1, "features": {"kind": "fourier", "order": 1}}

    def run(kind, path="gymnasium", **extra):
        spec = TrialSpec.build(
            env, kind, {**common, **extra}, 4, 900, every=300, episodes=2, step_cap=100, training_window=5
        )
        return run_trial(spec.as_dict(), path)

    model_columns = ("model_updates", "model_reward_error", "model_error_1", "model_error_5", "model_error_20")
    for path in ("gymnasium", "compiled"):
        model, plain = run("linear_gaussian", path, planning_steps=0), run("linear_q_learning", path)
        assert np.array_equal(model.final_values, plain.final_values)
        for column, values in plain.rows.items():
            if column not in (*TIMING_COLUMNS, *model_columns):
                assert np.array_equal(model.rows[column], values, equal_nan=True), column
    planned = run("linear_gaussian", planning_steps=4, sampling="predictive", rollout_length=3)
    assert planned.rows["planning_updates"][-1] == 4 * 900
    assert not np.array_equal(planned.final_values, plain.final_values)


def test_reports_its_model_error_on_held_out_transitions():
    """Through the model-error contract (`runner.models.held_out`): what is predicted is the next observation and
    the reward; both paths measure the errors, and they fall as it learns."""
    env = {"source": "gym", "id": "MountainCar-v0", "options": {}, "step_limit": None}
    params = {"planning_steps": 1, "features": {"kind": "fourier", "order": 3}}
    spec = TrialSpec.build(
        env, "linear_gaussian", params, 0, 2000, every=1000, episodes=1, step_cap=50, training_window=2
    )
    for path in ("compiled", "gymnasium"):
        rows = run_trial(spec.as_dict(), path).rows
        assert np.all(np.isfinite(rows["model_error_1"])) and np.all(np.isfinite(rows["model_error_20"])), path
        assert rows["model_error_1"][-1] < 0.5 * rows["model_error_1"][0], path
