"""One writer per experiment, stale locks, --start-over, --failed-only and --trial-timeout."""

import io
import os
import signal
import socket
import sqlite3
import subprocess
import sys
import time
from pathlib import Path

import pandas as pd
import pytest
from experiment_texts import HALL_DYNA, HALL_Q, hall_experiment

import runner
from runner.analysis.frames import load_failures, missing_trials
from runner.errors import ExperimentBusyError
from runner.lock import LOCK_NAME, ExperimentLock
from runner.metrics import TIMING_COLUMNS
from runner.run import RunOptions, run_experiment
from runner.store import experiment_dir

_REPO = Path(__file__).resolve().parents[1]


def _experiment(
    tmp_path: Path, seeds: int = 2, steps: int = 400, every: int = 100, agents: str = HALL_Q + HALL_DYNA
) -> Path:
    path = tmp_path / "guarded.yaml"
    path.write_text(hall_experiment("guarded", seeds, steps, every, agents), encoding="utf-8")
    return path


def _env() -> dict[str, str]:
    env = dict(os.environ)
    env["PYTHONPATH"] = os.pathsep.join(p for p in (str(_REPO), env.get("PYTHONPATH", "")) if p)
    env["MPLBACKEND"] = "Agg"
    return env


def _cli(*args: str, cwd: Path) -> subprocess.CompletedProcess:
    return subprocess.run(
        [sys.executable, "-m", "runner", *args], cwd=cwd, env=_env(), capture_output=True, text=True, timeout=120
    )


def _db(folder: Path) -> sqlite3.Connection:
    return sqlite3.connect(folder / "experiment.sqlite")


def _holder() -> str:
    return f"process {os.getpid()} on {socket.gethostname()}"


def test_a_held_lock_refuses_a_second_run_and_names_the_holder(tmp_path):
    results = tmp_path / "results"
    folder = experiment_dir(results, "guarded")
    run_experiment(_experiment(tmp_path), results_root=results, options=RunOptions(jobs=1))
    with ExperimentLock(folder):
        with pytest.raises(ExperimentBusyError) as busy:
            run_experiment(
                _experiment(tmp_path, seeds=3), results_root=results, options=RunOptions(jobs=1, start_over=True)
            )
        message = str(busy.value)
        assert _holder() in message and "another stepmeter run is writing this experiment" in message
        assert "\n" not in message
    # The refused run touched nothing: not even --start-over deleted the stored trials.
    with _db(folder) as conn:
        assert conn.execute("SELECT count(*) FROM trials").fetchone()[0] == 4
        assert conn.execute("SELECT count(*) FROM runs").fetchone()[0] == 1
        assert conn.execute("SELECT count(*) FROM declared").fetchone()[0] == 4  # seeds: 3 was never declared
    conn.close()
    assert (folder / LOCK_NAME).read_text() == ""  # released and cleared
    after = run_experiment(_experiment(tmp_path, seeds=3), results_root=results, options=RunOptions(jobs=1))
    assert (after.already_stored, after.ran) == (4, 2)


def test_a_held_lock_is_one_error_line_and_exit_2_on_the_command_line(tmp_path):
    _experiment(tmp_path)
    folder = experiment_dir(tmp_path / "results", "guarded")
    with ExperimentLock(folder):
        result = _cli("run", "guarded.yaml", "--results", "results", "--jobs", "1", "--no-report", cwd=tmp_path)
    assert result.returncode == 2
    lines = result.stderr.splitlines()
    assert len(lines) == 1, result.stderr
    assert lines[0].startswith(f"stepmeter: error: {folder}: another stepmeter run is writing this experiment")
    assert _holder() in lines[0]
    assert not (folder / "experiment.sqlite").exists()


