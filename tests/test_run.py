"""Running an experiment end to end: stored rows, provenance, skipping stored trials, growth, failures."""

import json
import sqlite3

import numpy as np
import pandas as pd
import pytest

import runner
from runner.config import load_experiment
from runner.metrics import METRIC_COLUMNS, TIMING_COLUMNS
from runner.plan import plan_trials
from runner.run import RunOptions, run_experiment

EXPERIMENT = """\
experiment: tiny
seeds: {seeds}
real_steps: 300
evaluation: {{every: 100, episodes: 2}}
environments:
  - label: aisle
    grid:
      map: |
        S.~.
        .#.G
      slip: 0.2
    step_limit: 40
agents:
  - {{label: q, kind: q_learning}}
  - {{label: dyna, kind: dyna_q, params: {{planning_steps: 5}}}}
{extra}baseline: q
"""


def _write(tmp_path, seeds=2, extra=""):
    path = tmp_path / "tiny.yaml"
    path.write_text(EXPERIMENT.format(seeds=seeds, extra=extra))
    return path


def _db(tmp_path):
    return sqlite3.connect(tmp_path / "results" / "tiny" / "experiment.sqlite")


def test_rows_provenance_and_tidy_frame(tmp_path):
    path = _write(tmp_path)
    summary = run_experiment(
        path, results_root=tmp_path / "results", options=RunOptions(jobs=1), command="stepmeter run tiny.yaml"
    )
    assert (summary.planned, summary.ran, summary.failed) == (4, 4, [])
    frame = runner.load_results(tmp_path / "results" / "tiny")
    fixed = ["env", "agent", "kind", "trial_id", "seed", "version", "point", *METRIC_COLUMNS]
    assert list(frame.columns[: len(fixed)]) == fixed
    params = ["param_alpha", "param_epsilon", "param_gamma", "param_initial_q", "param_planning_steps"]
    assert sorted(frame.columns[len(fixed) :]) == params
    assert (frame["version"] == 1).all()
    assert frame.loc[frame["agent"] == "dyna", "param_planning_steps"].eq(5).all()
    assert frame.loc[frame["agent"] == "q", "param_planning_steps"].isna().all()  # Q-learning has no such parameter
    assert len(frame) == 4 * 4  # 4 trials x evaluation points at 0, 100, 200, 300 real steps
    assert sorted(frame["real_steps"].unique()) == [0, 100, 200, 300]
    dyna = frame[frame["kind"] == "dyna_q"]
    assert (dyna["planning_updates"] == 5 * dyna["real_updates"]).all()
    versions, text, command = _db(tmp_path).execute("SELECT versions, experiment_text, command FROM runs").fetchone()
    assert {"python", "numpy", "numba", "gymnasium", "stepmeter"} <= set(json.loads(versions))
    assert text == path.read_text()
    assert command == "stepmeter run tiny.yaml"


def test_parallel_run_stores_the_same_rows_as_a_serial_run(tmp_path):
    serial, parallel = tmp_path / "serial", tmp_path / "parallel"
    for folder, jobs in ((serial, 1), (parallel, 2)):
        folder.mkdir()
        run_experiment(_write(folder), results_root=folder / "results", options=RunOptions(jobs=jobs))
    a = runner.load_results(serial / "results" / "tiny").drop(columns=list(TIMING_COLUMNS))
    b = runner.load_results(parallel / "results" / "tiny").drop(columns=list(TIMING_COLUMNS))
    pd.testing.assert_frame_equal(a, b)


def test_rerun_skips_stored_trials_and_new_seeds_run_alone(tmp_path):
    run_experiment(_write(tmp_path), results_root=tmp_path / "results", options=RunOptions(jobs=1))
    again = run_experiment(_write(tmp_path), results_root=tmp_path / "results", options=RunOptions(jobs=1))
    assert (again.already_stored, again.ran) == (4, 0)
    old_ids = {t.trial_id for t in plan_trials(load_experiment(_write(tmp_path)))}
    grown = run_experiment(_write(tmp_path, seeds=3), results_root=tmp_path / "results", options=RunOptions(jobs=1))
    assert (grown.already_stored, grown.ran) == (4, 2)
    new_ids = {t.trial_id for t in plan_trials(load_experiment(_write(tmp_path, seeds=3)))}
    assert old_ids < new_ids
    ids = [r[0] for r in _db(tmp_path).execute("SELECT trial_id FROM trials")]
    assert len(ids) == len(set(ids)) == 6


def test_adding_an_agent_changes_no_existing_trial_id(tmp_path):
    before = {(t.agent_label, t.seed): t.trial_id for t in plan_trials(load_experiment(_write(tmp_path)))}
    extra = "  - {label: model, kind: certainty_equivalence}\n"
    after = {(t.agent_label, t.seed): t.trial_id for t in plan_trials(load_experiment(_write(tmp_path, extra=extra)))}
    assert all(after[key] == value for key, value in before.items())
    assert len(after) == len(before) + 2


