"""Tests for steps-to-threshold extraction, Kaplan-Meier survival and its quantiles."""

import numpy as np
import pandas as pd
import pytest
from statsmodels.duration.survfunc import SurvfuncRight

from runner.analysis.threshold import (
    CROSSING_COLUMNS,
    THRESHOLD_SUMMARY_COLUMNS,
    first_sustained_crossing,
    kaplan_meier,
    km_quantile,
    steps_to_threshold,
    threshold_summary,
)

_STEPS = np.array([100, 200, 300, 400, 500, 600])


def test_first_crossing_with_single_point():
    returns = np.array([0.1, 0.5, 0.9, 0.4, 0.95, 0.97])
    assert first_sustained_crossing(_STEPS, returns, 0.9) == (300.0, True)


def test_threshold_is_inclusive():
    assert first_sustained_crossing(_STEPS, np.array([0, 0, 1.0, 0, 0, 0]), 1.0) == (300.0, True)


def test_consecutive_points_skip_a_short_spike():
    returns = np.array([0.1, 0.5, 0.9, 0.4, 0.95, 0.97])
    # 300 is above the threshold but drops at 400; the first run of two starts at 500
    assert first_sustained_crossing(_STEPS, returns, 0.9, consecutive=2) == (500.0, True)
    assert first_sustained_crossing(_STEPS, returns, 0.9, consecutive=3) == (600.0, False)


def test_never_reached_is_censored_at_the_last_step():
    assert first_sustained_crossing(_STEPS, np.full(6, 0.2), 0.9) == (600.0, False)


def test_reached_only_at_the_last_point():
    returns = np.array([0, 0, 0, 0, 0, 1.0])
    assert first_sustained_crossing(_STEPS, returns, 1.0) == (600.0, True)
    # a run cut short by the end of the trial is not sustained: censored at the budget
    assert first_sustained_crossing(_STEPS, returns, 1.0, consecutive=2) == (600.0, False)


def test_nan_return_counts_as_below():
    returns = np.array([1.0, np.nan, 1.0, 1.0, 0.0, 0.0])
    assert first_sustained_crossing(_STEPS, returns, 1.0, consecutive=2) == (300.0, True)


def test_invalid_crossing_arguments():
    with pytest.raises(ValueError, match="positive integer"):
        first_sustained_crossing(_STEPS, np.zeros(6), 1.0, consecutive=0)
    with pytest.raises(ValueError, match="equal length"):
        first_sustained_crossing(_STEPS, np.zeros(5), 1.0)


def _frame(curves: dict[tuple[str, str, int], list[float]]) -> pd.DataFrame:
    """Tidy per-point frame from {(env, agent, seed): returns at points 0.. with 100 real steps apart}."""
    rows = []
    for (env, agent, seed), returns in curves.items():
        for point, value in enumerate(returns):
            rows.append(
                {
                    "env": env,
                    "agent": agent,
                    "kind": "model_free",
                    "trial_id": f"{env}-{agent}-{seed}",
                    "seed": seed,
                    "point": point,
                    "real_steps": 100 * (point + 1),
                    "eval_return": value,
                }
            )
    return pd.DataFrame(rows)


def test_steps_to_threshold_matches_single_trial_function_and_skips_envs():
    rng = np.random.default_rng(3)
    curves = {
        (env, agent, seed): list(rng.uniform(0, 1, size=8))
        for env in ("maze", "grid", "free")
        for agent in ("a", "b")
        for seed in range(5)
    }
    frame = _frame(curves).sample(frac=1.0, random_state=1)  # shuffled rows: order must not matter
    result = steps_to_threshold(frame, {"maze": 0.7, "grid": 0.9, "free": None}, consecutive=2)
    assert list(result.columns) == CROSSING_COLUMNS
    assert set(result["env"]) == {"maze", "grid"}
    assert len(result) == 20
    for row in result.itertuples():
        returns = np.array(curves[(row.env, row.agent, row.seed)])
        expected = first_sustained_crossing(100 * np.arange(1, 9), returns, {"maze": 0.7, "grid": 0.9}[row.env], 2)
        assert (row.steps, row.reached) == expected


def test_steps_to_threshold_without_any_threshold_is_empty():
    frame = _frame({("maze", "a", 0): [0.0, 1.0]})
    assert steps_to_threshold(frame, {"other": 1.0}).empty


# Bewick, Cheek & Ball, "Statistics review 12: Survival analysis", Critical Care 2004, 8:389, Table 2.
# (Values as quoted in the task brief; the paper was not reopened here. Each also follows by hand:
# 6/8, x 5/6, x 4/5, x 2/3, x 0/1.)
_BEWICK_TIMES = np.array([1, 1, 4, 5, 6, 9, 9, 22], dtype=float)
_BEWICK_REACHED = np.array([True, True, True, True, False, True, False, True])


def test_kaplan_meier_matches_bewick_table_2():
    table = kaplan_meier(_BEWICK_TIMES, _BEWICK_REACHED)
    # reference: Bewick et al. 2004, Table 2 (survival 0.750, 0.625, 0.500, 0.333, 0.000)
    np.testing.assert_array_equal(table["time"], [1, 4, 5, 9, 22])
    np.testing.assert_allclose(table["survival"], [0.750, 0.625, 0.500, 0.333, 0.000], atol=5e-4)
    np.testing.assert_array_equal(table["at_risk"], [8, 6, 5, 3, 1])
    np.testing.assert_array_equal(table["events"], [2, 1, 1, 1, 1])
    assert np.isnan(table["greenwood_se"].iloc[-1])  # Greenwood divides by zero once survival is 0


