"""Speed of the learned dynamics models (`runner.neural`) on one core: fitting, training and prediction.

What, on synthetic transitions shaped like Pendulum-v1's (3 observation numbers, a Box action of 1, so 4 inputs
and 4 targets):

1. the Gaussian process (`GaussianProcessModel`, 200 points, 100 Adam iterations): seconds per fit, and predicted
   rows per second for a batch of 500 (a planner's candidates) and of 1 (a step-by-step caller);
2. the ensemble (`EnsembleModel`, 5 members of 2 x 64 swish units, minibatches of 64): minibatch Adam steps per
   second through `fit` (whole epochs scanned in one compiled program), beside a plain version that calls one
   jitted minibatch step per Python call on the same loss (`ensemble_loss`) and the same minibatches, and their
   ratio; predicted rows per second for a batch of 500 and of 1.

Why: model-predictive control and Dyna rollouts call `predict`/`sample` many times per real step, and the agents
refit their model every k real steps, so these figures bound what a planning budget costs. Each figure is the best
of 3 repetitions after a warm-up that compiles, timed by this process's CPU time (`time.process_time`) with the
process pinned to one CPU; the first call's CPU seconds (compilation) are printed separately. The script prints
how much CPU other processes used meanwhile. Run from the repository root with
`PYTHONPATH=. python benchmarks/learned_model_speed.py` (`--quick` for a smoke run with smaller fits). JAX and
OpenBLAS may start threads; on a shared machine set `OPENBLAS_NUM_THREADS=1` (OpenBLAS's threads spin while they
wait, and a busy machine makes a 200 x 200 Cholesky factorisation hundreds of times slower).
"""

from __future__ import annotations

import sys
import time
from collections.abc import Callable
from typing import Any

import jax
import jax.numpy as jnp
import numpy as np
import optax

try:  # run as a script: benchmarks/ is on sys.path
    from planning_speed import REPEATS, benchmark_start
    from speed import CpuSnapshot, other_cpu_use
except ImportError:  # imported as part of a package rather than run as a script
    from benchmarks.planning_speed import REPEATS, benchmark_start
    from benchmarks.speed import CpuSnapshot, other_cpu_use

from runner.neural.ensemble import EnsembleModel, ensemble_loss
from runner.neural.gp import GaussianProcessModel
from runner.neural.model import ActionEncoding, Transitions, check_transitions, fit_scaler, host_inputs, model_targets

ENCODING = ActionEncoding(box_dim=1)


def transitions(n: int, seed: int) -> Transitions:
    """Pendulum-shaped synthetic transitions (a smooth map of ours with noise sd 0.01)."""
    rng = np.random.default_rng(seed)
    states, actions = rng.uniform(-1, 1, (n, 3)), rng.uniform(-2, 2, (n, 1))
    change = 0.1 * np.sin(states[:, [1, 2, 0]]) + 0.05 * actions
    rewards = -np.sum(states**2, axis=1) - 0.001 * actions[:, 0] ** 2
    return Transitions(states, actions, states + change + 0.01 * rng.normal(size=(n, 3)), rewards)


def cpu_seconds(call: Callable[[], Any]) -> float:
    """CPU seconds of one call, its results waited for."""
    start = time.process_time()
    jax.block_until_ready(call())
    return time.process_time() - start


def best(call: Callable[[], Any]) -> tuple[float, float]:
    """(CPU seconds of the first call, best CPU seconds of `REPEATS` later calls)."""
    first = cpu_seconds(call)
    return first, min(cpu_seconds(call) for _ in range(REPEATS))


def prediction_rates(model: Any, params: Any, seed: int) -> str:
    """Predicted rows per CPU-second at batches of 500 and 1."""
    predict = jax.jit(model.predict)
    words = []
    for batch, calls in ((500, 20), (1, 200)):
        data = transitions(batch, seed)
        _, seconds = best(
            lambda data=data, calls=calls: [predict(params, data.states, data.actions) for _ in range(calls)]
        )
        words.append(f"batch {batch}: {batch * calls / seconds:,.0f} rows/s")
    return "; ".join(words)


def plain_ensemble_steps(model: EnsembleModel, data: Transitions, steps: int, seed: int) -> Callable[[], Any]:
    """The same minibatch Adam steps as `fit`, one jitted step per Python call (minibatches drawn ahead)."""
    clean = check_transitions(data, ENCODING)
    inputs, targets = host_inputs(clean, ENCODING), model_targets(clean)
    x_scaler, y_scaler = fit_scaler(inputs), fit_scaler(targets)
    x = jnp.asarray((inputs - x_scaler.mean) / x_scaler.scale, jnp.float32)
    y = jnp.asarray((targets - y_scaler.mean) / y_scaler.scale, jnp.float32)
    rng = np.random.default_rng(seed)
    batches = rng.integers(0, x.shape[0], (steps, model.members, model.batch_size))
    optimiser = optax.adam(model.learning_rate)
    weight = jnp.ones(model.batch_size)

    @jax.jit
    def step(members, state, picked):
        grads = jax.grad(ensemble_loss)(members, x[picked], y[picked], weight, model.bound_penalty, model.activation)
        updates, state = optimiser.update(grads, state, members)
        return optax.apply_updates(members, updates), state

    def run():
        members = model.init_members(jax.random.key(seed), x.shape[1], y.shape[1])
        state = optimiser.init(members)
        for picked in batches:
            members, state = step(members, state, picked)
        return members

    return run


def main(argv: list[str] | None = None) -> int:
    versions = f", jax {jax.__version__}, optax {optax.__version__}"
    args, _ = benchmark_start(argv, __doc__.splitlines()[0], "learned_model_speed.py", versions)
    before = CpuSnapshot.take()

    gp = GaussianProcessModel(ENCODING, max_points=50 if args.quick else 200, iterations=100)
    data = transitions(400, args.seed)
    first, seconds = best(lambda: gp.fit(data, jax.random.key(args.seed)))
    params = gp.fit(data, jax.random.key(args.seed))
    print(
        f"GP ({gp.max_points} points, {gp.iterations} iterations): a fit takes {seconds:.3f} CPU-s "
        f"(first call {first:.1f} CPU-s)"
    )
    print(f"  predict: {prediction_rates(gp, params, args.seed)}")

    epochs = 2 if args.quick else 10
    ensemble = EnsembleModel(ENCODING, epochs=epochs)
    data = transitions(1000 if args.quick else 4096, args.seed)
    steps = epochs * -(-data.rewards.size // ensemble.batch_size)
    first, seconds = best(lambda: ensemble.fit(data, jax.random.key(args.seed)))
    plain_first, plain_seconds = best(plain_ensemble_steps(ensemble, data, steps, args.seed))
    print(
        f"ensemble ({ensemble.members} x {ensemble.hidden}, minibatch {ensemble.batch_size}, {data.rewards.size} rows, "
        f"{steps} steps): {steps / seconds:,.0f} steps/s compiled epochs (first call {first:.1f} CPU-s), "
        f"{steps / plain_seconds:,.0f} steps/s one jitted step per call (first call {plain_first:.1f} CPU-s): "
        f"{plain_seconds / seconds:.1f}x"
    )
    params = ensemble.fit(data, jax.random.key(args.seed))
    print(f"  predict: {prediction_rates(ensemble, params, args.seed)}")
    print(other_cpu_use(before))
    return 0


if __name__ == "__main__":
    sys.exit(main())