def test_a_running_subprocess_holds_the_lock_against_this_process(tmp_path):
    experiment = _experiment(tmp_path, seeds=10, steps=20000, every=1000)
    results = tmp_path / "results"
    folder = experiment_dir(results, "guarded")
    command = [sys.executable, "-m", "runner", "run", str(experiment), "--results", str(results), "--jobs", "1",
               "--path", "gymnasium", "--no-report"]  # fmt: skip
    proc = subprocess.Popen(
        command, env=_env(), stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, start_new_session=True
    )
    try:
        deadline = time.monotonic() + 60
        lock = folder / LOCK_NAME
        while not (lock.exists() and lock.read_text().startswith("process ")):
            assert proc.poll() is None and time.monotonic() < deadline, "the run never took its lock"
            time.sleep(0.02)
        with pytest.raises(ExperimentBusyError, match=f"process {proc.pid} on "):
            run_experiment(experiment, results_root=results, options=RunOptions(jobs=1))
    finally:
        os.killpg(proc.pid, signal.SIGKILL)
        proc.wait(timeout=30)
    # The kernel dropped the dead run's lock: the next run clears it and goes on.
    out = io.StringIO()
    run_experiment(_experiment(tmp_path), results_root=results, options=RunOptions(jobs=1), stream=out)
    assert f"cleared a stale lock left by a run that no longer exists (process {proc.pid} on " in out.getvalue()


def test_a_stale_lock_file_is_cleared_and_the_run_goes_on(tmp_path):
    results = tmp_path / "results"
    folder = experiment_dir(results, "guarded")
    folder.mkdir(parents=True)
    left = "process 4194301 on some-old-host, started 2020-01-01T00:00:00+00:00"
    (folder / LOCK_NAME).write_text(left)
    out = io.StringIO()
    summary = run_experiment(_experiment(tmp_path), results_root=results, options=RunOptions(jobs=1), stream=out)
    assert (summary.ran, summary.failed) == (4, [])
    assert out.getvalue().splitlines()[0] == f"results folder: {folder}"
    assert out.getvalue().splitlines()[1] == f"cleared a stale lock left by a run that no longer exists ({left})"
    assert (folder / LOCK_NAME).read_text() == ""
    again = io.StringIO()
    run_experiment(_experiment(tmp_path), results_root=results, options=RunOptions(jobs=1), stream=again)
    assert "cleared a stale lock" not in again.getvalue()  # a lock released by a finished run is not stale


def test_a_stale_lock_is_reported_on_the_command_line(tmp_path):
    _experiment(tmp_path)
    folder = experiment_dir(tmp_path / "results", "guarded")
    folder.mkdir(parents=True)
    (folder / LOCK_NAME).write_text("process 4194302 on gone, started 2021-05-05T05:05:05+00:00")
    result = _cli("run", "guarded.yaml", "--results", "results", "--jobs", "1", "--no-report", cwd=tmp_path)
    assert result.returncode == 0, result.stderr
    assert "cleared a stale lock left by a run that no longer exists (process 4194302 on gone, " in result.stdout


def test_start_over_deletes_stored_trials_and_runs_everything_again(tmp_path):
    results = tmp_path / "results"
    folder = experiment_dir(results, "guarded")
    cramped = "  - {label: cramped, kind: certainty_equivalence, params: {max_successors: 1}}\n"
    first = run_experiment(
        _experiment(tmp_path, agents=HALL_Q + HALL_DYNA + cramped), results_root=results, options=RunOptions(jobs=1)
    )
    assert len(first.failed) == 2
    before = runner.load_results(folder).drop(columns=list(TIMING_COLUMNS))
    (folder / "report").mkdir()
    (folder / "report" / "old.md").write_text("old")

    again = run_experiment(
        _experiment(tmp_path), results_root=results, options=RunOptions(jobs=1, start_over=True, assume_yes=True)
    )
    assert (again.planned, again.already_stored, again.ran, again.failed) == (4, 0, 4, [])
    with _db(folder) as conn:
        assert conn.execute("SELECT run_id FROM runs").fetchall() == [(1,)]  # the old runs went with the store
        assert conn.execute("SELECT DISTINCT run_id FROM trials").fetchall() == [(1,)]
        assert conn.execute("SELECT count(*) FROM failures").fetchone()[0] == 0
        assert conn.execute("SELECT count(*) FROM trials").fetchone()[0] == 4
    conn.close()
    assert not (folder / "report").exists()
    assert load_failures(folder).empty and missing_trials(folder).empty
    after = runner.load_results(folder).drop(columns=list(TIMING_COLUMNS))
    kept = before.loc[before["agent"] != "cramped", after.columns].reset_index(drop=True)  # no cramped parameters
    pd.testing.assert_frame_equal(after, kept)


