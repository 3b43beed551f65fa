"""Tests for seeds-per-agent planning with the noncentral t distribution."""

import math

import numpy as np
import pandas as pd
import pytest
from statsmodels.stats.power import TTestIndPower

from runner.analysis.power import ADVICE_COLUMNS, achieved_power, seeds_advice, seeds_needed


@pytest.mark.parametrize("effect", [0.2, 0.35, 0.5, 0.8, 1.0, 1.5, 2.0, 3.0])
@pytest.mark.parametrize(("alpha", "power"), [(0.05, 0.8), (0.01, 0.9)])
def test_seeds_needed_matches_statsmodels(effect, alpha, power):
    # reference: statsmodels TTestIndPower().solve_power(..., ratio=1.0, alternative="two-sided"), rounded up
    expected = TTestIndPower().solve_power(
        effect_size=effect, alpha=alpha, power=power, ratio=1.0, alternative="two-sided"
    )
    assert seeds_needed(1.0, 1.0, effect, alpha=alpha, power=power) == math.ceil(expected)


def test_seeds_needed_uses_pooled_sd_and_ignores_sign():
    sd_a, sd_b, difference = 3.0, 4.0, 2.5
    effect = difference / math.sqrt((sd_a**2 + sd_b**2) / 2)
    # reference: statsmodels TTestIndPower().solve_power on the pooled effect size, rounded up
    expected = math.ceil(TTestIndPower().solve_power(effect_size=effect, alpha=0.05, power=0.8, ratio=1.0))
    assert seeds_needed(sd_a, sd_b, difference) == expected
    assert seeds_needed(sd_a, sd_b, -difference) == expected


def test_seeds_needed_known_table_values():
    # from memory: Cohen (1988), Statistical Power Analysis, two-sided alpha 0.05, power 0.8:
    # n = 64 per group for d = 0.5 and n = 26 for d = 0.8
    assert seeds_needed(1.0, 1.0, 0.5) == 64
    assert seeds_needed(1.0, 1.0, 0.8) == 26


@pytest.mark.parametrize("n_seeds", [2, 5, 10, 30, 100])
@pytest.mark.parametrize("effect", [0.3, 0.8, 1.2])
def test_achieved_power_matches_statsmodels(n_seeds, effect):
    # reference: statsmodels TTestIndPower().power(effect_size, nobs1, alpha, ratio=1.0, alternative="two-sided")
    expected = TTestIndPower().power(effect, n_seeds, 0.05, ratio=1.0, alternative="two-sided")
    assert achieved_power(2.0, 2.0, 2.0 * effect, n_seeds) == pytest.approx(expected, rel=1e-9)


def test_achieved_power_stays_finite_for_large_noncentrality():
    # scipy.stats.nct.cdf returns NaN far in the lower tail here (and so does statsmodels' power); ours is 1
    power = achieved_power(1.0, 1.0, 1.7, 100)
    assert power == pytest.approx(1.0, abs=1e-12)  # common practice: d = 1.7 with 100 seeds is certain to be found


def test_seeds_needed_is_the_smallest_sufficient_count():
    needed = seeds_needed(1.0, 2.0, 1.2)
    assert achieved_power(1.0, 2.0, 1.2, needed) >= 0.8
    assert achieved_power(1.0, 2.0, 1.2, needed - 1) < 0.8


def test_edge_cases():
    assert seeds_needed(0.0, 0.0, 1.0) == 2
    assert achieved_power(0.0, 0.0, 1.0, 3) == 1.0
    with pytest.raises(ValueError, match="difference of zero"):
        seeds_needed(1.0, 1.0, 0.0)
    with pytest.raises(ValueError, match="more than 50 seeds"):
        seeds_needed(1.0, 1.0, 0.1, max_seeds=50)
    with pytest.raises(ValueError, match="at least 2 seeds"):
        achieved_power(1.0, 1.0, 1.0, 1)


def _pilot() -> pd.DataFrame:
    rng = np.random.default_rng(0)
    parts = [
        pd.DataFrame({"env": "maze", "agent": agent, "auc": rng.normal(mean, sd, n)})
        for agent, mean, sd, n in (("q", 0.3, 0.1, 6), ("dyna", 0.5, 0.2, 5), ("ce", 0.45, 0.05, 1))
    ]
    parts.append(pd.DataFrame({"env": "grid", "agent": "q", "auc": rng.normal(size=4)}))
    return pd.concat(parts, ignore_index=True)


def test_seeds_advice_against_baseline():
    pilot = _pilot()
    advice = seeds_advice(pilot, "maze", [0.05, 0.2], baseline="q", agent_order=["q", "dyna", "ce"])
    assert list(advice.columns) == ADVICE_COLUMNS
    assert list(zip(advice["agent_a"], advice["difference"], strict=True)) == [
        ("dyna", 0.05),
        ("dyna", 0.2),
        ("ce", 0.05),
        ("ce", 0.2),
    ]
    dyna, q = (pilot.loc[(pilot["env"] == "maze") & (pilot["agent"] == a), "auc"] for a in ("dyna", "q"))
    first = advice.iloc[0]
    assert (first["sd_a"], first["sd_b"]) == pytest.approx((dyna.std(ddof=1), q.std(ddof=1)))
    assert first["seeds_needed"] == seeds_needed(dyna.std(ddof=1), q.std(ddof=1), 0.05)
    assert first["power_now"] == pytest.approx(achieved_power(dyna.std(ddof=1), q.std(ddof=1), 0.05, 5))
    assert advice.iloc[1]["seeds_needed"] < first["seeds_needed"]  # a larger difference needs fewer seeds
    assert pd.isna(advice.iloc[2]["seeds_needed"]) and np.isnan(advice.iloc[2]["power_now"])  # one pilot trial


def test_seeds_advice_all_pairs():
    advice = seeds_advice(_pilot(), "maze", [0.1], agent_order=["dyna", "q"])
    assert list(zip(advice["agent_a"], advice["agent_b"], strict=True)) == [("dyna", "q"), ("dyna", "ce"), ("q", "ce")]
    with pytest.raises(ValueError, match="baseline"):
        seeds_advice(_pilot(), "maze", [0.1], baseline="missing")
