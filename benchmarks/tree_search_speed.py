"""Search speed of stepmeter's tree-search agents on one core: simulations per second on the 6x9 maze.

What: simulations per second of `uct_search` and `puct_search` (runner/agents/tree_search.py) on the maze of
Sutton & Barto (2018), Example 8.1, measured

1. with the search kernel alone: evaluation searches (the agents' greedy kernel, 100 simulations each, depth 20)
   from every open cell in turn, planning on the true table (oracle) or on a count model learned from real steps;
2. end to end: a whole compiled `run_trial` of the learned-model UCT agent, simulations done while acting
   (the `planning_updates` counter) divided by the trial's wall time, evaluation included.

Why: a tree-search agent searches at every real step, so its cost per real step is simulations x the cost of a
simulation; the stage target is at least 100,000 simulations per second on one core.

Each figure is the best of 3 repetitions timed with `time.perf_counter` after a warm-up that compiles or loads the
kernels, so compile time is never counted. Randomness comes only from seeded streams. Run from the repository
root with `PYTHONPATH=. python benchmarks/tree_search_speed.py` (`--quick` for a smoke check about ten times
smaller).
"""

from __future__ import annotations

import argparse
import platform
import sys
from dataclasses import dataclass
from typing import Any

import numba
import numpy as np

try:
    from planning_speed import Figure, best_of, command_line, cpu_model, pin_to_one_core
except ImportError:  # imported as part of a package rather than run as a script
    from benchmarks.planning_speed import Figure, best_of, command_line, cpu_model, pin_to_one_core

from runner.agents import AGENTS
from runner.agents.tree_search import PUCTSearch, UCTSearch
from runner.envs.grid import GridWorld
from runner.envs.table import table_from_env
from runner.streams import new_stream
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

TARGET_PER_SECOND = 100_000
REPEATS = 3
SIMULATIONS = 100
DEPTH = 20


@dataclass(frozen=True)
class Sizes:
    """How much work each figure does; `--quick` divides the timed work by about ten."""

    fill_steps: int  # real steps that fill the learned model before the kernel timings
    searches: int  # evaluation searches per timed repetition
    trial_steps: int  # real-step budget of each timed run_trial


FULL = Sizes(fill_steps=3_000, searches=3_000, trial_steps=5_000)
QUICK = Sizes(fill_steps=1_000, searches=300, trial_steps=500)


def maze_agent(cls: type, params: dict, fill_steps: int, seed: int) -> tuple[Any, GridWorld]:
    """An agent set up on the maze (with its true table for the oracle), after `fill_steps` real steps."""
    env = GridWorld(DYNA_MAZE)
    agent = cls(**params)
    agent.setup(env.observation_space.n, env.action_space.n, seed, table=table_from_env(env).as_tuple())
    state, _ = env.reset(seed=seed)
    for _ in range(fill_steps):
        action = agent.act(int(state))
        nxt, reward, terminated, _, _ = env.step(action)
        agent.observe(int(state), action, float(reward), int(nxt), bool(terminated))
        state = env.reset()[0] if terminated else nxt
    return agent, env


def measure_kernel(what: str, cls: type, params: dict, sizes: Sizes, seed: int) -> tuple[Figure, str]:
    """Time evaluation searches from every open cell in turn (the greedy kernel: search, then most-visited)."""
    filling = {**params, "simulations": 10}  # cheap acting while the model fills; timed searches use `params`
    agent, _ = maze_agent(cls, filling, sizes.fill_steps if params.get("model") != "oracle" else 0, seed)
    timed = cls(**params)
    timed.setup(agent.n_states_, agent.n_actions_, seed, table=agent.table_)
    for mine, learned in zip(timed.arrays_, agent.arrays_, strict=True):
        mine[...] = learned  # the same Q and learned model, searched with the timed settings
    cells = [s for s, ch in enumerate(DYNA_MAZE.replace("\n", "")) if ch in ".S"]
    stream = new_stream(seed + 1)
    kernel, arrays, hyper = timed.greedy_kernel, timed.arrays_, timed.hyper_
    kernel(arrays, hyper, cells[0], stream)  # compile or load from the disk cache; not timed
    per_search = int(params["simulations"])

    def run() -> int:
        for i in range(sizes.searches):
            kernel(arrays, hyper, cells[i % len(cells)], stream)
        return sizes.searches * per_search

    figure = best_of(what, run)
    known = int((agent.arrays_[5] > 0).sum())
    model = "true table" if params.get("model") == "oracle" else f"learned model with {known} pairs tried"
    return figure, f"{model}; {sizes.searches} searches of {per_search} simulations, depth {params['depth']}"


