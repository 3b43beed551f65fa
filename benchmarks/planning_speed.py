"""Planning speed of stepmeter's Dyna-Q on one core, against the same algorithm written in plain Python.

What: planning updates per second of the tool's Dyna-Q (n = 50 simulated updates per real step) on the 6x9
maze of Sutton & Barto (2018), Example 8.1, measured three ways:

1a. the compiled planning kernel `dyna_q_plan` alone, called directly on a model filled by real steps;
1b. a whole trial through `runner.trial.run_trial` (gymnasium stepping, acting, learning, a little evaluation);
2.  a plain per-step Python Dyna-Q (lists and a dict, no numba), both its whole loop and its planning loop alone.

Why: stepmeter reports how many real steps planning saves; that figure is only worth having if the planning
it costs is cheap. This script checks the stage target (at least 2 M planning updates per second on one
core) and shows how much the compiled kernels buy over the obvious Python version.

Each figure is the best of 3 repetitions timed with `time.perf_counter`, after a warm-up that compiles or
loads the kernels, so compile time is never counted. Randomness comes only from seeded numpy Generators.
Run from the repository root with `PYTHONPATH=. python benchmarks/planning_speed.py` (`--quick` for a smoke
check about ten times smaller).
"""

from __future__ import annotations

import argparse
import os
import platform
import sys
import time
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import gymnasium
import numba
import numpy as np

from runner.agents.dyna_q import DynaQ, dyna_q_plan
from runner.envs.grid import GridWorld
from runner.trial import run_trial
from runner.trial_spec import TrialSpec

DYNA_MAZE = "\n".join(
    [
        ".......#G",
        "..#....#.",
        "S.#....#.",
        "..#......",
        ".....#...",
        ".........",
    ]
)
"""The 6x9 maze of Sutton & Barto (2018), Example 8.1; reward 1 on entering G, 0 otherwise."""

PLANNING_STEPS = 50
ALPHA, GAMMA, EPSILON = 0.1, 0.95, 0.1
TARGET_PER_SECOND = 2_000_000
REPEATS = 3
SHORTEST_PATH = 14
"""Fewest moves from S to G in this maze; a greedy policy that finds it has learned the maze."""


@dataclass(frozen=True)
class Sizes:
    """How much work each figure does; `--quick` divides every size by about ten."""

    fill_steps: int  # real steps that fill the model before the kernel-only timings
    kernel_updates: int  # planning updates per timed call of the compiled kernel
    trial_steps: int  # real-step budget of each timed run_trial
    plain_steps: int  # real steps of each timed plain-Python Dyna-Q run
    plain_plan_updates: int  # planning updates per timed call of the plain-Python planning loop


FULL = Sizes(
    fill_steps=3_000, kernel_updates=10_000_000, trial_steps=20_000, plain_steps=5_000, plain_plan_updates=1_000_000
)
QUICK = Sizes(fill_steps=300, kernel_updates=1_000_000, trial_steps=2_000, plain_steps=500, plain_plan_updates=100_000)


@dataclass(frozen=True)
class Figure:
    """One measured rate: the best of the repetitions, with the work and time behind it."""

    what: str
    work: int
    seconds: float

    @property
    def rate(self) -> float:
        return self.work / self.seconds


def pin_to_one_core() -> str:
    """Restrict the process to its first allowed CPU, so every figure is a one-core figure; say what happened."""
    if not hasattr(os, "sched_setaffinity"):
        return "not pinned (os.sched_setaffinity is unavailable on this platform)"
    allowed = sorted(os.sched_getaffinity(0))
    cpu = allowed[0]
    try:
        os.sched_setaffinity(0, {cpu})
    except OSError as err:
        return f"not pinned ({err})"
    return f"pinned to CPU {cpu} with os.sched_setaffinity (of {len(allowed)} allowed: {allowed})"


def cpu_model() -> str:
    """The CPU model name from /proc/cpuinfo, or what the platform module knows."""
    try:
        with open("/proc/cpuinfo", encoding="utf-8") as f:
            for line in f:
                if line.startswith("model name"):
                    return line.split(":", 1)[1].strip()
    except OSError:
        pass
    return platform.processor() or "unknown"


def best_of(what: str, run: Any) -> Figure:
    """Call `run()` (which returns the work it did: updates, simulations...) REPEATS times; keep the fastest."""
    best: Figure | None = None
    for _ in range(REPEATS):
        start = time.perf_counter()
        updates = run()
        seconds = time.perf_counter() - start
        if best is None or seconds < best.seconds:
            best = Figure(what, int(updates), seconds)
    assert best is not None
    return best


