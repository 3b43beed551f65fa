"""Real steps per second of true online Sarsa(lambda) beside linear Sarsa on MountainCar-v0 in the compiled loop of
box-taking kinds, for tile tables of several sizes, and what a dense trace step would cost at each size.

The dutch trace runs over the (action, feature) entries touched since the episode started, not over all
n_actions x n_features entries (`runner/agents/linear_true_online.py`), so its cost should not grow with the
hash size; the last column times the dense alternative (decay every entry, then a weight step over every entry)
in a compiled loop for comparison. Each figure is the best of 3 repetitions after a warm-up (compile time never
counted), by this process's CPU time, pinned to one core. Run from the repository root with
`PYTHONPATH=. python benchmarks/true_online_speed.py` (`--quick` for a smoke run ten times smaller).
"""

from __future__ import annotations

import argparse
import time

import numpy as np
from numba import njit

try:  # run as a script: benchmarks/ is on sys.path
    from linear_speed import ENV_ID, compiled_cpu_seconds
    from planning_speed import REPEATS, command_line, cpu_model, pin_to_one_core
    from speed import CpuSnapshot, other_cpu_use
except ImportError:  # imported as part of a package rather than run as a script
    from benchmarks.linear_speed import ENV_ID, compiled_cpu_seconds
    from benchmarks.planning_speed import REPEATS, command_line, cpu_model, pin_to_one_core
    from benchmarks.speed import CpuSnapshot, other_cpu_use

HASH_SIZES = (0, 4096, 65536, 1 << 20)
"""0: no hashing (8 x 81 = 648 features per action)."""


@njit(cache=True)
def _dense_trace_steps(w, trace, steps, decay):
    """`steps` dense trace steps: decay every entry, then move every weight along the trace."""
    flat_w = w.reshape(w.size)
    flat_e = trace.reshape(trace.size)
    for t in range(steps):
        flat_e *= decay
        flat_e[t % flat_e.size] += 1.0
        flat_w += 1e-3 * flat_e


def _dense_seconds_per_step(n_features: int, steps: int) -> float:
    w, trace = np.zeros((3, n_features)), np.zeros((3, n_features))
    _dense_trace_steps(w, trace, 2, 0.9)
    best = np.inf
    for _ in range(REPEATS):
        start = time.process_time()
        _dense_trace_steps(w, trace, steps, 0.9)
        best = min(best, time.process_time() - start)
    return best / steps


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="ten times smaller, for a smoke run")
    parser.add_argument("--seed", type=int, default=0)
    args = parser.parse_args(argv)
    scale = 10 if args.quick else 1
    steps = 500_000 // scale
    print(f"pinning: {pin_to_one_core()}; CPU: {cpu_model()}")
    before = CpuSnapshot.take()
    print(f"{ENV_ID}, 8 tilings of 8x8 tiles, alpha 0.5, gamma 1, epsilon 0.1, one core (CPU time, best of {REPEATS}):")
    print(f"{'hash size':>10} {'linear_sarsa':>16} {'true online 0.9':>16} {'ratio':>7} {'dense trace step':>18}")
    for hash_size in HASH_SIZES:
        tiles = {"kind": "tiles", "tilings": 8, "tiles": 8, "hash_size": hash_size}
        base = {"alpha": 0.5, "gamma": 1.0, "epsilon": 0.1, "features": tiles}
        traced = {**base, "lam": 0.9}
        rates = []
        for kind, params in (("linear_sarsa", base), ("linear_true_online_sarsa", traced)):
            compiled_cpu_seconds(kind, params, 1000, args.seed)
            seconds = min(compiled_cpu_seconds(kind, params, steps, args.seed)[0] for _ in range(REPEATS))
            rates.append(steps / seconds)
        n_features = hash_size or 8 * 81
        dense = _dense_seconds_per_step(n_features, max(10, 2_000_000 // (n_features * scale)))
        print(
            f"{hash_size:>10} {rates[0]:>12,.0f} /s {rates[1]:>12,.0f} /s {rates[0] / rates[1]:>6.1f}x "
            f"{dense * 1e6:>12.2f} us"
        )
    print(other_cpu_use(before))
    print(f"reproduce: {command_line(args.quick, 'true_online_speed.py')}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
