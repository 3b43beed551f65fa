"""Tests for pairwise Welch tests, Holm adjustment and probability of improvement."""

import numpy as np
import pandas as pd
import pytest
from scipy import stats
from statsmodels.stats.multitest import multipletests

from runner.analysis.compare import (
    PAIRWISE_COLUMNS,
    holm_adjust,
    pairwise_welch,
    probability_of_improvement,
    welch_test,
)


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_welch_matches_scipy(seed):
    rng = np.random.default_rng(seed)
    x = rng.normal(1.0, 1.0, size=8 + seed)
    y = rng.normal(0.0, 3.0, size=15)
    t_value, df, p_value = welch_test(x, y)
    # reference: scipy.stats.ttest_ind(x, y, equal_var=False) statistic, df and pvalue
    reference = stats.ttest_ind(x, y, equal_var=False)
    assert t_value == pytest.approx(reference.statistic, rel=1e-12)
    assert df == pytest.approx(reference.df, rel=1e-12)
    assert p_value == pytest.approx(reference.pvalue, rel=1e-10)


def test_welch_degenerate_cases_are_nan():
    assert all(np.isnan(welch_test(np.array([1.0]), np.array([1.0, 2.0]))))
    assert all(np.isnan(welch_test(np.full(4, 2.0), np.full(5, 2.0))))


@pytest.mark.parametrize("seed", [0, 1, 2, 3])
def test_holm_matches_statsmodels(seed):
    rng = np.random.default_rng(seed)
    p_values = np.r_[rng.uniform(0, 0.1, 4), rng.uniform(0, 1, 5), [0.03, 0.03]]  # includes a tie
    # reference: statsmodels.stats.multitest.multipletests(method="holm")[1]
    expected = multipletests(p_values, method="holm")[1]
    np.testing.assert_allclose(holm_adjust(p_values), expected, rtol=1e-12)


def test_holm_ignores_nan_p_values():
    p_values = np.array([0.01, np.nan, 0.04, 0.03])
    adjusted = holm_adjust(p_values)
    assert np.isnan(adjusted[1])
    # reference: statsmodels.stats.multitest.multipletests(method="holm") on the three valid p-values
    np.testing.assert_allclose(adjusted[[0, 2, 3]], multipletests(p_values[[0, 2, 3]], method="holm")[1])


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_probability_of_improvement_matches_mann_whitney_with_ties(seed):
    rng = np.random.default_rng(seed)
    x = rng.integers(0, 6, size=12).astype(float)  # few distinct values: many ties
    y = rng.integers(1, 7, size=9).astype(float)
    estimate, low, high = probability_of_improvement(x, y, n_resamples=200, rng=np.random.default_rng(1))
    # reference: scipy.stats.mannwhitneyu(x, y).statistic / (n1 * n2) counts ties as one half
    assert estimate == pytest.approx(stats.mannwhitneyu(x, y).statistic / (x.size * y.size), rel=1e-12)
    assert low <= estimate <= high


def test_probability_of_improvement_interval_matches_scipy_bootstrap():
    rng = np.random.default_rng(5)
    x, y = rng.normal(0.5, 1.0, size=14), rng.normal(0.0, 1.0, size=11)

    def improvement(a, b, axis):
        a, b = np.moveaxis(a, axis, -1), np.moveaxis(b, axis, -1)
        wins = (a[..., :, None] > b[..., None, :]) + 0.5 * (a[..., :, None] == b[..., None, :])
        return wins.mean(axis=(-2, -1))

    _, low, high = probability_of_improvement(x, y, n_resamples=20000, rng=np.random.default_rng(2))
    # reference: scipy.stats.bootstrap(method='percentile') with two independently resampled samples
    reference = stats.bootstrap(
        (x, y), improvement, method="percentile", n_resamples=20000, rng=np.random.default_rng(3)
    ).confidence_interval
    assert low == pytest.approx(reference.low, abs=0.015)
    assert high == pytest.approx(reference.high, abs=0.015)


def test_probability_of_improvement_extremes():
    estimate, low, high = probability_of_improvement(
        np.array([5.0, 6.0]), np.array([1.0, 2.0, 3.0]), rng=np.random.default_rng(0)
    )
    assert (estimate, low, high) == (1.0, 1.0, 1.0)  # every x beats every y (hand computation)


def _scores() -> pd.DataFrame:
    rng = np.random.default_rng(7)
    parts = []
    for env, shift in (("maze", 0.0), ("grid", 5.0)):
        for agent, mean, sd, n in (("q", 0.2, 0.05, 10), ("dyna", 0.5, 0.1, 12), ("ce", 0.45, 0.2, 9)):
            parts.append(pd.DataFrame({"env": env, "agent": agent, "auc": rng.normal(mean + shift, sd, n)}))
    return pd.concat(parts, ignore_index=True)


def test_pairwise_welch_table():
    scores = _scores()
    table = pairwise_welch(scores, "maze", ["dyna", "ce", "q"], n_resamples=300)
    assert list(table.columns) == PAIRWISE_COLUMNS
    assert list(zip(table["agent_a"], table["agent_b"], strict=True)) == [("dyna", "ce"), ("dyna", "q"), ("ce", "q")]
    maze = scores[scores["env"] == "maze"]
    for row in table.itertuples():
        x = maze.loc[maze["agent"] == row.agent_a, "auc"].to_numpy()
        y = maze.loc[maze["agent"] == row.agent_b, "auc"].to_numpy()
        # reference: scipy.stats.ttest_ind(equal_var=False)
        assert row.p_value == pytest.approx(stats.ttest_ind(x, y, equal_var=False).pvalue, rel=1e-10)
        assert row.difference == pytest.approx(x.mean() - y.mean())
        assert (row.n_a, row.n_b) == (x.size, y.size)
    # reference: statsmodels multipletests(method="holm") over the pairs of this environment only
    np.testing.assert_allclose(table["p_holm"], multipletests(table["p_value"], method="holm")[1], rtol=1e-12)
    assert table.loc[1, "probability_of_improvement"] > 0.9  # dyna (0.5) against q (0.2): clearly better
    pd.testing.assert_frame_equal(table, pairwise_welch(scores, "maze", ["dyna", "ce", "q"], n_resamples=300))


def test_pairwise_welch_other_metric_and_single_agent():
    scores = _scores().assign(final_return=lambda frame: -frame["auc"])
    table = pairwise_welch(scores, "grid", ["q", "dyna"], metric="final_return", n_resamples=100)
    on_auc = pairwise_welch(scores, "grid", ["q", "dyna"], n_resamples=100)
    assert table.loc[0, "difference"] == pytest.approx(-on_auc.loc[0, "difference"])
    # negating the scores turns P(q > dyna) into P(dyna > q) = 1 - P(q > dyna) (no ties in continuous data)
    assert table.loc[0, "probability_of_improvement"] == pytest.approx(1 - on_auc.loc[0, "probability_of_improvement"])
    single = pairwise_welch(scores[scores["agent"] == "q"], "maze", ["q"])
    assert single.empty and list(single.columns) == PAIRWISE_COLUMNS
