"""The report's held-out model errors: one tidy table of one-step and open-loop errors over real steps with
bands over seeds (`model_errors.csv`), and the model-error figure that draws them."""

import numpy as np
import pandas as pd
import pytest

from runner.analysis.model_errors import (
    HONESTY_TABLE_COLUMNS,
    MODEL_ERROR_COLUMNS,
    held_out_error_bands,
    model_honesty_table,
)
from runner.analysis.report import ExperimentFacts, write_report

_SEEDS, _POINTS = 6, 5


def _frame() -> pd.DataFrame:
    """A binned environment: Dyna-Q measured on held-out transitions (errors falling with real steps), Q-learning
    without a model (NaN)."""
    rng = np.random.default_rng(4)
    rows = []
    for agent, kind in (("Q-learning", "q_learning"), ("Dyna-Q", "dyna_q")):
        for seed in range(_SEEDS):
            for point in range(_POINTS):
                error = 1.0 / (1 + point) + rng.uniform(0, 0.1) if kind == "dyna_q" else np.nan
                rows.append(
                    {
                        "env": "crane",
                        "agent": agent,
                        "kind": kind,
                        "trial_id": f"{kind}-{seed}",
                        "seed": seed,
                        "point": point,
                        "real_steps": 100 * point,
                        "episodes": point,
                        "eval_return": -100.0 + 10 * point + rng.normal(),
                        "train_return": -100.0,
                        "real_updates": 100 * point,
                        "planning_updates": 0,
                        "model_updates": 100 * point,
                        "model_tv_error": np.nan,
                        "model_reward_error": np.nan,
                        "model_error_1": error,
                        "model_error_5": 2 * error,
                        "model_error_20": 3 * error,
                        "wall_seconds": 0.01 * point,
                        "cpu_seconds": 0.01 * point,
                    }
                )
    return pd.DataFrame(rows)


def _facts(name: str) -> ExperimentFacts:
    """The report facts of `_frame`'s experiment: one crane, Q-learning as the baseline."""
    return ExperimentFacts(
        name=name,
        budget=400,
        baseline="Q-learning",
        thresholds={"crane": -80.0},
        env_order=["crane"],
        agent_order=["Q-learning", "Dyna-Q"],
        n_resamples=100,
    )


def test_bands_hold_the_mean_over_seeds_for_agents_with_a_model_only():
    frame = _frame()
    bands = held_out_error_bands(frame, n_resamples=200)
    assert list(bands.columns) == MODEL_ERROR_COLUMNS
    assert set(bands["agent"]) == {"Dyna-Q"}
    assert sorted(bands["steps_ahead"].unique()) == [1, 5, 20]
    dyna = frame[frame["agent"] == "Dyna-Q"]
    for column, k in (("model_error_1", 1), ("model_error_5", 5), ("model_error_20", 20)):
        rows = bands[bands["steps_ahead"] == k].sort_values("point")
        # reference: pandas' own groupby mean over the seeds at each point
        np.testing.assert_allclose(rows["mean"], dyna.groupby("point")[column].mean(), rtol=1e-12)
        assert (rows["low"] <= rows["mean"]).all() and (rows["mean"] <= rows["high"]).all()
        assert (rows["n_seeds"] == _SEEDS).all()


def test_no_held_out_column_gives_an_empty_table():
    frame = _frame().drop(columns=["model_error_1", "model_error_5", "model_error_20"])
    assert held_out_error_bands(frame).empty


@pytest.mark.parametrize("with_errors", [True, False])
def test_report_writes_the_table_and_the_figure_when_errors_were_measured(tmp_path, with_errors):
    frame = _frame()
    if not with_errors:
        frame = frame.assign(model_error_1=np.nan, model_error_5=np.nan, model_error_20=np.nan)
    write_report(frame, _facts("errors"), tmp_path)
    assert (tmp_path / "model_error_crane.png").is_file() == with_errors
    assert (tmp_path / "model_errors.csv").is_file() == with_errors
    if with_errors:
        table = pd.read_csv(tmp_path / "model_errors.csv")
        assert len(table) == 3 * _POINTS and set(table["agent"]) == {"Dyna-Q"}
        assert table["interval"].str.contains("bootstrap").all()
        html = (tmp_path / "report.html").read_text(encoding="utf-8")
        assert "divided by its spread" in html


def _honest_frame() -> pd.DataFrame:
    """Dyna-Q's model states a spread: honest one step ahead (spread equals the error, 95% coverage) and
    overconfident after 5 steps (half the error, 70% coverage); Q-learning has none."""
    frame = _frame()
    stated = frame["kind"] == "dyna_q"
    return frame.assign(
        model_spread_1=np.where(stated, frame["model_error_1"], np.nan),
        model_spread_5=np.where(stated, frame["model_error_5"] / 2, np.nan),
        model_coverage_1=np.where(stated, 0.95, np.nan),
        model_coverage_5=np.where(stated, 0.7, np.nan),
    )


def test_honesty_table_puts_each_stated_spread_beside_its_error():
    frame = _honest_frame()
    table = model_honesty_table(frame)
    assert list(table.columns) == HONESTY_TABLE_COLUMNS
    assert set(table["agent"]) == {"Dyna-Q"} and sorted(table["steps_ahead"].unique()) == [1, 5]
    dyna = frame[frame["agent"] == "Dyna-Q"]
    for k, ratio, coverage in ((1, 1.0, 0.95), (5, 0.5, 0.7)):
        rows = table[table["steps_ahead"] == k].sort_values("point")
        # reference: pandas' own groupby mean over the seeds at each point
        np.testing.assert_allclose(rows["error"], dyna.groupby("point")[f"model_error_{k}"].mean(), rtol=1e-12)
        np.testing.assert_allclose(rows["spread"], ratio * rows["error"], rtol=1e-12)
        np.testing.assert_allclose(rows["coverage"], coverage)
        assert (rows["n_seeds"] == _SEEDS).all()
    assert model_honesty_table(_frame()).empty


def test_report_draws_the_honesty_figure_only_for_models_that_state_a_spread(tmp_path):
    facts = _facts("honesty")
    write_report(_honest_frame(), facts, tmp_path / "stated")
    write_report(_frame(), facts, tmp_path / "unstated")
    assert (tmp_path / "stated" / "model_honesty_crane.png").is_file()
    table = pd.read_csv(tmp_path / "stated" / "model_honesty.csv")
    assert len(table) == 2 * _POINTS
    assert "overconfident" in (tmp_path / "stated" / "report.html").read_text(encoding="utf-8")
    assert not (tmp_path / "unstated" / "model_honesty_crane.png").exists()
    assert not (tmp_path / "unstated" / "model_honesty.csv").exists()
