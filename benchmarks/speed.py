"""Speed of stepmeter end to end, against plain per-step Python doing the same work, checked against targets.

What: one run prints these figures in one table (figure, unit, the plain-Python figure where there is one, the
ratio, the target, PASS/MISS):

1. Dyna-Q (n = 50) planning updates per second on the 6x9 maze of Sutton & Barto (2018), Example 8.1, through
   `run_trial(spec, "compiled")` on one core, beside the plain-Python Dyna-Q of `planning_speed.py`;
2. Q-learning real steps per second on gymnasium's FrozenLake8x8-v1 through `run_trial` on the compiled path and
   on the gymnasium path, beside a plain per-step Python Q-learning stepping `gymnasium.make(...)`;
3. the bundled demo experiment `configs/warehouse.yaml` end to end (`stepmeter run --jobs 1` in a subprocess, so
   import and start-up count) against a plain per-step Python implementation of the same experiment, run on a
   subset and scaled linearly per trial to the whole experiment;
4. parallel scaling: `stepmeter run --jobs 1` against `--jobs 2` on the demo experiment and on a 200-seed variant;
5. `stepmeter report` on a synthetic experiment of 10,000 trials x 200 evaluation points made by a real run through
   the real store: wall seconds and peak memory;
6. the machine, the software versions, the date and the command that reproduces the output.

Why: stepmeter is only useful if an experiment's figures come back fast enough to iterate on, and if they stay cheap
as experiments grow; each figure has a target, and the plain-Python figures show what the compiled paths buy.

Every one-core figure runs pinned to one CPU with `os.sched_setaffinity` (the pin is lifted afterwards, and
item 4 and the synthetic experiment let the subprocesses use every allowed core). Numba compile time is left out of
every figure: each compiled path is warmed first, which also fills numba's on-disk cache (runner/__pycache__)
that the `stepmeter` subprocesses load. In-process figures are the best of 3 repetitions, subprocess figures
the best of 2 (1 with `--quick`). After each item the script prints how much CPU other processes on the
machine took meanwhile (from /proc/stat), because such work slows every figure and the parallel ones most.
Randomness comes only from seeded numpy Generators. This script prints figures; it asserts nothing. Run from
the repository root with `PYTHONPATH=. python benchmarks/speed.py` (`--quick` for a run about ten times smaller,
`--only 1,3` for some items, `--keep` to keep the synthetic experiment).
"""

from __future__ import annotations

import argparse
import contextlib
import math
import os
import platform
import re
import resource
import shutil
import subprocess
import sys
import tempfile
import time
import traceback
from collections import deque
from collections.abc import Callable, Iterator
from dataclasses import dataclass, field
from datetime import datetime
from pathlib import Path
from typing import Any

import gymnasium
import numba
import numpy as np

try:  # run as a script: benchmarks/ is on sys.path
    from planning_speed import DYNA_MAZE, best_of, cpu_model, plain_dyna_q, trial_spec
except ImportError:  # run as `python -m benchmarks.speed` from the repository root
    from benchmarks.planning_speed import DYNA_MAZE, best_of, cpu_model, plain_dyna_q, trial_spec

from runner.agents.q_learning import QLearning
from runner.config import load_experiment
from runner.envs.grid import GridWorld
from runner.trial import run_trial
from runner.trial_spec import TrialSpec

ROOT = Path(__file__).resolve().parent.parent
DEMO_EXPERIMENT = ROOT / "configs" / "warehouse.yaml"
ALPHA, GAMMA, EPSILON = 0.1, 0.95, 0.1
"""Hyperparameters of items 1 and 2 (those of planning_speed.py and of the demo experiment)."""

DYNA_N = 50
LAKE_ID = "FrozenLake8x8-v1"
LAKE_ENV = {"source": "gym", "id": LAKE_ID, "options": {}, "step_limit": None}
LAKE_STEP_CAP = 200  # FrozenLake8x8-v1's registered max_episode_steps, which an experiment would use as step_cap

TARGET_PLANNING = 8e6  # item 1: planning updates/s on one core
TARGET_LAKE = 2e6  # item 2: real steps/s on one core, compiled path
TARGET_EXPERIMENT_SPEEDUP = 20.0  # item 3: tool at least this many times faster than plain Python
TARGET_SCALING = 1.8  # item 4: 2 processes at least this many times faster than 1
TARGET_REPORT_SECONDS = 60.0  # item 5
TARGET_REPORT_BYTES = 2 * 1024**3  # item 5: 2 GiB peak resident memory

SYNTH_MAP = "S..#\n.#..\n...G"
"""The synthetic experiment's small grid map (12 cells; the shortest path takes 5 moves)."""


@dataclass(frozen=True)
class Sizes:
    """How much work each item does; `--quick` makes everything about ten times smaller."""

    dyna_steps: int  # item 1: real steps of each timed run_trial (n=50 planning updates each)
    dyna_plain_steps: int  # item 1: real steps of each timed plain-Python Dyna-Q run
    lake_steps: int  # item 2: real steps of each timed compiled run_trial
    lake_every: int  # item 2: evaluation interval on the compiled path (10 episodes each)
    lake_gym_steps: int  # item 2: real steps of each timed gymnasium-path run_trial
    lake_plain_steps: int  # item 2: real steps of each timed plain-Python Q-learning run
    plain_seeds: int  # item 3: seeds per agent variant run in plain Python
    plain_fraction: int  # item 3: plain Python runs 1/plain_fraction of the real-step budget
    scaling_seeds: int  # item 4: seeds of the larger variant of the demo experiment
    synth_seeds: int  # item 5: seeds per agent variant of the synthetic experiment (5 variants)
    runs: int  # repetitions of each timed subprocess (best kept)


