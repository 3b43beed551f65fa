"""Speed and memory of the replay-based Q-network (`q_network`) on one core, in the same run:

1. minibatch updates per CPU-second (batch 64, 2x64 MLP, Adam, Huber loss, target network) run inside one compiled
   `lax.scan`, beside one jitted update per Python call;
2. end-to-end real steps per CPU-second on CartPole-v1 (one update per real step): the tool's neural trial
   (`run_trial` on the compiled path: JAX dynamics, scan chunks between evaluation points; evaluation excluded, as
   its `cpu_seconds` column does) beside a plain per-step implementation (gymnasium's `env.step`, one jitted
   action and one jitted store-and-update call per real step); target at least 3x;
3. the peak resident memory of a 200,000-step trial, in a child process (target under 1 GB).

Compile time is never counted (every path is warmed first). The process pins itself to one CPU; on a machine
shared with other work the figures are slower, and the script prints how much CPU other processes used meanwhile.
Run from the repository root with `PYTHONPATH=. python benchmarks/neural_speed.py` (`--quick` for a smoke run).
"""

from __future__ import annotations

import resource
import subprocess
import sys
import time

import gymnasium
import jax
import jax.numpy as jnp
import numpy as np

try:  # run as a script: benchmarks/ is on sys.path
    from planning_speed import benchmark_start
    from speed import CpuSnapshot, other_cpu_use
except ImportError:  # imported as part of a package rather than run as a script
    from benchmarks.planning_speed import benchmark_start
    from benchmarks.speed import CpuSnapshot, other_cpu_use

from runner.neural.q_network import QNetworkCore
from runner.trial import run_trial
from runner.trial_spec import TrialSpec

CARTPOLE = {"source": "gym", "id": "CartPole-v1", "options": {}, "step_limit": None}
PARAMS = {"hidden_layers": 2, "hidden_units": 64, "batch_size": 64, "learning_starts": 1000}
TARGET_RATIO = 3.0
TARGET_MEMORY_MB = 1000.0


def _core() -> QNetworkCore:
    return QNetworkCore(4, 2, **PARAMS)


def _filled_state(core: QNetworkCore, seed: int):
    """An agent whose buffer holds `learning_starts` random transitions (so updates sample real data)."""
    state = core.init(jax.random.key(seed))
    rng = np.random.default_rng(seed)
    n = core.learning_starts
    buf = state.buffer._replace(
        obs=state.buffer.obs.at[:n].set(rng.normal(size=(n, 4)).astype(np.float32)),
        actions=state.buffer.actions.at[:n].set(rng.integers(2, size=n).astype(np.int32)),
        rewards=state.buffer.rewards.at[:n].set(np.ones(n, np.float32)),
        next_obs=state.buffer.next_obs.at[:n].set(rng.normal(size=(n, 4)).astype(np.float32)),
        size=jnp.int32(n),
    )
    return state._replace(buffer=buf)


def updates_per_second(updates: int, seed: int) -> tuple[float, float]:
    """(scanned, one call each): minibatch updates per CPU-second."""
    core = _core()
    state = _filled_state(core, seed)
    scanned = jax.jit(lambda s: jax.lax.scan(lambda c, _: (core._update(c), None), s, None, length=updates)[0])
    single = jax.jit(core._update)
    jax.block_until_ready(scanned(state))
    jax.block_until_ready(single(state))
    start = time.process_time()
    jax.block_until_ready(scanned(state))
    fast = updates / (time.process_time() - start)
    calls = max(updates // 10, 100)
    start = time.process_time()
    s = state
    for _ in range(calls):
        s = single(s)
    jax.block_until_ready(s)
    slow = calls / (time.process_time() - start)
    return fast, slow


def tool_steps_per_second(steps: int, seed: int) -> tuple[float, float]:
    """(real steps per CPU-second, wall seconds) of the tool's compiled neural trial, evaluation excluded."""
    spec = TrialSpec.build(
        CARTPOLE, "q_network", PARAMS, seed, steps, every=steps // 4, episodes=5, step_cap=500, training_window=10
    ).as_dict()
    run_trial(spec)  # compiles (and fills the persistent cache); the timed run below reuses the compiled loops
    start = time.perf_counter()
    rows = run_trial(spec).rows
    return steps / rows["cpu_seconds"][-1], time.perf_counter() - start


def plain_steps_per_second(steps: int, seed: int) -> float:
    """Real steps per CPU-second of a plain per-step loop: gymnasium's env.step, one jitted action, one jitted
    store-and-update per real step (after a warm-up past learning_starts, so every timed step updates)."""
    core = _core()
    env = gymnasium.make("CartPole-v1")
    obs, _ = env.reset(seed=seed)
    state = core.init(jax.random.key(seed))

    def run(n: int) -> None:
        nonlocal obs, state
        for _ in range(n):
            state, action = core.act(state, obs)
            action = int(action)
            nxt, reward, terminated, truncated, _ = env.step(action)
            state = core.observe(state, obs, np.int32(action), np.float32(reward), nxt, np.bool_(terminated))
            obs = env.reset()[0] if terminated or truncated else nxt

    run(core.learning_starts + 10)
    start = time.process_time()
    run(steps)
    jax.block_until_ready(state)
    return steps / (time.process_time() - start)


def peak_memory_mb(steps: int, seed: int) -> float:
    """Peak resident memory (MB) of a child process that runs one trial of `steps` real steps."""
    code = (
        "from runner.trial import run_trial\nfrom runner.trial_spec import TrialSpec\n"
        f"spec = TrialSpec.build({CARTPOLE!r}, 'q_network', {PARAMS!r}, {seed}, {steps}, every={steps // 20}, "
        "episodes=10, step_cap=500, training_window=10).as_dict()\nrun_trial(spec)\n"
    )
    subprocess.run([sys.executable, "-c", code], check=True)
    return resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss / 1024.0


def main(argv: list[str] | None = None) -> int:
    """Measure, then print the machine, the figures and the targets."""
    args, scale = benchmark_start(argv, __doc__.splitlines()[0], "neural_speed.py", f", jax {jax.__version__}")
    with jax.enable_x64(True):
        before = CpuSnapshot.take()
        fast, slow = updates_per_second(20_000 // scale, args.seed)
        print(
            f"\n1. updates per CPU-second (batch 64, 2x64 MLP): scanned {fast:,.0f}; one call each {slow:,.0f} "
            f"({fast / slow:.1f}x); {other_cpu_use(before)}"
        )
        before = CpuSnapshot.take()
        tool, wall = tool_steps_per_second(40_000 // scale, args.seed)
        plain = plain_steps_per_second(4_000 // scale, args.seed)
        verdict = "met" if tool >= TARGET_RATIO * plain else "missed"
        print(
            f"2. CartPole-v1 real steps per CPU-second, one update each: tool's neural trial {tool:,.0f} "
            f"({wall:.1f} s wall for {40_000 // scale:,} steps with evaluations); plain per-step {plain:,.0f}; "
            f"{tool / plain:.1f}x (target >= {TARGET_RATIO:g}x: {verdict}); {other_cpu_use(before)}"
        )
    steps = 200_000 // scale
    memory = peak_memory_mb(steps, args.seed)
    verdict = "met" if memory < TARGET_MEMORY_MB else "missed"
    print(
        f"3. peak resident memory of a {steps:,}-step trial (child process, imports included): {memory:,.0f} MB "
        f"(target < {TARGET_MEMORY_MB:g} MB: {verdict})"
    )
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
