"""Per-seed companions of the curve figures: one thin line per seed, one panel per agent, same axes throughout.

A mean curve and its band can hide a seed that collapsed or never learned; these figures show every seed, with
the seeds flagged in `runner.analysis.seeds` drawn darker and labelled with their seed number.
"""

from __future__ import annotations

import math
from collections.abc import Collection, Sequence
from pathlib import Path

import numpy as np
import pandas as pd
from matplotlib.collections import LineCollection
from matplotlib.figure import Figure

from runner.analysis.plots import _THRESHOLD_COLOUR, _finish, _save_both, agent_styles, safe_name

__all__ = ["plot_seed_curves"]

_COLUMNS = 3
_PANEL_SIZE = (3.8, 2.7)


def _segments(rows: pd.DataFrame, column: str) -> tuple[list[np.ndarray], list[str]]:
    """One (real_steps, value) polyline per trial of `rows`, and the trial ids in the same order."""
    ordered = rows[rows[column].notna()].sort_values(["trial_id", "point"], kind="stable")
    trial_ids = ordered["trial_id"].to_numpy()
    points = np.column_stack([ordered["real_steps"].to_numpy(dtype=float), ordered[column].to_numpy(dtype=float)])
    starts = np.flatnonzero(np.r_[True, trial_ids[1:] != trial_ids[:-1]])
    return np.split(points, starts[1:]), [str(trial_ids[start]) for start in starts]


def plot_seed_curves(
    frame: pd.DataFrame,
    env: str,
    *,
    agents: Sequence[str],
    column: str,
    threshold: float | None,
    flagged: Collection[str],
    out_dir: Path,
    title: str,
    changes: Sequence[int] = (),
    ylabel: str = "greedy evaluation return",
    stem: str = "curves",
) -> list[Path]:
    """Write `<stem>_seeds_<env>.png/.svg`: every trial's curve of `column`, a panel per agent in `agents`.

    Panels share both axes so seeds compare across agents as in the mean figure; the threshold is dashed,
    map changes dotted. Trials whose id is in `flagged` are drawn dark and labelled "seed k" at their end.
    """
    in_env = frame[(frame["env"] == env) & frame["agent"].isin(agents)]
    shown = [agent for agent in agents if in_env.loc[in_env["agent"] == agent, column].notna().any()]
    if not shown:
        raise ValueError(f"no per-seed values of {column!r} for environment {env!r}")
    columns = min(_COLUMNS, len(shown))
    rows = math.ceil(len(shown) / columns)
    figure = Figure(figsize=(_PANEL_SIZE[0] * columns, _PANEL_SIZE[1] * rows + 0.6), layout="constrained")
    panels = np.atleast_1d(figure.subplots(rows, columns, sharex=True, sharey=True, squeeze=False)).ravel()
    styles = agent_styles(agents)
    seeds = dict(zip(in_env["trial_id"].astype(str), in_env["seed"], strict=False))
    for axes, agent in zip(panels, shown, strict=False):
        segments, trial_ids = _segments(in_env[in_env["agent"] == agent], column)
        marked = [trial_id in flagged for trial_id in trial_ids]
        plain = [segment for segment, mark in zip(segments, marked, strict=True) if not mark]
        axes.add_collection(LineCollection(plain, colors=styles[agent][0], linewidths=0.7, alpha=0.55))
        for segment, trial_id, mark in zip(segments, trial_ids, marked, strict=True):
            if not mark:
                continue
            axes.plot(segment[:, 0], segment[:, 1], color=_THRESHOLD_COLOUR, linewidth=1.4)
            axes.annotate(
                f"seed {seeds[trial_id]}",
                xy=(segment[-1, 0], segment[-1, 1]),
                xytext=(-4, 4),
                textcoords="offset points",
                ha="right",
                fontsize="x-small",
                color=_THRESHOLD_COLOUR,
            )
        axes.autoscale_view()
        if threshold is not None:
            axes.axhline(threshold, color=_THRESHOLD_COLOUR, linestyle="--", linewidth=1.0)
        for step in changes:
            axes.axvline(step, color="#555555", linestyle=":", linewidth=1.0)
        _finish(axes, "real environment steps", ylabel, f"{agent} ({len(segments)} seeds)", legend=False)
        axes.title.set_fontsize("small")
    for axes in panels[len(shown) :]:
        axes.set_visible(False)
    figure.suptitle(f"{title}: every seed")
    return _save_both(figure, out_dir, f"{stem}_seeds_{safe_name(env)}")