FULL = Sizes(
    dyna_steps=50_000,
    dyna_plain_steps=5_000,
    lake_steps=2_000_000,
    lake_every=500_000,
    lake_gym_steps=100_000,
    lake_plain_steps=100_000,
    plain_seeds=2,
    plain_fraction=1,
    scaling_seeds=200,
    synth_seeds=2_000,
    runs=2,
)
QUICK = Sizes(
    dyna_steps=5_000,
    dyna_plain_steps=500,
    lake_steps=200_000,
    lake_every=50_000,
    lake_gym_steps=10_000,
    lake_plain_steps=10_000,
    plain_seeds=1,
    plain_fraction=10,
    scaling_seeds=20,
    synth_seeds=200,
    runs=1,
)


@dataclass
class Row:
    """One line of the final table, already formatted."""

    item: str
    what: str
    value: str
    unit: str
    plain: str = "-"
    ratio: str = "-"
    target: str = "-"
    verdict: str = "-"


@dataclass
class Context:
    """What the items share: sizes, the seed, a scratch folder and whether numba's disk cache is warm."""

    sizes: Sizes
    seed: int
    scratch: Path
    keep: bool
    warm: bool = False
    rows: list[Row] = field(default_factory=list)


def say(text: str = "") -> None:
    """Print a line at once, so a run whose output goes to a file can be followed while it works."""
    print(text, flush=True)


def verdict(passed: bool) -> str:
    """PASS or MISS."""
    return "PASS" if passed else "MISS"


def mega(rate: float) -> str:
    """A rate in millions, to 3 significant digits."""
    return f"{rate / 1e6:.3g}"


@contextlib.contextmanager
def one_core() -> Iterator[str]:
    """Pin this process (and the subprocesses it starts meanwhile) to its first allowed CPU, then unpin it."""
    if not hasattr(os, "sched_setaffinity"):
        yield "not pinned (os.sched_setaffinity is unavailable on this platform)"
        return
    allowed = os.sched_getaffinity(0)
    cpu = min(allowed)
    try:
        os.sched_setaffinity(0, {cpu})
    except OSError as err:
        yield f"not pinned ({err})"
        return
    try:
        yield f"pinned to CPU {cpu}"
    finally:
        os.sched_setaffinity(0, allowed)


def load_average() -> str:
    """The 1-minute load average, to show when other work shared the machine with a figure."""
    return f"{os.getloadavg()[0]:.2f}" if hasattr(os, "getloadavg") else "n/a"


@dataclass(frozen=True)
class CpuSnapshot:
    """Machine-wide busy CPU seconds (from /proc/stat), wall time, and the CPU seconds of this process plus its
    waited-for descendants, so the CPU time other processes took meanwhile can be told apart."""

    machine_busy: float
    wall: float
    ours: float

    @staticmethod
    def take() -> CpuSnapshot | None:
        """A snapshot now, or None where /proc/stat is not available."""
        try:
            with open("/proc/stat", encoding="ascii") as f:
                fields = [int(x) for x in f.readline().split()[1:]]
        except (OSError, ValueError):
            return None
        user, nice, system, _idle, _iowait, irq, softirq, steal = (fields + [0] * 8)[:8]
        busy = (user + nice + system + irq + softirq + steal) / os.sysconf("SC_CLK_TCK")
        me, children = resource.getrusage(resource.RUSAGE_SELF), resource.getrusage(resource.RUSAGE_CHILDREN)
        ours = me.ru_utime + me.ru_stime + children.ru_utime + children.ru_stime
        return CpuSnapshot(busy, time.perf_counter(), ours)


def other_cpu_use(before: CpuSnapshot | None) -> str:
    """How much CPU other processes on the machine used since `before`, in words."""
    after = CpuSnapshot.take()
    if before is None or after is None:
        return "CPU use of other processes unknown"
    others = max(0.0, (after.machine_busy - before.machine_busy) - (after.ours - before.ours))
    wall = after.wall - before.wall
    cores = os.cpu_count() or 1
    return (
        f"other processes used {others:.1f} CPU-s of the {cores * wall:.1f} this machine had "
        f"({others / (cores * wall):.0%})"
    )


def allowed_cpus() -> list[int]:
    """The CPUs this process may run on."""
    if hasattr(os, "sched_getaffinity"):
        return sorted(os.sched_getaffinity(0))
    return list(range(os.cpu_count() or 1))


def uniforms(rng: np.random.Generator) -> Iterator[float]:
    """Endless uniform [0, 1) numbers from a seeded Generator, drawn in blocks and handed out one by one.

    `next(u)` costs far less than a scalar `rng.random()` call, so the plain-Python baselines are not slowed
    by per-call Generator overhead (that would flatter the tool).
    """
    while True:
        yield from rng.random(4096).tolist()


def argmax_random_tie(row: list[float], u: Iterator[float]) -> int:
    """Index of the largest value, ties broken uniformly at random (as the tool's kernel does)."""
    best = max(row)
    ties = [a for a, v in enumerate(row) if v == best]
    return ties[0] if len(ties) == 1 else ties[int(next(u) * len(ties))]


def epsilon_greedy(row: list[float], epsilon: float, u: Iterator[float]) -> int:
    """With probability epsilon a uniform action, else a greedy one with random tie-breaking."""
    if next(u) < epsilon:
        return int(next(u) * len(row))
    return argmax_random_tie(row, u)


# --- the stepmeter command in a subprocess ------------------------------------------------------------


def stepmeter_command(*args: str) -> list[str]:
    """`stepmeter ARGS` as this interpreter running `python -m runner` (what the console script runs)."""
    return [sys.executable, "-m", "runner", *args]


def subprocess_env() -> dict[str, str]:
    """This process's environment with the repository root first on PYTHONPATH."""
    env = dict(os.environ)
    env["PYTHONPATH"] = os.pathsep.join(p for p in (str(ROOT), env.get("PYTHONPATH", "")) if p)
    return env


def run_stepmeter(args: list[str], wrapper: list[str] | None = None) -> tuple[float, str]:
    """Run `stepmeter ARGS` from the repository root; return its wall seconds and its standard output.

    Raises RuntimeError with the end of its standard error when it fails.
    """
    command = [*(wrapper or []), *stepmeter_command(*args)]
    start = time.perf_counter()
    done = subprocess.run(command, cwd=ROOT, env=subprocess_env(), capture_output=True, text=True, check=False)
    seconds = time.perf_counter() - start
    if done.returncode != 0:
        tail = "\n".join(done.stderr.strip().splitlines()[-15:])
        raise RuntimeError(f"`stepmeter {' '.join(args)}` exited with {done.returncode}:\n{tail}")
    return seconds, done.stdout