def test_quantile_uses_less_or_equal():
    # survival is exactly 0.5 at time 5: with "<=" the median is 5; statsmodels' strict "<" would give 9
    estimate, _, _ = km_quantile(_BEWICK_TIMES, _BEWICK_REACHED, 0.5)
    assert estimate == 5.0
    with np.errstate(divide="ignore", invalid="ignore"):
        # reference: statsmodels SurvfuncRight.quantile uses survival < 1 - p (documented difference)
        assert SurvfuncRight(_BEWICK_TIMES, _BEWICK_REACHED.astype(int)).quantile(0.5) == 9.0


def _censored_sample(seed: int, n: int) -> tuple[np.ndarray, np.ndarray]:
    """Rounded exponential times with uniform censoring: ties and censoring both occur."""
    rng = np.random.default_rng(seed)
    event = np.round(rng.exponential(100.0, n))
    censor = np.round(rng.uniform(20.0, 250.0, n))
    return np.minimum(event, censor), event <= censor


@pytest.mark.parametrize("seed", [0, 1, 2, 3])
def test_kaplan_meier_matches_statsmodels(seed):
    times, reached = _censored_sample(seed, 60)
    table = kaplan_meier(times, reached)
    reference = SurvfuncRight(times, reached.astype(int))
    # reference: statsmodels.duration.survfunc.SurvfuncRight surv_times, surv_prob, surv_prob_se, n_risk
    np.testing.assert_allclose(table["time"], reference.surv_times)
    np.testing.assert_allclose(table["survival"], reference.surv_prob, rtol=1e-10, atol=1e-14)
    np.testing.assert_allclose(table["greenwood_se"], reference.surv_prob_se, rtol=1e-10, equal_nan=True)
    np.testing.assert_array_equal(table["at_risk"], reference.n_risk)


@pytest.mark.parametrize("seed", [0, 1, 2, 3, 4, 5])
@pytest.mark.parametrize("q", [0.25, 0.5, 0.75])
@pytest.mark.parametrize("confidence", [0.9, 0.95])
def test_quantiles_and_intervals_match_statsmodels(seed, q, confidence):
    times, reached = _censored_sample(seed, 60)
    reference = SurvfuncRight(times, reached.astype(int))
    # the estimates agree when survival never equals 1 - q exactly (see test_quantile_uses_less_or_equal)
    assert not np.any(np.isclose(reference.surv_prob, 1.0 - q))
    estimate, low, high = km_quantile(times, reached, q, confidence=confidence)
    with np.errstate(divide="ignore", invalid="ignore"):
        ref_low, ref_high = reference.quantile_ci(q, alpha=1.0 - confidence, method="cloglog")
        # reference: statsmodels SurvfuncRight.quantile and quantile_ci(method="cloglog")
        assert estimate == reference.quantile(q)
    assert (low, high) == (ref_low, ref_high)


def test_quantile_is_nan_when_fewer_than_needed_reach():
    times = np.array([10.0, 20.0, 50.0, 50.0, 50.0])
    reached = np.array([True, True, False, False, False])
    estimate, low, high = km_quantile(times, reached, 0.5)
    assert np.isnan(estimate)
    with np.errstate(divide="ignore", invalid="ignore"):
        # reference: statsmodels SurvfuncRight.quantile_ci(0.5, method="cloglog") (the interval still exists)
        assert (low, high) == SurvfuncRight(times, reached.astype(int)).quantile_ci(0.5, method="cloglog")
    assert high == np.inf  # the data do not bound the median from above
    assert km_quantile(times, reached, 0.25)[0] == 20.0  # survival 0.8 at 10, 0.6 at 20 (hand computation)
    with pytest.raises(ValueError, match="strictly between"):
        km_quantile(times, reached, 1.0)


def test_threshold_summary_counts_and_quartiles():
    per_trial = pd.DataFrame(
        {
            "env": ["maze"] * 8 + ["maze"] * 4,
            "agent": ["dyna"] * 8 + ["q"] * 4,
            "kind": ["model_based"] * 8 + ["model_free"] * 4,
            "trial_id": [f"t{i}" for i in range(12)],
            "seed": list(range(8)) + list(range(4)),
            "steps": list(_BEWICK_TIMES) + [500.0] * 4,
            "reached": list(_BEWICK_REACHED) + [False] * 4,
        }
    )
    summary = threshold_summary(per_trial)
    assert list(summary.columns) == THRESHOLD_SUMMARY_COLUMNS
    dyna, q = summary.iloc[0], summary.iloc[1]
    assert (dyna["trials"], dyna["reached"], dyna["reached_share"]) == (8, 6, 0.75)
    assert (dyna["median_steps"], dyna["q25_steps"], dyna["q75_steps"]) == (5.0, 1.0, 22.0)
    expected = km_quantile(_BEWICK_TIMES, _BEWICK_REACHED, 0.5)
    assert (dyna["median_steps"], dyna["median_low"], dyna["median_high"]) == expected
    assert (q["reached"], q["reached_share"]) == (0, 0.0)
    assert np.isnan(q["median_steps"]) and np.isnan(q["median_low"])
