"""Tests for the vectorised bootstrap intervals of the mean over seeds: bootstrap-t (the report's) and percentile."""

import numpy as np
import pytest
from scipy import stats

from runner.analysis.bootstrap import (
    interval_caption,
    keyed_rng,
    mean_and_interval,
    percentile_interval,
    studentized_interval,
)

_DATA_SETS = {
    "normal": lambda rng: rng.normal(loc=3.0, scale=2.0, size=30),
    "exponential": lambda rng: rng.exponential(scale=5.0, size=25),
    "lognormal": lambda rng: rng.lognormal(mean=0.0, sigma=1.0, size=40),
    "small_integers": lambda rng: rng.integers(-200, 0, size=8).astype(float),
}


@pytest.mark.parametrize("name", sorted(_DATA_SETS))
def test_matches_scipy_percentile_bootstrap(name):
    data = _DATA_SETS[name](np.random.default_rng(11))
    low, high = percentile_interval(data, confidence=0.95, n_resamples=20000, rng=np.random.default_rng(5))
    # reference: scipy.stats.bootstrap(method='percentile') on the sample mean
    reference = stats.bootstrap(
        (data,),
        np.mean,
        confidence_level=0.95,
        n_resamples=20000,
        method="percentile",
        rng=np.random.default_rng(6),
    ).confidence_interval
    tolerance = 0.05 * data.std(ddof=1)
    assert abs(float(low) - reference.low) < tolerance
    assert abs(float(high) - reference.high) < tolerance


def test_matches_scipy_at_other_confidence_levels():
    data = np.random.default_rng(2).gamma(shape=2.0, scale=1.5, size=20)
    for confidence in (0.5, 0.9):
        low, high = percentile_interval(data, confidence=confidence, n_resamples=20000, rng=np.random.default_rng(3))
        # reference: scipy.stats.bootstrap(method='percentile') on the sample mean
        reference = stats.bootstrap(
            (data,),
            np.mean,
            confidence_level=confidence,
            n_resamples=20000,
            method="percentile",
            rng=np.random.default_rng(4),
        ).confidence_interval
        tolerance = 0.05 * data.std(ddof=1)
        assert abs(float(low) - reference.low) < tolerance
        assert abs(float(high) - reference.high) < tolerance


def test_two_samples_give_the_exact_bootstrap_quantiles():
    # Hand-worked: with samples (a, b) the resampled mean is a, (a+b)/2 or b with probabilities 1/4, 1/2, 1/4,
    # so the 2.5% and 97.5% quantiles are a and b.
    low, high = percentile_interval(np.array([1.0, 3.0]), n_resamples=4000, rng=np.random.default_rng(0))
    assert float(low) == pytest.approx(1.0)
    assert float(high) == pytest.approx(3.0)


def test_two_dimensional_input_is_bootstrapped_column_by_column_with_shared_indices():
    data = np.random.default_rng(7).normal(size=(12, 5))
    low, high = percentile_interval(data, n_resamples=3000, rng=np.random.default_rng(9))
    assert low.shape == (5,)
    assert high.shape == (5,)
    for column in range(data.shape[1]):
        col_low, col_high = percentile_interval(data[:, column], n_resamples=3000, rng=np.random.default_rng(9))
        np.testing.assert_allclose(low[column], col_low, rtol=1e-12)
        np.testing.assert_allclose(high[column], col_high, rtol=1e-12)


def test_trailing_shape_is_preserved():
    data = np.random.default_rng(1).normal(size=(6, 2, 3))
    mean, low, high = mean_and_interval(data, n_resamples=500, rng=np.random.default_rng(0))
    assert mean.shape == low.shape == high.shape == (2, 3)
    np.testing.assert_allclose(mean, data.mean(axis=0))
    assert np.all(low <= mean)
    assert np.all(mean <= high)
    assert np.all(low < high)


def test_single_sample_has_no_bootstrap_t_interval_and_a_point_percentile_one():
    data = np.array([[0.25, -4.0, 7.5]])
    mean, low, high = mean_and_interval(data, rng=np.random.default_rng(0))
    np.testing.assert_array_equal(mean, data[0])
    assert np.isnan(low).all() and np.isnan(high).all()
    _, low, high = mean_and_interval(data, rng=np.random.default_rng(0), method="percentile")
    np.testing.assert_array_equal(low, data[0])
    np.testing.assert_array_equal(high, data[0])
    one_low, one_high = percentile_interval(np.array([2.5]), rng=np.random.default_rng(0))
    assert one_low.shape == ()
    assert float(one_low) == float(one_high) == 2.5


