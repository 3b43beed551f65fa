"""The dask.distributed backend: the same rows as a local run, a killed worker's trials run again elsewhere, and
an unreachable scheduler is one error line."""

import io
import os
import signal
import sqlite3
import subprocess
import sys
import threading
import time
from pathlib import Path

import distributed
import pandas as pd
import pytest
from experiment_texts import room_experiment

import runner
from runner.analysis.frames import load_failures, missing_trials
from runner.metrics import TIMING_COLUMNS
from runner.rerun import rerun_trials
from runner.run import RunOptions, run_experiment

pytestmark = pytest.mark.slow

_REPO = Path(__file__).resolve().parents[1]

_SMALL = """\
experiment: spread
seeds: 3
real_steps: 600
evaluation: {every: 200, episodes: 3}
environments:
  - label: hall
    grid:
      map: |
        S.~.
        .#.G
      slip: 0.2
    step_limit: 40
  - label: lake
    gym: FrozenLake-v1
agents:
  - {label: q, kind: q_learning}
  - {label: dyna, kind: dyna_q, params: {planning_steps: 5}}
  - {label: ce, kind: certainty_equivalence}
baseline: q
"""

# 4 agent variants x 8 seeds = 32 trials of about 0.05-0.3 s each on the gymnasium path: several seconds on 2 workers.
_LONG = room_experiment("longer", seeds=8, steps=6000, every=1000)
_LONG_TRIALS = 32
_UNREACHABLE = "tcp://127.0.0.1:1"


def _env() -> dict[str, str]:
    env = dict(os.environ)
    env["PYTHONPATH"] = os.pathsep.join(p for p in (str(_REPO), env.get("PYTHONPATH", "")) if p)
    env["MPLBACKEND"] = "Agg"
    return env


@pytest.fixture(scope="module")
def cluster():
    with distributed.LocalCluster(
        n_workers=2, threads_per_worker=1, processes=True, dashboard_address=None
    ) as local_cluster:
        yield local_cluster


class _Background:
    """`stepmeter run --cluster tcp://127.0.0.1:1` (a refused connection), run once for the module's tests."""

    def __init__(self, folder: Path) -> None:
        (folder / "spread.yaml").write_text(_SMALL, encoding="utf-8")
        self.folder = folder
        started = time.monotonic()
        done = subprocess.run(
            [sys.executable, "-m", "runner", "run", "spread.yaml", "--results", "results", "--jobs", "1",
             "--no-report", "--cluster", _UNREACHABLE],
            cwd=folder, env=_env(), capture_output=True, text=True, timeout=180,
        )  # fmt: skip
        self.result = (done.returncode, done.stdout, done.stderr, time.monotonic() - started)

    def finish(self) -> tuple[int, str, str, float]:
        """Return code, stdout, stderr and seconds from start to exit."""
        return self.result


@pytest.fixture(scope="module")
def unreachable(tmp_path_factory):
    background = _Background(tmp_path_factory.mktemp("unreachable"))
    return background


def _frame(folder: Path) -> pd.DataFrame:
    return runner.load_results(folder).drop(columns=list(TIMING_COLUMNS))


def _stored(db: Path) -> int:
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


@pytest.mark.usefixtures("unreachable")
def test_a_cluster_run_stores_the_same_rows_as_a_local_run(tmp_path, cluster):
    experiment = tmp_path / "spread.yaml"
    experiment.write_text(_SMALL, encoding="utf-8")
    local = run_experiment(experiment, results_root=tmp_path / "local", options=RunOptions(jobs=1))
    remote = run_experiment(
        experiment, results_root=tmp_path / "remote", options=RunOptions(cluster=cluster.scheduler_address)
    )
    assert (local.ran, local.failed) == (18, [])
    assert (remote.ran, remote.failed) == (18, [])
    pd.testing.assert_frame_equal(_frame(tmp_path / "remote" / "spread"), _frame(tmp_path / "local" / "spread"))
    paths = []
    for root in ("local", "remote"):
        with sqlite3.connect(tmp_path / root / "spread" / "experiment.sqlite") as conn:
            paths.append(conn.execute("SELECT trial_id, trial_path FROM trials ORDER BY trial_id").fetchall())
        conn.close()
    assert paths[0] == paths[1]


