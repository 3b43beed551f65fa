"""Tests for learning-curve bands and per-trial scores."""

import numpy as np
import pandas as pd
import pytest

from runner.analysis.curves import BAND_COLUMNS, SCORE_COLUMNS, curve_bands, normalized_auc, trial_scores

_STEPS = np.arange(0, 1100, 100)


def _frame(seed: int = 0) -> pd.DataFrame:
    """Two environments, two agents, four paired seeds, eleven evaluation points of noisy rising returns."""
    rng = np.random.default_rng(seed)
    rows = []
    for env in ("chain", "grid"):
        for agent, kind, rate in (("q", "q_learning", 1.0), ("dyna (n=5)", "dyna_q", 3.0)):
            for trial_seed in range(4):
                noise = rng.normal(scale=0.05, size=_STEPS.size)
                returns = 1.0 - np.exp(-rate * _STEPS / _STEPS[-1]) + noise
                returns[0] = 0.0
                for point, (steps, value) in enumerate(zip(_STEPS, returns, strict=True)):
                    rows.append(
                        {
                            "env": env,
                            "agent": agent,
                            "kind": kind,
                            "trial_id": f"{env}-{kind}-{trial_seed}",
                            "seed": trial_seed,
                            "point": point,
                            "real_steps": int(steps),
                            "episodes": point * 2,
                            "eval_return": float(value),
                            "train_return": float("nan") if point == 0 else float(value) - 0.1,
                            "real_updates": int(steps),
                            "planning_updates": int(steps) * (5 if kind == "dyna_q" else 0),
                            "model_updates": int(steps) if kind == "dyna_q" else 0,
                            "wall_seconds": 0.01 * point,
                        }
                    )
    return pd.DataFrame(rows)


def test_normalized_auc_hand_worked_example():
    # Hand-worked: segments 0.5*(0+1)*10 = 5 and 0.5*(1+1)*20 = 20, total 25 over a span of 30 steps.
    assert normalized_auc(np.array([0, 10, 30]), np.array([0.0, 1.0, 1.0])) == pytest.approx(25.0 / 30.0)


def test_normalized_auc_of_a_constant_curve_is_that_constant():
    assert normalized_auc(np.array([0, 5, 50, 500]), np.full(4, -3.5)) == pytest.approx(-3.5)


def test_normalized_auc_matches_numpy_trapezoid_on_an_irregular_grid():
    rng = np.random.default_rng(3)
    steps = np.cumsum(rng.integers(1, 50, size=30))
    returns = rng.normal(size=30)
    # reference: numpy.trapezoid(y, x) / (x[-1] - x[0])
    expected = np.trapezoid(returns, steps) / (steps[-1] - steps[0])
    assert normalized_auc(steps, returns) == pytest.approx(expected, rel=1e-12)


def test_normalized_auc_degenerate_and_invalid_inputs():
    assert normalized_auc(np.array([0]), np.array([2.0])) == 2.0
    with pytest.raises(ValueError):
        normalized_auc(np.array([0, 10, 5]), np.array([0.0, 1.0, 2.0]))
    with pytest.raises(ValueError):
        normalized_auc(np.array([0, 1]), np.array([1.0]))


def test_trial_scores_one_row_per_trial_with_expected_values():
    frame = _frame()
    scores = trial_scores(frame)
    assert list(scores.columns) == SCORE_COLUMNS
    assert len(scores) == frame["trial_id"].nunique() == 16
    for _, row in scores.iterrows():
        trial = frame[frame["trial_id"] == row["trial_id"]].sort_values("point")
        # reference: numpy.trapezoid(y, x) / (x[-1] - x[0])
        expected_auc = np.trapezoid(trial["eval_return"], trial["real_steps"]) / 1000.0
        assert row["auc"] == pytest.approx(expected_auc, rel=1e-12)
        assert row["final_return"] == trial["eval_return"].iloc[-1]
        assert row["real_steps"] == 1000
        assert row["wall_seconds"] == pytest.approx(0.1)
        assert row["planning_per_real"] == (5.0 if row["kind"] == "dyna_q" else 0.0)


