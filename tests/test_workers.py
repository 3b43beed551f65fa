"""Local worker processes: the same rows as one process, and a run that stops (a store fault, Ctrl-C) ends its
workers at once instead of leaving them running."""

import json
import os
import signal
import sqlite3
import subprocess
import sys
import time
from pathlib import Path

import pandas as pd
import psutil
import pytest
from experiment_texts import hall_experiment

import runner
import runner.run as run_module
from runner.errors import StoreError
from runner.metrics import TIMING_COLUMNS
from runner.provenance import WORKER_THREADS, worker_threads
from runner.run import RunOptions, run_experiment
from runner.workers import THREAD_VARIABLES, worker_thread_caps

_REPO = Path(__file__).resolve().parents[1]


def _write(folder: Path, seeds: int = 3, steps: int = 400, every: int = 100) -> Path:
    folder.mkdir(parents=True, exist_ok=True)
    path = folder / "crew.yaml"
    path.write_text(hall_experiment("crew", seeds, steps, every), encoding="utf-8")
    return path


def _workers(root: psutil.Process) -> list[psutil.Process]:
    """Running worker processes under `root`: the children of its fork server (which `root` started)."""
    workers = []
    for child in root.children(recursive=True):
        try:
            forked = "forkserver" in " ".join(child.cmdline()) and child.ppid() != root.pid
            if forked and child.status() != psutil.STATUS_ZOMBIE:
                workers.append(child)
        except psutil.NoSuchProcess:
            continue
    return workers


def _workers_alive() -> list[psutil.Process]:
    return _workers(psutil.Process())


def _wait_gone(seconds: float = 10.0) -> list[psutil.Process]:
    deadline = time.monotonic() + seconds
    while (alive := _workers_alive()) and time.monotonic() < deadline:
        time.sleep(0.1)
    return alive


def test_two_workers_store_the_same_rows_as_one_process(tmp_path):
    one = run_experiment(_write(tmp_path / "a"), results_root=tmp_path / "a" / "results", options=RunOptions(jobs=1))
    two = run_experiment(_write(tmp_path / "b"), results_root=tmp_path / "b" / "results", options=RunOptions(jobs=2))
    assert (one.ran, two.ran) == (6, 6)
    assert len(_workers_alive()) == 2  # the pool stays up for the next run in this process
    frames = [runner.load_results(s.folder).drop(columns=list(TIMING_COLUMNS)) for s in (one, two)]
    pd.testing.assert_frame_equal(*frames)
    recorded = []
    for summary in (one, two):
        with sqlite3.connect(Path(summary.folder) / "experiment.sqlite") as conn:
            recorded.append(json.loads(conn.execute("SELECT versions FROM runs").fetchone()[0]))
    assert WORKER_THREADS not in recorded[0]  # one process: no workers to cap
    assert recorded[1][WORKER_THREADS] == worker_threads(worker_thread_caps())[WORKER_THREADS]


_THREADS_IN_A_WORKER = """
import json, os, threadpoolctl
from runner.workers import THREAD_VARIABLES, pool, stop_workers

executor = pool(2)
seen = executor.submit(threadpoolctl.threadpool_info).result()
environ = {name: executor.submit(os.getenv, name).result() for name in THREAD_VARIABLES}
stop_workers()
parent = {name: os.getenv(name) for name in THREAD_VARIABLES}
print(json.dumps({"libraries": seen, "worker": environ, "parent": parent}))
"""


