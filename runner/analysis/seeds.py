"""Seeds a mean hides: runs that collapse after reaching the threshold, and runs far from the other seeds.

A mean curve of 0.96 can be 29 seeds at 1.0 and one that reached 1.0 early and then sat at 0.0; the report lists
such seeds by trial id, so they can be re-run and looked at, instead of leaving them inside an average.

Two flags, per (env, agent):
- "collapsed": the trial reached the threshold on the primary measure at some evaluation point, and the mean of
  its last COLLAPSE_POINTS points lies more than COLLAPSE_DROP of the environment's observed range of that
  measure below the threshold (a run that wobbles around the threshold is not flagged);
- "far from the rest": the modified z-score of its score (AUC, or reward per real step when that is the primary
  measure) is above OUTLIER_Z in absolute value: 0.6745 (x - median) / MAD over the agent's seeds (Iglewicz &
  Hoaglin 1993, who suggest 3.5 as the cut). When more than half the seeds share one value the MAD is 0; the
  mean absolute deviation from the median times 1.2533 (its ratio to the standard deviation for normal data)
  takes its place, and with no spread at all nothing is flagged. Fewer than OUTLIER_MIN_SEEDS seeds: no flag.
"""

from __future__ import annotations

from collections.abc import Mapping

import numpy as np
import pandas as pd

__all__ = [
    "COLLAPSE_DROP",
    "COLLAPSE_POINTS",
    "OUTLIER_MIN_SEEDS",
    "OUTLIER_Z",
    "SEED_FLAG_COLUMNS",
    "collapsed_seeds",
    "modified_z",
    "outlying_seeds",
    "seed_flags",
]

SEED_FLAG_COLUMNS = ["env", "agent", "seed", "trial_id", "flag", "detail"]
COLLAPSE_POINTS = 3
COLLAPSE_DROP = 0.5
OUTLIER_Z = 3.5
OUTLIER_MIN_SEEDS = 5
_MAD_TO_Z = 0.6745  # the normal quantile at 3/4: MAD / 0.6745 estimates the standard deviation of normal data
_MEAN_AD_TO_MAD = 1.2533  # sqrt(pi / 2): standard deviation over mean absolute deviation for normal data


def modified_z(values: np.ndarray) -> np.ndarray:
    """Modified z-scores 0.6745 (x - median) / MAD of a 1-D sample (zeros when it has no spread at all).

    A MAD of 0 (more than half the values equal) falls back to 1.2533 x the mean absolute deviation from the
    median, scaled to the same units, so a lone deviating seed among identical ones is still measured.
    """
    data = np.asarray(values, dtype=float)
    centre = np.median(data)
    deviation = np.abs(data - centre)
    mad = float(np.median(deviation))
    if mad > 0.0:
        return _MAD_TO_Z * (data - centre) / mad
    mean_ad = float(deviation.mean())
    if mean_ad == 0.0:
        return np.zeros_like(data)
    return (data - centre) / (_MEAN_AD_TO_MAD * mean_ad)


def _empty() -> pd.DataFrame:
    """A flag table with no rows."""
    return pd.DataFrame(columns=SEED_FLAG_COLUMNS)


def collapsed_seeds(
    frame: pd.DataFrame, thresholds: Mapping[str, float | None], column: str = "eval_return"
) -> pd.DataFrame:
    """Trials that reached the threshold on `column` and whose last COLLAPSE_POINTS points fell far below it.

    `frame` is the tidy results frame (one row per trial and evaluation point); environments without a
    threshold are skipped. "Far below": the mean of the last points is under threshold - COLLAPSE_DROP x the
    environment's range of `column` (highest minus lowest value stored for it). A trial needs more than
    COLLAPSE_POINTS points after its first crossing. Vectorised over trials.
    """
    limit = frame["env"].map(lambda env: thresholds.get(str(env))).astype(float)
    rows = frame.loc[limit.notna() & frame[column].notna(), ["env", "agent", "seed", "trial_id", "point", "real_steps"]]
    if rows.empty:
        return _empty()
    rows = rows.assign(value=frame[column], limit=limit).sort_values(["trial_id", "point"], kind="stable")
    span = rows.groupby("env", sort=False)["value"].transform(lambda v: v.max() - v.min())
    rows = rows.assign(position=rows.groupby("trial_id", sort=False).cumcount(), span=span)
    crossed = rows[rows["value"] >= rows["limit"]]
    first = crossed.groupby("trial_id", sort=False)[["position", "real_steps"]].first()
    per_trial = rows.groupby("trial_id", sort=False).agg(
        env=("env", "first"),
        agent=("agent", "first"),
        seed=("seed", "first"),
        points=("position", "size"),
        limit=("limit", "first"),
        span=("span", "first"),
    )
    per_trial["tail"] = rows.groupby("trial_id", sort=False).tail(COLLAPSE_POINTS).groupby("trial_id")["value"].mean()
    per_trial = per_trial.join(first, how="inner")
    fell = per_trial[
        (per_trial["points"] - per_trial["position"] > COLLAPSE_POINTS)
        & (per_trial["span"] > 0.0)
        & (per_trial["tail"] < per_trial["limit"] - COLLAPSE_DROP * per_trial["span"])
    ]
    if fell.empty:
        return _empty()
    detail = [
        f"reached {limit:g} at {int(steps):,} real steps, then averaged {tail:.3g} over its last {COLLAPSE_POINTS} "
        "evaluations"
        for limit, steps, tail in zip(fell["limit"], fell["real_steps"], fell["tail"], strict=True)
    ]
    table = fell.reset_index().assign(seed=fell["seed"].astype(int).to_numpy(), flag="collapsed", detail=detail)
    return table[SEED_FLAG_COLUMNS].reset_index(drop=True)


def outlying_seeds(scores: pd.DataFrame, score: str = "auc") -> pd.DataFrame:
    """Trials whose `score` lies far from their agent's other seeds (|modified z| > OUTLIER_Z)."""
    rows = []
    for (env, agent), group in scores.groupby(["env", "agent"], sort=False):
        values = group[score].to_numpy(dtype=float)
        usable = np.isfinite(values)
        if usable.sum() < OUTLIER_MIN_SEEDS:
            continue
        z = np.full(values.shape, np.nan)
        z[usable] = modified_z(values[usable])
        median = float(np.median(values[usable]))
        for index in np.flatnonzero(np.abs(np.nan_to_num(z)) > OUTLIER_Z):
            row = group.iloc[index]
            rows.append(
                {
                    "env": env,
                    "agent": agent,
                    "seed": int(row["seed"]),
                    "trial_id": row["trial_id"],
                    "flag": "far from the rest",
                    "detail": f"{score} {values[index]:.3g} against a median of {median:.3g} over "
                    f"{int(usable.sum())} seeds (modified z {z[index]:+.1f})",
                }
            )
    return pd.DataFrame.from_records(rows, columns=SEED_FLAG_COLUMNS) if rows else _empty()


def seed_flags(
    frame: pd.DataFrame,
    scores: pd.DataFrame,
    thresholds: Mapping[str, float | None],
    *,
    column: str = "eval_return",
    score: str = "auc",
) -> pd.DataFrame:
    """Every flagged seed, collapsed ones first, then those far from the rest, one row per (trial, flag)."""
    parts = [
        table for table in (collapsed_seeds(frame, thresholds, column), outlying_seeds(scores, score)) if len(table)
    ]
    if not parts:
        return _empty()
    return pd.concat(parts, ignore_index=True)[SEED_FLAG_COLUMNS]