def greedy_path_length(q: Any, table: dict, start: int, cap: int = 100) -> int | None:
    """Moves a first-max greedy policy takes from `start` to a terminal cell, or None within `cap` moves."""
    state = start
    for moves in range(1, cap + 1):
        row = list(q[state])
        action = row.index(max(row))
        _, state, _, terminated = table[state][action][0]
        if terminated:
            return moves
    return None


def describe_path(moves: int | None) -> str:
    """A greedy path length in words."""
    return "does not reach G within 100 moves" if moves is None else f"reaches G in {moves} moves"


# --- 1a: the tool's compiled planning kernel alone ----------------------------------------------------


def filled_tool_agent(sizes: Sizes, seed: int) -> tuple[DynaQ, GridWorld]:
    """A DynaQ agent whose model was filled by `fill_steps` real steps on the maze (planning n=50 meanwhile)."""
    env = GridWorld(DYNA_MAZE)
    agent = DynaQ(alpha=ALPHA, gamma=GAMMA, epsilon=EPSILON, planning_steps=PLANNING_STEPS)
    agent.setup(env.observation_space.n, env.action_space.n, seed)
    state, _ = env.reset(seed=seed)
    for _ in range(sizes.fill_steps):
        action = agent.act(state)
        next_state, reward, terminated, _, _ = env.step(action)
        agent.observe(state, action, reward, next_state, terminated)
        state = env.reset()[0] if terminated else next_state
    return agent, env


def measure_kernel(sizes: Sizes, seed: int) -> tuple[Figure, str]:
    """Time `dyna_q_plan` called directly with a large n on a filled model."""
    agent, env = filled_tool_agent(sizes, seed)
    arrays, hyper, counters, rng = agent.arrays_, agent.hyper_, agent.counters_, agent.stream_
    dyna_q_plan(arrays, hyper, counters, np.int64(1_000), rng)  # compile or load from cache; not timed
    n = np.int64(sizes.kernel_updates)

    def run() -> int:
        before = int(counters[1])
        dyna_q_plan(arrays, hyper, counters, n, rng)
        return int(counters[1]) - before

    figure = best_of("1a tool kernel dyna_q_plan alone (numba)", run)
    n_pairs = int(arrays[6][0])
    path = greedy_path_length(arrays[0], env.P, int(np.flatnonzero(env.initial_state_distrib)[0]))
    note = (
        f"model holds {n_pairs} (state, action) pairs after {sizes.fill_steps} real steps; "
        f"greedy path from S {describe_path(path)}"
    )
    return figure, note


# --- 1b: the tool end to end --------------------------------------------------------------------------


def trial_spec(real_steps: int, seed: int) -> dict[str, Any]:
    """A trial spec laid out as `runner.plan.plan_trials` makes them; evaluation only at the start and end."""
    env = {
        "source": "grid",
        "map": DYNA_MAZE,
        "slip": 0.0,
        "step_reward": 0.0,
        "goal_reward": 1.0,
        "hazard_penalty": -1.0,
        "hazard_ends": True,
        "step_limit": None,
    }
    params = DynaQ(alpha=ALPHA, gamma=GAMMA, epsilon=EPSILON, planning_steps=PLANNING_STEPS).get_params()
    return TrialSpec.build(
        env, "dyna_q", params, seed, real_steps, every=real_steps, episodes=1, step_cap=100, training_window=10
    ).as_dict()


def per_call_seconds(call: Any, calls: int) -> float:
    """Best-of-REPEATS mean seconds of one `call()`, over `calls` calls."""
    best = float("inf")
    for _ in range(REPEATS):
        start = time.perf_counter()
        for _ in range(calls):
            call()
        best = min(best, (time.perf_counter() - start) / calls)
    return best


def measure_step_parts(sizes: Sizes, seed: int) -> str:
    """Where a real step's time goes: one `agent.act`, one `env.step`, one `agent.observe` (n=50), each alone.

    The same transition is repeated, so the figures are per-call costs, not a learning run.
    """
    agent, env = filled_tool_agent(sizes, seed)
    state = int(np.flatnonzero(env.initial_state_distrib)[0])
    calls = sizes.trial_steps // 2

    def step_env() -> None:
        env.s = state
        env.step(1)

    act = per_call_seconds(lambda: agent.act(state), calls)
    step = per_call_seconds(step_env, calls)
    observe = per_call_seconds(lambda: agent.observe(state, 1, 0.0, state + 1, False), calls)
    return f"agent.act {act * 1e6:.1f} us, env.step {step * 1e6:.1f} us, agent.observe (n=50) {observe * 1e6:.1f} us"


