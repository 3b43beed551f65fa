"""Whole trials of a tabular kind on compiled dynamics seen through bins, against the step-by-step path.

What: real steps per CPU-second of `run_trial` for Q-learning (and Dyna-Q with 5 planning steps) on CartPole-v1
with 6 x 6 x 12 x 12 bins and on the overhead crane with the bins of `configs/crane.yaml`, on the compiled path
(agent kernels x environment kernels in one compiled loop, `runner.compiled_dynamics_trial`) and on the gymnasium
path (the same agent kernels called once per step from Python, gymnasium's `env.step` and the bins wrapper), with
evaluation only at the start and the end (one greedy episode), and their ratio.

Why: the compiled classic-control dynamics pay off only when whole trials of agents run on them in compiled code;
this prints what a trial, not a bare loop, gains (`dynamics_speed.py` measures the bare loop).

Each figure is the best of 3 repetitions after a warm-up run (compile time never counted), timed by this process's
CPU time, pinned to one core; the script prints how much CPU other processes used meanwhile. It asserts nothing.
Run from the repository root with `PYTHONPATH=. python benchmarks/binned_trial_speed.py` (`--quick`: 10x smaller).
"""

from __future__ import annotations

import argparse
import time

try:  # run as a script: benchmarks/ is on sys.path
    from planning_speed import REPEATS, command_line, cpu_model, pin_to_one_core
    from speed import CpuSnapshot, other_cpu_use
except ImportError:  # imported as part of a package rather than run as a script
    from benchmarks.planning_speed import REPEATS, command_line, cpu_model, pin_to_one_core
    from benchmarks.speed import CpuSnapshot, other_cpu_use

from runner.config import load_experiment
from runner.envs.bins import resolve_bins
from runner.envs.sources import build_env
from runner.trial import run_trial
from runner.trial_spec import TrialSpec

CARTPOLE_BINS = {"counts": [6, 6, 12, 12], "low": [-2.4, -3.0, -0.21, -3.5], "high": [2.4, 3.0, 0.21, 3.5]}


def _cartpole() -> dict:
    env = {"source": "gym", "id": "CartPole-v1", "options": {}, "step_limit": None}
    built = build_env(env)
    env["bins"] = resolve_bins(CARTPOLE_BINS, built.observation_space)
    built.close()
    return env


def _crane() -> dict:
    return load_experiment("configs/crane.yaml").environments[0].spec


def steps_per_cpu_second(env: dict, kind: str, params: dict, steps: int, path: str) -> float:
    """Best of REPEATS: real steps per CPU-second of one trial (after a warm-up run)."""
    spec = TrialSpec.build(env, kind, params, 0, steps, every=steps, episodes=1, step_cap=500, training_window=10)
    run_trial(spec.as_dict(), path)
    best = float("inf")
    for _ in range(REPEATS):
        start = time.process_time()
        result = run_trial(spec.as_dict(), path)
        best = min(best, time.process_time() - start)
        assert result.trial_path == path
    return steps / best


def main() -> int:
    """Print the figures."""
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="timed work about 10x smaller (smoke check)")
    args = parser.parse_args()
    pinned = pin_to_one_core()
    scale = 10 if args.quick else 1
    print(f"machine: {cpu_model()}; {pinned}")
    before = CpuSnapshot.take()
    header = f"{'environment':<34} {'agent':<12} {'compiled steps/CPU-s':>21} {'gymnasium path':>15} {'ratio':>7}"
    print(header)
    print("-" * len(header))
    for label, env in (("CartPole-v1, 6x6x12x12 bins", _cartpole()), ("overhead crane, crane.yaml bins", _crane())):
        for kind, params in (("q_learning", {}), ("dyna_q", {"planning_steps": 5})):
            compiled = steps_per_cpu_second(env, kind, params, 2_000_000 // scale, "compiled")
            stepped = steps_per_cpu_second(env, kind, params, 40_000 // scale, "gymnasium")
            print(f"{label:<34} {kind:<12} {compiled:>21,.0f} {stepped:>15,.0f} {compiled / stepped:>6.0f}x")
    print(f"load: {other_cpu_use(before)}")
    print(f"reproduce: {command_line(args.quick, 'binned_trial_speed.py')}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
