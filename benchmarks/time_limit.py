"""How far past `--trial-timeout` trials stop, wherever the limit finds them, on both trial paths.

What: trials that would each run for hours are given a limit of LIMIT seconds and timed from the call to the
failed outcome: (a) a greedy evaluation with a step cap of a billion steps on a map whose goal is walled off, and
(b) training steps that each plan 2,000 Dyna-Q updates, on the compiled and on the gymnasium path. The script
prints, per case, the wall seconds and how far past the limit the trial stopped (best and worst of REPEATS).

Why: a limit that is only looked at between training chunks lets an evaluation run past it for ever; the
compiled loop now looks at the clock adaptively (more often when steps are slow) and inside the evaluation,
and the gymnasium path looks at every step.

Each path is warmed first, so compilation is left out. Other work on the machine delays the stop by however long
the process waits for a core; the figures say how busy the machine was. Run from the repository root with
`PYTHONPATH=. python benchmarks/time_limit.py`. It prints figures and asserts nothing.
"""

from __future__ import annotations

import os
import tempfile
import time
from pathlib import Path

from runner.config import load_experiment
from runner.plan import plan_trials
from runner.schedule import execute_trial

LIMIT = 1.0
REPEATS = 3

_TEXT = """\
experiment: walled
seeds: 1
real_steps: {steps}
evaluation: {{every: {every}, episodes: 1, step_cap: {cap}}}
environments:
  - label: walled hall
    grid:
      map: |
        S.#G
        ..#.
agents:
  - {{label: dyna, kind: dyna_q, params: {{planning_steps: {planning}}}}}
"""

CASES = {
    "evaluation with a step cap of 10^9": {"steps": 200, "every": 100, "cap": 10**9, "planning": 5},
    "training steps of 2,000 planning updates each": {"steps": 10**7, "every": 10**7, "cap": 5, "planning": 2000},
}


def spec_for(folder: Path, **values: int) -> dict:
    """The one trial spec of the walled-hall experiment with these values."""
    path = folder / "walled.yaml"
    path.write_text(_TEXT.format(**values), encoding="utf-8")
    return plan_trials(load_experiment(path))[0].spec


def main() -> None:
    """Print how far past the limit each case stops on each path."""
    print(f"trial time limit {LIMIT:g} s; best and worst of {REPEATS}; load average before: {os.getloadavg()[0]:.1f}")
    with tempfile.TemporaryDirectory() as scratch:
        folder = Path(scratch)
        for name, values in CASES.items():
            spec = spec_for(folder, **values)
            for path in ("compiled", "gymnasium"):
                small = {**spec, "real_steps": 4, "evaluation": {**spec["evaluation"], "every": 2, "step_cap": 5}}
                execute_trial("warm", small, path)
                overshoots = []
                for _ in range(REPEATS):
                    started = time.perf_counter()
                    outcome = execute_trial("limited", spec, path, LIMIT)
                    seconds = time.perf_counter() - started
                    if outcome.error_type != "TrialTimeout":
                        raise RuntimeError(f"{name} on the {path} path ended with {outcome.error_type or 'rows'}")
                    overshoots.append(seconds - LIMIT)
                print(
                    f"  {name}, {path} path: stopped {min(overshoots) * 1000:.0f} to "
                    f"{max(overshoots) * 1000:.0f} ms past the limit"
                )
    print(f"load average after: {os.getloadavg()[0]:.1f} (2 cores shared with other work)")


if __name__ == "__main__":
    main()