def measure_trial(sizes: Sizes, seed: int) -> tuple[Figure, str]:
    """Time whole `run_trial` calls (environment building and evaluation included) with n=50."""
    run_trial(trial_spec(200, seed))  # compile or load every kernel the trial uses; not timed
    spec = trial_spec(sizes.trial_steps, seed)
    last: dict[str, Any] = {}

    def run() -> int:
        result = run_trial(spec)
        last["rows"] = result.rows
        last["episodes"] = len(result.episode_returns)
        return int(result.rows["planning_updates"][-1])

    figure = best_of("1b tool end to end, run_trial, n=50", run)
    rows = last["rows"]
    note = (
        f"{sizes.trial_steps} real steps, {last['episodes']} episodes, final greedy return "
        f"{rows['eval_return'][-1]:.1f}, trial's own wall_seconds {rows['wall_seconds'][-1]:.3f}"
    )
    return figure, note


# --- 2: the same Dyna-Q in plain Python ---------------------------------------------------------------

_CHUNK = 4096


def plain_plan(q: list[list[float]], model: dict, seen: list, n: int, rng: np.random.Generator) -> int:
    """n Dyna-Q planning updates in plain Python: replay uniformly chosen seen (state, action) pairs.

    The uniform numbers are drawn in blocks from the numpy Generator and then used one by one, so this
    baseline is not slowed by the per-call cost of scalar Generator draws (that would flatter the tool).
    """
    n_seen = len(seen)
    done = 0
    while done < n:
        for u in rng.random(min(_CHUNK, n - done)).tolist():
            s, a = seen[int(u * n_seen)]
            reward, s2, terminated = model[s, a]
            target = reward if terminated else reward + GAMMA * max(q[s2])
            row = q[s]
            row[a] += ALPHA * (target - row[a])
        done += min(_CHUNK, n - done)
    return n


def plain_act(row: list[float], rng: np.random.Generator) -> int:
    """Epsilon-greedy with uniform tie-breaking, as the tool's kernel does."""
    if rng.random() < EPSILON:
        return int(rng.random() * len(row))
    best = max(row)
    ties = [a for a, v in enumerate(row) if v == best]
    return ties[0] if len(ties) == 1 else ties[int(rng.random() * len(ties))]


def plain_dyna_q(
    table: dict, start: int, n_states: int, n_actions: int, real_steps: int, rng: np.random.Generator
) -> tuple[list[list[float]], dict, list, int]:
    """Tabular Dyna-Q in per-step Python on the maze's transition table (no gymnasium, no numba).

    Returns the Q-table, the last-outcome model, the seen pairs in first-seen order and the planning updates.
    """
    q = [[0.0] * n_actions for _ in range(n_states)]
    model: dict[tuple[int, int], tuple[float, int, bool]] = {}
    seen: list[tuple[int, int]] = []
    planned = 0
    state = start
    for _ in range(real_steps):
        action = plain_act(q[state], rng)
        _, next_state, reward, terminated = table[state][action][0]
        target = reward if terminated else reward + GAMMA * max(q[next_state])
        q[state][action] += ALPHA * (target - q[state][action])
        if (state, action) not in model:
            seen.append((state, action))
        model[state, action] = (reward, next_state, terminated)
        planned += plain_plan(q, model, seen, PLANNING_STEPS, rng)
        state = start if terminated else next_state
    return q, model, seen, planned


def measure_plain(sizes: Sizes, seed: int) -> tuple[Figure, Figure, str]:
    """Time the plain-Python Dyna-Q whole loop with n=50, then its planning loop alone on a filled model."""
    env = GridWorld(DYNA_MAZE)
    start = int(np.flatnonzero(env.initial_state_distrib)[0])
    n_states, n_actions = int(env.observation_space.n), int(env.action_space.n)

    def run_loop() -> int:
        return plain_dyna_q(env.P, start, n_states, n_actions, sizes.plain_steps, np.random.default_rng(seed))[3]

    loop = best_of("2a plain Python Dyna-Q, whole loop, n=50", run_loop)
    q, model, seen, _ = plain_dyna_q(env.P, start, n_states, n_actions, sizes.fill_steps, np.random.default_rng(seed))
    rng = np.random.default_rng(seed + 1)

    def run_plan() -> int:
        return plain_plan(q, model, seen, sizes.plain_plan_updates, rng)

    plan = best_of("2b plain Python planning loop alone", run_plan)
    path = greedy_path_length(q, env.P, start)
    note = (
        f"model holds {len(seen)} (state, action) pairs after {sizes.fill_steps} real steps; "
        f"greedy path from S {describe_path(path)}"
    )
    return loop, plan, note


