"""Real steps per second of the compiled classic-control dynamics on one core, beside gymnasium's own `env.step`.

What: for CartPole-v1 and Acrobot-v1, steps per second of

1. a compiled loop (`runner.envs.dynamics.compiled`: the kernels resolved by id when the loop compiles) that steps
   the environment, computes the observation an agent would see, counts rewards, and resets at termination or at
   gymnasium's step limit; actions either uniformly random or epsilon-greedy (epsilon 0.1) on a fixed linear
   action-value function of the observation (weights from a seeded Generator), a stand-in for an agent's greedy
   choice;
2. gymnasium's own loop: `gymnasium.make(id)`, `env.step` with the same kind of actions (random actions drawn
   ahead of time; the epsilon-greedy choice computed with numpy from each observation), `env.reset` at the end of
   each episode;

and their ratio. Why: compiled agents on these environments pay off only if a compiled trial runs far faster
than stepping gymnasium from Python; the issue's target is at least 100x per core.

Each figure is the best of 3 repetitions after a warm-up that compiles or loads the kernels, so compile time is
never counted, timed twice: by the wall clock (`time.perf_counter`) and by this process's CPU time
(`time.process_time`). The process pins itself to one CPU; on a machine shared with other work the wall clock
also counts time given to other processes, so the verdict uses the CPU-time ratio (steps per CPU-second, i.e.
per core). The script prints how much CPU other processes used meanwhile. Run from the repository root with
`PYTHONPATH=. python benchmarks/dynamics_speed.py` (`--quick` for a smoke check about ten times smaller).
"""

from __future__ import annotations

import argparse
import platform
import sys
import time
from collections.abc import Callable
from dataclasses import dataclass

import gymnasium
import numba
import numpy as np
from numba import literally, njit, typeof, types

try:  # run as a script: benchmarks/ is on sys.path
    from planning_speed import REPEATS, Figure, command_line, cpu_model, pin_to_one_core
    from speed import CpuSnapshot, other_cpu_use
except ImportError:  # imported as part of a package rather than run as a script
    from benchmarks.planning_speed import REPEATS, Figure, command_line, cpu_model, pin_to_one_core
    from benchmarks.speed import CpuSnapshot, other_cpu_use

from runner.envs.dynamics import dynamics_spec
from runner.envs.dynamics.compiled import env_observation, env_reset, env_step
from runner.streams import below, new_stream, uniform

TARGET_RATIO = 100.0
EPSILON = 0.1
ENV_IDS = ("CartPole-v1", "Acrobot-v1")
POLICIES = ("random", "epsilon-greedy")


@dataclass(frozen=True)
class Sizes:
    """Steps per timed repetition; `--quick` divides them by ten."""

    compiled: dict[str, int]
    gymnasium: dict[str, int]


