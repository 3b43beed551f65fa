"""Real steps until an agent reaches a return threshold, treating trials that never reach it as censored.

A trial that ends below the threshold still says "more than its budget"; Kaplan-Meier estimates keep that
information instead of dropping such trials or pretending they succeeded at the budget.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import NamedTuple

import numpy as np
import pandas as pd
from scipy import special

__all__ = [
    "CROSSING_COLUMNS",
    "KM_COLUMNS",
    "THRESHOLD_SUMMARY_COLUMNS",
    "first_sustained_crossing",
    "kaplan_meier",
    "km_quantile",
    "steps_to_threshold",
    "threshold_summary",
]

_TRIAL_KEYS = ["env", "agent", "kind", "trial_id", "seed"]
CROSSING_COLUMNS = [*_TRIAL_KEYS, "steps", "reached"]
KM_COLUMNS = ["time", "at_risk", "events", "survival", "greenwood_se"]
_QUANTILES = {"median": 0.5, "q25": 0.25, "q75": 0.75}
THRESHOLD_SUMMARY_COLUMNS = [
    "env",
    "agent",
    "kind",
    "trials",
    "reached",
    "reached_share",
    *(f"{name}_{part}" for name in _QUANTILES for part in ("steps", "low", "high")),
]
# Survival values within this distance above 1 - q count as having dropped to it (cumulative products round).
_TOLERANCE = 1e-10


def _crossings(
    codes: np.ndarray, steps: np.ndarray, met: np.ndarray, consecutive: int
) -> tuple[np.ndarray, np.ndarray]:
    """First sustained crossing of every trial from rows grouped by trial and ordered by point.

    Parameters
    ----------
    codes : ndarray, shape (n_rows,)
        Trial number of each row, 0..n_trials-1, non-decreasing.
    steps : ndarray, shape (n_rows,)
        Real steps at each evaluation point.
    met : ndarray of bool, shape (n_rows,)
        Whether the evaluation return is at or above the threshold.

    Returns
    -------
    steps : ndarray, shape (n_trials,)
        Step where the first qualifying run starts, or the trial's last step when there is none.
    reached : ndarray of bool, shape (n_trials,)
    """
    index = np.arange(codes.size)
    starts = np.r_[True, codes[1:] != codes[:-1]]
    # Length of the run of met points ending at each row, restarting at every unmet row and every trial.
    breaks = np.where(~met, index, np.where(starts, index - 1, -1))
    run_length = index - np.maximum.accumulate(breaks)
    last_rows = np.r_[np.flatnonzero(starts)[1:] - 1, codes.size - 1]
    result = steps[last_rows].copy()
    reached = np.zeros(last_rows.size, dtype=bool)
    sustained = np.flatnonzero(run_length >= consecutive)
    trials, first = np.unique(codes[sustained], return_index=True)
    result[trials] = steps[sustained[first] - (consecutive - 1)]
    reached[trials] = True
    return result, reached


def _check_consecutive(consecutive: int) -> None:
    """Reject run lengths below one."""
    if int(consecutive) != consecutive or consecutive < 1:
        raise ValueError(f"consecutive must be a positive integer, got {consecutive}")


def first_sustained_crossing(
    real_steps: np.ndarray, returns: np.ndarray, threshold: float, consecutive: int = 1
) -> tuple[float, bool]:
    """Real step where the return first reaches `threshold` and stays there for `consecutive` evaluations.

    The step reported is the first point of the qualifying run. When no run qualifies (including a run cut
    short by the end of the trial) the result is (last real step, False): censored at the budget.

    Parameters
    ----------
    real_steps : ndarray, shape (n_points,)
        Real environment steps at each evaluation point, in evaluation order.
    returns : ndarray, shape (n_points,)
        Evaluation return at each point; NaN counts as below the threshold.
    """
    _check_consecutive(consecutive)
    steps = np.asarray(real_steps, dtype=float)
    values = np.asarray(returns, dtype=float)
    if steps.ndim != 1 or steps.shape != values.shape or steps.size == 0:
        raise ValueError("real_steps and returns must be non-empty 1-D arrays of equal length")
    result, reached = _crossings(np.zeros(steps.size, dtype=np.int64), steps, values >= threshold, int(consecutive))
    return float(result[0]), bool(reached[0])


def steps_to_threshold(
    frame: pd.DataFrame, thresholds: Mapping[str, float | None], consecutive: int = 1, column: str = "eval_return"
) -> pd.DataFrame:
    """One row per trial: real steps to its first sustained crossing of its environment's threshold.

    Columns: env, agent, kind, trial_id, seed, steps, reached. Trials that never qualify get their last real
    step with reached False (censored). Environments without a threshold (missing or None) are skipped.
    `column` is the measure compared with the threshold (greedy return, or `earning_rate`; NaN counts as below).
    Trials keep the order in which they first appear in `frame`; the work is vectorised over all rows.
    """
    _check_consecutive(consecutive)
    levels = {str(env): np.nan if value is None else float(value) for env, value in thresholds.items()}
    threshold = frame["env"].astype(str).map(levels).to_numpy(dtype=float)
    rows = frame.loc[~np.isnan(threshold)]
    if rows.empty:
        return pd.DataFrame({column: pd.Series(dtype=object) for column in CROSSING_COLUMNS})
    codes = rows.groupby(_TRIAL_KEYS, sort=False, dropna=False).ngroup().to_numpy()
    order = np.lexsort((rows["point"].to_numpy(), codes))
    met = rows[column].to_numpy(dtype=float)[order] >= threshold[~np.isnan(threshold)][order]
    steps, reached = _crossings(codes[order], rows["real_steps"].to_numpy()[order], met, int(consecutive))
    ordered = rows.iloc[order]
    firsts = ordered.loc[np.r_[True, codes[order][1:] != codes[order][:-1]], _TRIAL_KEYS].reset_index(drop=True)
    return firsts.assign(steps=steps, reached=reached)[CROSSING_COLUMNS]


class _Curve(NamedTuple):
    """Kaplan-Meier curve at the distinct event times."""

    time: np.ndarray
    at_risk: np.ndarray
    events: np.ndarray
    survival: np.ndarray
    se: np.ndarray


def _km_curve(times: np.ndarray, reached: np.ndarray) -> _Curve:
    """Kaplan-Meier survival and Greenwood standard error at each distinct time where a trial reached."""
    values = np.asarray(times, dtype=float)
    events = np.asarray(reached, dtype=bool)
    if values.ndim != 1 or values.shape != events.shape:
        raise ValueError("times and reached must be 1-D arrays of equal length")
    if np.isnan(values).any():
        raise ValueError("times must not contain NaN")
    unique, inverse = np.unique(values, return_inverse=True)
    count = np.bincount(inverse, weights=events, minlength=unique.size)
    # A trial censored at t is still at risk at t: events at a time come before censorings at that time.
    at_risk = np.cumsum(np.bincount(inverse, minlength=unique.size)[::-1])[::-1]
    keep = count > 0
    unique, count, at_risk = unique[keep], count[keep].astype(np.int64), at_risk[keep]
    survival = np.cumprod(1.0 - count / at_risk)
    with np.errstate(divide="ignore", invalid="ignore"):
        variance_sum = np.cumsum(count / (at_risk * (at_risk - count)))
        se = survival * np.sqrt(variance_sum)
    se[~np.isfinite(variance_sum)] = np.nan
    return _Curve(unique, at_risk, count, survival, se)


def kaplan_meier(times: np.ndarray, reached: np.ndarray) -> pd.DataFrame:
    """Kaplan-Meier estimate of the probability of NOT having reached the threshold yet, at each event time.

    Columns: time, at_risk (trials not yet reached nor censored just before `time`), events, survival and
    greenwood_se (Greenwood's standard error, NaN once survival is zero, where the formula divides by zero).
    Only times where at least one trial reached are listed; survival is 1 before the first of them.

    Parameters
    ----------
    times : ndarray, shape (n_trials,)
        Steps to threshold, or the censoring step (budget) for trials that never reached it.
    reached : ndarray of bool, shape (n_trials,)
        True where the threshold was reached at `times`, False where the trial was censored there.
    """
    curve = _km_curve(times, reached)
    return pd.DataFrame(
        {
            "time": curve.time,
            "at_risk": curve.at_risk,
            "events": curve.events,
            "survival": curve.survival,
            "greenwood_se": curve.se,
        }
    )[KM_COLUMNS]


def _quantile(curve: _Curve, q: float, confidence: float) -> tuple[float, float, float]:
    """Quantile of steps to threshold with its interval from an existing Kaplan-Meier curve."""
    if not 0.0 < q < 1.0:
        raise ValueError(f"q must lie strictly between 0 and 1, got {q}")
    if not 0.0 < confidence < 1.0:
        raise ValueError(f"confidence must lie strictly between 0 and 1, got {confidence}")
    target = 1.0 - q
    below = np.flatnonzero(curve.survival <= target + _TOLERANCE)
    estimate = float(curve.time[below[0]]) if below.size else np.nan
    # Complementary log-log transform g(s) = log(-log s), g'(s) = 1 / (s log s): a time belongs to the
    # interval when the z statistic of g(S(t)) against g(1 - q) lies within the normal quantile.
    survival, se = curve.survival, curve.se
    with np.errstate(divide="ignore", invalid="ignore"):
        z = (np.log(-np.log(survival)) - np.log(-np.log(target))) * (survival * np.log(survival)) / se
    inside = np.flatnonzero(np.abs(z) <= special.ndtri((1.0 + confidence) / 2.0))
    if inside.size == 0:
        return estimate, np.nan, np.nan
    low = float(curve.time[inside[0]])
    high = np.inf if inside[-1] == curve.time.size - 1 else float(curve.time[inside[-1] + 1])
    return estimate, low, high


def km_quantile(
    times: np.ndarray, reached: np.ndarray, q: float, confidence: float = 0.95
) -> tuple[float, float, float]:
    """Steps by which a share `q` of trials is estimated to reach the threshold, as (estimate, low, high).

    The estimate is the first event time where Kaplan-Meier survival is <= 1 - q (NaN when it never gets
    there; statsmodels' SurvfuncRight.quantile uses a strict < instead, which differs only when survival
    equals 1 - q exactly). The interval inverts pointwise tests on the complementary log-log scale, as in
    statsmodels' SurvfuncRight.quantile_ci(method="cloglog"): it runs from the first event time whose
    survival is compatible with 1 - q to the event time after the last compatible one, and its upper end is
    inf when the last event time is still compatible (the data do not bound it). NaN when no time is.

    Parameters
    ----------
    times : ndarray, shape (n_trials,)
        Steps to threshold or censoring step.
    reached : ndarray of bool, shape (n_trials,)
        Whether each trial reached the threshold.
    """
    return _quantile(_km_curve(times, reached), q, confidence)


def threshold_summary(per_trial: pd.DataFrame, confidence: float = 0.95) -> pd.DataFrame:
    """Per (env, agent): trials, how many reached the threshold, and Kaplan-Meier quartiles of steps with intervals.

    Columns: env, agent, kind, trials, reached, reached_share, then median, q25 and q75 (the steps by which
    50%, 25% and 75% of trials reach the threshold) each as *_steps, *_low, *_high (see `km_quantile`).
    Rows keep the order in which (env, agent) pairs first appear in `per_trial` (from `steps_to_threshold`).
    """
    rows = []
    for (env, agent), group in per_trial.groupby(["env", "agent"], sort=False):
        curve = _km_curve(group["steps"].to_numpy(dtype=float), group["reached"].to_numpy(dtype=bool))
        reached = int(group["reached"].sum())
        row = {
            "env": env,
            "agent": agent,
            "kind": str(group["kind"].iloc[0]),
            "trials": len(group),
            "reached": reached,
            "reached_share": reached / len(group),
        }
        for name, q in _QUANTILES.items():
            row[f"{name}_steps"], row[f"{name}_low"], row[f"{name}_high"] = _quantile(curve, q, confidence)
        rows.append(row)
    return pd.DataFrame.from_records(rows, columns=THRESHOLD_SUMMARY_COLUMNS)
