"""Speed of soft actor-critic (`soft_actor_critic`) on Pendulum-v1 on one core: real steps per CPU-second, one
update per real step (2x64 networks, batch 256, the kind's other defaults but `learning_starts` 100), of the
tool's compiled neural trial (JAX dynamics, scan chunks between evaluation points) beside the tool's own
step-by-step path (gymnasium's `env.step`, one jitted action and one jitted store-and-update call per real step).
Both from the trials' `cpu_seconds` column, which leaves evaluation out; compile time is never counted (each path
is warmed first with the same spec). The process pins itself to one CPU; on a shared machine the figures are
slower, and the script prints how much CPU other processes used meanwhile.
Run from the repository root with `PYTHONPATH=. python benchmarks/sac_speed.py` (`--quick` for a smoke run).
"""

from __future__ import annotations

import jax

try:  # run as a script: benchmarks/ is on sys.path
    from planning_speed import benchmark_start
    from speed import CpuSnapshot, other_cpu_use
except ImportError:  # imported as part of a package rather than run as a script
    from benchmarks.planning_speed import benchmark_start
    from benchmarks.speed import CpuSnapshot, other_cpu_use

from runner.trial import run_trial
from runner.trial_spec import TrialSpec

PENDULUM = {"source": "gym", "id": "Pendulum-v1", "options": {}, "step_limit": None}
PARAMS = {"hidden_units": 64, "learning_starts": 100}


def steps_per_second(steps: int, seed: int, path: str) -> float:
    """Real steps per CPU-second of a warmed trial on `path`, evaluation excluded."""
    spec = TrialSpec.build(
        PENDULUM,
        "soft_actor_critic",
        PARAMS,
        seed,
        steps,
        every=steps // 2,
        episodes=2,
        step_cap=200,
        training_window=10,
    ).as_dict()
    run_trial(spec, path=path)  # compiles; the timed run below reuses the compiled functions
    return steps / run_trial(spec, path=path).rows["cpu_seconds"][-1]


def main(argv: list[str] | None = None) -> int:
    """Measure, then print the machine and the figures."""
    args, scale = benchmark_start(argv, __doc__.splitlines()[0], "sac_speed.py", f", jax {jax.__version__}")
    before = CpuSnapshot.take()
    compiled = steps_per_second(20_000 // scale, args.seed, "compiled")
    stepwise = steps_per_second(4_000 // scale, args.seed, "gymnasium")
    print(
        f"Pendulum-v1 real steps per CPU-second, one SAC update each: compiled trial {compiled:,.0f}; step by step "
        f"{stepwise:,.0f} ({compiled / stepwise:.1f}x); {other_cpu_use(before)}"
    )
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
