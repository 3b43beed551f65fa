"""The metric schema: the columns of a metric row, their types and meanings, and their positions.

The trial loops (step by step and compiled), the store and the analysis all read this one module, so a new
metric is one line here. The compiled loop writes a row by position; the constants below are those positions.
"""

from __future__ import annotations

from dataclasses import dataclass

__all__ = ["HONESTY_COLUMNS", "INT_COLUMNS", "METRICS", "METRIC_COLUMNS", "METRIC_INDEX", "TIMING_COLUMNS", "Metric"]


@dataclass(frozen=True)
class Metric:
    """One column of a metric row: its name, whether it holds whole numbers or timings, and its meaning."""

    name: str
    integer: bool
    timing: bool
    meaning: str


METRICS = (
    Metric("real_steps", True, False, "real environment steps taken so far (the x axis of everything)"),
    Metric("episodes", True, False, "training episodes finished so far"),
    Metric("eval_return", False, False, "mean return of the greedy evaluation episodes at this point"),
    Metric("train_return", False, False, "mean return of the last `training_window` training episodes"),
    Metric("reward_earned", False, False, "sum of the rewards of all real steps so far (return earned while learning)"),
    Metric("real_updates", True, False, "value updates from real transitions so far"),
    Metric("planning_updates", True, False, "value updates from simulated (planned) transitions so far"),
    Metric("model_updates", True, False, "updates of the learned model so far"),
    Metric("model_tv_error", False, False, "mean total-variation distance of the learned model to the true table"),
    Metric(
        "model_reward_error",
        False,
        False,
        "mean absolute reward error of the learned model (against the true table, or for a function model on the "
        "held-out real transitions)",
    ),
    Metric("env_phase", True, False, "how many of the environment's change events have happened"),
    Metric("wall_seconds", False, True, "wall-clock seconds since the trial started"),
    Metric("cpu_seconds", False, True, "CPU seconds spent acting, learning and planning (evaluation excluded)"),
    Metric(
        "model_error_1",
        False,
        False,
        "one-step error of a function model's next observations on held-out real transitions (root mean square, "
        "each dimension in units of its spread)",
    ),
    Metric("model_error_5", False, False, "the same after 5 steps of the model's own open-loop rollouts"),
    Metric("model_error_20", False, False, "the same after 20 steps of the model's own open-loop rollouts"),
    Metric(
        "model_spread_1",
        False,
        False,
        "the spread a probabilistic model predicts for its one-step error on the same held-out transitions (root "
        "mean square of its predicted standard deviation, on model_error_1's scale: equal to it when honest)",
    ),
    Metric("model_spread_5", False, False, "the same for 5 steps of sampled open-loop rollouts (beside model_error_5)"),
    Metric(
        "model_coverage_1",
        False,
        False,
        "share of held-out next-observation values inside the model's central 95% predictive interval (0.95 when "
        "honest)",
    ),
    Metric("model_coverage_5", False, False, "the same after 5 steps of sampled open-loop rollouts"),
)

METRIC_COLUMNS = tuple(m.name for m in METRICS)
"""Columns of a metric row, in order (new ones go last: stores made before them gain them as empty columns).
The model errors are NaN for model-free agents, the table errors for environments with no known table, and the
function-model errors for agents that cannot `predict`; the timing columns are the only ones that differ
between two runs of one trial."""

METRIC_INDEX = {name: i for i, name in enumerate(METRIC_COLUMNS)}
INT_COLUMNS = frozenset(m.name for m in METRICS if m.integer)
TIMING_COLUMNS = tuple(m.name for m in METRICS if m.timing)

(
    REAL_STEPS,
    EPISODES,
    EVAL_RETURN,
    TRAIN_RETURN,
    REWARD_EARNED,
    REAL_UPDATES,
    PLANNING_UPDATES,
    MODEL_UPDATES,
    MODEL_TV_ERROR,
    MODEL_REWARD_ERROR,
    ENV_PHASE,
    WALL_SECONDS,
    CPU_SECONDS,
    MODEL_ERROR_1,
    MODEL_ERROR_5,
    MODEL_ERROR_20,
    MODEL_SPREAD_1,
    MODEL_SPREAD_5,
    MODEL_COVERAGE_1,
    MODEL_COVERAGE_5,
) = range(len(METRIC_COLUMNS))

HONESTY_COLUMNS = ("model_spread_1", "model_spread_5", "model_coverage_1", "model_coverage_5")
"""What only a probabilistic model (one that states its own uncertainty) measures; NaN for every other agent."""
