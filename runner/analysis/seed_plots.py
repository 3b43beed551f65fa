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

__all__ = ["SEED_LINES", "plot_seed_curves"]

SEED_LINES = 100
"""Most seeds drawn per agent: flagged seeds first, then the lowest seed numbers, up to this many. Thousands of
lines hide each other and take minutes to draw; the panel title says how many of how many are shown."""
LABELLED = 5
"""Flagged seeds labelled with their seed number per panel (all are drawn dark; the table lists every one)."""
_COLUMNS = 3
_PANEL_SIZE = (3.8, 2.7)


def _segments(rows: pd.DataFrame, column: str) -> tuple[list[np.ndarray], list[str]]:
    """One (real_steps, value) polyline per trial of `rows`, and the trial ids in the same order."""
    ordered = rows[rows[column].notna()].sort_values(["trial_id", "point"], kind="stable")
    trial_ids = ordered["trial_id"].to_numpy()
    points = np.column_stack([ordered["real_steps"].to_numpy(dtype=float), ordered[column].to_numpy(dtype=float)])
    starts = np.flatnonzero(np.r_[True, trial_ids[1:] != trial_ids[:-1]])
    return np.split(points, starts[1:]), [str(trial_ids[start]) for start in starts]


def _drawn_trials(rows: pd.DataFrame, flagged: Collection[str]) -> tuple[dict[str, int], int]:
    """Seed of each trial to draw for one agent (flagged first, then by seed number, SEED_LINES at most), and
    how many trials the agent has."""
    seeds = rows.groupby(rows["trial_id"].astype(str), sort=False, observed=True)["seed"].first()
    marked = seeds.index.isin(list(flagged))
    ordered = pd.concat([seeds[marked].sort_values(kind="stable"), seeds[~marked].sort_values(kind="stable")])
    return {str(trial): int(seed) for trial, seed in ordered.head(SEED_LINES).items()}, len(seeds)


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
    map changes dotted. Trials whose id is in `flagged` are drawn dark, the first LABELLED of a panel labelled
    "seed k" at their end. An agent with more than SEED_LINES seeds shows its flagged seeds first, then the
    lowest seed numbers. Lines are rasterized inside the SVG, which keeps it small and quick to write.
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
    for axes, agent in zip(panels, shown, strict=False):
        rows = in_env[in_env["agent"] == agent]
        drawn, total = _drawn_trials(rows, flagged)
        segments, trial_ids = _segments(rows[rows["trial_id"].astype(str).isin(list(drawn))], column)
        marked = [trial_id in flagged for trial_id in trial_ids]
        for mark, colour, width, alpha in ((False, styles[agent][0], 0.7, 0.55), (True, _THRESHOLD_COLOUR, 1.4, 0.9)):
            chosen = [segment for segment, is_marked in zip(segments, marked, strict=True) if is_marked == mark]
            axes.add_collection(LineCollection(chosen, colors=colour, linewidths=width, alpha=alpha, rasterized=True))
        dark = [
            (segment, trial_id) for segment, trial_id, mark in zip(segments, trial_ids, marked, strict=True) if mark
        ]
        for segment, trial_id in dark[:LABELLED]:
            axes.annotate(
                f"seed {drawn[trial_id]}",
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
        count = f"{len(segments)} seeds" if len(segments) == total else f"{len(segments)} of {total:,} seeds"
        _finish(axes, "real environment steps", ylabel, f"{agent} ({count})", legend=False)
        axes.title.set_fontsize("small")
    for axes in panels[len(shown) :]:
        axes.set_visible(False)
    figure.suptitle(f"{title}: every seed")
    return _save_both(figure, out_dir, f"{stem}_seeds_{safe_name(env)}")
