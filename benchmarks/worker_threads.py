"""Wall time of a 200 x 200 Cholesky factorisation (numpy, through OpenBLAS) in each of `--jobs` worker processes
running at once: in stepmeter's worker pool (`runner.workers.pool`, BLAS and OpenMP capped at one thread each)
beside a plain process pool whose OpenBLAS starts a thread per core.

Why: every worker runs one trial and the pool has one worker per core, so uncapped libraries put cores x cores
threads on the machine, and OpenBLAS's threads spin while they wait. The figure that matters is wall time with
all workers busy at once; on a machine shared with other work it is noisy (the script prints how much CPU other
processes used meanwhile). Run from the repository root with `PYTHONPATH=. python benchmarks/worker_threads.py`.
"""

from __future__ import annotations

import argparse
import multiprocessing
import os
import time
from concurrent.futures import ProcessPoolExecutor

try:  # run as a script: benchmarks/ is on sys.path
    from planning_speed import command_line, cpu_model
    from speed import CpuSnapshot, other_cpu_use
except ImportError:  # imported as part of a package rather than run as a script
    from benchmarks.planning_speed import command_line, cpu_model
    from benchmarks.speed import CpuSnapshot, other_cpu_use

from runner.workers import THREAD_VARIABLES, default_jobs, pool, stop_workers, worker_thread_caps


def cholesky_ms(repeats: int) -> float:
    """Milliseconds of wall time per factorisation of a fixed 200 x 200 positive definite matrix."""
    import numpy as np

    rng = np.random.default_rng(0)
    a = rng.normal(size=(200, 200))
    a = a @ a.T + 200 * np.eye(200)
    np.linalg.cholesky(a)
    start = time.perf_counter()
    for _ in range(repeats):
        np.linalg.cholesky(a)
    return (time.perf_counter() - start) / repeats * 1e3


def _all_at_once(executor: ProcessPoolExecutor, jobs: int, repeats: int) -> list[float]:
    return [f.result() for f in [executor.submit(cholesky_ms, repeats) for _ in range(jobs)]]


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--jobs", type=int, default=default_jobs(), help="worker processes (default: all cores)")
    parser.add_argument("--repeats", type=int, default=200, help="factorisations per worker")
    args = parser.parse_args(argv)
    user_set = [name for name in THREAD_VARIABLES if name in os.environ]
    print(f"cpu: {cpu_model()}; {args.jobs} workers at once, {args.repeats} factorisations each")
    if user_set:
        print(f"note: set in this shell, so neither pool is capped by stepmeter: {', '.join(user_set)}")
    before = CpuSnapshot.take()
    capped = _all_at_once(pool(args.jobs), args.jobs, args.repeats)
    stop_workers()
    plain_context = multiprocessing.get_context("spawn")
    with ProcessPoolExecutor(max_workers=args.jobs, mp_context=plain_context) as plain:
        uncapped = _all_at_once(plain, args.jobs, args.repeats)
    caps = ", ".join(f"{k}={v}" for k, v in worker_thread_caps().items())
    print(f"stepmeter's workers ({caps}): " + ", ".join(f"{ms:.2f}" for ms in capped) + " ms")
    print("plain process pool (library defaults): " + ", ".join(f"{ms:.2f}" for ms in uncapped) + " ms")
    print(other_cpu_use(before))
    print(f"reproduce: {command_line(False, 'worker_threads.py')}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
