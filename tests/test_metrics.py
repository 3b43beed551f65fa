"""The metric schema's own columns: reward earned while learning and training CPU time, on both trial paths."""

import numpy as np
import pytest

from runner.metrics import INT_COLUMNS, METRIC_COLUMNS, METRIC_INDEX, TIMING_COLUMNS
from runner.trial import run_trial
from runner.trial_spec import TrialSpec

# Every step costs 1 and so does reaching the goal, so the reward earned after n real steps is exactly -n.
_ENV = {
    "source": "grid",
    "map": "S..~\n.#..\n...G",
    "slip": 0.2,
    "step_reward": -1.0,
    "goal_reward": -1.0,
    "hazard_penalty": -1.0,
    "hazard_ends": True,
    "step_limit": 30,
}


def _spec(kind, params):
    return TrialSpec.build(
        _ENV,
        kind,
        params,
        3,
        2000,
        every=250,
        episodes=3,
        step_cap=30,
        training_window=5,
    ).as_dict()


def test_schema_positions_types_and_timing_columns_agree():
    assert [METRIC_INDEX[name] for name in METRIC_COLUMNS] == list(range(len(METRIC_COLUMNS)))
    assert set(TIMING_COLUMNS) == {"wall_seconds", "cpu_seconds"}
    assert {"real_steps", "episodes", "env_phase"} <= INT_COLUMNS
    assert not INT_COLUMNS & set(TIMING_COLUMNS)


@pytest.mark.parametrize("path", ["compiled", "gymnasium"])
@pytest.mark.parametrize(("kind", "params"), [("q_learning", {}), ("dyna_q", {"planning_steps": 20})])
def test_reward_earned_is_every_real_reward_and_cpu_time_grows(path, kind, params):
    rows = run_trial(_spec(kind, params), path=path).rows
    np.testing.assert_array_equal(rows["reward_earned"], -rows["real_steps"])
    cpu, wall = rows["cpu_seconds"], rows["wall_seconds"]
    assert cpu[0] >= 0.0
    assert (np.diff(cpu) >= 0.0).all()
    # One process, one thread: training CPU time (evaluation excluded) cannot run far ahead of the wall clock.
    assert cpu[-1] <= wall[-1] + 0.05
