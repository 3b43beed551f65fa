"""Per-point learning-curve bands over seeds and per-trial scalar scores from the tidy results frame."""

from __future__ import annotations

import numpy as np
import pandas as pd

from runner.analysis.bootstrap import keyed_rng, mean_and_interval

__all__ = ["BAND_COLUMNS", "SCORE_COLUMNS", "curve_bands", "normalized_auc", "trial_scores"]

BAND_COLUMNS = ["env", "agent", "point", "real_steps", "mean", "low", "high", "n_seeds"]
SCORE_COLUMNS = [
    "env",
    "agent",
    "kind",
    "trial_id",
    "seed",
    "auc",
    "final_return",
    "real_steps",
    "planning_per_real",
    "wall_seconds",
]
_TRIAL_KEYS = ["env", "agent", "kind", "trial_id", "seed"]


def _pattern_bands(
    values: np.ndarray, *, confidence: float, n_resamples: int, rng: np.random.Generator
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Bootstrap each point over the trials that have a value there, batching points that share trials.

    Normally every trial reaches every point and there is a single batch; an unfinished trial only
    drops out of the points it never reached.
    """
    n_points = values.shape[1]
    mean, low, high = (np.full(n_points, np.nan) for _ in range(3))
    present = ~np.isnan(values)
    patterns, which = np.unique(present.T, axis=0, return_inverse=True)
    for index, pattern in enumerate(patterns):
        columns = np.flatnonzero(which.ravel() == index)
        if not pattern.any():
            continue
        mean[columns], low[columns], high[columns] = mean_and_interval(
            values[pattern][:, columns], confidence=confidence, n_resamples=n_resamples, rng=rng
        )
    return mean, low, high, present.sum(axis=0)


def curve_bands(
    frame: pd.DataFrame,
    *,
    confidence: float = 0.95,
    n_resamples: int = 2000,
    seed: int = 0,
    column: str = "eval_return",
) -> pd.DataFrame:
    """Mean greedy evaluation return (or another measure, `column`) per (env, agent, point) with a percentile
    bootstrap band over seeds.

    Each (env, agent) pair draws from its own generator keyed on the seed and its labels, so the band of
    one agent does not change when other agents are added to the experiment. Points where `column` is NaN for
    every trial (the earning rate at step 0) get NaN bands.
    """
    parts = []
    for (env, agent), group in frame.groupby(["env", "agent"], sort=True):
        returns = group.pivot(index="trial_id", columns="point", values=column).sort_index(axis=1)
        steps = group.groupby("point")["real_steps"].first().reindex(returns.columns)
        mean, low, high, n_seeds = _pattern_bands(
            returns.to_numpy(dtype=float),
            confidence=confidence,
            n_resamples=n_resamples,
            rng=keyed_rng(seed, "curve", str(env), str(agent)),
        )
        parts.append(
            pd.DataFrame(
                {
                    "env": env,
                    "agent": agent,
                    "point": returns.columns.to_numpy(dtype=int),
                    "real_steps": steps.to_numpy(dtype=int),
                    "mean": mean,
                    "low": low,
                    "high": high,
                    "n_seeds": n_seeds.astype(int),
                }
            )
        )
    if not parts:
        return pd.DataFrame(columns=BAND_COLUMNS)
    return pd.concat(parts, ignore_index=True)[BAND_COLUMNS]


def normalized_auc(real_steps: np.ndarray, returns: np.ndarray) -> float:
    """Trapezoid area under return-vs-real-steps divided by the step span: the time-averaged return.

    The result is in return units, so agents with different budgets stay comparable; a curve with a
    zero step span (for example a single point) scores its mean return.
    """
    steps = np.asarray(real_steps, dtype=float)
    values = np.asarray(returns, dtype=float)
    if steps.shape != values.shape or steps.ndim != 1 or steps.size == 0:
        raise ValueError("real_steps and returns must be non-empty 1-D arrays of equal length")
    if np.any(np.diff(steps) < 0):
        raise ValueError("real_steps must be non-decreasing")
    span = steps[-1] - steps[0]
    if span <= 0:
        return float(values.mean())
    return float(np.trapezoid(values, steps) / span)


def trial_scores(frame: pd.DataFrame) -> pd.DataFrame:
    """One row per trial with its normalised AUC, final return, reached steps, planning ratio and wall time.

    `auc` is the time-averaged greedy evaluation return over the real steps taken (see `normalized_auc`);
    `planning_per_real` is planning updates per real environment step at the last point (0 before any step).
    """
    if frame.empty:
        return pd.DataFrame(columns=SCORE_COLUMNS)
    codes = frame.groupby(_TRIAL_KEYS, sort=True, observed=True).ngroup().to_numpy()
    order = np.lexsort((frame["point"].to_numpy(), codes))
    code = codes[order]
    steps = frame["real_steps"].to_numpy(dtype=float)[order]
    returns = frame["eval_return"].to_numpy(dtype=float)[order]
    starts = np.r_[True, code[1:] != code[:-1]]
    first = np.flatnonzero(starts)
    last = np.r_[first[1:] - 1, code.size - 1]
    within = ~starts[1:]
    if np.any(np.diff(steps)[within] < 0):
        raise ValueError("real_steps must be non-decreasing within each trial")
    segments = np.diff(steps) * (returns[1:] + returns[:-1]) / 2.0
    n_trials = first.size
    area = np.bincount(code[:-1][within], weights=segments[within], minlength=n_trials)
    mean = np.bincount(code, weights=returns, minlength=n_trials) / np.bincount(code, minlength=n_trials)
    span = steps[last] - steps[first]
    planning = frame["planning_updates"].to_numpy(dtype=float)[order][last]
    with np.errstate(divide="ignore", invalid="ignore"):
        auc = np.where(span > 0, area / span, mean)
        per_real = np.where(steps[last] > 0, planning / steps[last], 0.0)
    keys = frame[_TRIAL_KEYS].iloc[order[first]].reset_index(drop=True)
    return keys.assign(
        auc=auc,
        final_return=returns[last],
        real_steps=steps[last].astype(int),
        planning_per_real=per_real,
        wall_seconds=frame["wall_seconds"].to_numpy(dtype=float)[order][last],
    )[SCORE_COLUMNS]
