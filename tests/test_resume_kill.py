"""Killing `stepmeter run` (SIGKILL, whole process group) at random moments and restarting it converges to the
same stored rows as an uninterrupted run: no trial twice, no partial trial, a sound database, stale locks cleared."""

import os
import signal
import sqlite3
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from experiment_texts import room_experiment

import runner
from runner.metrics import TIMING_COLUMNS

_REPO = Path(__file__).resolve().parents[1]
_NAME = "killable"
_REAL_STEPS = 15000
_EVERY = 1500
_POINTS = _REAL_STEPS // _EVERY + 1

# 4 agent variants x 30 seeds = 120 trials of about 0.1-0.7 s each on the step-by-step gymnasium path: enough
# work that six kills, each after a few more trials are stored, all land before the experiment is done.
_EXPERIMENT = room_experiment(_NAME, seeds=30, steps=_REAL_STEPS, every=_EVERY)
_TRIALS = 120

# Kinds of kill, in order: "early" lands at a random moment of the first seconds (imports, lock, declaring,
# warm-up, worker start, first trials); "mid" lands while trials compute, a moment after some were stored;
# "commit" lands right as the trial count grows, when the parent is writing finished trials.
_KILLS = ("early", "commit", "mid", "commit", "early", "mid")
_DEADLINE = 90.0


def _env() -> dict[str, str]:
    env = dict(os.environ)
    env["PYTHONPATH"] = os.pathsep.join(p for p in (str(_REPO), env.get("PYTHONPATH", "")) if p)
    env["PYTHONUNBUFFERED"] = "1"  # a killed run's lines must reach its output file
    env["MPLBACKEND"] = "Agg"
    return env


def _command(experiment: Path, results: Path) -> list[str]:
    return [
        sys.executable, "-m", "runner", "run", str(experiment),
        "--jobs", "2", "--path", "gymnasium", "--no-report", "--results", str(results),
    ]  # fmt: skip


def _stored(db: Path) -> int:
    """Committed trials, read without creating, writing or checkpointing the database."""
    if not db.exists():
        return 0
    try:
        conn = sqlite3.connect(f"file:{db}?mode=ro", uri=True, timeout=0.5)
        try:
            return int(conn.execute("SELECT count(*) FROM trials").fetchone()[0])
        finally:
            conn.close()
    except sqlite3.Error:
        return 0


def _group_alive(pgid: int) -> bool:
    """Whether any non-zombie process is left in the group (zombies may never be reaped in a container)."""
    for stat in Path("/proc").glob("[0-9]*/stat"):
        try:
            fields = stat.read_text().rsplit(")", 1)[1].split()
        except OSError:
            continue
        if int(fields[2]) == pgid and fields[0] != "Z":
            return True
    return False


def _kill_group(proc: subprocess.Popen) -> None:
    os.killpg(proc.pid, signal.SIGKILL)
    proc.wait(timeout=30)
    deadline = time.monotonic() + 10
    while _group_alive(proc.pid) and time.monotonic() < deadline:
        time.sleep(0.01)


def _wait_for(condition, proc: subprocess.Popen, poll: float) -> bool:
    """Poll until condition() holds (True) or the process exits first (False)."""
    deadline = time.monotonic() + _DEADLINE
    while time.monotonic() < deadline:
        if condition():
            return True
        if proc.poll() is not None:
            return False
        time.sleep(poll)
    _kill_group(proc)
    pytest.fail("a run neither reached its kill moment nor finished in time")


def _frame(folder: Path) -> pd.DataFrame:
    frame = runner.load_results(folder).drop(columns=list(TIMING_COLUMNS))
    return frame.sort_values(["trial_id", "point"]).reset_index(drop=True)


@pytest.mark.slow
def test_killed_and_restarted_runs_store_what_an_uninterrupted_run_stores(tmp_path):
    experiment = tmp_path / "killable.yaml"
    experiment.write_text(_EXPERIMENT, encoding="utf-8")
    env = _env()

    reference = subprocess.run(
        _command(experiment, tmp_path / "reference"), env=env, capture_output=True, text=True, timeout=180, check=False
    )
    assert reference.returncode == 0, reference.stderr
    expected = _frame(tmp_path / "reference" / _NAME)
    assert len(expected) == _TRIALS * _POINTS

    results = tmp_path / "killed"
    db = results / _NAME / "experiment.sqlite"
    rng = np.random.default_rng(20240611)
    attempts = []  # (kind, return code, stdout, stderr, trials stored at the kill)
    for number, kind in enumerate((*_KILLS, "final")):
        out, err = tmp_path / f"attempt{number}.out", tmp_path / f"attempt{number}.err"
        with out.open("w") as stdout, err.open("w") as stderr:
            proc = subprocess.Popen(
                _command(experiment, results), env=env, stdout=stdout, stderr=stderr, start_new_session=True
            )
        base = _stored(db)
        at_kill = None
        if kind == "early":
            delay = rng.uniform(0.3, 2.8)
            started = time.monotonic()
            if _wait_for(lambda d=delay, s=started: time.monotonic() - s >= d, proc, 0.005):
                at_kill = _stored(db)
                _kill_group(proc)
        elif kind in ("mid", "commit"):
            target = base + int(rng.integers(1, 4))
            poll = 0.001 if kind == "commit" else 0.01
            delay = rng.uniform(0.0, 0.002) if kind == "commit" else rng.uniform(0.02, 0.15)
            if _wait_for(lambda t=target: _stored(db) >= t, proc, poll):
                time.sleep(delay)
                at_kill = _stored(db)
                _kill_group(proc)
        else:
            proc.wait(timeout=180)
        attempts.append((kind, proc.returncode, out.read_text(), err.read_text(), at_kill))

    kills = [a for a in attempts if a[1] == -signal.SIGKILL]
    assert len(kills) >= 5, [(a[0], a[1], a[4]) for a in attempts]
    assert all(a[4] < _TRIALS for a in kills), "a kill came after every trial was stored"
    assert any(a[4] > 0 for a in kills), "no kill landed after trials had been stored"
    final = attempts[-1]
    assert final[1] == 0, final[3]
    assert all(a[1] in (0, -signal.SIGKILL) for a in attempts), [(a[0], a[1], a[3][-300:]) for a in attempts]

    # No restart was refused by the lock, and a lock left by a killed run was cleared at least once.
    restarts = attempts[1:]
    assert not any("another stepmeter run" in a[3] for a in restarts)
    assert any("cleared a stale lock left by a run that no longer exists" in a[2] for a in restarts)
    assert (results / _NAME / "run.lock").read_text() == ""  # the final run released and cleared its lock

    pd.testing.assert_frame_equal(_frame(results / _NAME), expected)

    conn = sqlite3.connect(f"file:{db}?mode=ro", uri=True)
    try:
        assert conn.execute("PRAGMA integrity_check").fetchone()[0] == "ok"
        ids = [r[0] for r in conn.execute("SELECT trial_id FROM trials")]
        assert len(ids) == len(set(ids)) == _TRIALS
        per_trial = dict(conn.execute("SELECT trial_id, count(*) FROM metrics GROUP BY trial_id").fetchall())
        assert per_trial == dict.fromkeys(ids, _POINTS)  # every stored trial whole, no rows without a trial
        points = conn.execute("SELECT DISTINCT point FROM metrics ORDER BY point").fetchall()
        assert [p[0] for p in points] == list(range(_POINTS))
        assert conn.execute("SELECT count(*) FROM failures").fetchone()[0] == 0
    finally:
        conn.close()
