"""Adaptation after a change, on synthetic frames whose recovery steps are known by construction."""

import numpy as np
import pandas as pd
import pytest
from statsmodels.duration.survfunc import SurvfuncRight

from runner.analysis.adaptation import (
    RECOVERY_COLUMNS,
    adaptation_sentences,
    recovery_ratios,
    recovery_summary,
    recovery_times,
    window_means,
)

_EVERY = 100
_CHANGE = 3000
_BUDGET = 6000
_STEPS = np.arange(0, _BUDGET + 1, _EVERY)


def _rows(agent: str, seed: int, recover_after: float | None, *, drop_at: int = _CHANGE) -> list[dict]:
    """A trial at 1.0 before the change, 0.0 from it until `recover_after` real steps later, then 1.0 again.

    `recover_after` None: it never recovers. Phases follow the trial loop: the point at the change step itself
    still belongs to phase 0.
    """
    rows = []
    for point, step in enumerate(_STEPS):
        after = step - drop_at
        value = 1.0 if step <= drop_at or (recover_after is not None and after >= recover_after) else 0.0
        rows.append(
            {
                "env": "maze",
                "agent": agent,
                "kind": agent,
                "trial_id": f"{agent}-{seed}",
                "seed": seed,
                "point": point,
                "real_steps": int(step),
                "eval_return": value,
                "env_phase": int(step > _CHANGE),
            }
        )
    return rows


# Recovery steps after the change per seed (None: never within the phase). Chosen without ties at half survival.
_FAST = [200, 400, 400, 700, 1000, None, 300, 600, 500]
_SLOW = [1500, 2500, None, 900, 2000, None, 2800, 1200, 1700]
_NEVER = [None] * 9


def _frame() -> pd.DataFrame:
    rows = []
    for agent, recoveries in (("slow", _SLOW), ("fast", _FAST), ("never", _NEVER)):
        for seed, value in enumerate(recoveries):
            rows += _rows(agent, seed, value)
    return pd.DataFrame(rows)


def _times(recoveries):
    """Expected (steps, reached): censored at the phase's last evaluation point, 3,000 steps after the change."""
    steps = np.array([_BUDGET - _CHANGE if r is None else r for r in recoveries], dtype=float)
    return steps, np.array([r is not None for r in recoveries])


def test_recovery_times_are_the_known_steps_and_censor_at_the_phase_end():
    per_trial = recovery_times(_frame(), {"maze": [_CHANGE]}, {"maze": 0.5})
    assert list(per_trial.columns) == RECOVERY_COLUMNS
    for agent, recoveries in (("fast", _FAST), ("slow", _SLOW), ("never", _NEVER)):
        rows = per_trial[per_trial["agent"] == agent].sort_values("seed")
        steps, reached = _times(recoveries)
        np.testing.assert_array_equal(rows["steps"], steps)
        np.testing.assert_array_equal(rows["reached"], reached)
    assert set(per_trial["at"]) == {_CHANGE} and set(per_trial["phase_end"]) == {_BUDGET}
    assert set(per_trial["first_point"]) == {_EVERY} and set(per_trial["change"]) == {1}


def test_recovery_needs_consecutive_points_when_asked():
    rows = _rows("blip", 0, None)
    for row in rows:
        if row["real_steps"] == _CHANGE + 500:
            row["eval_return"] = 1.0  # a single point back at the threshold, then down again
    frame = pd.DataFrame(rows + _rows("steady", 0, 800))
    one = recovery_times(frame, {"maze": [_CHANGE]}, {"maze": 0.5}, consecutive=1).set_index("agent")
    two = recovery_times(frame, {"maze": [_CHANGE]}, {"maze": 0.5}, consecutive=2).set_index("agent")
    assert (one.loc["blip", "steps"], bool(one.loc["blip", "reached"])) == (500.0, True)
    assert (two.loc["blip", "steps"], bool(two.loc["blip", "reached"])) == (3000.0, False)
    assert (two.loc["steady", "steps"], bool(two.loc["steady", "reached"])) == (800.0, True)


@pytest.mark.parametrize(("agent", "recoveries"), [("fast", _FAST), ("slow", _SLOW)])
def test_recovery_medians_and_intervals_match_statsmodels(agent, recoveries):
    per_trial = recovery_times(_frame(), {"maze": [_CHANGE]}, {"maze": 0.5})
    summary = recovery_summary(per_trial, confidence=0.95).set_index("agent")
    steps, reached = _times(recoveries)
    reference = SurvfuncRight(steps, reached.astype(int))
    assert not np.any(np.isclose(reference.surv_prob, 0.5))  # no tie at half survival
    row = summary.loc[agent]
    # reference: statsmodels.duration.survfunc.SurvfuncRight.quantile(0.5)
    assert row["median_steps"] == reference.quantile(0.5)
    with np.errstate(divide="ignore", invalid="ignore"):
        # reference: statsmodels SurvfuncRight.quantile_ci(0.5, method="cloglog")
        assert (row["median_low"], row["median_high"]) == reference.quantile_ci(0.5, method="cloglog")
    assert row["reached"] == int(reached.sum()) and row["trials"] == len(recoveries)
    assert summary.loc["never", "reached"] == 0 and np.isnan(summary.loc["never", "median_steps"])


