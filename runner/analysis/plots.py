"""Learning-curve figures (mean greedy return vs real steps with bootstrap bands), one per environment."""

from __future__ import annotations

import os
import re
import threading
from collections.abc import Sequence
from pathlib import Path

import pandas as pd
from matplotlib.figure import Figure

from runner.analysis.tables import ordered_labels

__all__ = ["PALETTE", "plot_curves", "safe_name"]

PALETTE = (
    "#1d4f91",
    "#e3870e",
    "#2f9e8f",
    "#b2366e",
    "#8c6bb8",
    "#6b4a1f",
    "#9cb83a",
    "#5f6b73",
)
_MARKERS = ("o", "s", "^", "D", "v", "P", "X")
_THRESHOLD_COLOUR = "#333333"
_DPI = 120


def safe_name(label: str) -> str:
    """Turn a label into a file-name fragment made only of letters, digits, dots, dashes and underscores."""
    cleaned = re.sub(r"[^A-Za-z0-9._-]+", "_", label).strip("._")
    return cleaned or "env"


def _save_atomic(figure: Figure, path: Path, file_format: str) -> None:
    """Save a figure under a temporary name in the target folder, then rename it into place."""
    temp_path = path.with_name(f".{path.name}.{os.getpid()}.{threading.get_ident()}.tmp")
    try:
        with temp_path.open("wb") as stream:
            metadata = {"Date": None} if file_format == "svg" else None
            figure.savefig(stream, format=file_format, dpi=_DPI, metadata=metadata)
        os.replace(temp_path, path)
    except BaseException:
        temp_path.unlink(missing_ok=True)
        raise


def _draw(bands: pd.DataFrame, agents: list[str], threshold: float | None, title: str) -> Figure:
    """Build the figure: one line and shaded band per agent, plus an optional dashed threshold line."""
    figure = Figure(figsize=(7.0, 4.5), layout="constrained")
    axes = figure.add_subplot()
    for index, agent in enumerate(agents):
        rows = bands[bands["agent"] == agent].sort_values("real_steps")
        colour = PALETTE[index % len(PALETTE)]
        axes.fill_between(rows["real_steps"], rows["low"], rows["high"], color=colour, alpha=0.18, linewidth=0)
        axes.plot(
            rows["real_steps"],
            rows["mean"],
            color=colour,
            linewidth=1.8,
            marker=_MARKERS[index % len(_MARKERS)],
            markersize=4,
            markevery=max(1, len(rows) // 10),
            label=agent,
        )
    if threshold is not None:
        axes.axhline(
            threshold,
            color=_THRESHOLD_COLOUR,
            linestyle="--",
            linewidth=1.2,
            label=f"threshold {threshold:g}",
        )
    axes.set_xlabel("real environment steps")
    axes.set_ylabel("mean greedy evaluation return")
    axes.set_title(title)
    axes.grid(True, color="#dddddd", linewidth=0.6)
    axes.legend(loc="best", fontsize="small", frameon=False)
    return figure


def plot_curves(
    bands: pd.DataFrame,
    env: str,
    *,
    agent_order: Sequence[str],
    threshold: float | None,
    out_dir: Path,
    title: str,
) -> list[Path]:
    """Write `curves_<env>.png` and `.svg` for one environment and return their paths.

    Shaded areas are the bootstrap bands from `curve_bands`; figures are built without pyplot, so no
    global figure state is touched and nothing stays open after the call.
    """
    env_bands = bands[bands["env"] == env]
    if env_bands.empty:
        raise ValueError(f"no curve bands for environment {env!r}")
    out_dir = Path(out_dir)
    out_dir.mkdir(parents=True, exist_ok=True)
    figure = _draw(env_bands, ordered_labels(env_bands["agent"], agent_order), threshold, title)
    paths = []
    for file_format in ("png", "svg"):
        path = out_dir / f"curves_{safe_name(env)}.{file_format}"
        _save_atomic(figure, path, file_format)
        paths.append(path)
    figure.clear()
    return paths