def time_experiment_run(ctx: Context, experiment: Path, jobs: int, keep: Path | None = None) -> float:
    """Wall seconds of one `stepmeter run EXPERIMENT --jobs J --no-report` into a fresh results folder.

    The results go to `keep` when it is given (and stay there); otherwise they are deleted afterwards.
    """
    results = keep if keep is not None else Path(tempfile.mkdtemp(prefix="results-", dir=ctx.scratch))
    try:
        seconds, _ = run_stepmeter(
            ["run", str(experiment), "--jobs", str(jobs), "--no-report", "--results", str(results)]
        )
    finally:
        if keep is None:
            shutil.rmtree(results, ignore_errors=True)
    return seconds


def ensure_warm(ctx: Context) -> None:
    """Run the demo experiment once, untimed, so numba's disk cache holds every kernel the timed runs load."""
    if ctx.warm:
        return
    results = Path(tempfile.mkdtemp(prefix="warm-", dir=ctx.scratch))
    try:
        seconds, _ = run_stepmeter(
            ["run", str(DEMO_EXPERIMENT), "--jobs", "1", "--no-report", "--results", str(results)]
        )
    finally:
        shutil.rmtree(results, ignore_errors=True)
    say(f"    (warm-up: one untimed run of the demo experiment took {seconds:.2f} s; numba's disk cache is now warm)")
    ctx.warm = True


def folder_bytes(folder: Path) -> int:
    """Total size of the files under a folder."""
    return sum(p.stat().st_size for p in folder.rglob("*") if p.is_file())


# --- item 1: Dyna-Q n=50 planning updates per second ----------------------------------------------------


def item_planning(ctx: Context) -> None:
    """Dyna-Q n=50 on the Example 8.1 maze: planning updates/s through run_trial (compiled) and in plain Python."""
    sizes, seed = ctx.sizes, ctx.seed
    with one_core() as pinned:
        run_trial(trial_spec(200, seed), "compiled")  # compile or load every kernel; not timed
        spec = trial_spec(sizes.dyna_steps, seed)
        last: dict[str, Any] = {}

        def run_tool() -> int:
            result = run_trial(spec, "compiled")
            last["rows"] = result.rows
            return int(result.rows["planning_updates"][-1])

        tool = best_of("tool", run_tool)
        env = GridWorld(DYNA_MAZE)
        start = int(np.flatnonzero(env.initial_state_distrib)[0])
        n_states, n_actions = int(env.observation_space.n), int(env.action_space.n)

        def run_plain() -> int:
            rng = np.random.default_rng(seed)
            return plain_dyna_q(env.P, start, n_states, n_actions, sizes.dyna_plain_steps, rng)[3]

        plain = best_of("plain", run_plain)
    ratio = tool.rate / plain.rate
    say(f"1 Dyna-Q n={DYNA_N}, Example 8.1 maze, {pinned}")
    say(
        f"    tool: run_trial(spec, 'compiled'), {sizes.dyna_steps:,} real steps, {tool.work:,} planning updates "
        f"in {tool.seconds:.4f} s (best of 3), evaluation only at steps 0 and {sizes.dyna_steps:,}; "
        f"final greedy return {last['rows']['eval_return'][-1]:.1f}"
    )
    say(
        f"    plain Python: planning_speed.plain_dyna_q (lists and a dict, table stepping), {sizes.dyna_plain_steps:,}"
        f" real steps, {plain.work:,} planning updates in {plain.seconds:.4f} s (best of 3)"
    )
    ctx.rows.append(
        Row(
            "1",
            f"Dyna-Q n={DYNA_N} planning, run_trial compiled, 1 core",
            mega(tool.rate),
            "M planning updates/s",
            mega(plain.rate),
            f"{ratio:.0f}x",
            f">= {TARGET_PLANNING / 1e6:g}",
            verdict(tool.rate >= TARGET_PLANNING),
        )
    )


# --- item 2: Q-learning on FrozenLake8x8 ------------------------------------------------------------------


def lake_spec(real_steps: int, every: int, seed: int) -> dict[str, Any]:
    """A Q-learning trial spec on FrozenLake8x8-v1 laid out as `runner.plan.plan_trials` makes them."""
    return TrialSpec.build(
        dict(LAKE_ENV),
        "q_learning",
        QLearning(alpha=ALPHA, gamma=GAMMA, epsilon=EPSILON).get_params(),
        seed,
        real_steps,
        every=every,
        episodes=10,
        step_cap=LAKE_STEP_CAP,
        training_window=10,
    ).as_dict()


def plain_lake_q_learning(steps: int, seed: int) -> int:
    """Plain per-step Python Q-learning stepping `gymnasium.make(LAKE_ID)` (its default wrappers included).

    Epsilon-greedy with random tie-breaking and the same hyperparameters as the tool; no evaluation (the tool's
    timed run evaluates only every few hundred thousand steps). Returns the real steps taken.
    """
    env = gymnasium.make(LAKE_ID)
    env_seq, agent_seq = np.random.SeedSequence(seed).spawn(2)
    u = uniforms(np.random.default_rng(agent_seq))
    n_actions = int(env.action_space.n)
    q = [[0.0] * n_actions for _ in range(int(env.observation_space.n))]
    state = int(env.reset(seed=int(env_seq.generate_state(1)[0]))[0])
    try:
        for _ in range(steps):
            action = epsilon_greedy(q[state], EPSILON, u)
            next_state, reward, terminated, truncated, _ = env.step(action)
            next_state = int(next_state)
            target = reward if terminated else reward + GAMMA * max(q[next_state])
            q[state][action] += ALPHA * (target - q[state][action])
            state = int(env.reset()[0]) if terminated or truncated else next_state
    finally:
        env.close()
    return steps