def trial_spec(kind: str, params: dict, real_steps: int, seed: int) -> dict[str, Any]:
    """A trial spec laid out as `runner.plan.plan_trials` makes them; evaluation only at the start and the end."""
    return TrialSpec.build(
        {
            "source": "grid",
            "map": DYNA_MAZE,
            "slip": 0.0,
            "step_reward": 0.0,
            "goal_reward": 1.0,
            "hazard_penalty": -1.0,
            "hazard_ends": True,
            "step_limit": None,
        },
        kind,
        params,
        seed,
        real_steps,
        every=real_steps,
        episodes=1,
        step_cap=100,
        training_window=10,
    ).as_dict()


def measure_trial(sizes: Sizes, seed: int) -> tuple[Figure, str]:
    """Time whole compiled `run_trial` calls of the learned-model UCT agent."""
    # Until the kinds are in the package registry, name them here (this process only), so the compiled trial
    # loop comes from numba's disk cache as it does for registered kinds.
    AGENTS.entries.setdefault("uct_search", "runner.agents.tree_search:UCTSearch")
    params = UCTSearch(simulations=SIMULATIONS, depth=DEPTH).get_params()
    run_trial(trial_spec("uct_search", params, 100, seed), "compiled")  # compile or load; not timed
    spec = trial_spec("uct_search", params, sizes.trial_steps, seed)
    last: dict[str, Any] = {}

    def run() -> int:
        result = run_trial(spec, "compiled")
        last["rows"] = result.rows
        last["episodes"] = len(result.episode_returns)
        return int(result.rows["planning_updates"][-1])

    figure = best_of("2 uct_search learned, whole compiled run_trial", run)
    rows = last["rows"]
    note = (
        f"{sizes.trial_steps} real steps x {SIMULATIONS} simulations, {last['episodes']} episodes, final greedy "
        f"return {rows['eval_return'][-1]:.1f}, trial's own wall_seconds {rows['wall_seconds'][-1]:.3f}"
    )
    return figure, note


def main(argv: list[str] | None = None) -> int:
    """Measure, then print the machine, the table and the target check."""
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="timed work about 10x smaller (smoke check)")
    parser.add_argument("--seed", type=int, default=0, help="seed of every stream used (default 0)")
    args = parser.parse_args(argv)
    sizes = QUICK if args.quick else FULL
    pinned = pin_to_one_core()

    print("stepmeter tree-search speed: simulations per second, Sutton & Barto (2018) Example 8.1 maze (6x9)")
    print(f"machine  : {cpu_model()}; {platform.system()} {platform.machine()}; {pinned}")
    print(f"software : python {platform.python_version()}, numpy {np.__version__}, numba {numba.__version__}")
    print(
        f"mode     : {'quick (timed work / 10)' if args.quick else 'full'}; seed {args.seed}; "
        f"best of {REPEATS} per figure, compile time excluded"
    )
    print()

    base = {"simulations": SIMULATIONS, "depth": DEPTH}
    cases = [
        ("1a uct_search oracle, mean back-up", UCTSearch, {**base, "model": "oracle"}),
        ("1b uct_search oracle, bellman back-up", UCTSearch, {**base, "model": "oracle", "backup": "bellman"}),
        ("1c uct_search learned, mean back-up", UCTSearch, base),
        ("1d uct_search learned, bellman back-up", UCTSearch, {**base, "backup": "bellman"}),
        ("1e uct_search learned, greedy rollouts", UCTSearch, {**base, "rollout": "greedy"}),
        ("1f puct_search learned, lambda 0.5", PUCTSearch, base),
    ]
    figures, notes = [], []
    for what, cls, params in cases:
        figure, note = measure_kernel(what, cls, params, sizes, args.seed)
        figures.append(figure)
        notes.append(note)
    trial, trial_note = measure_trial(sizes, args.seed)
    figures.append(trial)
    notes.append(trial_note)

    width = max(len(f.what) for f in figures)
    print(f"{'what':<{width}}  {'simulations/s':>13}  {'simulations':>11}  {'best s':>8}  verdict")
    print("-" * (width + 48))
    for f in figures:
        verdict = "PASS" if f.rate >= TARGET_PER_SECOND else "MISS"
        print(f"{f.what:<{width}}  {f.rate:>13,.0f}  {f.work:>11,}  {f.seconds:>8.4f}  {verdict}")
    print()
    for f, note in zip(figures, notes, strict=True):
        print(f"{f.what.split()[0]:<3}: {note}")
    print()
    print(f"target: >= {TARGET_PER_SECOND:,} simulations/s on one core")
    misses = [f.what for f in figures if f.rate < TARGET_PER_SECOND]
    print(f"overall: {'PASS' if not misses else 'MISS (' + '; '.join(misses) + ')'}")
    print(f"reproduce: {command_line(args.quick, 'tree_search_speed.py')}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