def _textbook_bootstrap_t(data, picks, confidence):
    """Bootstrap-t bounds written out as Efron & Tibshirani (1993), section 12.5, one resample at a time."""
    n = data.size
    se = data.std(ddof=1) / np.sqrt(n)
    t_values = []
    for row in picks:
        resample = data[row]
        t_values.append((resample.mean() - data.mean()) / (resample.std(ddof=1) / np.sqrt(n)))
    alpha = 1.0 - confidence
    low_t, high_t = np.quantile(t_values, [alpha / 2.0, 1.0 - alpha / 2.0])
    return data.mean() - high_t * se, data.mean() - low_t * se


def test_bootstrap_t_matches_the_textbook_definition_column_by_column():
    data = np.random.default_rng(17).gamma(2.0, 1.5, size=(12, 4))
    low, high = studentized_interval(data, confidence=0.9, n_resamples=3000, rng=np.random.default_rng(8))
    # same draws as the vectorised code: numpy's Generator.integers on the same generator state
    picks = np.random.default_rng(8).integers(0, 12, size=(3000, 12))
    for column in range(data.shape[1]):
        # reference: Efron & Tibshirani (1993), An Introduction to the Bootstrap, section 12.5 (bootstrap-t)
        ref_low, ref_high = _textbook_bootstrap_t(data[:, column], picks, 0.9)
        assert low[column] == pytest.approx(ref_low, rel=1e-9)
        assert high[column] == pytest.approx(ref_high, rel=1e-9)


def test_bootstrap_t_approaches_the_t_interval_for_large_normal_samples():
    data = np.random.default_rng(6).normal(size=400)
    low, high = studentized_interval(data, n_resamples=20000, rng=np.random.default_rng(0))
    # reference: scipy.stats.t.interval(0.95, n - 1, loc=mean, scale=scipy.stats.sem); for large normal samples
    # the bootstrap-t quantiles approach Student's t quantiles (common practice)
    ref_low, ref_high = stats.t.interval(0.95, data.size - 1, loc=data.mean(), scale=stats.sem(data))
    assert float(low) == pytest.approx(ref_low, abs=0.01)
    assert float(high) == pytest.approx(ref_high, abs=0.01)


def test_bootstrap_t_widens_to_the_range_when_resamples_have_no_spread():
    # two seeds: half the resamples pick one seed twice and have no spread, so no finite t quantile holds
    low, high = studentized_interval(np.array([1.0, 3.0]), rng=np.random.default_rng(0))
    assert (float(low), float(high)) == (1.0, 3.0)
    # nine failures and one success: a third of resamples are all failures; the interval must still hold the
    # mean and reach above it rather than collapse onto it
    mean, low, high = mean_and_interval(np.r_[np.zeros(9), 1.0], rng=np.random.default_rng(0))
    assert float(low) == 0.0 and float(high) > 0.3 and float(mean) == pytest.approx(0.1)


def test_caption_names_the_method():
    assert interval_caption(0.95) == "95% bootstrap-t interval over seeds"
    assert interval_caption(0.9, "percentile") == "90% percentile interval over seeds"
    with pytest.raises(ValueError, match="interval method"):
        interval_caption(0.95, "bca")


def test_constant_columns_have_a_zero_width_interval_containing_the_mean():
    data = np.column_stack([np.full(9, 0.1), np.linspace(0.0, 1.0, 9)])
    mean, low, high = mean_and_interval(data, n_resamples=1000, rng=np.random.default_rng(0))
    assert low[0] == mean[0] == high[0]
    assert low[1] < mean[1] < high[1]


def test_same_generator_seed_gives_identical_intervals():
    data = np.random.default_rng(4).normal(size=(10, 3))
    first = percentile_interval(data, n_resamples=800, rng=np.random.default_rng(21))
    second = percentile_interval(data, n_resamples=800, rng=np.random.default_rng(21))
    np.testing.assert_array_equal(first[0], second[0])
    np.testing.assert_array_equal(first[1], second[1])


def test_keyed_generators_are_stable_and_label_specific():
    first = keyed_rng(3, "curve", "env-a", "agent-x").integers(0, 1_000_000, size=4)
    again = keyed_rng(3, "curve", "env-a", "agent-x").integers(0, 1_000_000, size=4)
    other = keyed_rng(3, "curve", "env-a", "agent-y").integers(0, 1_000_000, size=4)
    np.testing.assert_array_equal(first, again)
    assert not np.array_equal(first, other)


@pytest.mark.parametrize(
    ("samples", "kwargs"),
    [
        (np.array([]), {}),
        (np.array([1.0, np.nan]), {}),
        (np.array([1.0, 2.0]), {"confidence": 1.0}),
        (np.array([1.0, 2.0]), {"n_resamples": 0}),
    ],
)
def test_invalid_input_is_rejected(samples, kwargs):
    with pytest.raises(ValueError):
        percentile_interval(samples, rng=np.random.default_rng(0), **kwargs)