def item_lake(ctx: Context) -> None:
    """Q-learning on FrozenLake8x8-v1: real steps/s on the compiled path, the gymnasium path and in plain Python."""
    sizes, seed = ctx.sizes, ctx.seed
    with one_core() as pinned:
        for path in ("compiled", "gymnasium"):
            run_trial(lake_spec(1_000, 500, seed), path)  # compile or load the kernels; not timed
        compiled_spec = lake_spec(sizes.lake_steps, sizes.lake_every, seed)
        gym_spec = lake_spec(sizes.lake_gym_steps, sizes.lake_gym_steps, seed)
        last: dict[str, Any] = {}

        def run_compiled() -> int:
            result = run_trial(compiled_spec, "compiled")
            last["rows"] = result.rows
            return int(result.rows["real_steps"][-1])

        compiled = best_of("compiled", run_compiled)
        gym_path = best_of("gymnasium", lambda: int(run_trial(gym_spec, "gymnasium").rows["real_steps"][-1]))
        plain = best_of("plain", lambda: plain_lake_q_learning(sizes.lake_plain_steps, seed))
    say(f"2 Q-learning, {LAKE_ID}, {pinned}")
    points = len(last["rows"]["real_steps"])
    say(
        f"    compiled path: {sizes.lake_steps:,} real steps in {compiled.seconds:.4f} s (best of 3), {points} "
        f"evaluation points of 10 greedy episodes (cap {LAKE_STEP_CAP}); final greedy return "
        f"{last['rows']['eval_return'][-1]:.2f}"
    )
    say(f"    gymnasium path: {sizes.lake_gym_steps:,} real steps in {gym_path.seconds:.4f} s (best of 3)")
    say(
        f"    plain Python through gymnasium.make('{LAKE_ID}'): {sizes.lake_plain_steps:,} real steps in "
        f"{plain.seconds:.4f} s (best of 3), no evaluation"
    )
    ctx.rows.append(
        Row(
            "2",
            "Q-learning FrozenLake8x8, run_trial compiled, 1 core",
            mega(compiled.rate),
            "M real steps/s",
            mega(plain.rate),
            f"{compiled.rate / plain.rate:.0f}x",
            f">= {TARGET_LAKE / 1e6:g}",
            verdict(compiled.rate >= TARGET_LAKE),
        )
    )
    ctx.rows.append(
        Row(
            "2",
            "Q-learning FrozenLake8x8, run_trial gymnasium, 1 core",
            mega(gym_path.rate),
            "M real steps/s",
            mega(plain.rate),
            f"{gym_path.rate / plain.rate:.2f}x",
        )
    )


# --- item 3: the demo experiment, tool against plain Python ---------------------------------------------------


class PlainEnv:
    """A grid map stepped from its transition table in plain Python, with an optional step limit.

    `outcomes[s][a]` lists (cumulative probability, next state, reward, terminated); one outcome draws nothing.
    """

    def __init__(self, grid: GridWorld, step_limit: int | None) -> None:
        n_states, n_actions = int(grid.observation_space.n), int(grid.action_space.n)
        self.outcomes: list[list[list[tuple[float, int, float, bool]]]] = []
        for s in range(n_states):
            per_action = []
            for a in range(n_actions):
                total, cumulative = 0.0, []
                for prob, nxt, reward, terminated in grid.P[s][a]:
                    total += prob
                    cumulative.append((total, int(nxt), float(reward), bool(terminated)))
                per_action.append(cumulative)
            self.outcomes.append(per_action)
        starts = np.flatnonzero(grid.initial_state_distrib)
        self.starts = [int(s) for s in starts]
        self.n_states, self.n_actions = n_states, n_actions
        self.step_limit = step_limit or 0

    def start(self, u: Iterator[float]) -> int:
        """A start state (uniform over the start cells)."""
        return self.starts[0] if len(self.starts) == 1 else self.starts[int(next(u) * len(self.starts))]

    def step(self, state: int, action: int, u: Iterator[float]) -> tuple[int, float, bool]:
        """(next state, reward, terminated) of one move."""
        outcomes = self.outcomes[state][action]
        if len(outcomes) == 1:
            _, nxt, reward, terminated = outcomes[0]
            return nxt, reward, terminated
        x = next(u)
        for cumulative, nxt, reward, terminated in outcomes:
            if x < cumulative:
                return nxt, reward, terminated
        _, nxt, reward, terminated = outcomes[-1]
        return nxt, reward, terminated


class PlainQLearning:
    """Tabular Q-learning in plain Python (lists), epsilon-greedy with random tie-breaking."""

    def __init__(self, n_states: int, n_actions: int, u: Iterator[float], params: dict[str, Any]) -> None:
        self.q = [[float(params.get("initial_q", 0.0))] * n_actions for _ in range(n_states)]
        self.alpha, self.gamma, self.epsilon = params["alpha"], params["gamma"], params["epsilon"]
        self.u = u
        self.counters = [0, 0, 0]  # real updates, planning updates, model updates

    def act(self, state: int) -> int:
        return epsilon_greedy(self.q[state], self.epsilon, self.u)

    def update(self, s: int, a: int, reward: float, s2: int, terminated: bool) -> None:
        """One Q-learning backup; a terminated transition does not bootstrap."""
        row = self.q[s]
        target = reward if terminated else reward + self.gamma * max(self.q[s2])
        row[a] += self.alpha * (target - row[a])

    def observe(self, s: int, a: int, reward: float, s2: int, terminated: bool) -> None:
        self.update(s, a, reward, s2, terminated)
        self.counters[0] += 1


