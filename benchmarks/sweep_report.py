"""Time `stepmeter report` on a sweep of 1,000 values of one parameter (target: under 30 s).

What: writes an experiment of one grid environment, a Q-learning baseline and Q-learning with 1,000 values of
alpha, 2 seeds (2,002 trials of 2,000 real steps, 11 evaluation points each), runs it with `stepmeter run
--no-report`, then runs `stepmeter report` in a subprocess and prints its wall and CPU seconds, its peak memory,
the rows of `comparisons.csv` and the size of the report folder. Why: before comparisons were limited to the
baseline and the nearest rivals, and figures to 12 variants, such a report took minutes and wrote a 46 MB
pairwise table. The machine's load average is printed beside the figures, since other work slows the wall time.
Run from the repository root: `PYTHONPATH=. python benchmarks/sweep_report.py [--jobs N] [--keep]`. It prints
figures and asserts nothing.
"""

from __future__ import annotations

import argparse
import os
import resource
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

_VALUES = 1000


def experiment_text() -> str:
    """The sweep: 1,001 agent variants on one small grid with a threshold, 2 seeds."""
    values = ", ".join(str(round(0.0005 + i * 0.000999, 7)) for i in range(_VALUES))
    return f"""\
experiment: sweep
seeds: 2
real_steps: 2000
evaluation: {{every: 200, episodes: 2}}
environments:
  - label: hall
    grid:
      map: |
        S...
        .#.G
    step_limit: 40
    threshold: 0.5
agents:
  - {{label: q, kind: q_learning}}
  - label: fast
    kind: q_learning
    params: {{alpha: [{values}]}}
baseline: q
"""


def _stepmeter(*args: str) -> tuple[float, float, int]:
    """Run `python -m runner ARGS`; return wall seconds, CPU seconds and peak resident KiB of the child."""
    before = resource.getrusage(resource.RUSAGE_CHILDREN)
    start = time.perf_counter()
    subprocess.run([sys.executable, "-m", "runner", *args], check=True, stdout=subprocess.DEVNULL)
    wall = time.perf_counter() - start
    after = resource.getrusage(resource.RUSAGE_CHILDREN)
    cpu = (after.ru_utime - before.ru_utime) + (after.ru_stime - before.ru_stime)
    return wall, cpu, after.ru_maxrss


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--jobs", type=int, default=os.cpu_count() or 1)
    parser.add_argument("--keep", action="store_true", help="keep the temporary folder")
    args = parser.parse_args()
    work = Path(tempfile.mkdtemp(prefix="stepmeter-sweep-"))
    try:
        path = work / "sweep.yaml"
        path.write_text(experiment_text(), encoding="utf-8")
        results = work / "results"
        run_wall, _, _ = _stepmeter(
            "run", str(path), "--results", str(results), "--no-report", "--jobs", str(args.jobs)
        )
        print(f"run (2,002 trials, --jobs {args.jobs}): {run_wall:.1f} s wall")
        load_before = os.getloadavg()[0]
        wall, cpu, peak = _stepmeter("report", str(results / "sweep"))
        report = results / "sweep" / "report"
        pairs = sum(1 for _ in (report / "comparisons.csv").open(encoding="utf-8")) - 1
        size = sum(f.stat().st_size for f in report.iterdir())
        print(
            f"report: {wall:.1f} s wall, {cpu:.1f} s CPU, peak {peak / 1024:.0f} MiB; comparisons.csv {pairs} rows; "
            f"report folder {size / 1e6:.1f} MB; load average {load_before:.1f} before, "
            f"{os.getloadavg()[0]:.1f} after on {os.cpu_count()} cores"
        )
    finally:
        if args.keep:
            print(f"kept {work}")
        else:
            shutil.rmtree(work)


if __name__ == "__main__":
    main()
