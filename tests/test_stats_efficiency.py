"""Tests for paired step ratios against a baseline agent and their sentences."""

import numpy as np
import pandas as pd
import pytest

from runner.analysis.efficiency import (
    EFFICIENCY_COLUMNS,
    MIN_ESTIMABLE_SHARE,
    efficiency_ratios,
    efficiency_sentences,
)
from runner.analysis.threshold import km_quantile


def _trials(env: str, agent: str, steps, reached, seeds=None) -> pd.DataFrame:
    """Per-trial rows as produced by steps_to_threshold."""
    seeds = list(range(len(steps))) if seeds is None else list(seeds)
    return pd.DataFrame(
        {
            "env": env,
            "agent": agent,
            "kind": "x",
            "trial_id": [f"{env}-{agent}-{s}" for s in seeds],
            "seed": seeds,
            "steps": np.asarray(steps, dtype=float),
            "reached": np.asarray(reached, dtype=bool),
        }
    )


def _row(table: pd.DataFrame, agent: str, env: str = "maze") -> pd.Series:
    return table[(table["env"] == env) & (table["agent"] == agent)].iloc[0]


def test_known_medians_and_ratio():
    baseline = _trials("maze", "q", np.arange(1, 11) * 1000, [True] * 10)
    agent = _trials("maze", "dyna", np.arange(1, 11) * 100 + 50, [True] * 10)
    table = efficiency_ratios(pd.concat([baseline, agent]), "q", n_resamples=500)
    assert list(table.columns) == EFFICIENCY_COLUMNS
    row = _row(table, "dyna")
    # Kaplan-Meier median without censoring: the 5th of 10 sorted times (survival 0.5 there; hand computation)
    assert (row["baseline_median"], row["agent_median"]) == (5000.0, 550.0)
    assert row["ratio"] == pytest.approx(5000 / 550)
    assert row["low"] <= row["ratio"] <= row["high"]
    assert bool(row["includes_one"]) is False  # bool(pd.NA) would raise
    assert (row["agent_reached"], row["baseline_reached"], row["paired_seeds"]) == (10, 10, 10)
    assert row["estimable_share"] == 1.0 and row["note"] == ""


def test_median_with_censoring_matches_km_quantile():
    steps = [300, 500, 500, 800, 900, 1000, 1000, 1000]
    reached = [True, True, False, True, True, False, False, False]
    baseline = _trials("maze", "q", steps, reached)
    agent = _trials("maze", "dyna", np.array(steps) / 2, reached)
    row = _row(efficiency_ratios(pd.concat([baseline, agent]), "q", n_resamples=200), "dyna")
    assert row["baseline_median"] == km_quantile(np.array(steps, float), np.array(reached), 0.5)[0]
    assert row["ratio"] == pytest.approx(2.0)


def test_pairing_excludes_unshared_seeds_and_keeps_seeds_together():
    steps = np.array([120, 340, 560, 780, 910, 1500, 2100, 2600, 3000, 4100], dtype=float)
    baseline = _trials("maze", "q", steps, [True] * 10)
    # the agent ran one extra seed (99) with an extreme value and lacks seed 9
    agent_steps = np.r_[steps[:9] / 4, 1.0]
    agent = _trials("maze", "dyna", agent_steps, [True] * 10, seeds=[*range(9), 99])
    row = _row(efficiency_ratios(pd.concat([baseline, agent]), "q", n_resamples=1000), "dyna")
    assert row["paired_seeds"] == 9
    assert row["ratio"] == pytest.approx(4.0)
    # every seed's baseline steps are exactly 4x the agent's, so every paired resample has ratio 4;
    # resampling the two agents independently would spread the interval widely
    assert (row["low"], row["high"]) == pytest.approx((4.0, 4.0))


def test_duplicate_seed_is_rejected():
    baseline = _trials("maze", "q", [1, 2], [True, True], seeds=[0, 0])
    agent = _trials("maze", "dyna", [1, 2], [True, True], seeds=[0, 1])
    with pytest.raises(ValueError, match="same seed"):
        efficiency_ratios(pd.concat([baseline, agent]), "q")


def test_undefined_median_gives_nan_with_note():
    baseline = _trials("maze", "q", [400, 1000, 1000, 1000], [True, False, False, False])
    agent = _trials("maze", "dyna", [100, 200, 300, 1000], [True, True, True, False])
    row = _row(efficiency_ratios(pd.concat([baseline, agent]), "q", n_resamples=200), "dyna")
    assert np.isnan(row["ratio"]) and np.isnan(row["low"])
    assert pd.isna(row["includes_one"])
    assert "q got 1 of 4 paired trials" in row["note"]
    assert "dyna" not in row["note"]


def test_interval_is_withheld_when_too_few_resamples_are_estimable():
    # exactly half of each agent reaches: many resamples fall short of half and have no median
    baseline = _trials("maze", "q", [100, 200, 300, 1000, 1000, 1000], [True] * 3 + [False] * 3)
    agent = _trials("maze", "dyna", [10, 20, 30, 1000, 1000, 1000], [True] * 3 + [False] * 3)
    row = _row(efficiency_ratios(pd.concat([baseline, agent]), "q", n_resamples=500), "dyna")
    assert row["ratio"] == pytest.approx(10.0)
    assert row["estimable_share"] < MIN_ESTIMABLE_SHARE
    assert np.isnan(row["low"]) and np.isnan(row["high"])
    assert "interval not computed" in row["note"]


