"""Real steps per second of linear Sarsa (8 tilings of 8x8 tiles) on MountainCar-v0 on one core: the compiled
loop of box-taking kinds on compiled dynamics (`runner.compiled_box_trial`) beside a plain per-step Python
implementation (gymnasium's `env.step`, numpy tile coding, numpy updates) in the same run; linear Dyna's
planning updates per second in the same compiled loop (uniform planning and prioritized sweeping); and what
measuring linear Dyna's held-out model errors costs at one evaluation point (it happens only there, never per step).

The plain implementation is the one a careful user would write without a compiler: the tile offsets computed once,
each step's tiles by a few whole-array numpy operations, action values by fancy indexing, one Sarsa update, first
index on ties; it is checked to pick the same tiles as the compiled kernel before anything is timed.

Targets (issue 12): at least 1 M real steps per second per core on the compiled path, and at least 30x the plain
Python loop. Each figure is the best of 3 repetitions after a warm-up (compile time never counted), timed by this
process's CPU time (`time.process_time`, i.e. per core; the process pins itself to one CPU). On a machine shared
with other work the script prints how much CPU other processes used meanwhile. Run from the repository root with
`PYTHONPATH=. python benchmarks/linear_speed.py` (`--quick` for a smoke run ten times smaller).
"""

from __future__ import annotations

import argparse
import time

import gymnasium
import numpy as np
from numba import typeof, types

try:  # run as a script: benchmarks/ is on sys.path
    from planning_speed import REPEATS, command_line, cpu_model, pin_to_one_core
    from speed import CpuSnapshot, other_cpu_use
except ImportError:  # imported as part of a package rather than run as a script
    from benchmarks.planning_speed import REPEATS, command_line, cpu_model, pin_to_one_core
    from benchmarks.speed import CpuSnapshot, other_cpu_use

from runner.agents import make_agent
from runner.compiled_box_trial import BoxDynamics, run_box_kind_trial
from runner.envs.dynamics import dynamics_spec
from runner.features import build_feature_map, feature_values, resolve_features
from runner.metrics import METRIC_COLUMNS
from runner.models.held_out import collect_held_out
from runner.models.held_out_bins import held_out_arrays
from runner.models.held_out_function import function_model_errors
from runner.seeding import held_out_sequence
from runner.streams import new_stream

TARGET_STEPS = 1e6
TARGET_RATIO = 30.0
ENV_ID = "MountainCar-v0"
LOW, HIGH = np.array([-1.2, -0.07]), np.array([0.6, 0.07])
TILES = {"kind": "tiles", "tilings": 8, "tiles": 8, "hash_size": 0}
PARAMS = {"alpha": 0.5, "gamma": 1.0, "epsilon": 0.1, "features": TILES}


def compiled_cpu_seconds(kind: str, params: dict, steps: int, seed: int) -> tuple[float, np.ndarray]:
    """CPU seconds of one compiled trial of `steps` real steps (one evaluation step at the start and the end)."""
    spec = dynamics_spec(ENV_ID)
    dynamics = BoxDynamics(ENV_ID, spec.default_params(), spec.step_limit, spec.state_size, spec.obs_size)
    agent = make_agent(kind, params)
    agent.setup(spec.obs_size, spec.action_size, seed, bounds=(LOW, HIGH))
    rows = np.zeros((2, len(METRIC_COLUMNS)))
    returns, lengths = np.zeros(steps), np.zeros(steps, dtype=np.int64)
    args = (new_stream(seed + 1), new_stream(seed + 2), new_stream(seed + 3), steps, steps, 1, 1, 5, 0.0)
    start = time.process_time()
    run_box_kind_trial(
        kind, dynamics, agent.arrays_, agent.hyper_, agent.counters_, agent.stream_, *args, rows, returns, lengths
    )
    return time.process_time() - start, agent.counters_.copy()


def _model_error_cpu_seconds(params: dict, seed: int) -> float:
    """CPU seconds of one held-out model-error measurement (50 runs of up to 20 steps) of a linear Dyna agent."""
    env = gymnasium.make(ENV_ID)
    held = held_out_arrays(collect_held_out(env, held_out_sequence(seed)), 2)
    env.close()
    agent = make_agent("linear_dyna", params)
    agent.setup(2, 3, seed, bounds=(LOW, HIGH))
    # called through its entry point for the literal kind, as the compiled loop calls it (no dispatch by value)
    entry = function_model_errors.compile((types.literal("linear_dyna"), typeof(agent.arrays_), typeof(held)))
    start = time.process_time()
    for _ in range(10):
        entry("linear_dyna", agent.arrays_, held)
    return (time.process_time() - start) / 10


_PLAIN_SHIFTS = ((np.arange(8)[:, None] * (2 * np.arange(2) + 1)) % 8) / 8
_PLAIN_BASE = np.arange(8) * 81
"""The plain tile coder's offsets (tiling t shifted by ((t * (2d + 1)) mod 8) / 8 of a tile along dimension d) and
first index of each tiling, computed once as any tile coder would."""


def plain_tiles(obs: np.ndarray) -> np.ndarray:
    """The same tile coding in numpy: one active tile per tiling (asymmetric offsets), 9 x 9 tiles per tiling."""
    s = np.clip((obs - LOW) / (HIGH - LOW), 0.0, 1.0)
    coords = (s * 8 + _PLAIN_SHIFTS).astype(np.int64)  # non-negative: truncation floors
    return _PLAIN_BASE + coords[:, 0] * 9 + coords[:, 1]


