"""Tests for interval methods over seeds: reference checks against scipy and a coverage simulation."""

import numpy as np
import pytest
from scipy import stats

from runner.analysis.aggregates import DEFAULT_METHOD, METHODS, interval, iqm, stratified_interval

# Skewed case: exponential (skewness 2). Scores over seeds in RL are often right-skewed because a few seeds
# learn much faster; skewness 2 is clearly asymmetric without being a pathological tail. A stronger case,
# lognormal with sigma 1 (skewness about 6), is printed for information but not asserted: no method here
# reaches 92% on it with 10 seeds (the studentized bootstrap comes closest, about 91%).
_DISTRIBUTIONS = {
    "normal": (lambda rng, shape: rng.normal(0.0, 1.0, shape), 0.0, True),
    "exponential": (lambda rng, shape: rng.exponential(1.0, shape), 1.0, True),
    "student_t3": (lambda rng, shape: rng.standard_t(3, shape), 0.0, True),
    "lognormal_s1": (lambda rng, shape: rng.lognormal(0.0, 1.0, shape), float(np.exp(0.5)), False),
}
_SEEDS = 10
_REPLICATIONS = 2000


@pytest.mark.parametrize("n", [4, 7, 10, 13, 40])
def test_iqm_matches_scipy_trim_mean(n):
    values = np.random.default_rng(n).normal(size=(n, 3))
    # reference: scipy.stats.trim_mean(x, 0.25, axis=0)
    np.testing.assert_allclose(iqm(values, axis=0), stats.trim_mean(values, 0.25, axis=0), rtol=1e-12)
    # reference: scipy.stats.trim_mean(x, 0.25, axis=1)
    np.testing.assert_allclose(iqm(values, axis=1), stats.trim_mean(values, 0.25, axis=1), rtol=1e-12)


def test_iqm_of_one_dimensional_input_is_a_float():
    assert iqm(np.array([1.0, 2.0, 3.0, 100.0])) == pytest.approx(2.5)  # middle two of four: hand computation


def _scipy_function(statistic):
    """Vectorised statistic for scipy.stats.bootstrap."""
    if statistic == "mean":
        return np.mean
    return lambda values, axis: stats.trim_mean(values, 0.25, axis=axis)


@pytest.mark.parametrize("size", [15, 16])
@pytest.mark.parametrize("statistic", ["mean", "iqm"])
@pytest.mark.parametrize(("method", "scipy_method"), [("percentile", "percentile"), ("bca", "BCa")])
def test_bootstrap_intervals_match_scipy(statistic, method, scipy_method, size):
    data = np.random.default_rng(8).gamma(2.0, 1.5, size=size)
    estimate, low, high = interval(data, statistic, method, n_resamples=40000, rng=np.random.default_rng(1))
    # reference: scipy.stats.bootstrap(method='percentile' / 'BCa'); bounds agree within resampling noise
    reference = stats.bootstrap(
        (data,), _scipy_function(statistic), method=scipy_method, n_resamples=40000, rng=np.random.default_rng(2)
    ).confidence_interval
    tolerance = 0.03 * data.std(ddof=1)
    assert estimate == pytest.approx(float(_scipy_function(statistic)(data, axis=0)))
    assert low == pytest.approx(reference.low, abs=tolerance)
    assert high == pytest.approx(reference.high, abs=tolerance)


def test_t_interval_matches_scipy():
    data = np.random.default_rng(4).normal(5.0, 2.0, size=9)
    estimate, low, high = interval(data, "mean", "t", confidence=0.9)
    # reference: scipy.stats.t.interval(0.9, df=n-1, loc=mean, scale=scipy.stats.sem(data))
    ref_low, ref_high = stats.t.interval(0.9, len(data) - 1, loc=data.mean(), scale=stats.sem(data))
    assert estimate == pytest.approx(data.mean())
    assert low == pytest.approx(ref_low, rel=1e-12)
    assert high == pytest.approx(ref_high, rel=1e-12)


def test_studentized_interval_approaches_t_interval_for_large_normal_samples():
    data = np.random.default_rng(6).normal(size=400)
    _, low, high = interval(data, "mean", "studentized", n_resamples=20000, rng=np.random.default_rng(0))
    _, t_low, t_high = interval(data, "mean", "t")
    # common practice: for large normal samples the bootstrap-t quantiles approach the t quantiles
    assert low == pytest.approx(t_low, abs=0.01)
    assert high == pytest.approx(t_high, abs=0.01)


