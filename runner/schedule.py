"""Run trials in parallel on local worker processes (or a dask cluster); only the parent writes to the store.

On one process, compiled kernels are warmed in the parent first (`warm_up`). On several, the workers
(`runner.workers`) load the kernels themselves, from numba's disk cache, while the parent prepares the run;
a few trials more than there are workers stay queued, so no worker waits for the parent.
"""

from __future__ import annotations

import contextlib
import json
import signal
import threading
import traceback
from collections.abc import Callable, Iterator
from concurrent.futures import FIRST_COMPLETED, Future, wait
from dataclasses import dataclass
from typing import Any

import numpy as np
from joblib import delayed

from runner.cluster import DEFAULT_TIMEOUT
from runner.errors import TrialTimeout
from runner.metrics import HONESTY_COLUMNS
from runner.plan import PlannedTrial
from runner.trial import resolve_path, run_trial
from runner.workers import pool, stop_workers

NAN_ALLOWED = (
    "train_return",
    "model_tv_error",
    "model_reward_error",
    "model_error_1",
    "model_error_5",
    "model_error_20",
    *HONESTY_COLUMNS,
)
"""Metric columns where NaN means "not applicable yet" rather than a broken trial."""

__all__ = ["NAN_ALLOWED", "TrialOutcome", "execute_trial", "ignore_interrupts", "run_parallel", "warm_up"]

_QUEUED_PER_WORKER = 3
"""Trials handed to the pool ahead per worker: enough that none idles, few enough to stop quickly."""

ALARM_GRACE = 1.0
"""Seconds past the trial's limit before the alarm rings: the loops' own checks normally stop it earlier."""


@dataclass
class TrialOutcome:
    """What a worker sends back: rows on success, or the error of a failed trial."""

    trial_id: str
    rows: dict[str, np.ndarray] | None
    trial_path: str
    error_type: str = ""
    message: str = ""
    traceback: str = ""


def ignore_interrupts() -> None:
    """In a worker process, leave Ctrl-C to the parent, which stops the pool and keeps finished trials.

    Cluster workers run tasks in threads, where signals cannot be set (nor arrive); they are left alone.
    """
    if threading.current_thread() is not threading.main_thread():
        return
    if signal.getsignal(signal.SIGINT) is not signal.SIG_IGN:
        signal.signal(signal.SIGINT, signal.SIG_IGN)


@contextlib.contextmanager
def _alarm(time_limit: float) -> Iterator[None]:
    """Raise TrialTimeout in Python code still running `ALARM_GRACE` seconds past the limit.

    The trial loops check the clock between steps; a single step that itself runs for long (a user's own agent
    training a network inside `observe`) is stopped by this alarm instead, at its next Python instruction.
    Signals reach only a process's main thread, so cluster workers (threads) rely on the loops' checks alone.
    """
    if time_limit <= 0 or threading.current_thread() is not threading.main_thread():
        yield
        return

    def ring(signum: int, frame: Any) -> None:
        raise TrialTimeout(f"the trial ran past its limit of {time_limit:g} wall seconds (inside one step)")

    previous = signal.signal(signal.SIGALRM, ring)
    signal.setitimer(signal.ITIMER_REAL, time_limit + ALARM_GRACE)
    try:
        yield
    finally:
        signal.setitimer(signal.ITIMER_REAL, 0.0)
        signal.signal(signal.SIGALRM, previous)


def execute_trial(
    trial_id: str, spec: dict[str, Any], path: str = "auto", time_limit: float = 0.0, in_worker: bool = False
) -> TrialOutcome:
    """Run one trial; any exception, time-out or non-finite metric becomes a failed outcome."""
    if in_worker:
        ignore_interrupts()
    try:
        with _alarm(time_limit):
            result = run_trial(spec, path, time_limit)
        for name, column in result.rows.items():
            if name not in NAN_ALLOWED and not np.all(np.isfinite(column)):
                raise FloatingPointError(f"metric {name!r} has a non-finite value")
        return TrialOutcome(trial_id, result.rows, result.trial_path)
    except Exception as err:
        return TrialOutcome(trial_id, None, "", type(err).__name__, str(err), traceback.format_exc())


def warm_up(runs: list[tuple[dict[str, Any], str]]) -> None:
    """Compile (or load from numba's disk cache) what the given (trial spec, path) pairs will run.

    One four-step trial per distinct agent kind, path and environment, run in the parent before dispatch, so
    worker processes load the cached machine code instead of compiling it again (the environment matters: it
    fixes the argument types the compiled loop is built for).
    """
    done = set()
    for spec, path in runs:
        chosen = resolve_path(spec, path)
        key = (spec["agent"]["kind"], chosen, json.dumps(spec["env"], sort_keys=True))
        if key in done:
            continue
        done.add(key)
        evaluation = {**spec["evaluation"], "every": 2, "episodes": 1, "step_cap": 3}
        run_trial({**spec, "real_steps": 4, "evaluation": evaluation}, chosen)


def run_parallel(
    trials: list[PlannedTrial],
    jobs: int,
    on_outcome: Callable[[PlannedTrial, TrialOutcome], None],
    path: str = "auto",
    time_limit: float = 0.0,
    cluster: str | None = None,
    cluster_timeout: float = DEFAULT_TIMEOUT,
) -> None:
    """Run every trial on `jobs` local processes (1: in this process) or on a dask cluster, calling on_outcome
    in this process as each finishes, so only this process writes."""
    by_id = {t.trial_id: t for t in trials}
    if cluster:
        from runner.cluster import run_on_cluster

        tasks = (delayed(execute_trial)(t.trial_id, t.spec, path, time_limit, in_worker=True) for t in trials)
        for outcome in run_on_cluster(cluster, tasks, cluster_timeout):
            on_outcome(by_id[outcome.trial_id], outcome)
        return
    if jobs == 1:
        for t in trials:
            on_outcome(t, execute_trial(t.trial_id, t.spec, path, time_limit))
        return
    with contextlib.closing(_on_workers(trials, jobs, path, time_limit)) as outcomes:
        for outcome in outcomes:
            on_outcome(by_id[outcome.trial_id], outcome)


def _on_workers(trials: list[PlannedTrial], jobs: int, path: str, time_limit: float) -> Iterator[TrialOutcome]:
    """Outcomes of `trials` run on `jobs` worker processes, in the order they finish.

    Whatever stops the caller (Ctrl-C, a store fault) ends the workers at once, so no trial keeps running.
    """
    executor = pool(jobs)
    waiting = iter(trials)
    running: set[Future] = set()

    def hand_out() -> None:
        # No window with Ctrl-C ignored here: a Ctrl-C must never be lost between two trials. A worker that died
        # is replaced by the fork server, which ignores Ctrl-C since `pool` started it, not by this process.
        for t in waiting:
            running.add(executor.submit(execute_trial, t.trial_id, t.spec, path, time_limit, in_worker=True))
            if len(running) >= jobs * _QUEUED_PER_WORKER:
                break

    finished = False
    try:
        hand_out()
        while running:
            done, _ = wait(running, return_when=FIRST_COMPLETED)
            for future in done:
                running.discard(future)
                yield future.result()
            hand_out()
        finished = True
    finally:
        if not finished:
            stop_workers()
