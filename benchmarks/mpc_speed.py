"""Speed of model-predictive control (`mpc`, `runner.neural.mpc`) on one core: planning and real steps.

What:

1. planning: simulated model steps per CPU-second of one receding-horizon plan (the cross-entropy method, 200
   candidates, horizon 15, 5 iterations, 4 particles: 60,000 model steps a plan) on a fitted ensemble (5 members of
   2 x 64 swish units) and on a fitted Gaussian process (200 points), with Pendulum-v1's shapes (3 observation
   numbers, a Box action of 1) and synthetic transitions;
2. real steps: real steps per CPU-second of whole `mpc` trials on Pendulum-v1 on the compiled path (the trial's own
   `cpu_seconds`: evaluation and model errors excluded, refits between chunks included), at the planning budget
   above and at a small one (32 candidates, horizon 10, 3 iterations, mean rollouts), and the CPU time of its
   refits (the difference from the same trial refitting only once), every trial after a warm-up trial of the same
   length, so compilation is left out.

Why: the planning budget (`horizon`, `candidates`, `iterations`) is what an experiment varies against real steps
saved, so what a unit of it costs bounds the experiments one can afford. Planning figures are the best of 3
repetitions after a warm-up that compiles, timed by this process's CPU time with the process pinned to one CPU.
The script prints how much CPU other processes used meanwhile. Run from the repository root with
`PYTHONPATH=. python benchmarks/mpc_speed.py` (`--quick` for a smoke run with shorter trials).
"""

from __future__ import annotations

import sys
import time

import jax
import jax.numpy as jnp
import optax

try:  # run as a script: benchmarks/ is on sys.path
    from learned_model_speed import best, transitions
    from planning_speed import benchmark_start
    from speed import CpuSnapshot, other_cpu_use
except ImportError:  # imported as part of a package rather than run as a script
    from benchmarks.learned_model_speed import best, transitions
    from benchmarks.planning_speed import benchmark_start
    from benchmarks.speed import CpuSnapshot, other_cpu_use

from runner.neural.mpc import MPCCore
from runner.trial import run_trial
from runner.trial_spec import TrialSpec

PLANNING = {"horizon": 15, "candidates": 200, "iterations": 5, "elites": 20, "particles": 4, "termination": "none"}
SMALL = {"horizon": 10, "candidates": 32, "iterations": 3, "elites": 4, "particles": 0, "termination": "none"}
PENDULUM = {"source": "gym", "id": "Pendulum-v1", "options": {}, "step_limit": None}


def planning_rate(model: str, seed: int) -> str:
    """Simulated model steps per CPU-second of one plan on a model fitted to synthetic transitions."""
    core = MPCCore(3, 0, (-2.0,), (2.0,), model=model, **PLANNING)
    with jax.enable_x64(True):
        state = core.init(jax.random.key(seed))
        fitted = core.dynamics.fit(transitions(400, seed), jax.random.key(seed))
        state = state._replace(model=jax.tree.map(lambda new, old: jnp.asarray(new, old.dtype), fitted, state.model))
        obs = jnp.asarray([1.0, 0.0, 0.0], jnp.float32)
        first, seconds = best(lambda: core.greedy(state.online, obs))
    return (
        f"{model}: {core.simulated_per_plan / seconds:,.0f} simulated steps/s ({seconds * 1e3:.1f} ms a plan of "
        f"{core.simulated_per_plan:,} steps; first call {first:.1f} CPU-s)"
    )


def trial_rate(params: dict, steps: int, seed: int) -> tuple[float, float]:
    """(real steps per CPU-second of a compiled trial, CPU seconds it took) on Pendulum-v1 with the ensemble."""
    full = {"learning_starts": 200, "model_every": 250, **params}
    spec = TrialSpec.build(PENDULUM, "mpc", full, seed, steps, every=steps, episodes=1, step_cap=10, training_window=5)
    result = run_trial(spec.as_dict())
    cpu = float(result.rows["cpu_seconds"][-1])
    return steps / cpu, cpu


def main(argv: list[str] | None = None) -> int:
    versions = f", jax {jax.__version__}, optax {optax.__version__}"
    args, _ = benchmark_start(argv, __doc__.splitlines()[0], "mpc_speed.py", versions)
    before = CpuSnapshot.take()
    print("planning (CEM, 200 candidates x 4 particles x horizon 15 x 5 iterations):")
    for model in ("ensemble", "gp"):
        print(f"  {planning_rate(model, args.seed)}")
    steps = 450 if args.quick else 1200
    for label, params in (("planning budget above", PLANNING), ("small budget", SMALL)):
        warm_start = time.process_time()
        trial_rate(params, steps, args.seed)  # compiles this setting's chunks and every size class of its fits
        warm = time.process_time() - warm_start
        rate, cpu = trial_rate(params, steps, args.seed)
        one_fit = trial_rate({**params, "model_every": 10**6}, steps, args.seed)[1]
        extra = len(range(200, steps + 1, 250)) - 1
        print(
            f"trial on Pendulum-v1, {label}, ensemble, {steps} real steps: {rate:,.1f} real steps/s "
            f"({cpu:.1f} CPU-s, of which {cpu - one_fit:.1f} for {extra} of its {extra + 1} refits; "
            f"warm-up trial {warm:.1f} CPU-s)"
        )
    print(other_cpu_use(before))
    return 0


if __name__ == "__main__":
    sys.exit(main())