def _same_tiles(seed: int, n: int = 10_000) -> bool:
    """Whether the plain tile coder picks the compiled kernel's tiles on n observations in and around the bounds."""
    fmap = build_feature_map(resolve_features(TILES), LOW, HIGH)
    idx, val = np.zeros(8, dtype=np.int64), np.zeros(8)
    span = HIGH - LOW
    for obs in np.random.default_rng(seed).uniform(LOW - 0.05 * span, HIGH + 0.05 * span, size=(n, 2)):
        feature_values(obs, fmap, idx, val)
        if not np.array_equal(idx, plain_tiles(obs)):
            return False
    return True


def _plain_python_cpu_seconds(steps: int, seed: int) -> float:
    """CPU seconds of semi-gradient Sarsa written per step in plain Python with numpy, on gymnasium's env."""
    env = gymnasium.make(ENV_ID)
    rng = np.random.default_rng(seed)
    w = np.zeros((3, 8 * 81))
    obs, _ = env.reset(seed=seed)
    tiles = plain_tiles(obs)
    action = int(np.argmax(w[:, tiles].sum(axis=1)))
    start = time.process_time()
    for _ in range(steps):
        nxt, reward, terminated, truncated, _ = env.step(action)
        next_tiles = plain_tiles(nxt)
        q_next = w[:, next_tiles].sum(axis=1)
        following = int(rng.integers(3)) if rng.random() < 0.1 else int(np.argmax(q_next))
        target = reward if terminated else reward + q_next[following]
        w[action, tiles] += 0.5 / 8 * (target - w[action, tiles].sum())
        if terminated or truncated:
            nxt, _ = env.reset()
            next_tiles = plain_tiles(nxt)
            following = int(np.argmax(w[:, next_tiles].sum(axis=1)))
        tiles, action = next_tiles, following
    seconds = time.process_time() - start
    env.close()
    return seconds


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="ten times smaller, for a smoke run")
    parser.add_argument("--seed", type=int, default=0)
    args = parser.parse_args(argv)
    scale = 10 if args.quick else 1
    compiled_steps, plain_steps, dyna_steps = 2_000_000 // scale, 40_000 // scale, 100_000 // scale
    print(f"pinning: {pin_to_one_core()}; CPU: {cpu_model()}")
    print(f"plain tile coding picks the compiled kernel's tiles: {'yes' if _same_tiles(args.seed) else 'NO'}")
    before = CpuSnapshot.take()
    compiled_cpu_seconds("linear_sarsa", PARAMS, 1000, args.seed)
    dyna = {**PARAMS, "planning_steps": 10, "features": TILES}
    compiled_cpu_seconds("linear_dyna", dyna, 1000, args.seed)
    compiled = min(compiled_cpu_seconds("linear_sarsa", PARAMS, compiled_steps, args.seed)[0] for _ in range(REPEATS))
    plain = min(_plain_python_cpu_seconds(plain_steps, args.seed) for _ in range(REPEATS))
    planning = []
    for _ in range(REPEATS):
        seconds, counters = compiled_cpu_seconds("linear_dyna", dyna, dyna_steps, args.seed)
        planning.append((seconds, counters))
    seconds, counters = min(planning, key=lambda item: item[0])
    swept = {**dyna, "sweeping": "prioritized"}
    compiled_cpu_seconds("linear_dyna", swept, 1000, args.seed)
    sweeping = min(
        (compiled_cpu_seconds("linear_dyna", swept, dyna_steps, args.seed) for _ in range(REPEATS)),
        key=lambda item: item[0],
    )
    measuring = min(_model_error_cpu_seconds(dyna, args.seed) for _ in range(REPEATS))
    compiled_rate, plain_rate = compiled_steps / compiled, plain_steps / plain
    ratio = compiled_rate / plain_rate
    print(f"linear Sarsa, 8 tilings of 8x8, {ENV_ID}, one core (CPU time, best of {REPEATS}):")
    print(
        f"  compiled loop     {compiled_rate:>14,.0f} real steps/s   target {TARGET_STEPS:,.0f}: "
        f"{'PASS' if compiled_rate >= TARGET_STEPS else 'MISS'}"
    )
    print(f"  plain Python      {plain_rate:>14,.0f} real steps/s")
    print(
        f"  ratio             {ratio:>14,.1f}x              target {TARGET_RATIO:.0f}x: "
        f"{'PASS' if ratio >= TARGET_RATIO else 'MISS'}"
    )
    print(
        f"linear Dyna, planning_steps 10, same features: {counters[1] / seconds:,.0f} planning updates/s "
        f"({dyna_steps / seconds:,.0f} real steps/s with their planning)"
    )
    print(
        f"  with prioritized sweeping: {sweeping[1][1] / sweeping[0]:,.0f} planning updates/s "
        f"({dyna_steps / sweeping[0]:,.0f} real steps/s with their planning)"
    )
    print(f"  its held-out model errors at one evaluation point: {measuring * 1e3:,.2f} ms")
    print(other_cpu_use(before))
    print(f"reproduce: {command_line(args.quick, 'linear_speed.py')}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
