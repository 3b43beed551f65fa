"""The local worker processes: started as early as possible, so they are ready when the parent has planned.

A worker spends its first seconds importing numba and gymnasium and setting numba up; the parent spends the
same seconds reading the experiment, planning and opening the store. `stepmeter run` therefore starts the pool
first. Workers are forked from a fork server (`multiprocessing`'s "forkserver" start method) that has imported
the trial code once: each worker starts with the imports done, instead of each importing everything again,
and no worker inherits the parent's open database or threads. Each worker then sets numba up
(`prepare_worker`) and loads each compiled loop from numba's disk cache on its first trial. A worker watches the
run's process and exits within half a second of it, however the run ends (a worker's own task queue would not
tell it). This module imports nothing heavy itself.

Each worker runs one trial at a time, and the pool has as many workers as cores, so a worker whose BLAS library
(OpenBLAS, MKL, BLIS, or OpenMP under them) started a thread per core would put cores x cores threads on the
machine; OpenBLAS's threads spin while they wait, which made a 200 x 200 Cholesky factorisation over 100 times
slower on a busy two-core machine. The fork server therefore starts with each of those libraries capped at one
thread (`worker_thread_caps`), unless the user set the variable: the libraries read it when numpy is imported,
in the fork server, before any worker exists. Dask's nanny caps OpenMP, MKL and OpenBLAS the same way in the
cluster workers it starts (`distributed.nanny.pre-spawn-environ`).
"""

from __future__ import annotations

import contextlib
import os
import signal
import threading
import time
from collections.abc import Iterator, Mapping
from typing import Any

__all__ = [
    "THREAD_VARIABLES",
    "default_jobs",
    "pool",
    "prepare_worker",
    "start_workers",
    "stop_workers",
    "worker_thread_caps",
    "workers_ignore_interrupts",
]

THREAD_VARIABLES = (
    "OMP_NUM_THREADS",
    "OPENBLAS_NUM_THREADS",
    "MKL_NUM_THREADS",
    "BLIS_NUM_THREADS",
    "VECLIB_MAXIMUM_THREADS",
)
"""The thread counts of the BLAS and OpenMP libraries numpy, scipy and jaxlib may load; capped at 1 in workers."""


_started: dict[str, Any] = {}
_WATCH_SECONDS = 0.5
"""How often a worker checks that the run's process still exists."""


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


def _exit_with(parent: int) -> None:
    """Watch the run's process; end this worker as soon as it is gone (killed, say), whatever the worker does."""
    while True:
        time.sleep(_WATCH_SECONDS)
        try:
            os.kill(parent, 0)
        except ProcessLookupError:
            os._exit(1)
        except PermissionError:
            continue


def prepare_worker(parent: int) -> None:
    """In a worker: ignore Ctrl-C, exit with the run's process `parent`, and set numba up (its first cached
    function loads numba's registries), so the first trial only loads its own compiled loop."""
    from runner.clock import wall_clock
    from runner.schedule import ignore_interrupts

    ignore_interrupts()
    threading.Thread(target=_exit_with, args=(parent,), daemon=True, name="stepmeter-parent-watch").start()
    wall_clock()


def worker_thread_caps(environ: Mapping[str, str] | None = None) -> dict[str, str]:
    """The thread variables workers run with: each of `THREAD_VARIABLES` as the user set it in `environ` (this
    process's environment by default), else 1."""
    environ = os.environ if environ is None else environ
    return {name: environ.get(name, "1") for name in THREAD_VARIABLES}


@contextlib.contextmanager
def _capped_threads() -> Iterator[None]:
    """This process's environment with the worker thread caps, while processes started now inherit it (the fork
    server, and through it every worker); restored after, so this process keeps its own threads."""
    added = {name: value for name, value in worker_thread_caps().items() if name not in os.environ}
    os.environ.update(added)
    try:
        yield
    finally:
        for name in added:
            os.environ.pop(name, None)


def pool(jobs: int) -> Any:
    """A pool of at least `jobs` worker processes, started now if this process has none that large."""
    if _started.get("jobs", 0) >= jobs:
        return _started["executor"]
    stop_workers()
    import multiprocessing
    from concurrent.futures import ProcessPoolExecutor

    context = multiprocessing.get_context("forkserver")
    context.set_forkserver_preload(["runner.schedule"])
    before = set(multiprocessing.active_children())
    with workers_ignore_interrupts(), _capped_threads():
        executor = ProcessPoolExecutor(
            max_workers=jobs, mp_context=context, initializer=prepare_worker, initargs=(os.getpid(),)
        )
        for _ in range(jobs):  # processes start on submission; start them all now
            executor.submit(os.getpid)
    _started.update(executor=executor, jobs=jobs, processes=set(multiprocessing.active_children()) - before)
    return executor


def start_workers(jobs: int) -> None:
    """Start `jobs` worker processes now (none below 2), without waiting for them."""
    if jobs >= 2:
        pool(jobs)


def stop_workers() -> None:
    """End the workers started by this process at once (after an error, or when the run needs none)."""
    executor = _started.pop("executor", None)
    processes = _started.pop("processes", set())
    _started.pop("jobs", None)
    if executor is None:
        return
    executor.shutdown(wait=False, cancel_futures=True)
    for process in processes:
        process.terminate()
    for process in processes:
        process.join(timeout=5)