# --- report -------------------------------------------------------------------------------------------


def command_line(quick: bool, script: str = "planning_speed.py") -> str:
    """The command that reproduces a run of one of the benchmark scripts."""
    root = Path(__file__).resolve().parent.parent
    return f"cd {root} && PYTHONPATH={root} python benchmarks/{script}" + (" --quick" if quick else "")


def benchmark_start(
    argv: list[str] | None, description: str, script: str, versions: str = ""
) -> tuple[argparse.Namespace, int]:
    """The opening the JAX benchmarks share: `--quick` and `--seed`, one pinned core, the machine and date lines
    (`versions` appended to the machine line); returns the arguments and the scale (10 with --quick, else 1)."""
    parser = argparse.ArgumentParser(description=description)
    parser.add_argument("--quick", action="store_true", help="a smoke run about ten times smaller")
    parser.add_argument("--seed", type=int, default=0)
    args = parser.parse_args(argv)
    pinned = pin_to_one_core()
    print(f"machine: {cpu_model()}; {pinned}; python {sys.version.split()[0]}{versions}")
    print(f"date: {time.strftime('%Y-%m-%d %H:%M')}; reproduce: {command_line(args.quick, script)}")
    return args, 10 if args.quick else 1


def main(argv: list[str] | None = None) -> int:
    """Measure, then print the machine, the table, the ratios and the target check."""
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="every size about 10x smaller (smoke check)")
    parser.add_argument("--seed", type=int, default=0, help="seed of every numpy Generator used (default 0)")
    args = parser.parse_args(argv)
    sizes = QUICK if args.quick else FULL
    pinned = pin_to_one_core()

    print("stepmeter planning speed: Dyna-Q, n=50, Sutton & Barto (2018) Example 8.1 maze (6x9)")
    print(f"cpu      : {cpu_model()}; {pinned}")
    print(
        f"software : python {platform.python_version()}, numpy {np.__version__}, numba {numba.__version__}, "
        f"gymnasium {gymnasium.__version__} ({platform.system()} {platform.machine()})"
    )
    print(
        f"mode     : {'quick (sizes / 10)' if args.quick else 'full'}; seed {args.seed}; "
        f"best of {REPEATS} per figure, compile time excluded"
    )
    print()

    kernel, kernel_note = measure_kernel(sizes, args.seed)
    trial, trial_note = measure_trial(sizes, args.seed)
    parts = measure_step_parts(sizes, args.seed)
    plain_loop, plain_plan_fig, plain_note = measure_plain(sizes, args.seed)
    figures = [kernel, trial, plain_loop, plain_plan_fig]

    width = max(len(f.what) for f in figures)
    print(f"{'what':<{width}}  {'figure':>10}  unit                 {'updates':>11}  {'best s':>8}")
    print("-" * (width + 58))
    for f in figures:
        print(f"{f.what:<{width}}  {f.rate / 1e6:>10.3f}  M planning updates/s {f.work:>11,}  {f.seconds:>8.4f}")
    print()
    print(f"1a: {kernel_note}")
    print(f"1b: {trial_note}")
    per_step = trial.seconds / sizes.trial_steps
    planning_share = PLANNING_STEPS / kernel.rate
    print(
        f"    {per_step * 1e6:.1f} us per real step end to end, of which {planning_share * 1e6:.1f} us is planning "
        "at the kernel's speed;"
    )
    print(f"    one call each, alone: {parts}")
    print(f"2 : {plain_note}")
    print(
        f"    (plain Python steps the maze through its transition table, not gymnasium; shortest path is "
        f"{SHORTEST_PATH} moves)"
    )
    print()
    print("ratios")
    print(f"  tool kernel     / plain Python whole loop    : {kernel.rate / plain_loop.rate:8.1f} x")
    print(f"  tool end to end / plain Python whole loop    : {trial.rate / plain_loop.rate:8.1f} x")
    like = kernel.rate / plain_plan_fig.rate
    print(f"  tool kernel     / plain Python planning loop : {like:8.1f} x  (like for like)")
    print()
    print(f"target for this stage: >= {TARGET_PER_SECOND / 1e6:g} M planning updates/s on one core")
    for f in (kernel, trial):
        verdict = "PASS" if f.rate >= TARGET_PER_SECOND else "MISS"
        print(f"  {verdict}  {f.what}: {f.rate / 1e6:.3f} M/s")
    print()
    print(f"reproduce: {command_line(args.quick)}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
