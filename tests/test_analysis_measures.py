"""The earning rate (reward earned while learning per real step) and the report following the primary measure."""

import numpy as np
import pandas as pd
import pytest

from runner.analysis.measures import earning_summary, with_earning_rate
from runner.analysis.report import ExperimentFacts, write_report
from runner.analysis.threshold import steps_to_threshold

_STEPS = np.arange(0, 2001, 200)


def _frame() -> pd.DataFrame:
    """Two agents, three seeds: 'steady' earns 0.01 per step from the start; 'late' earns nothing until step
    1,000 and 0.05 per step after it. Greedy returns: 'late' is at 1 from the start, 'steady' never."""
    rows = []
    for agent in ("steady", "late"):
        for seed in range(3):
            for point, step in enumerate(_STEPS):
                earned = 0.01 * step if agent == "steady" else 0.05 * max(0, step - 1000)
                rows.append(
                    {
                        "env": "maze",
                        "agent": agent,
                        "kind": agent,
                        "trial_id": f"{agent}-{seed}",
                        "seed": seed,
                        "point": point,
                        "real_steps": int(step),
                        "eval_return": 1.0 if agent == "late" else 0.0,
                        "reward_earned": earned + 0.001 * seed * (point > 0),
                        "real_updates": int(step),
                        "planning_updates": 0,
                        "model_updates": 0,
                        "wall_seconds": 0.001 * point,
                        "env_phase": 0,
                    }
                )
    return pd.DataFrame(rows)


def test_earning_rate_is_the_reward_per_real_step_of_each_interval():
    frame = _frame().sample(frac=1.0, random_state=1)  # row order must not matter
    rated = with_earning_rate(frame).sort_values(["trial_id", "point"])
    steady = rated[rated["trial_id"] == "steady-0"]["earning_rate"].to_numpy()
    assert np.isnan(steady[0])
    np.testing.assert_allclose(steady[1:], 0.01)
    late = rated[rated["trial_id"] == "late-2"]["earning_rate"].to_numpy()
    # seed 2 adds 0.002 to every point after step 0: only the first interval's rate sees it
    np.testing.assert_allclose(late[1:], [0.002 / 200, 0, 0, 0, 0, 0.05, 0.05, 0.05, 0.05, 0.05])


def test_earning_summary_totals_and_rates():
    table = earning_summary(with_earning_rate(_frame()), n_resamples=200).set_index("agent")
    assert table.loc["steady", "earned_mean"] == pytest.approx(20.0 + 0.001)  # seeds add 0, 0.001, 0.002
    assert table.loc["late", "rate_mean"] == pytest.approx((50.0 + 0.001) / 2000)
    assert table.loc["late", "final_rate_mean"] == pytest.approx(0.05)
    assert table.loc["late", "earned_low"] <= table.loc["late", "earned_mean"] <= table.loc["late", "earned_high"]


def test_steps_to_threshold_on_the_earning_rate():
    crossings = steps_to_threshold(with_earning_rate(_frame()), {"maze": 0.02}, column="earning_rate")
    by_agent = crossings.groupby("agent")[["steps", "reached"]].first()
    assert (by_agent.loc["late", "steps"], bool(by_agent.loc["late", "reached"])) == (1200, True)
    assert (by_agent.loc["steady", "steps"], bool(by_agent.loc["steady", "reached"])) == (2000, False)


def _facts(measure: str) -> ExperimentFacts:
    return ExperimentFacts(
        name="measures",
        budget=2000,
        baseline="steady",
        thresholds={"maze": 0.5},
        earning_thresholds={"maze": 0.005},
        env_order=["maze"],
        agent_order=["steady", "late"],
        n_resamples=200,
        measure=measure,
    )


def test_the_headline_follows_the_primary_measure(tmp_path):
    greedy = write_report(_frame(), _facts("greedy_return"), tmp_path / "greedy")
    earning = write_report(_frame(), _facts("earning_rate"), tmp_path / "earning")
    # greedy return: 'late' is at 1 from step 0, so no ratio and a warning that untrained agents meet it
    assert any("met the threshold at step 0" in line for line in greedy.headline)
    assert (
        len(greedy.warnings) == 1
        and "3 of 6 trials already met the return threshold 0.5 at step 0" in (greedy.warnings[0])
    )
    # earning rate 0.005: 'steady' reaches it at the first evaluation (at or before 200 steps), 'late' at 1,200
    (sentence,) = earning.headline
    assert "an earning rate of 0.005 reward per real step" in sentence
    assert "late needed at least 6x more real steps than steady" in sentence
    assert "at or before 200 real steps" in sentence and "a finer evaluation `every`" in sentence
    summary = (tmp_path / "earning" / "summary.md").read_text(encoding="utf-8")
    assert "Primary measure: reward earned while learning per real step." in summary
    assert "| steady | 3 | 3 (100%) | at or before 200 |" in summary
    assert (tmp_path / "earning" / "earnings.csv").exists() and (tmp_path / "earning" / "earning_maze.png").exists()