def test_workers_run_with_one_blas_thread_unless_the_user_set_another():
    """With no thread variable set, a worker's OpenBLAS (as loaded by numpy, read back with threadpoolctl) runs one
    thread and every variable reads 1; a variable the user set reaches the worker unchanged; the run's own
    process keeps its environment."""
    env = {k: v for k, v in os.environ.items() if k not in THREAD_VARIABLES} | {"MKL_NUM_THREADS": "3"}
    done = subprocess.run(
        [sys.executable, "-c", _THREADS_IN_A_WORKER], env=env, cwd=_REPO, capture_output=True, text=True, timeout=120
    )
    assert done.returncode == 0, done.stderr
    report = json.loads(done.stdout.splitlines()[-1])
    openblas = [lib for lib in report["libraries"] if lib["internal_api"] == "openblas"]
    assert openblas and all(lib["num_threads"] == 1 for lib in openblas), report["libraries"]
    assert report["worker"] == {name: "3" if name == "MKL_NUM_THREADS" else "1" for name in THREAD_VARIABLES}
    assert report["parent"] == {name: "3" if name == "MKL_NUM_THREADS" else None for name in THREAD_VARIABLES}


def test_a_store_fault_while_workers_run_ends_them(tmp_path, monkeypatch):
    real_write = run_module.Store.write_trial
    writes = []

    def full_disk_on_the_second_write(self, *args, **kwargs):
        writes.append(1)
        if len(writes) == 2:
            raise sqlite3.OperationalError("database or disk is full")
        return real_write(self, *args, **kwargs)

    monkeypatch.setattr(run_module.Store, "write_trial", full_disk_on_the_second_write)
    path = _write(tmp_path, seeds=6, steps=4000, every=1000)
    with pytest.raises(StoreError, match="no space left on the disk"):
        run_experiment(path, results_root=tmp_path / "results", options=RunOptions(jobs=2))
    assert _wait_gone() == []
    with sqlite3.connect(tmp_path / "results" / "crew" / "experiment.sqlite") as conn:
        assert conn.execute("SELECT count(*) FROM trials").fetchone()[0] == 1
    conn.close()


@pytest.mark.slow
def _ctrl_c_as_a_terminal_gives() -> None:
    """Give the run Ctrl-C's default disposition: a shell starts background jobs with it ignored, and a
    process that starts with Ctrl-C ignored never sees it (so the test would depend on how it was launched)."""
    signal.signal(signal.SIGINT, signal.SIG_DFL)


def test_ctrl_c_on_two_workers_keeps_finished_trials_and_leaves_no_worker(tmp_path):
    path = _write(tmp_path, seeds=40, steps=20000, every=1000)
    env = dict(os.environ)
    env["PYTHONPATH"] = os.pathsep.join(p for p in (str(_REPO), env.get("PYTHONPATH", "")) if p)
    proc = subprocess.Popen(
        [sys.executable, "-m", "runner", "run", str(path), "--jobs", "2", "--no-report", "--path", "gymnasium",
         "--results", str(tmp_path / "results")],
        env=env, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, preexec_fn=_ctrl_c_as_a_terminal_gives,
    )  # fmt: skip
    db = tmp_path / "results" / "crew" / "experiment.sqlite"
    deadline = time.monotonic() + 120
    stored = 0
    while stored < 2 and time.monotonic() < deadline and proc.poll() is None:
        time.sleep(0.2)
        try:
            with sqlite3.connect(f"file:{db}?mode=ro", uri=True, timeout=0.5) as conn:
                stored = conn.execute("SELECT count(*) FROM trials").fetchone()[0]
            conn.close()
        except sqlite3.Error:
            stored = 0
    workers = _workers(psutil.Process(proc.pid))
    assert stored >= 2 and len(workers) == 2
    proc.send_signal(signal.SIGINT)
    _, err = proc.communicate(timeout=60)
    assert proc.returncode == 130, err
    assert "finished in this run are stored" in err and "Traceback" not in err
    time.sleep(1)
    assert not [w for w in workers if w.is_running() and w.status() != psutil.STATUS_ZOMBIE]
    with sqlite3.connect(db) as conn:
        assert conn.execute("SELECT count(*) FROM trials").fetchone()[0] >= stored
        assert conn.execute("PRAGMA integrity_check").fetchone()[0] == "ok"
    conn.close()