def test_trial_scores_planning_ratio_counts_per_real_step_not_per_update():
    frame = _frame()
    frame["real_updates"] = 0
    scores = trial_scores(frame)
    assert (scores.loc[scores["kind"] == "dyna_q", "planning_per_real"] == 5.0).all()
    assert (scores.loc[scores["kind"] != "dyna_q", "planning_per_real"] == 0.0).all()


def test_trial_scores_rank_the_faster_learner_higher():
    scores = trial_scores(_frame())
    mean_auc = scores.groupby(["env", "agent"])["auc"].mean()
    for env in ("chain", "grid"):
        assert mean_auc[(env, "dyna (n=5)")] > mean_auc[(env, "q")]


def test_curve_bands_shape_mean_and_ordering():
    frame = _frame()
    bands = curve_bands(frame, n_resamples=500, seed=1)
    assert list(bands.columns) == BAND_COLUMNS
    assert len(bands) == 2 * 2 * _STEPS.size
    # reference: pandas groupby mean of eval_return per (env, agent, point)
    expected = frame.groupby(["env", "agent", "point"])["eval_return"].mean()
    actual = bands.set_index(["env", "agent", "point"])["mean"]
    pd.testing.assert_series_equal(actual.sort_index(), expected.sort_index(), check_names=False, rtol=1e-12)
    assert (bands["low"] <= bands["mean"]).all()
    assert (bands["mean"] <= bands["high"]).all()
    assert (bands["n_seeds"] == 4).all()
    grid = bands[(bands["env"] == "grid") & (bands["agent"] == "q")]
    np.testing.assert_array_equal(grid["real_steps"].to_numpy(), _STEPS)
    point_zero = bands[bands["point"] == 0]
    assert (point_zero["low"] == point_zero["high"]).all()


def test_curve_bands_are_reproducible_and_seed_dependent():
    frame = _frame()
    first = curve_bands(frame, n_resamples=300, seed=4)
    second = curve_bands(frame, n_resamples=300, seed=4)
    other = curve_bands(frame, n_resamples=300, seed=5)
    pd.testing.assert_frame_equal(first, second)
    assert not np.allclose(first["low"], other["low"])


def test_curve_band_of_one_agent_ignores_other_agents():
    frame = _frame()
    alone = curve_bands(frame[frame["agent"] == "q"], n_resamples=300, seed=2)
    together = curve_bands(frame, n_resamples=300, seed=2)
    together = together[together["agent"] == "q"].reset_index(drop=True)
    pd.testing.assert_frame_equal(alone.reset_index(drop=True), together)


def test_curve_bands_handle_a_trial_that_stopped_early():
    frame = _frame()
    unfinished = frame[~((frame["trial_id"] == "chain-q_learning-0") & (frame["point"] >= 8))]
    bands = curve_bands(unfinished, n_resamples=300, seed=0)
    chain_q = bands[(bands["env"] == "chain") & (bands["agent"] == "q")].set_index("point")
    assert (chain_q.loc[:7, "n_seeds"] == 4).all()
    assert (chain_q.loc[8:, "n_seeds"] == 3).all()
    # reference: pandas groupby mean of eval_return per point over the trials present there
    expected = (
        unfinished[(unfinished["env"] == "chain") & (unfinished["agent"] == "q")].groupby("point")["eval_return"].mean()
    )
    np.testing.assert_allclose(chain_q["mean"].to_numpy(), expected.to_numpy(), rtol=1e-12)
    assert not chain_q[["mean", "low", "high"]].isna().any().any()


def test_curve_bands_of_an_empty_frame_are_empty():
    assert list(curve_bands(_frame().iloc[0:0]).columns) == BAND_COLUMNS