def test_recovery_ratios_pair_seeds_against_the_baseline():
    per_trial = recovery_times(_frame(), {"maze": [_CHANGE]}, {"maze": 0.5})
    ratios = recovery_ratios(per_trial, "slow", n_resamples=400, seed=3).set_index("agent")
    fast = ratios.loc["fast"]
    slow_median = SurvfuncRight(*_times(_SLOW)).quantile(0.5)  # reference: statsmodels SurvfuncRight.quantile
    fast_median = SurvfuncRight(*_times(_FAST)).quantile(0.5)
    assert fast["ratio"] == pytest.approx(slow_median / fast_median)
    assert fast["low"] <= fast["ratio"] <= fast["high"] and fast["low"] > 1.0
    assert (fast["at"], fast["change"]) == (_CHANGE, 1)
    assert np.isnan(ratios.loc["never", "ratio"]) and "median is undefined" in ratios.loc["never", "note"]


def test_windows_show_the_drop_and_the_recovery():
    windows = window_means(_frame(), {"maze": [_CHANGE]}, _BUDGET, n_resamples=200)
    table = windows.set_index(["agent", "window"])
    # a quarter of the shorter neighbouring phase: 750 steps on each side, points every 100 steps
    assert tuple(table.loc[("fast", "before"), ["from_step", "to_step"]]) == (2250, 3000)
    assert table.loc[("fast", "before"), "mean"] == 1.0
    assert table.loc[("never", "just after"), "mean"] == 0.0 and table.loc[("never", "end of phase"), "mean"] == 0.0

    def share_back(recoveries, start, stop):
        """Mean over seeds of the share of points in (start, stop] at which a seed is back at 1."""
        points = [s for s in _STEPS if start < s <= stop]
        return np.mean([np.mean([r is not None and s - _CHANGE >= r for s in points]) for r in recoveries])

    assert table.loc[("fast", "just after"), "mean"] == pytest.approx(share_back(_FAST, 3000, 3750))
    assert table.loc[("slow", "end of phase"), "mean"] == pytest.approx(share_back(_SLOW, 5250, 6000))
    assert table.loc[("slow", "just after"), "low"] <= table.loc[("slow", "just after"), "mean"]


def test_sentence_says_who_adapts_and_how_fast():
    per_trial = recovery_times(_frame(), {"maze": [_CHANGE]}, {"maze": 0.5})
    summary = recovery_summary(per_trial)
    (sentence,) = adaptation_sentences(summary, {"maze": "a return of 0.5"}, 0.95)
    assert sentence.startswith("On maze, after the map changed at 3,000 real steps, a return of 0.5 was regained")
    assert "fast in 8 of 9 seeds, median 500 real steps [" in sentence
    assert sentence.index("fast in") < sentence.index("slow in")
    assert "not by never (0 of 9 seeds)" in sentence


def test_a_median_at_the_first_point_reads_at_or_before():
    frame = pd.DataFrame([row for seed in range(4) for row in _rows("quick", seed, 0)])
    summary = recovery_summary(recovery_times(frame, {"maze": [_CHANGE]}, {"maze": 0.5}))
    (sentence,) = adaptation_sentences(summary, {}, 0.95)
    assert "quick in 4 of 4 seeds, median at or before 100 real steps" in sentence


def test_report_of_a_changing_map_heads_with_adaptation_and_marks_the_phases(tmp_path):
    from runner.analysis.report import ExperimentFacts, write_report

    frame = _frame().assign(real_updates=0, planning_updates=0, model_updates=0, wall_seconds=0.0)
    # 'never' learns fastest from the start, so a ratio from the start would praise the agent that never adapts
    frame.loc[(frame["agent"] == "never") & (frame["real_steps"] == 0), "eval_return"] = 0.0
    facts = ExperimentFacts(
        name="changing",
        budget=_BUDGET,
        baseline="slow",
        thresholds={"maze": 0.5},
        env_order=["maze"],
        agent_order=["slow", "fast", "never"],
        changes={"maze": [_CHANGE]},
        n_resamples=200,
    )
    output = write_report(frame, facts, tmp_path)
    assert not any("fewer real steps" in line or "more real steps" in line for line in output.headline)
    assert any(line.startswith("On maze, after the map changed at 3,000 real steps") for line in output.headline)
    names = {path.name for path in output.files}
    assert {"recovery.csv", "recovery_summary.csv", "recovery_ratios.csv", "change_windows.csv"} <= names
    svg = (tmp_path / "curves_maze.svg").read_text(encoding="utf-8")
    assert "phase 2 from 3,000" in svg
    page = (tmp_path / "report.html").read_text(encoding="utf-8")
    assert "Adaptation after the change" in page and "The measure around each change" in page
