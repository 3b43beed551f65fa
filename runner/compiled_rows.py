"""One metric row at an evaluation point, written from compiled code: the part every compiled trial loop shares.

The three compiled loops (`runner.compiled_trial` on tables, `runner.compiled_dynamics_trial` on bins,
`runner.compiled_box_trial` on boxes) differ in how they step and evaluate, not in what a row holds: each
evaluates, measures its model's errors, then calls `record_point` with the values and `record_times` last, so
the measurement's own CPU time is left out of the next row's `cpu_seconds`.
"""

import numpy as np
from numba import njit

from runner.clock import cpu_clock, wall_clock
from runner.metrics import (
    CPU_SECONDS,
    ENV_PHASE,
    EPISODES,
    EVAL_RETURN,
    MODEL_ERROR_1,
    MODEL_ERROR_5,
    MODEL_ERROR_20,
    MODEL_REWARD_ERROR,
    MODEL_TV_ERROR,
    MODEL_UPDATES,
    PLANNING_UPDATES,
    REAL_STEPS,
    REAL_UPDATES,
    REWARD_EARNED,
    TRAIN_RETURN,
    WALL_SECONDS,
)

__all__ = ["record_point", "record_times"]


@njit(cache=True)
def record_point(rows, point, step, earned, n_episodes, eval_return, episode_returns, window, counters, errors, phase):
    """Fill row `point` of `rows` but its timing columns: the real steps, reward earned, episodes, greedy return,
    mean return of the last `window` training episodes (NaN before the first), the agent's counters, the model
    errors `errors` = (total variation, reward, after 1, 5 and 20 steps; NaN where not measured) and the phase."""
    rows[point, REAL_STEPS] = step
    rows[point, REWARD_EARNED] = earned
    rows[point, EPISODES] = n_episodes
    rows[point, EVAL_RETURN] = eval_return
    if n_episodes == 0:
        rows[point, TRAIN_RETURN] = np.nan
    else:
        first = n_episodes - window if n_episodes > window else 0
        rows[point, TRAIN_RETURN] = episode_returns[first:n_episodes].mean()
    rows[point, REAL_UPDATES] = counters[0]
    rows[point, PLANNING_UPDATES] = counters[1]
    rows[point, MODEL_UPDATES] = counters[2]
    tv, reward_error, one_step, short, long = errors
    rows[point, MODEL_TV_ERROR] = tv
    rows[point, MODEL_REWARD_ERROR] = reward_error
    rows[point, MODEL_ERROR_1] = one_step
    rows[point, MODEL_ERROR_5] = short
    rows[point, MODEL_ERROR_20] = long
    rows[point, ENV_PHASE] = phase


@njit(cache=True)
def record_times(rows, point, started, cpu_started, measuring, measured):
    """Fill row `point`'s wall seconds since `started` and CPU seconds of training (CPU time since `cpu_started`
    up to `measuring`, this point's start, less `measured`, the CPU time of earlier measurements); return
    `measured` plus this measurement's CPU time."""
    rows[point, WALL_SECONDS] = wall_clock() - started
    rows[point, CPU_SECONDS] = measuring - cpu_started - measured
    return measured + (cpu_clock() - measuring)