@pytest.mark.parametrize(("method", "scipy_method"), [("percentile", "percentile"), ("bca", "BCa")])
def test_stratified_bootstrap_matches_scipy_independent_samples(method, scipy_method):
    rng = np.random.default_rng(12)
    groups = {"a": rng.exponential(1.0, size=8), "b": rng.normal(3.0, 0.5, size=12), "c": rng.gamma(3.0, size=6)}
    estimate, low, high = stratified_interval(groups, "mean", method, n_resamples=40000, rng=np.random.default_rng(3))

    def average_of_means(a, b, c, axis):
        return (np.mean(a, axis=axis) + np.mean(b, axis=axis) + np.mean(c, axis=axis)) / 3.0

    # reference: scipy.stats.bootstrap with several samples resamples each one independently (a stratified
    # bootstrap); its BCa uses the same multi-sample jackknife acceleration
    reference = stats.bootstrap(
        tuple(groups.values()), average_of_means, method=scipy_method, n_resamples=40000, rng=np.random.default_rng(4)
    ).confidence_interval
    assert estimate == pytest.approx(np.mean([values.mean() for values in groups.values()]))
    assert low == pytest.approx(reference.low, abs=0.02)
    assert high == pytest.approx(reference.high, abs=0.02)


def test_stratified_t_interval_uses_welch_satterthwaite():
    groups = {"a": np.array([1.0, 2.0, 4.0, 7.0]), "b": np.array([10.0, 10.5, 9.0, 11.0, 12.0, 8.0])}
    estimate, low, high = stratified_interval(groups, "mean", "t")
    variances = [np.var(v, ddof=1) / v.size for v in groups.values()]
    df = sum(variances) ** 2 / sum(var**2 / (v.size - 1) for var, v in zip(variances, groups.values(), strict=True))
    half = stats.t.ppf(0.975, df) * np.sqrt(sum(variances)) / 2
    # reference: hand-computed Welch-Satterthwaite interval (standard formula, common practice)
    assert estimate == pytest.approx(163 / 24)  # (3.5 + 10.0833) / 2 by hand
    assert (low, high) == pytest.approx((163 / 24 - half, 163 / 24 + half))


def test_single_group_stratified_equals_plain_interval():
    data = np.random.default_rng(9).normal(size=11)
    for method in METHODS:
        plain = interval(data, "mean", method, rng=np.random.default_rng(5))
        stratified = stratified_interval({"only": data}, "mean", method, rng=np.random.default_rng(5))
        assert plain == pytest.approx(stratified)


def test_degenerate_inputs():
    assert interval(np.full(5, 2.0), "mean", "bca", rng=np.random.default_rng(0)) == (2.0, 2.0, 2.0)
    estimate, low, high = interval(np.array([3.0]), "mean", "t")
    assert estimate == 3.0 and np.isnan(low) and np.isnan(high)
    with pytest.raises(ValueError, match="only defined here for the mean"):
        interval(np.arange(5.0), "iqm", "t")
    with pytest.raises(ValueError, match="needs an explicit rng"):
        interval(np.arange(5.0), "mean", "percentile")
    with pytest.raises(ValueError, match="finite"):
        interval(np.array([1.0, np.nan]), "mean", "t")


def _coverage(draw, true_mean: float, method: str) -> float:
    """Share of replications whose 95% interval of the mean over 10 seeds contains the true mean."""
    data = draw(np.random.default_rng(2024), (_REPLICATIONS, _SEEDS))
    resampling = np.random.default_rng(7)
    hits = 0
    for sample in data:
        _, low, high = interval(sample, "mean", method, confidence=0.95, n_resamples=2000, rng=resampling)
        hits += bool(low <= true_mean <= high)
    return hits / _REPLICATIONS


@pytest.mark.slow
def test_default_method_coverage_with_ten_seeds(capsys):
    table = {
        name: {method: _coverage(draw, mean, method) for method in METHODS}
        for name, (draw, mean, _) in _DISTRIBUTIONS.items()
    }
    with capsys.disabled():
        print(f"\ncoverage of 95% intervals for the mean, {_SEEDS} seeds, {_REPLICATIONS} replications")
        print(f"{'distribution':<14}" + "".join(f"{method:>13}" for method in METHODS))
        for name, row in table.items():
            print(f"{name:<14}" + "".join(f"{row[method]:>13.3f}" for method in METHODS))
    for name, (_, _, asserted) in _DISTRIBUTIONS.items():
        if asserted:
            # common practice: a 95% interval should cover 92-97% of the time at this simulation size
            assert 0.92 <= table[name][DEFAULT_METHOD] <= 0.97, (name, table[name])