def test_failed_only_runs_exactly_the_trials_that_failed_before(tmp_path):
    results = tmp_path / "results"
    folder = experiment_dir(results, "guarded")
    # q trials stored first; then the dyna trials fail by time-out on the step-by-step path.
    run_experiment(_experiment(tmp_path, steps=3000, agents=HALL_Q), results_root=results, options=RunOptions(jobs=1))
    timed = RunOptions(jobs=1, trial_path="gymnasium", time_limit=0.001)
    failed = run_experiment(_experiment(tmp_path, steps=3000), results_root=results, options=timed)
    assert failed.ran == 0 and len(failed.failed) == 2
    dyna_ids = set(missing_trials(folder)["trial_id"])
    assert set(load_failures(folder)["trial_id"]) == dyna_ids
    assert set(load_failures(folder)["error_type"]) == {"TrialTimeout"}

    # A third seed declares two more trials that never ran; --failed-only must leave them alone.
    grown = _experiment(tmp_path, seeds=3, steps=3000)
    out = io.StringIO()
    summary = run_experiment(grown, results_root=results, options=RunOptions(jobs=1, failed_only=True), stream=out)
    assert "6 trials declared, 2 already stored, 2 previously failed trials" in out.getvalue()
    assert (summary.already_stored, summary.ran, summary.failed) == (2, 2, [])
    with _db(folder) as conn:
        latest = conn.execute("SELECT max(run_id) FROM runs").fetchone()[0]
        ran = {r[0] for r in conn.execute("SELECT trial_id FROM trials WHERE run_id=?", (latest,))}
    conn.close()
    assert ran == dyna_ids
    missing = missing_trials(folder)
    assert list(missing["seed"]) == [2, 2] and set(missing["agent"]) == {"q", "dyna"}

    nothing = run_experiment(grown, results_root=results, options=RunOptions(jobs=1, failed_only=True))
    assert nothing.ran == 0
    rest = run_experiment(grown, results_root=results, options=RunOptions(jobs=1))
    assert (rest.already_stored, rest.ran) == (4, 2)
    assert missing_trials(folder).empty


@pytest.mark.parametrize(("path", "steps", "limit"), [("gymnasium", 3000, "0.001"), ("compiled", 20000, "0.000001")])
def test_trial_timeout_stores_failures_exits_1_and_lists_them(tmp_path, path, steps, limit):
    _experiment(tmp_path, steps=steps, every=1000)
    result = _cli(
        "run", "guarded.yaml", "--results", "results", "--jobs", "1", "--no-report",
        "--path", path, "--trial-timeout", limit, cwd=tmp_path,
    )  # fmt: skip
    assert result.returncode == 1, result.stderr
    folder = tmp_path / "results" / "guarded"
    failed = [line for line in result.stderr.splitlines() if line.startswith("failed: ")]
    heads = sorted(line.split(": TrialTimeout: ")[0] for line in failed)
    assert heads == sorted(f"failed: hall / {agent} / seed {seed}" for agent in ("q", "dyna") for seed in (0, 1))
    # On a busy machine the limit may pass during an evaluation, which says so instead of the limit's value.
    said = {line.split(": TrialTimeout: ")[1] for line in failed}
    assert said <= {
        f"the trial ran past its limit of {float(limit):g} wall seconds",
        "the trial ran past its wall-clock limit during an evaluation",
    }, said
    assert f"4 trials failed; their errors are stored in {folder}" in result.stderr
    failures = load_failures(folder)
    assert list(failures["error_type"]) == ["TrialTimeout"] * 4
    assert set(missing_trials(folder)["trial_id"]) == set(failures["trial_id"])
    with _db(folder) as conn:
        assert conn.execute("SELECT count(*) FROM trials").fetchone()[0] == 0
        assert conn.execute("SELECT outcome FROM runs").fetchall() == [("failures",)]
    conn.close()