def test_a_killed_worker_costs_no_trial_and_stores_none_twice(tmp_path, cluster):
    experiment = tmp_path / "longer.yaml"
    experiment.write_text(_LONG, encoding="utf-8")
    folder = tmp_path / "results" / "longer"
    db = folder / "experiment.sqlite"
    client = distributed.Client(cluster.scheduler_address)
    try:
        before = client.run(os.getpid)
        killed: dict = {}

        def kill_a_busy_worker() -> None:
            deadline = time.monotonic() + 120
            while time.monotonic() < deadline:
                if _stored(db) >= 4:
                    busy = [address for address, keys in client.processing().items() if keys]
                    if busy:
                        killed.update(address=busy[0], pid=before[busy[0]], stored=_stored(db),
                                      tasks=list(client.processing()[busy[0]]))  # fmt: skip
                        os.kill(before[busy[0]], signal.SIGKILL)
                        return
                time.sleep(0.005)

        killer = threading.Thread(target=kill_a_busy_worker)
        killer.start()
        out = io.StringIO()
        summary = run_experiment(
            experiment,
            results_root=tmp_path / "results",
            options=RunOptions(cluster=cluster.scheduler_address, trial_path="gymnasium"),
            stream=out,
        )
        killer.join(timeout=30)
        assert killed, "no worker was killed"
        assert killed["stored"] < _LONG_TRIALS and killed["tasks"], killed  # it died holding work
        assert not summary.interrupted
        assert summary.failed == []
        assert (summary.planned, summary.already_stored, summary.ran) == (_LONG_TRIALS, 0, _LONG_TRIALS)

        with sqlite3.connect(db) as conn:
            ids = [r[0] for r in conn.execute("SELECT trial_id FROM trials")]
            declared = {r[0] for r in conn.execute("SELECT trial_id FROM declared")}
            per_trial = set(conn.execute("SELECT count(*) FROM metrics GROUP BY trial_id").fetchall())
            outcome = conn.execute("SELECT outcome FROM runs").fetchall()
        conn.close()
        assert len(ids) == len(set(ids)) == _LONG_TRIALS and set(ids) == declared
        assert per_trial == {(7,)}
        assert outcome == [("complete",)]
        assert load_failures(folder).empty and missing_trials(folder).empty
        # A few of the trials come out bit for bit when re-run here.
        checks = rerun_trials(folder, sorted(ids)[:: _LONG_TRIALS // 3])
        assert all(c.matched and c.trial_path == "gymnasium" for c in checks)

        # The nanny started a fresh worker in place of the killed one.
        client.wait_for_workers(2, timeout=60)
        after = client.run(os.getpid)
        assert killed["pid"] not in after.values() and len(after) == 2
    finally:
        client.close()


def test_an_unreachable_scheduler_is_one_error_line_and_exit_2(unreachable):
    code, out, err, seconds = unreachable.finish()
    assert code == 2, err
    lines = err.splitlines()
    assert len(lines) == 1, err
    assert lines[0].startswith(f"stepmeter: error: cannot reach a dask scheduler at '{_UNREACHABLE}'")
    assert "Traceback" not in err + out
    # A refused connection is reported at once; the bound leaves room for start-up on a busy machine.
    assert seconds < 60, (seconds, err)


def test_an_unreachable_scheduler_leaves_no_run_recorded_as_complete(unreachable):
    code, *_ = unreachable.finish()
    assert code == 2
    db = unreachable.folder / "results" / "spread" / "experiment.sqlite"
    if db.exists():
        with sqlite3.connect(db) as conn:
            outcomes = [r[0] for r in conn.execute("SELECT outcome FROM runs")]
            stored = conn.execute("SELECT count(*) FROM trials").fetchone()[0]
        conn.close()
        assert stored == 0
        assert "complete" not in outcomes, f"a run that never reached its cluster is recorded as {outcomes}"


def test_a_scheduler_with_no_workers_is_one_line_within_the_timeout_and_releases_the_lock(tmp_path):
    (tmp_path / "spread.yaml").write_text(_SMALL, encoding="utf-8")
    with distributed.LocalCluster(n_workers=0, dashboard_address=":0") as empty:
        started = time.monotonic()
        done = subprocess.run(
            [sys.executable, "-m", "runner", "run", "spread.yaml", "--results", "results", "--jobs", "1",
             "--no-report", "--cluster", empty.scheduler_address, "--cluster-timeout", "2"],
            cwd=tmp_path, env=_env(), capture_output=True, text=True, timeout=120,
        )  # fmt: skip
        seconds = time.monotonic() - started
    lines = [line for line in done.stderr.splitlines() if not line.startswith("[")]
    assert done.returncode == 2, done.stderr
    assert len(lines) == 1 and "has no workers (waited 2 s)" in lines[0], done.stderr
    assert "Traceback" not in done.stderr
    assert seconds < 60, seconds
    assert (tmp_path / "results" / "spread" / "run.lock").read_text(encoding="utf-8") == ""