def test_environment_without_baseline_is_skipped_and_results_reproducible():
    rng = np.random.default_rng(0)
    parts = [
        _trials("maze", "q", rng.integers(500, 900, 12), [True] * 12),
        _trials("maze", "dyna", rng.integers(100, 300, 12), [True] * 12),
        _trials("grid", "dyna", rng.integers(100, 300, 12), [True] * 12),
    ]
    data = pd.concat(parts)
    first = efficiency_ratios(data, "q", n_resamples=300, seed=3)
    assert list(first["env"]) == ["maze"]
    pd.testing.assert_frame_equal(first, efficiency_ratios(data, "q", n_resamples=300, seed=3))


def _ratio_row(ratio, low, high, note="", agent_reached=30, baseline_reached=27):
    return {
        "env": "maze",
        "agent": "Dyna-Q (n=50)",
        "baseline": "Q-learning",
        "ratio": ratio,
        "low": low,
        "high": high,
        "confidence": 0.95,
        "includes_one": pd.NA if np.isnan(low) else bool(low <= 1 <= high),
        "agent_median": np.nan,
        "baseline_median": np.nan,
        "agent_reached": agent_reached,
        "baseline_reached": baseline_reached,
        "paired_seeds": 30,
        "estimable_share": 1.0,
        "note": note,
    }


def test_sentence_forms():
    table = pd.DataFrame(
        [
            _ratio_row(6.1, 4.8, 7.9),
            _ratio_row(0.5, 0.4, 0.8),
            _ratio_row(1.2, 0.9, 1.6),
            _ratio_row(np.nan, np.nan, np.nan, note="Q-learning got 3 of 30 paired trials to the threshold"),
            _ratio_row(2.0, np.nan, np.nan, note="interval not computed: only 70% of resamples"),
            _ratio_row(1.0, np.nan, np.nan, note="interval not computed: only 88% of resamples"),
        ]
    )
    fewer, more, same, missing, no_interval, equal = efficiency_sentences(table, "a return of 0.9")
    assert fewer == (
        "On maze, Dyna-Q (n=50) needed 6.1x fewer real steps than Q-learning to reach a return of 0.9 "
        "(95% paired percentile interval 4.8-7.9; 30/30 and 27/30 paired seeds reached it)."
    )
    # a ratio of 0.5 means twice the steps; the interval 0.4-0.8 becomes 1.25-2.5 times as many
    assert "needed 2x more real steps" in more and "interval 1.25-2.5" in more
    assert "do not show" in same and "includes 1" in same
    assert "no step ratio" in missing and "3 of 30" in missing
    assert "2x fewer" in no_interval and "without an interval (interval not computed" in no_interval
    # equal medians read as equal, not as "1x fewer"
    assert "Dyna-Q (n=50) needed as many real steps as Q-learning to reach a return of 0.9, but without" in equal


def test_sentence_bounds_near_one_stay_distinguishable():
    sentence = efficiency_sentences(pd.DataFrame([_ratio_row(1.196, 1.037, 1.362)]))[0]
    assert "1.2x fewer" in sentence and "interval 1.04-1.36" in sentence


def test_sentences_take_per_environment_labels():
    table = pd.DataFrame([_ratio_row(6.1, 4.8, 7.9)])
    assert "to reach 90% success" in efficiency_sentences(table, {"maze": "90% success"})[0]
    assert "to reach the threshold" in efficiency_sentences(table, {"other": "x"})[0]


def test_sentences_from_computed_ratios():
    baseline = _trials("maze", "q", np.arange(1, 11) * 1000, [True] * 10)
    agent = _trials("maze", "dyna", np.arange(1, 11) * 100, [True] * 10)
    sentences = efficiency_sentences(efficiency_ratios(pd.concat([baseline, agent]), "q", n_resamples=300))
    assert len(sentences) == 1 and "10x fewer real steps than q" in sentences[0]


def test_a_median_at_the_first_evaluation_point_gives_a_bound_without_interval():
    baseline = _trials("maze", "q", [1000, 1500, 2000, 2500, 3000], [True] * 5)
    quick = _trials("maze", "dyna", [500, 500, 500, 1000, 1000], [True] * 5)
    table = efficiency_ratios(pd.concat([baseline, quick]), "q", n_resamples=300, resolution={"maze": 500.0})
    row = _row(table, "dyna")
    assert row["agent_median"] == 500.0 and row["ratio"] == pytest.approx(4.0)
    assert row["bound"] == "at least" and np.isnan(row["low"]) and np.isnan(row["high"])
    (sentence,) = efficiency_sentences(table, "a return of 0.9")
    assert sentence.startswith("On maze, dyna needed at least 4x fewer real steps than q to reach a return of 0.9:")
    assert "at or before 500 real steps" in sentence and "a finer evaluation `every`" in sentence
    # the other way round: the baseline's median is the coarse one, so the agent needs at least 4x more
    flipped = efficiency_ratios(
        pd.concat([baseline.assign(agent="dyna"), quick.assign(agent="q")]), "q", resolution={"maze": 500.0}
    )
    assert _row(flipped, "dyna")["bound"] == "at most"
    assert "needed at least 4x more real steps" in efficiency_sentences(flipped)[0]
    # without a resolution the medians are taken at face value, with an interval
    plain = _row(efficiency_ratios(pd.concat([baseline, quick]), "q", n_resamples=300), "dyna")
    assert plain["bound"] == "" and not np.isnan(plain["low"])
