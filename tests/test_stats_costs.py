"""Total cost to the threshold and the break-even price of a real step, on synthetic trials with known figures.

Checked against direct computation (sorted medians, explicit sums) and, for the paired interval, against
scipy.stats.bootstrap(paired=True, method="percentile") resampling the same statistic.
"""

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from runner.analysis.costs import (
    Prices,
    break_even_prices,
    break_even_sentences,
    cost_curves,
    cost_trials,
    decision_sentences,
    format_cpu_time,
    total_costs,
)
from runner.analysis.efficiency import weighted_km_medians


def _trials(rows):
    frame = pd.DataFrame(rows, columns=["agent", "seed", "steps", "reached", "cpu_seconds"])
    return frame.assign(env="floor", kind="k", trial_id=frame["agent"] + frame["seed"].astype(str))


def _synthetic(n=12, seed=5):
    """A model-free agent (many steps, little CPU) and a planner (fewer steps, more CPU), every trial reaching."""
    rng = np.random.default_rng(seed)
    rows = []
    for s in range(n):
        base_steps = float(rng.integers(8_000, 12_000))
        rows.append(("free", s, base_steps, True, base_steps * 2e-6))
        plan_steps = float(rng.integers(2_000, 3_000))
        rows.append(("planner", s, plan_steps, True, plan_steps * 2e-4))
    return _trials(rows)


def _lower_median(values):
    """The Kaplan-Meier median with no censoring: the ceil(n/2)-th smallest value (first survival <= 1/2)."""
    ordered = np.sort(values)
    return ordered[int(np.ceil(len(ordered) / 2)) - 1]


def test_cost_trials_read_cpu_time_at_the_crossing_point_or_at_the_end():
    frame = pd.DataFrame(
        {
            "trial_id": ["a"] * 3 + ["b"] * 3,
            "real_steps": [0, 100, 200] * 2,
            "cpu_seconds": [0.0, 0.5, 0.9, 0.0, 0.2, 0.4],
        }
    )
    crossings = pd.DataFrame(
        {
            "env": "e",
            "agent": ["x", "y"],
            "kind": "k",
            "trial_id": ["a", "b"],
            "seed": [0, 0],
            "steps": [100.0, 200.0],
            "reached": [True, False],
        }
    )
    out = cost_trials(frame, crossings)
    assert out["cpu_seconds"].tolist() == [0.5, 0.4]


def test_total_costs_equal_explicit_sums_and_the_cheapest_is_named():
    trials = _synthetic()
    prices = Prices(unit="minutes", real_step=1.0, cpu_second=0.5)
    table = total_costs(trials, prices, ["free", "planner"], n_resamples=500)
    for agent in ("free", "planner"):
        side = trials[trials["agent"] == agent]
        totals = side["steps"] * 1.0 + side["cpu_seconds"] * 0.5
        row = table[table["agent"] == agent].iloc[0]
        assert row["median_cost"] == pytest.approx(_lower_median(totals.to_numpy()))
        assert row["median_steps"] == _lower_median(side["steps"].to_numpy())
    planner = table[table["agent"] == "planner"].iloc[0]
    assert planner["rival"] == "free" and planner["difference"] < 0 and planner["high"] < 0
    sentence = decision_sentences(table, prices)[0]
    assert "planner reaches the threshold at the lowest total cost" in sentence and "less than free" in sentence


def test_break_even_price_is_cpu_difference_over_steps_saved():
    trials = _synthetic()
    table = break_even_prices(trials, ["free", "planner"], "free", n_resamples=500)
    row = table.iloc[0]
    free, planner = (trials[trials["agent"] == a] for a in ("free", "planner"))
    saved = _lower_median(free["steps"].to_numpy()) - _lower_median(planner["steps"].to_numpy())
    extra = _lower_median(planner["cpu_seconds"].to_numpy()) - _lower_median(free["cpu_seconds"].to_numpy())
    assert (row["agent"], row["rival"], row["verdict"]) == ("planner", "free", "above")
    assert row["price"] == pytest.approx(extra / saved)
    assert row["low"] <= row["price"] <= row["high"]
    text = break_even_sentences(table, Prices())[0]
    assert "pays for its extra CPU time" in text and format_cpu_time(row["price"]) in text


def test_break_even_interval_matches_scipy_paired_percentile_bootstrap():
    # scipy.stats.bootstrap with paired=True resamples seeds and keeps each seed's two trials together; both
    # sides compute the same statistic (medians as Kaplan-Meier medians of uncensored data), so their
    # percentile bounds agree up to Monte Carlo error.
    trials = _synthetic(n=15, seed=11)
    mine = break_even_prices(trials, ["free", "planner"], "free", n_resamples=8000).iloc[0]
    free, planner = (trials[trials["agent"] == a].sort_values("seed") for a in ("free", "planner"))

    def statistic(steps_free, cpu_free, steps_plan, cpu_plan):
        saved = _lower_median(steps_free) - _lower_median(steps_plan)
        return (_lower_median(cpu_plan) - _lower_median(cpu_free)) / saved

    data = tuple(side[c].to_numpy() for side in (free, planner) for c in ("steps", "cpu_seconds"))
    reference = stats.bootstrap(
        data,
        statistic,
        paired=True,
        vectorized=False,
        method="percentile",
        n_resamples=8000,
        rng=np.random.default_rng(3),
    )
    assert mine["price"] == pytest.approx(statistic(*data))
    assert mine["low"] == pytest.approx(reference.confidence_interval.low, rel=0.03)
    assert mine["high"] == pytest.approx(reference.confidence_interval.high, rel=0.03)


def test_an_agent_that_saves_no_steps_has_no_break_even_price_and_a_cheaper_one_pays_always():
    rows = []
    for s in range(8):
        rows.append(("base", s, 1000.0 + s, True, 0.010))
        rows.append(("slow", s, 2000.0 + s, True, 0.500))
        rows.append(("lean", s, 500.0 + s, True, 0.005))
    table = break_even_prices(_trials(rows), ["base", "slow", "lean"], "base", n_resamples=300)
    verdicts = dict(zip(zip(table["agent"], table["rival"], strict=False), table["verdict"], strict=False))
    assert verdicts[("slow", "base")] == "never"
    assert verdicts[("lean", "base")] == "always"
    sentences = " ".join(break_even_sentences(table, Prices()))
    assert "no price of a real step" in sentences and "at any price" in sentences


def test_censored_trials_stay_in_as_censored_not_dropped():
    rows = [("a", s, 1000.0, s < 3, 1.0) for s in range(8)]  # 3 of 8 reach: the median is undefined
    rows += [("b", s, 400.0, True, 2.0) for s in range(8)]
    table = total_costs(_trials(rows), Prices("euros", 1.0, 1.0), ["a", "b"], n_resamples=200)
    a = table[table["agent"] == "a"].iloc[0]
    assert np.isnan(a["median_cost"]) and "3 of 8 trials" in a["note"]
    reached = np.array([True] * 3 + [False] * 5)
    assert np.isnan(weighted_km_medians(np.full(8, 1001.0), reached, np.ones((1, 8)))[0])


def test_cost_curves_cross_at_the_break_even_price():
    trials = _synthetic()
    price = break_even_prices(trials, ["free", "planner"], "free", n_resamples=200).iloc[0]["price"]
    grid = np.array([price / 10, price * 10])
    curves = cost_curves(trials, "floor", ["free", "planner"], Prices(), grid, n_resamples=100)
    free = curves[curves["agent"] == "free"]["median"].to_numpy()
    planner = curves[curves["agent"] == "planner"]["median"].to_numpy()
    assert planner[0] > free[0] and planner[1] < free[1]
