"""Tests for flagged seeds (collapsed after the threshold, far from the rest) and the per-seed figures."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from runner.analysis import seed_plots
from runner.analysis.report import ExperimentFacts, write_report
from runner.analysis.seeds import OUTLIER_Z, SEED_FLAG_COLUMNS, collapsed_seeds, modified_z, outlying_seeds

_POINTS = 20
_STEPS = np.arange(_POINTS) * 500


def _trial(env: str, agent: str, seed: int, values: np.ndarray) -> list[dict]:
    """Metric rows of one synthetic trial (only the columns the seed flags and the report read)."""
    return [
        {
            "env": env,
            "agent": agent,
            "kind": "dyna_q",
            "trial_id": f"{env}-{agent}-{seed}",
            "seed": seed,
            "point": point,
            "real_steps": int(_STEPS[point]),
            "eval_return": float(values[point]),
            "real_updates": int(_STEPS[point]),
            "planning_updates": 5 * int(_STEPS[point]),
            "wall_seconds": 1e-5 * _STEPS[point],
            "cpu_seconds": 1e-5 * _STEPS[point],
        }
        for point in range(_POINTS)
    ]


def _frame() -> pd.DataFrame:
    """Warehouse robot: eight seeds learn to 1.0; seed 3 reaches 1.0 at 2,000 steps and then sits at 0.0; seed 5
    wobbles just around the threshold; the crane environment has no threshold."""
    rng = np.random.default_rng(4)
    rows = []
    learned = np.minimum(1.0, _STEPS / 3000.0)
    for seed in range(8):
        values = learned + rng.normal(0.0, 0.01, _POINTS)
        if seed == 3:
            values = np.where(_STEPS <= 3000, np.minimum(1.0, _STEPS / 2000.0), 0.0)
        if seed == 5:
            values = np.where(_STEPS < 2000, _STEPS / 2000.0, 0.9 + 0.1 * (np.arange(_POINTS) % 2))
        rows += _trial("warehouse", "sweeper", seed, values)
        rows += _trial("crane", "sweeper", seed, np.where(_STEPS <= 3000, 1.0, 0.0))
    return pd.DataFrame(rows)


def test_modified_z_matches_scipy_scaled_mad():
    values = np.random.default_rng(2).lognormal(size=15)
    # reference: scipy.stats.median_abs_deviation(scale="normal") is MAD / 0.67449, so (x - median) over it is the
    # modified z-score of Iglewicz & Hoaglin (1993) up to the rounding of 0.6745
    expected = (values - np.median(values)) / stats.median_abs_deviation(values, scale="normal")
    np.testing.assert_allclose(modified_z(values), expected, rtol=1e-4)


def test_modified_z_without_median_spread_uses_the_mean_deviation():
    values = np.r_[np.ones(9), 0.0]
    z = modified_z(values)
    # hand computation: median 1, MAD 0, mean absolute deviation 0.1, so z = (0 - 1) / (1.2533 x 0.1)
    assert z[-1] == pytest.approx(-1.0 / 0.12533)
    assert np.all(z[:-1] == 0.0)
    assert np.all(modified_z(np.full(6, 2.0)) == 0.0)


def test_collapsed_seed_is_flagged_and_a_wobbling_one_is_not():
    frame = _frame()
    flags = collapsed_seeds(frame, {"warehouse": 0.95, "crane": None})
    assert list(flags.columns) == SEED_FLAG_COLUMNS
    assert flags["trial_id"].tolist() == ["warehouse-sweeper-3"]
    assert flags["flag"].tolist() == ["collapsed"]
    assert "reached 0.95 at 2,000 real steps, then averaged 0" in flags["detail"].iloc[0]
    # the crane has no threshold: nothing to collapse from
    assert collapsed_seeds(frame, {"warehouse": None, "crane": None}).empty


def test_outlying_seed_is_flagged_by_its_score():
    scores = pd.DataFrame(
        {
            "env": "warehouse",
            "agent": "sweeper",
            "seed": np.arange(10),
            "trial_id": [f"t{seed}" for seed in range(10)],
            "auc": np.r_[np.random.default_rng(0).normal(0.8, 0.02, 9), 0.1],
        }
    )
    flags = outlying_seeds(scores)
    assert flags["trial_id"].tolist() == ["t9"]
    assert flags["flag"].tolist() == ["far from the rest"]
    assert abs(modified_z(scores["auc"].to_numpy())[9]) > OUTLIER_Z
    # four seeds are too few to call any of them far from the rest
    assert outlying_seeds(scores.head(3).assign(auc=[0.8, 0.81, 0.1])).empty


def test_report_lists_flagged_seeds_and_draws_every_seed(tmp_path):
    facts = ExperimentFacts(
        name="seeds",
        budget=int(_STEPS[-1]),
        baseline=None,
        thresholds={"warehouse": 0.95, "crane": None},
        env_order=["warehouse", "crane"],
        agent_order=["sweeper"],
        n_resamples=200,
    )
    output = write_report(_frame(), facts, tmp_path)
    flagged = pd.read_csv(tmp_path / "flagged_seeds.csv")
    assert "warehouse-sweeper-3" in set(flagged["trial_id"])
    # its AUC is also far below the other seeds', so it carries both flags; it alone collapsed
    assert sorted(flagged.loc[flagged["trial_id"] == "warehouse-sweeper-3", "flag"]) == [
        "collapsed",
        "far from the rest",
    ]
    assert flagged.loc[flagged["flag"] == "collapsed", "trial_id"].tolist() == ["warehouse-sweeper-3"]
    names = {path.name for path in output.files}
    assert {"curves_seeds_warehouse.png", "curves_seeds_warehouse.svg", "curves_seeds_crane.png"} <= names
    html = (tmp_path / "report.html").read_text(encoding="utf-8")
    assert "Seeds to look at" in html and "warehouse-sweeper-3" in html
    assert "Learning curves, seed by seed" in html
    assert any("warehouse-sweeper-3" in warning for warning in output.warnings)
    assert "## Methods" in (tmp_path / "summary.md").read_text(encoding="utf-8")


def test_per_seed_figure_draws_flagged_seeds_first_and_at_most_seed_lines(tmp_path, monkeypatch):
    monkeypatch.setattr(seed_plots, "SEED_LINES", 3)
    frame = _frame()
    rows = frame[(frame["env"] == "warehouse") & (frame["agent"] == "sweeper")]
    drawn, total = seed_plots._drawn_trials(rows, {"warehouse-sweeper-6"})
    assert total == 8
    assert list(drawn.items()) == [("warehouse-sweeper-6", 6), ("warehouse-sweeper-0", 0), ("warehouse-sweeper-1", 1)]
    paths = seed_plots.plot_seed_curves(
        frame,
        "warehouse",
        agents=["sweeper"],
        column="eval_return",
        threshold=0.95,
        flagged={"warehouse-sweeper-6"},
        out_dir=tmp_path,
        title="capped",
    )
    assert [path.name for path in paths] == ["curves_seeds_warehouse.png", "curves_seeds_warehouse.svg"]
    assert "3 of 8 seeds" in paths[1].read_text(encoding="utf-8")