class PlainDynaQ(PlainQLearning):
    """Dyna-Q in plain Python: Q-learning plus n planning updates from a last-outcome model per real step."""

    def __init__(self, n_states: int, n_actions: int, u: Iterator[float], params: dict[str, Any]) -> None:
        super().__init__(n_states, n_actions, u, params)
        self.n = int(params["planning_steps"])
        self.model: dict[tuple[int, int], tuple[float, int, bool]] = {}
        self.seen: list[tuple[int, int]] = []

    def observe(self, s: int, a: int, reward: float, s2: int, terminated: bool) -> None:
        self.update(s, a, reward, s2, terminated)
        self.counters[0] += 1
        if (s, a) not in self.model:
            self.seen.append((s, a))
        self.model[s, a] = (reward, s2, terminated)
        self.counters[2] += 1
        seen, model, q, u = self.seen, self.model, self.q, self.u
        alpha, gamma, n_seen = self.alpha, self.gamma, len(seen)
        for _ in range(self.n):
            ps, pa = seen[int(next(u) * n_seen)]
            r, ps2, done = model[ps, pa]
            row = q[ps]
            target = r if done else r + gamma * max(q[ps2])
            row[pa] += alpha * (target - row[pa])
        self.counters[1] += self.n


class PlainCertaintyEquivalence:
    """Certainty-equivalence in plain Python: count-based model, Gauss-Seidel value iteration every k real steps.

    The same rules as the tool's kernel: successor n_states stands for "episode ended" (worth 0), never-tried
    pairs are worth `optimistic_value` (or a zero-reward self-loop), sweeps stop when no state value moves by
    `tolerance` or after `max_sweeps`; the Q-table starts at the optimistic value.
    """

    def __init__(self, n_states: int, n_actions: int, u: Iterator[float], params: dict[str, Any]) -> None:
        self.gamma, self.epsilon = params["gamma"], params["epsilon"]
        self.tol, self.max_sweeps = params["tolerance"], int(params["max_sweeps"])
        self.replan_every = int(params["replan_every"])
        self.optimistic = params["unvisited"] == "optimistic"
        self.optimistic_value = float(params["optimistic_value"])
        start = self.optimistic_value if self.optimistic else 0.0
        self.q = [[start] * n_actions for _ in range(n_states)]
        self.v = [0.0] * (n_states + 1)
        self.succ: list[list[dict[int, float]]] = [[{} for _ in range(n_actions)] for _ in range(n_states)]
        self.visits = [[0.0] * n_actions for _ in range(n_states)]
        self.reward_sum = [[0.0] * n_actions for _ in range(n_states)]
        self.since = 0
        self.n_states, self.n_actions = n_states, n_actions
        self.u = u
        self.counters = [0, 0, 0]

    def act(self, state: int) -> int:
        return epsilon_greedy(self.q[state], self.epsilon, self.u)

    def observe(self, s: int, a: int, reward: float, s2: int, terminated: bool) -> None:
        target = self.n_states if terminated else s2
        counts = self.succ[s][a]
        counts[target] = counts.get(target, 0.0) + 1.0
        self.visits[s][a] += 1.0
        self.reward_sum[s][a] += reward
        self.counters[2] += 1
        self.since += 1
        if self.since >= self.replan_every:
            self.since = 0
            self.counters[1] += self.sweep_until_converged() * self.n_states * self.n_actions

    def sweep_until_converged(self) -> int:
        """In-place value-iteration sweeps over every state; returns the sweeps done."""
        q, v, succ, visits, reward_sum = self.q, self.v, self.succ, self.visits, self.reward_sum
        gamma, optimistic, value_unvisited = self.gamma, self.optimistic, self.optimistic_value
        sweeps = 0
        for _ in range(self.max_sweeps):
            delta = 0.0
            for s in range(self.n_states):
                best = -math.inf
                q_s, succ_s, visits_s, reward_s = q[s], succ[s], visits[s], reward_sum[s]
                for a in range(self.n_actions):
                    total = visits_s[a]
                    if total == 0.0:
                        value = value_unvisited if optimistic else gamma * v[s]
                    else:
                        acc = 0.0
                        for nxt, weight in succ_s[a].items():
                            acc += weight * v[nxt]
                        value = (reward_s[a] + gamma * acc) / total
                    q_s[a] = value
                    if value > best:
                        best = value
                change = abs(best - v[s])
                if change > delta:
                    delta = change
                v[s] = best
            sweeps += 1
            if delta < self.tol:
                break
        return sweeps


PLAIN_AGENTS: dict[str, Callable[..., Any]] = {
    "q_learning": PlainQLearning,
    "dyna_q": PlainDynaQ,
    "certainty_equivalence": PlainCertaintyEquivalence,
}


def plain_trial(
    env: PlainEnv,
    kind: str,
    params: dict[str, Any],
    seed: int,
    real_steps: int,
    every: int,
    episodes: int,
    step_cap: int,
    window: int,
) -> list[list[float]]:
    """One trial in plain Python with the tool's protocol; returns its metric rows.

    A row (real steps, episodes, greedy return, training return, the three counters, wall seconds) at step 0
    and every `every` real steps; the greedy return is the mean of `episodes` episodes cut at `step_cap` on a
    separate environment copy with its own stream, ties broken with an evaluation stream of their own.
    """
    env_seq, agent_seq, eval_env_seq, eval_policy_seq = np.random.SeedSequence(seed).spawn(4)
    env_u = uniforms(np.random.default_rng(env_seq))
    eval_env_u = uniforms(np.random.default_rng(eval_env_seq))
    eval_u = uniforms(np.random.default_rng(eval_policy_seq))
    agent = PLAIN_AGENTS[kind](env.n_states, env.n_actions, uniforms(np.random.default_rng(agent_seq)), params)
    cap = min(step_cap, env.step_limit) if env.step_limit else step_cap
    returns: list[float] = []
    recent: deque[float] = deque(maxlen=window)
    rows: list[list[float]] = []
    started = time.perf_counter()

    def record(step: int) -> None:
        total = 0.0
        for _ in range(episodes):
            s = env.start(eval_env_u)
            for _ in range(cap):
                s, reward, terminated = env.step(s, argmax_random_tie(agent.q[s], eval_u), eval_env_u)
                total += reward
                if terminated:
                    break
        train = sum(recent) / len(recent) if recent else math.nan
        wall = time.perf_counter() - started
        rows.append([step, len(returns), total / episodes, train, *agent.counters, wall])

    record(0)
    state = env.start(env_u)
    episode_return, episode_length = 0.0, 0
    for step in range(1, real_steps + 1):
        action = agent.act(state)
        next_state, reward, terminated = env.step(state, action, env_u)
        agent.observe(state, action, reward, next_state, terminated)
        episode_return += reward
        episode_length += 1
        state = next_state
        if terminated or (env.step_limit and episode_length >= env.step_limit):
            returns.append(episode_return)
            recent.append(episode_return)
            episode_return, episode_length = 0.0, 0
            state = env.start(env_u)
        if step % every == 0:
            record(step)
    return rows


