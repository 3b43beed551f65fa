"""Speed of Dyna with a learned neural model (`neural_dyna`) on one core, in the same run:

1. planning updates per CPU-second inside one compiled `lax.scan` (each: a rollout batch of 64 simulated
   transitions from a 5-member ensemble of 2x64 probabilistic MLPs, then one Adam step of the 2x64 Q-network on
   them), beside the Q-network's real minibatch updates (batch 64) in the same kind of scan;
2. end-to-end on CartPole-v1 (the tool's compiled neural trial, evaluation and held-out model errors excluded, as
   its `cpu_seconds` column does): real steps and planning updates per CPU-second with 4 planning updates per real
   step, beside the `q_network` kind's real steps per CPU-second with the same Q-network.

Compile time is never counted (every path is warmed first). The process pins itself to one CPU; on a machine
shared with other work the figures are slower, and the script prints how much CPU other processes used meanwhile.
Run from the repository root with `PYTHONPATH=. python benchmarks/neural_dyna_speed.py` (`--quick` for a smoke run).
"""

from __future__ import annotations

import time

import jax
import jax.numpy as jnp
import numpy as np

try:  # run as a script: benchmarks/ is on sys.path
    from planning_speed import benchmark_start
    from speed import CpuSnapshot, other_cpu_use
except ImportError:  # imported as part of a package rather than run as a script
    from benchmarks.planning_speed import benchmark_start
    from benchmarks.speed import CpuSnapshot, other_cpu_use

from runner.agents import make_agent
from runner.neural.dyna import NeuralDynaCore
from runner.trial import run_trial
from runner.trial_spec import TrialSpec

CARTPOLE = {"source": "gym", "id": "CartPole-v1", "options": {}, "step_limit": None}
Q_PARAMS = {"hidden_layers": 2, "hidden_units": 64, "batch_size": 64, "learning_starts": 1000}
PLANNING = 4


def _core() -> NeuralDynaCore:
    params = make_agent("neural_dyna", {**Q_PARAMS, "planning_steps": PLANNING}).get_params()
    return NeuralDynaCore.from_params(params, 4, 2)


def _trained_state(core: NeuralDynaCore, seed: int):
    """An agent whose buffer holds `learning_starts` random CartPole-like transitions and whose model has had one
    training round (so rollouts sample a fitted model)."""
    state = core.init(jax.random.key(seed))
    rng = np.random.default_rng(seed)
    n = core.q.learning_starts
    obs = rng.normal(scale=0.1, size=(n, 4)).astype(np.float32)
    buf = state.q.buffer._replace(
        obs=state.q.buffer.obs.at[:n].set(obs),
        actions=state.q.buffer.actions.at[:n].set(rng.integers(2, size=n).astype(np.int32)),
        rewards=state.q.buffer.rewards.at[:n].set(np.ones(n, np.float32)),
        next_obs=state.q.buffer.next_obs.at[:n].set(obs + rng.normal(scale=0.02, size=(n, 4)).astype(np.float32)),
        terminated=state.q.buffer.terminated.at[:n].set(rng.random(n) < 0.05),
        size=jnp.int32(n),
    )
    state = state._replace(q=state.q._replace(buffer=buf, steps=jnp.int32(n)))
    return core.train_model(state)


def updates_per_second(updates: int, seed: int) -> tuple[float, float]:
    """(planning updates, real updates) per CPU-second, each run as one compiled scan."""
    core = _core()
    state = _trained_state(core, seed)
    planning = jax.jit(
        lambda s: jax.lax.scan(lambda c, _: (core._planning_update(c), None), s, None, length=updates)[0]
    )
    real = jax.jit(lambda q: jax.lax.scan(lambda c, _: (core.q._update(c), None), q, None, length=updates)[0])
    jax.block_until_ready(planning(state))
    jax.block_until_ready(real(state.q))
    start = time.process_time()
    jax.block_until_ready(planning(state))
    plan_rate = updates / (time.process_time() - start)
    start = time.process_time()
    jax.block_until_ready(real(state.q))
    return plan_rate, updates / (time.process_time() - start)


def trial_rates(kind: str, params: dict, steps: int, seed: int) -> tuple[float, float]:
    """(real steps, planning updates) per CPU-second of the tool's compiled trial, evaluation excluded."""
    spec = TrialSpec.build(
        CARTPOLE, kind, params, seed, steps, every=steps // 4, episodes=5, step_cap=500, training_window=10
    ).as_dict()
    run_trial(spec)  # compiles (and fills the persistent cache); the timed run below reuses the compiled loops
    rows = run_trial(spec).rows
    cpu = rows["cpu_seconds"][-1]
    return steps / cpu, rows["planning_updates"][-1] / cpu


def main(argv: list[str] | None = None) -> int:
    """Measure, then print the machine and the figures."""
    args, scale = benchmark_start(argv, __doc__.splitlines()[0], "neural_dyna_speed.py", f", jax {jax.__version__}")
    with jax.enable_x64(True):
        before = CpuSnapshot.take()
        plan_rate, real_rate = updates_per_second(5_000 // scale, args.seed)
        print(
            f"\n1. updates per CPU-second (batch 64, 2x64 Q-network; 5 x 2x64 ensemble, rollouts of 1 step): "
            f"planning {plan_rate:,.0f}; real {real_rate:,.0f} ({real_rate / plan_rate:.1f}x a planning update's "
            f"cost); {other_cpu_use(before)}"
        )
        before = CpuSnapshot.take()
        steps = 20_000 // scale
        dyna_steps, dyna_planning = trial_rates("neural_dyna", {**Q_PARAMS, "planning_steps": PLANNING}, steps, 0)
        q_steps, _ = trial_rates("q_network", Q_PARAMS, steps, 0)
        print(
            f"2. CartPole-v1, {steps:,} real steps, tool's compiled trial: neural_dyna ({PLANNING} planning updates "
            f"per real step) {dyna_steps:,.0f} real steps and {dyna_planning:,.0f} planning updates per CPU-second; "
            f"q_network {q_steps:,.0f} real steps per CPU-second; {other_cpu_use(before)}"
        )
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
