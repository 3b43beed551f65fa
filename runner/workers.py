"""The local worker processes: started as early as possible, so they import stepmeter while the parent prepares.

A worker spends its first seconds importing numba and gymnasium and setting numba up; the parent spends the
same seconds reading the experiment, planning and opening the store. Starting the workers first lets both
happen at once, and the workers then load each compiled loop from numba's disk cache on their first trial.
The pool is loky's reusable executor (the one joblib uses), so a pool started early is the pool that runs the
trials. This module imports nothing heavy itself.
"""

from __future__ import annotations

import contextlib
import os
import signal
import threading
from collections.abc import Iterator
from typing import Any

__all__ = [
    "IDLE_SECONDS",
    "default_jobs",
    "pool",
    "prepare_worker",
    "start_workers",
    "stop_workers",
    "workers_ignore_interrupts",
]

IDLE_SECONDS = 60
"""Workers left idle this long exit on their own (also when their parent was killed); a later run starts new ones."""

_started: dict[str, Any] = {}


def default_jobs() -> int:
    """All cores this process may use."""
    try:
        return len(os.sched_getaffinity(0))
    except AttributeError:
        return os.cpu_count() or 1


@contextlib.contextmanager
def workers_ignore_interrupts() -> Iterator[None]:
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


def prepare_worker() -> None:
    """In a worker: import the trial code and set numba up (its first cached function loads its registries)."""
    from runner.clock import wall_clock
    from runner.schedule import ignore_interrupts

    ignore_interrupts()
    wall_clock()


def pool(jobs: int) -> Any:
    """The reusable pool of `jobs` worker processes (started or resized now)."""
    from joblib.externals.loky import get_reusable_executor

    with workers_ignore_interrupts():
        executor = get_reusable_executor(max_workers=jobs, timeout=IDLE_SECONDS)
    _started["executor"] = executor
    return executor


def start_workers(jobs: int) -> None:
    """Start `jobs` worker processes now (none below 2) and have each prepare itself, without waiting."""
    if jobs < 2:
        return
    executor = pool(jobs)
    with workers_ignore_interrupts():  # processes start on the first submissions
        for _ in range(jobs):
            executor.submit(prepare_worker)


def stop_workers() -> None:
    """End the workers started by this process at once (after an error, or when the run needs none)."""
    executor = _started.pop("executor", None)
    if executor is not None:
        executor.shutdown(wait=False, kill_workers=True)
