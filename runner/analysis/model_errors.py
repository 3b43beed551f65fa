"""Errors of learned models on held-out real transitions, over real steps, with bands over seeds.

The trial measures them at every evaluation point (`runner.models.held_out`): `model_error_1` one step ahead
from each real observation, `model_error_5` and `model_error_20` after 5 and 20 steps of the model's own
open-loop predictions; root mean squares over transitions and dimensions, each dimension divided by its spread
on the held-out set, so 1 means "off by a typical spread". This module turns them into one tidy table for the
report's figure and `model_errors.csv`.
"""

from __future__ import annotations

import pandas as pd

from runner.analysis.curves import BAND_COLUMNS, curve_bands

__all__ = ["HELD_OUT_COLUMNS", "MODEL_ERROR_COLUMNS", "held_out_error_bands"]

HELD_OUT_COLUMNS = {"model_error_1": 1, "model_error_5": 5, "model_error_20": 20}
"""Metric column -> steps ahead it measures."""
MODEL_ERROR_COLUMNS = ["env", "agent", "steps_ahead", *BAND_COLUMNS[2:]]


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
