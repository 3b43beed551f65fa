"""Errors of learned models on held-out real transitions, over real steps, with bands over seeds.

The trial measures them at every evaluation point (`runner.models.held_out`): `model_error_1` one step ahead
from each real observation, `model_error_5` and `model_error_20` after 5 and 20 steps of the model's own
open-loop predictions; root mean squares over transitions and dimensions, each dimension divided by its spread
on the held-out set, so 1 means "off by a typical spread". This module turns them into one tidy table for the
report's figure and `model_errors.csv`.

Probabilistic models (ensembles, Gaussian processes) also state how far off they expect to be: their predicted
spread on the same scale and the share of held-out values inside their 95% interval (`runner.metrics`'s
`model_spread_k` and `model_coverage_k`). `model_honesty_table` puts each beside the error it predicts, for the
report's honesty figure and `model_honesty.csv`.
"""

from __future__ import annotations

import pandas as pd

from runner.analysis.curves import BAND_COLUMNS, curve_bands

__all__ = [
    "HELD_OUT_COLUMNS",
    "HONESTY_TABLE_COLUMNS",
    "MODEL_ERROR_COLUMNS",
    "held_out_error_bands",
    "model_honesty_table",
]

HELD_OUT_COLUMNS = {"model_error_1": 1, "model_error_5": 5, "model_error_20": 20}
"""Metric column -> steps ahead it measures."""
MODEL_ERROR_COLUMNS = ["env", "agent", "steps_ahead", *BAND_COLUMNS[2:]]
HONESTY_STEPS = (1, 5)
"""Horizons at which models state their spread and coverage (metric columns model_spread_k, model_coverage_k)."""
HONESTY_TABLE_COLUMNS = ["env", "agent", "steps_ahead", "point", "real_steps", "error", "spread", "coverage", "n_seeds"]


def held_out_error_bands(
    frame: pd.DataFrame, *, confidence: float = 0.95, n_resamples: int = 2000, seed: int = 0
) -> pd.DataFrame:
    """Mean held-out model error per (env, agent, steps ahead, point) with the return curves' interval over
    seeds (`curve_bands`), for the (env, agent) pairs that have one; columns `MODEL_ERROR_COLUMNS`."""
    parts = []
    for column, steps_ahead in HELD_OUT_COLUMNS.items():
        if column not in frame.columns:
            continue
        measured = frame.loc[frame[column].notna(), ["env", "agent"]].drop_duplicates()
        if measured.empty:
            continue
        rows = frame.merge(measured, on=["env", "agent"])
        bands = curve_bands(rows, confidence=confidence, n_resamples=n_resamples, seed=seed, column=column)
        parts.append(bands.assign(steps_ahead=steps_ahead))
    if not parts:
        return pd.DataFrame(columns=MODEL_ERROR_COLUMNS)
    return pd.concat(parts, ignore_index=True)[MODEL_ERROR_COLUMNS]


def model_honesty_table(frame: pd.DataFrame) -> pd.DataFrame:
    """Mean held-out error, predicted spread and 95%-interval coverage over seeds per (env, agent, steps ahead,
    point), for the agents whose model states a spread; columns `HONESTY_TABLE_COLUMNS`. Means only: the figure
    asks whether spread tracks error, which the points' scatter around the diagonal shows."""
    parts = []
    for k in HONESTY_STEPS:
        columns = {f"model_error_{k}": "error", f"model_spread_{k}": "spread", f"model_coverage_{k}": "coverage"}
        if not set(columns) <= set(frame.columns):
            continue
        rows = frame.loc[frame[f"model_spread_{k}"].notna(), ["env", "agent", "point", "real_steps", *columns]]
        if rows.empty:
            continue
        grouped = rows.rename(columns=columns).groupby(["env", "agent", "point"], sort=True, observed=True)
        means = grouped[["real_steps", "error", "spread", "coverage"]].mean()
        parts.append(means.assign(n_seeds=grouped.size(), steps_ahead=k).reset_index())
    if not parts:
        return pd.DataFrame(columns=HONESTY_TABLE_COLUMNS)
    table = pd.concat(parts, ignore_index=True)
    return table.assign(real_steps=table["real_steps"].astype("int64"))[HONESTY_TABLE_COLUMNS]