def test_a_failing_trial_is_stored_as_a_failure_and_the_experiment_goes_on(tmp_path):
    # One distinct next state per (state, action) cannot hold a slippery floor's outcomes: the kernel raises.
    extra = "  - {label: cramped, kind: certainty_equivalence, params: {max_successors: 1}}\n"
    summary = run_experiment(
        _write(tmp_path, extra=extra), results_root=tmp_path / "results", options=RunOptions(jobs=1)
    )
    assert summary.ran == 4
    assert len(summary.failed) == 2 and all("max_successors" in line for line in summary.failed)
    rows = _db(tmp_path).execute("SELECT error_type, message, traceback FROM failures").fetchall()
    assert len(rows) == 2
    assert rows[0][0] == "ValueError" and "Traceback" in rows[0][2]
    missing = runner.analysis.frames.missing_trials(tmp_path / "results" / "tiny")
    assert set(missing["agent"]) == {"cramped"}


def test_interrupted_run_keeps_finished_trials(tmp_path, monkeypatch):
    import runner.store

    original = runner.store.Store.write_trial
    calls = {"n": 0}

    def write_then_interrupt(self, *args, **kwargs):
        original(self, *args, **kwargs)
        calls["n"] += 1
        if calls["n"] == 2:
            raise KeyboardInterrupt

    monkeypatch.setattr(runner.store.Store, "write_trial", write_then_interrupt)
    summary = run_experiment(_write(tmp_path), results_root=tmp_path / "results", options=RunOptions(jobs=1))
    assert summary.interrupted and summary.ran == 2
    db = _db(tmp_path)
    assert db.execute("SELECT count(*) FROM trials").fetchone()[0] == 2
    assert db.execute("SELECT outcome FROM runs").fetchone()[0] == "interrupted"
    assert db.execute("PRAGMA integrity_check").fetchone()[0] == "ok"
    monkeypatch.undo()
    finished = run_experiment(_write(tmp_path), results_root=tmp_path / "results", options=RunOptions(jobs=1))
    assert (finished.already_stored, finished.ran) == (2, 2)


@pytest.mark.parametrize("seed", [0, 1])
def test_metric_rows_are_finite_and_counters_grow(tmp_path, seed):
    run_experiment(_write(tmp_path), results_root=tmp_path / "results", options=RunOptions(jobs=1))
    frame = runner.load_results(tmp_path / "results" / "tiny")
    trial = frame[frame["seed"] == seed]
    assert np.isfinite(trial["eval_return"]).all()
    for _, rows in trial.groupby("trial_id"):
        assert (np.diff(rows["real_updates"]) >= 0).all()
        assert (np.diff(rows["episodes"]) >= 0).all()
        assert (np.diff(rows["wall_seconds"]) >= 0).all()


def test_a_store_of_the_previous_release_is_refused_with_one_line_then_migrated(tmp_path, capsys):
    from runner.cli import main

    path = _write(tmp_path)
    folder = tmp_path / "results" / "tiny"
    run_experiment(path, results_root=tmp_path / "results", options=RunOptions(jobs=1))
    before = runner.load_results(folder)
    # Make the store look like the previous release's: another file name, store version 3, old column names.
    db = folder / "experiment.sqlite"
    with sqlite3.connect(db) as conn:
        conn.execute("PRAGMA wal_checkpoint(TRUNCATE)")
        conn.execute("UPDATE meta SET value='3' WHERE key='schema_version'")
        for old, new in (("experiment_file", "study_file"), ("experiment_text", "study_text")):
            conn.execute(f"ALTER TABLE runs RENAME COLUMN {old} TO {new}")
        for added in ("reward_earned", "cpu_seconds"):  # metric columns the previous release did not record
            conn.execute(f"ALTER TABLE metrics DROP COLUMN {added}")
    conn.close()
    db.rename(folder / "previous.sqlite")
    capsys.readouterr()

    assert main(["run", str(path), "--results", str(tmp_path / "results")]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "stepmeter migrate" in err[0] and "previous.sqlite" in err[0]
    assert not db.exists()  # nothing was started over

    assert main(["migrate", str(folder)]) == 0
    assert "4 trials carried over from previous.sqlite" in capsys.readouterr().out
    assert (folder / "previous.sqlite").exists()
    after = runner.load_results(folder)
    assert after["reward_earned"].isna().all() and after["cpu_seconds"].isna().all()
    added = ["reward_earned", "cpu_seconds"]
    pd.testing.assert_frame_equal(after.drop(columns=added), before.drop(columns=added))
    assert main(["migrate", str(folder)]) == 2  # a second migration is refused, not a silent overwrite