def item_demo_experiment(ctx: Context) -> None:
    """The demo experiment end to end through `stepmeter run --jobs 1`, against plain Python scaled from a subset."""
    from runner.analysis.frames import load_results  # only this item reads a store in-process

    sizes = ctx.sizes
    experiment = load_experiment(DEMO_EXPERIMENT)
    (env_decl,) = experiment.environments
    spec = env_decl.spec
    grid = GridWorld(
        spec["map"],
        slip=spec["slip"],
        step_reward=spec["step_reward"],
        goal_reward=spec["goal_reward"],
        hazard_penalty=spec["hazard_penalty"],
        hazard_ends=spec["hazard_ends"],
    )
    env = PlainEnv(grid, spec["step_limit"])
    ev = experiment.evaluation
    plain_steps = experiment.real_steps // sizes.plain_fraction
    plain_steps -= plain_steps % ev.every
    seeds = experiment.seeds[: sizes.plain_seeds]
    results = Path(tempfile.mkdtemp(prefix="demo-", dir=ctx.scratch))
    with one_core() as pinned:
        ensure_warm(ctx)
        best = min(
            time_experiment_run(ctx, DEMO_EXPERIMENT, 1, keep=results if k == 0 else None) for k in range(sizes.runs)
        )
        plain_seconds: dict[str, list[float]] = {}
        plain_rows: dict[str, list[list[list[float]]]] = {}
        for agent in experiment.agents:
            for seed in seeds:
                start = time.perf_counter()
                rows = plain_trial(
                    env,
                    agent.kind,
                    agent.params,
                    seed,
                    plain_steps,
                    ev.every,
                    ev.episodes,
                    env_decl.step_cap,
                    ev.training_window,
                )
                plain_seconds.setdefault(agent.label, []).append(time.perf_counter() - start)
                plain_rows.setdefault(agent.label, []).append(rows)
    frame = load_results(results / experiment.name)
    shutil.rmtree(results, ignore_errors=True)

    n_seeds = len(experiment.seeds)
    step_scale = experiment.real_steps / plain_steps
    scaled_total = 0.0
    say(f"3 demo experiment {DEMO_EXPERIMENT.relative_to(ROOT)} ({experiment.name}), {pinned}")
    say(
        f"    tool: `stepmeter run {DEMO_EXPERIMENT.relative_to(ROOT)} --jobs 1 --no-report "
        f"--results <fresh temp dir>` in a subprocess: {len(experiment.agents)} variants x {n_seeds} seeds x "
        f"{experiment.real_steps:,} real steps, "
        f"{best:.2f} s wall (best of {sizes.runs}; import, start-up, kernel loading and store writes included)"
    )
    subset = f"{len(seeds)} of {n_seeds} seeds per variant"
    if plain_steps != experiment.real_steps:
        subset += f", the first {plain_steps:,} of {experiment.real_steps:,} real steps"
    say(f"    plain Python: same map (GridWorld's P table), same protocol, run on {subset}; per trial:")
    width = max(len(a.label) for a in experiment.agents)
    n_pairs = env.n_states * env.n_actions
    for agent in experiment.agents:
        per_trial = sum(plain_seconds[agent.label]) / len(plain_seconds[agent.label])
        scaled = per_trial * step_scale * n_seeds
        scaled_total += scaled
        plain_final = [rows[-1] for rows in plain_rows[agent.label]]
        tool_at = frame[(frame["agent"] == agent.label) & (frame["real_steps"] == plain_steps)]
        tool_sub = tool_at[tool_at["seed"].isin(seeds)]
        line = (
            f"      {agent.label:<{width}}  {per_trial:8.3f} s/trial -> x {step_scale * n_seeds:g} = {scaled:8.1f} s"
            f"   greedy return at step {plain_steps:,}: plain {np.mean([r[2] for r in plain_final]):.2f} "
            f"(n={len(plain_final)}), tool {tool_at['eval_return'].mean():.2f} (n={len(tool_at)})"
        )
        if agent.kind == "certainty_equivalence":
            plain_sweeps = np.mean([r[5] for r in plain_final]) / n_pairs / plain_steps
            tool_sweeps = tool_sub["planning_updates"].mean() / n_pairs / plain_steps
            line += f"; VI sweeps per real step: plain {plain_sweeps:.2f}, tool {tool_sweeps:.2f} (same seeds)"
        say(line)
    how = f"scaled linearly per trial from {subset} to {n_seeds} seeds" + (
        f" and x {step_scale:g} in real steps" if plain_steps != experiment.real_steps else ""
    )
    say(f"    plain Python experiment total: {scaled_total:.1f} s ({how}; compute only, no start-up)")
    say("    (the environment streams differ between the two, so returns agree in distribution, not exactly)")
    speedup = scaled_total / best
    ctx.rows.append(
        Row(
            "3",
            "demo experiment end to end, stepmeter run --jobs 1, 1 core",
            f"{best:.2f}",
            "s wall",
            f"{scaled_total:.0f} (scaled)",
            f"{speedup:.0f}x",
            f">= {TARGET_EXPERIMENT_SPEEDUP:g}x faster",
            verdict(speedup >= TARGET_EXPERIMENT_SPEEDUP),
        )
    )


# --- item 4: parallel scaling -----------------------------------------------------------------------------