FULL = Sizes(
    compiled={"CartPole-v1": 5_000_000, "Acrobot-v1": 1_000_000},
    gymnasium={"CartPole-v1": 100_000, "Acrobot-v1": 20_000},
)
QUICK = Sizes(
    compiled={k: v // 10 for k, v in FULL.compiled.items()},
    gymnasium={k: v // 10 for k, v in FULL.gymnasium.items()},
)


@dataclass(frozen=True)
class Timing:
    """The best wall-clock and the best CPU-time figure of the same repetitions."""

    wall: Figure
    cpu: Figure


def best_of_both(what: str, run: Callable[[], int]) -> Timing:
    """Call `run()` REPEATS times; keep the fastest by `time.perf_counter` and by `time.process_time`.

    On a machine shared with other work, the process's CPU time is the fairer per-core figure: wall time also
    counts the time the scheduler gave to other processes.
    """
    walls, cpus = [], []
    for _ in range(REPEATS):
        wall0, cpu0 = time.perf_counter(), time.process_time()
        work = run()
        walls.append(Figure(what, int(work), time.perf_counter() - wall0))
        cpus.append(Figure(what, int(work), max(time.process_time() - cpu0, 1e-9)))
    return Timing(min(walls, key=lambda f: f.seconds), min(cpus, key=lambda f: f.seconds))


@njit(cache=True)
def compiled_steps(env_id, params, stream, steps, step_limit, weights, epsilon, state, obs):
    """Step `env_id` `steps` times; epsilon-greedy on `weights @ obs` (epsilon 1: uniformly random).

    Returns (finished episodes, total reward), so the work cannot be optimised away.
    """
    n_actions = weights.shape[0]
    env_reset(literally(env_id), state, params, stream)
    env_observation(literally(env_id), state, params, obs)
    t = 0
    episodes = 0
    total = 0.0
    for _ in range(steps):
        if epsilon >= 1.0 or uniform(stream) < epsilon:
            action = below(stream, n_actions)
        else:
            action = 0
            best = -np.inf
            for a in range(n_actions):
                value = 0.0
                for i in range(obs.shape[0]):
                    value += weights[a, i] * obs[i]
                if value > best:
                    best = value
                    action = a
        reward, terminated = env_step(literally(env_id), state, action, params, state)
        env_observation(literally(env_id), state, params, obs)
        total += reward
        t += 1
        if terminated or t >= step_limit:
            env_reset(literally(env_id), state, params, stream)
            env_observation(literally(env_id), state, params, obs)
            t = 0
            episodes += 1
    return episodes, total


def measure_compiled(env_id: str, policy: str, steps: int, seed: int) -> Timing:
    """The compiled loop's best rate over the repetitions."""
    spec = dynamics_spec(env_id)
    params = spec.default_params()
    weights = np.random.default_rng(seed).normal(size=(spec.action_size, spec.obs_size))
    epsilon = 1.0 if policy == "random" else EPSILON
    stream = new_stream(seed)
    state, obs = np.zeros(spec.state_size), np.zeros(spec.obs_size)
    args = (params, stream, steps, spec.step_limit, weights, epsilon, state, obs)
    # compile (or load) for the id as a literal and call the entry point directly, as runner.compiled_trial's
    # run_kind_trial does: dispatching a literal by value costs tens of milliseconds per call
    loop = compiled_steps.compile((types.literal(env_id), *(typeof(arg) for arg in args)))

    def run() -> int:
        loop(env_id, *args)
        return steps

    return best_of_both(f"compiled {env_id} {policy}", run)


def measure_gymnasium(env_id: str, policy: str, steps: int, seed: int) -> Timing:
    """Gymnasium's own `env.step` loop with the same kind of actions, best rate over the repetitions."""
    spec = dynamics_spec(env_id)
    rng = np.random.default_rng(seed)
    weights = rng.normal(size=(spec.action_size, spec.obs_size))
    env = gymnasium.make(env_id)
    env.reset(seed=seed)

    def run() -> int:
        actions = rng.integers(spec.action_size, size=steps).tolist()
        explore = (rng.random(size=steps) < (1.0 if policy == "random" else EPSILON)).tolist()
        obs, _ = env.reset()
        for action, random_action in zip(actions, explore, strict=True):
            if not random_action:
                action = int(np.argmax(weights @ obs))
            obs, _, terminated, truncated, _ = env.step(action)
            if terminated or truncated:
                obs, _ = env.reset()
        return steps

    figure = best_of_both(f"gymnasium {env_id} {policy}", run)
    env.close()
    return figure


def main(argv: list[str] | None = None) -> int:
    """Measure, then print the machine, the table, the ratios and the target check."""
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="timed work about 10x smaller (smoke check)")
    parser.add_argument("--seed", type=int, default=0, help="seed of every stream and Generator used (default 0)")
    args = parser.parse_args(argv)
    sizes = QUICK if args.quick else FULL
    pinned = pin_to_one_core()

    print("stepmeter compiled dynamics speed: real steps per second on one core, beside gymnasium's env.step")
    print(f"machine  : {cpu_model()}; {platform.system()} {platform.machine()}; {pinned}")
    print(
        f"software : python {platform.python_version()}, numpy {np.__version__}, numba {numba.__version__}, "
        f"gymnasium {gymnasium.__version__}"
    )
    print(
        f"mode     : {'quick (timed work / 10)' if args.quick else 'full'}; seed {args.seed}; "
        f"best of 3 per figure, compile time excluded"
    )
    print()
    before = CpuSnapshot.take()
    rows = []
    for env_id in ENV_IDS:
        for policy in POLICIES:
            ours = measure_compiled(env_id, policy, sizes.compiled[env_id], args.seed)
            theirs = measure_gymnasium(env_id, policy, sizes.gymnasium[env_id], args.seed)
            rows.append((env_id, policy, ours, theirs))
    load = other_cpu_use(before)

    header = (
        f"{'environment':<12}  {'actions':<14}  {'compiled steps/s':>16}  {'gymnasium steps/s':>17}  {'ratio':>6}  "
        f"{'per CPU-s: compiled':>19}  {'gymnasium':>9}  {'ratio':>6}"
    )
    print(header + "  verdict")
    print("-" * (len(header) + 9))
    misses = []
    for env_id, policy, ours, theirs in rows:
        wall_ratio = ours.wall.rate / theirs.wall.rate
        cpu_ratio = ours.cpu.rate / theirs.cpu.rate
        passed = cpu_ratio >= TARGET_RATIO
        if not passed:
            misses.append(f"{env_id} {policy}")
        print(
            f"{env_id:<12}  {policy:<14}  {ours.wall.rate:>16,.0f}  {theirs.wall.rate:>17,.0f}  {wall_ratio:>5,.0f}x  "
            f"{ours.cpu.rate:>19,.0f}  {theirs.cpu.rate:>9,.0f}  {cpu_ratio:>5,.0f}x  {'PASS' if passed else 'MISS'}"
        )
    print()
    print(f"work: compiled {', '.join(f'{k} {v:,}' for k, v in sizes.compiled.items())} steps per repetition; ")
    print(f"      gymnasium {', '.join(f'{k} {v:,}' for k, v in sizes.gymnasium.items())} steps per repetition")
    print(f"load: {load}")
    print(f"target: compiled >= {TARGET_RATIO:.0f}x gymnasium's env.step loop per core (verdict on CPU time)")
    print(f"overall: {'PASS' if not misses else 'MISS (' + '; '.join(misses) + ')'}")
    print(f"reproduce: {command_line(args.quick, 'dynamics_speed.py')}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
