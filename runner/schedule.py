"""Run trials in parallel with joblib; only the parent process writes to the store.

Compiled kernels are warmed in the parent first, which fills numba's on-disk cache, so worker processes
load them instead of compiling them again.
"""

from __future__ import annotations

import contextlib
import json
import signal
import threading
import traceback
from collections.abc import Callable, Iterator
from dataclasses import dataclass
from typing import Any

import numpy as np
from joblib import Parallel, delayed

from runner.plan import PlannedTrial
from runner.trial import resolve_path, run_trial

NAN_ALLOWED = (
    "train_return",
    "model_tv_error",
    "model_reward_error",
    "model_error_1",
    "model_error_5",
    "model_error_20",
)
"""Metric columns where NaN means "not applicable yet" rather than a broken trial."""

__all__ = ["NAN_ALLOWED", "TrialOutcome", "execute_trial", "run_parallel", "warm_up"]


@dataclass
class TrialOutcome:
    """What a worker sends back: rows on success, or the error of a failed trial."""

    trial_id: str
    rows: dict[str, np.ndarray] | None
    trial_path: str
    error_type: str = ""
    message: str = ""
    traceback: str = ""


def _ignore_interrupts() -> None:
    """In a worker process, leave Ctrl-C to the parent, which stops the pool and keeps finished trials.

    Cluster workers run tasks in threads, where signals cannot be set (nor arrive); they are left alone.
    """
    if threading.current_thread() is not threading.main_thread():
        return
    if signal.getsignal(signal.SIGINT) is not signal.SIG_IGN:
        signal.signal(signal.SIGINT, signal.SIG_IGN)


@contextlib.contextmanager
def _workers_ignore_interrupts() -> Iterator[None]:
    """Start worker processes with Ctrl-C ignored (an ignored signal survives their start), so a Ctrl-C while
    they import reaches only this process, which stops the pool and keeps the finished trials."""
    if threading.current_thread() is not threading.main_thread():
        yield
        return
    previous = signal.signal(signal.SIGINT, signal.SIG_IGN)
    try:
        yield
    finally:
        signal.signal(signal.SIGINT, previous)


def execute_trial(
    trial_id: str, spec: dict[str, Any], path: str = "auto", time_limit: float = 0.0, in_worker: bool = False
) -> TrialOutcome:
    """Run one trial; any exception, time-out or non-finite metric becomes a failed outcome."""
    if in_worker:
        _ignore_interrupts()
    try:
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
    cluster_timeout: float = 10.0,
) -> None:
    """Run every trial on `jobs` local processes (1: in this process) or on a dask cluster, calling on_outcome
    in this process as each finishes, so only this process writes."""
    by_id = {t.trial_id: t for t in trials}
    tasks = (delayed(execute_trial)(t.trial_id, t.spec, path, time_limit, in_worker=True) for t in trials)
    if cluster:
        from runner.cluster import run_on_cluster

        for outcome in run_on_cluster(cluster, tasks, cluster_timeout):
            on_outcome(by_id[outcome.trial_id], outcome)
        return
    outcomes: Iterator[TrialOutcome]
    if jobs == 1:
        outcomes = (execute_trial(t.trial_id, t.spec, path, time_limit) for t in trials)
    else:
        with _workers_ignore_interrupts():
            outcomes = Parallel(n_jobs=jobs, return_as="generator_unordered")(tasks)
    for outcome in outcomes:
        on_outcome(by_id[outcome.trial_id], outcome)