def larger_demo(ctx: Context, seeds: int) -> Path:
    """The demo experiment's YAML with `seeds: N` and another experiment name, written to the scratch folder."""
    text = DEMO_EXPERIMENT.read_text(encoding="utf-8")
    text, n_seeds = re.subn(r"(?m)^seeds:\s*\d+", f"seeds: {seeds}", text)
    text, n_names = re.subn(r"(?m)^experiment:\s*(\S+)", rf"experiment: \g<1>-{seeds}seeds", text)
    if n_seeds != 1 or n_names != 1:
        raise RuntimeError(f"could not rewrite the seeds and experiment lines of {DEMO_EXPERIMENT}")
    path = ctx.scratch / f"warehouse-{seeds}seeds.yaml"
    path.write_text(text, encoding="utf-8")
    return path


def item_scaling(ctx: Context) -> None:
    """`stepmeter run --jobs 1` against `--jobs 2` on the demo experiment and on a larger variant of it."""
    sizes = ctx.sizes
    ensure_warm(ctx)
    cpus = allowed_cpus()
    larger = larger_demo(ctx, sizes.scaling_seeds)
    say(
        f"4 parallel scaling, not pinned (CPUs allowed: {cpus}); best of {sizes.runs} per figure, "
        "--jobs 1 and --jobs 2 runs alternated"
    )
    demo = load_experiment(DEMO_EXPERIMENT)
    n_variants = len(demo.agents)
    for label, experiment, seeds in (
        ("demo", DEMO_EXPERIMENT, len(demo.seeds)),
        ("larger", larger, sizes.scaling_seeds),
    ):
        one = two = math.inf
        for _ in range(sizes.runs):  # alternate, so a burst of other work on the machine hits both alike
            one = min(one, time_experiment_run(ctx, experiment, 1))
            two = min(two, time_experiment_run(ctx, experiment, 2))
        ratio = one / two
        trials = f"{seeds * n_variants} trials"
        name = (
            f"demo experiment ({seeds} seeds, {trials})"
            if label == "demo"
            else f"demo experiment, seeds: {seeds} ({trials})"
        )
        say(f"    {name}: --jobs 1 {one:.2f} s, --jobs 2 {two:.2f} s, speed-up {ratio:.2f}x")
        ctx.rows.append(
            Row(
                "4",
                f"{name}, --jobs 2 vs --jobs 1",
                f"{ratio:.2f}",
                "x speed-up",
                "-",
                f"{one:.2f} s / {two:.2f} s",
                f">= {TARGET_SCALING:g}x",
                verdict(ratio >= TARGET_SCALING),
            )
        )
    if len(cpus) < 2:
        say("    (fewer than 2 CPUs are allowed, so --jobs 2 cannot be faster here)")
    if autogroup_on():
        say(
            "    (Linux shares CPU between terminal sessions first (sched_autogroup_enabled = 1): while other "
            "sessions keep the cores busy, --jobs 2 gets no more CPU than --jobs 1, so these figures mean "
            "something only when the other processes' share printed below is near 0%)"
        )


def autogroup_on() -> bool:
    """Whether the kernel groups each session's processes for CPU sharing."""
    try:
        return Path("/proc/sys/kernel/sched_autogroup_enabled").read_text(encoding="ascii").strip() == "1"
    except OSError:
        return False


# --- item 5: the report of a large stored experiment ------------------------------------------------------------


def synthetic_experiment_text(name: str, seeds: int) -> str:
    """An experiment of 5 agent variants x `seeds` seeds x 200 evaluation points on a small grid map."""
    grid = "\n".join(f"        {line}" for line in SYNTH_MAP.splitlines())
    return f"""\
# Synthetic experiment written by benchmarks/speed.py to time `stepmeter report` on many stored rows.
experiment: {name}
description: Many short trials with many evaluation points, to time the report.
seeds: {seeds}
real_steps: 1990
evaluation:
  every: 10
  episodes: 1
environments:
  - label: small grid
    grid:
      map: |
{grid}
    step_limit: 20
agents:
  - label: Q-learning
    kind: q_learning
  - label: Dyna-Q
    kind: dyna_q
    params: {{planning_steps: [1, 2, 5]}}
  - label: certainty-equivalence
    kind: certainty_equivalence
    params: {{replan_every: 50}}
baseline: Q-learning
"""


def peak_memory_run(args: list[str]) -> tuple[float, int | None, str]:
    """Run `stepmeter ARGS`; return wall seconds, its peak resident memory in bytes (None if unknown) and how."""
    gnu_time = shutil.which("time") or ("/usr/bin/time" if Path("/usr/bin/time").exists() else None)
    if gnu_time:
        with tempfile.NamedTemporaryFile("r", suffix=".time", encoding="utf-8") as out:
            seconds, _ = run_stepmeter(args, [gnu_time, "-f", "%e %M", "-o", out.name])
            fields = out.read().strip().splitlines()[-1].split()
        return seconds, int(fields[1]) * 1024, f'{gnu_time} -f "%e %M" (peak RSS)'
    probe = (
        "import resource, subprocess, sys; subprocess.run(sys.argv[1:], check=True); "
        "print(resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss)"
    )
    start = time.perf_counter()
    done = subprocess.run(
        [sys.executable, "-c", probe, *stepmeter_command(*args)],
        cwd=ROOT,
        env=subprocess_env(),
        capture_output=True,
        text=True,
        check=True,
    )
    seconds = time.perf_counter() - start
    return seconds, int(done.stdout.split()[-1]) * 1024, "resource.getrusage(RUSAGE_CHILDREN).ru_maxrss"


def item_report(ctx: Context) -> None:
    """Make a large experiment through a real `stepmeter run`, then time `stepmeter report` on it and its memory."""
    seeds = ctx.sizes.synth_seeds
    trials = 5 * seeds
    name = f"synthetic-{trials}-trials"
    root = Path(tempfile.mkdtemp(prefix="stepmeter-synthetic-"))
    experiment_file = root / f"{name}.yaml"
    experiment_file.write_text(synthetic_experiment_text(name, seeds), encoding="utf-8")
    folder = root / "results" / name
    say(f"5 report at scale: {trials:,} trials x 200 evaluation points = {trials * 200:,} metric rows")
    try:
        ensure_warm(ctx)
        generate, _ = run_stepmeter(
            ["run", str(experiment_file), "--jobs", "2", "--no-report", "--results", str(root / "results")]
        )
        store_bytes = folder_bytes(folder)
        say(
            f"    generated through the real store by `stepmeter run {experiment_file.name} --jobs 2 --no-report` in "
            f"{generate:.1f} s; experiment folder {folder} holds {store_bytes / 2**20:.1f} MiB"
        )
        seconds, peak, how = peak_memory_run(["report", str(folder)])
        peak_text = "unknown" if peak is None else f"{peak / 2**20:.0f} MiB"
        say(f"    `stepmeter report {folder}`: {seconds:.2f} s wall, peak memory {peak_text} by {how}")
    finally:
        if ctx.keep:
            say(f"    kept {root} (--keep)")
        else:
            shutil.rmtree(root, ignore_errors=True)
            say(f"    deleted {root} (pass --keep to keep it)")
    ctx.rows.append(
        Row("5", f"make the {trials:,}-trial experiment, stepmeter run --jobs 2", f"{generate:.1f}", "s wall")
    )
    ctx.rows.append(
        Row(
            "5",
            f"stepmeter report, {trials:,} trials x 200 points",
            f"{seconds:.1f}",
            "s wall",
            target=f"< {TARGET_REPORT_SECONDS:g}",
            verdict=verdict(seconds < TARGET_REPORT_SECONDS),
        )
    )
    ctx.rows.append(
        Row(
            "5",
            f"stepmeter report, {trials:,} trials x 200 points",
            "n/a" if peak is None else f"{peak / 2**20:.0f}",
            "MiB peak RSS",
            target=f"< {TARGET_REPORT_BYTES / 2**20:.0f}",
            verdict="-" if peak is None else verdict(peak < TARGET_REPORT_BYTES),
        )
    )


# --- report ---------------------------------------------------------------------------------------------

ITEMS: dict[int, Callable[[Context], None]] = {
    1: item_planning,
    2: item_lake,
    3: item_demo_experiment,
    4: item_scaling,
    5: item_report,
}


def command_line(argv: list[str]) -> str:
    """The command that reproduces this run."""
    extra = "".join(f" {a}" for a in argv)
    return f"cd {ROOT} && PYTHONPATH={ROOT} python benchmarks/speed.py{extra}"


def parse_only(text: str | None) -> list[int]:
    """The items named by `--only` ("1,3"), or all of them."""
    if not text:
        return sorted(ITEMS)
    try:
        chosen = sorted({int(part) for part in text.split(",") if part.strip()})
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected item numbers such as 1,3, got {text!r}") from None
    unknown = [n for n in chosen if n not in ITEMS]
    if unknown or not chosen:
        raise argparse.ArgumentTypeError(f"items are {sorted(ITEMS)}, got {text!r}")
    return chosen


def print_table(rows: list[Row]) -> None:
    """The figures as an aligned table."""
    headers = Row("#", "figure", "value", "unit", "plain Python", "ratio", "target", "verdict")
    table = [headers, *rows]
    names = ("item", "what", "value", "unit", "plain", "ratio", "target", "verdict")
    widths = {n: max(len(getattr(r, n)) for r in table) for n in names}
    right = {"value", "plain", "ratio"}
    for k, r in enumerate(table):
        cells = [getattr(r, n).rjust(widths[n]) if n in right and k else getattr(r, n).ljust(widths[n]) for n in names]
        say("  ".join(cells).rstrip())
        if k == 0:
            say("  ".join("-" * widths[n] for n in names))


def main(argv: list[str] | None = None) -> int:
    """Measure the chosen items, then print the machine, the table and the command that reproduces it."""
    argv = sys.argv[1:] if argv is None else argv
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="everything about 10x smaller (smoke run)")
    parser.add_argument("--only", type=parse_only, default=None, help="run only these items, e.g. 1,3 (default all)")
    parser.add_argument("--keep", action="store_true", help="keep item 5's synthetic experiment (deleted by default)")
    parser.add_argument("--seed", type=int, default=0, help="seed of every numpy Generator used (default 0)")
    args = parser.parse_args(argv)
    items = args.only or sorted(ITEMS)
    sizes = QUICK if args.quick else FULL

    say("stepmeter speed: compiled paths, whole experiments, parallel scaling and the report, against targets")
    say(f"date     : {datetime.now().astimezone().isoformat(timespec='seconds')}")
    say(
        f"cpu      : {cpu_model()}; {len(allowed_cpus())} cores allowed {allowed_cpus()}; "
        f"1-minute load average {load_average()}"
    )
    say(
        f"software : python {platform.python_version()}, numpy {np.__version__}, numba {numba.__version__}, "
        f"gymnasium {gymnasium.__version__} ({platform.system()} {platform.machine()})"
    )
    say(
        f"mode     : {'quick (about 10x smaller)' if args.quick else 'full'}; items {items}; seed {args.seed}; "
        "numba compile time excluded (every path warmed first)"
    )
    say()
    failed: list[int] = []
    with tempfile.TemporaryDirectory(prefix="stepmeter-speed-") as scratch:
        ctx = Context(sizes, args.seed, Path(scratch), args.keep)
        for n in items:
            started, cpu_before = time.perf_counter(), CpuSnapshot.take()
            try:
                ITEMS[n](ctx)
            except Exception as err:
                failed.append(n)
                say(f"{n} FAILED: {type(err).__name__}: {err}")
                say(traceback.format_exc().rstrip())
            took = time.perf_counter() - started
            say(f"    (item {n} took {took:.1f} s; {other_cpu_use(cpu_before)})")
            say()
        print_table(ctx.rows)
    if failed:
        say(f"\nitems that failed: {failed}")
    say()
    say(f"reproduce: {command_line(argv)}")
    return 1 if failed else 0


if __name__ == "__main__":
    sys.exit(main())
