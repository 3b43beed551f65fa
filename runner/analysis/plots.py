"""Report figures, one set per environment: learning curves, time to threshold, model error, budget and frontier.

Every figure is built without pyplot (no global figure state) and written as PNG and SVG. An agent keeps the
same colour and marker in every figure of an environment: its position in the report's agent order picks them.
"""

from __future__ import annotations

import hashlib
import math
import re
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd
from matplotlib.axes import Axes
from matplotlib.figure import Figure
from matplotlib.ticker import NullFormatter

from runner.analysis.tables import ordered_labels
from runner.safe_files import ensure_folder, write_atomic

__all__ = [
    "PALETTE",
    "BudgetFamily",
    "BudgetReference",
    "agent_styles",
    "plot_budget",
    "plot_costs",
    "plot_curves",
    "plot_frontier",
    "plot_model_error",
    "plot_model_honesty",
    "plot_threshold",
    "safe_name",
]

PALETTE = (
    "#1d4f91",
    "#e3870e",
    "#2f9e8f",
    "#b2366e",
    "#8c6bb8",
    "#6b4a1f",
    "#9cb83a",
    "#5f6b73",
    "#d1495b",
    "#00798c",
    "#c9a227",
    "#3d3b8e",
)
_MARKERS = ("o", "s", "^", "D", "v", "P", "X", "h", "<", ">", "*")
_THRESHOLD_COLOUR = "#333333"
_GRID_COLOUR = "#dddddd"
_DPI = 120


_PLAIN_NAME = re.compile(r"^[a-z0-9][a-z0-9._-]{0,63}$")
_HASHED_TAIL = re.compile(r"-[0-9a-f]{10}$")
_STEM_CHARS = 48


def safe_name(label: str) -> str:
    """A file-name fragment for a label, unique per label and at most 59 characters.

    A short lower-case label of letters, digits, dots, dashes and underscores is its own name; any other
    (spaces, capitals, other scripts, very long) becomes a cleaned stem plus ten hex digits of its SHA-256, so
    'floor A' and 'floor_A', or two labels in other scripts, never share a file, even on a file system that
    ignores case.
    """
    if _PLAIN_NAME.match(label) and not _HASHED_TAIL.search(label):
        return label
    stem = re.sub(r"[^A-Za-z0-9._-]+", "_", label).strip("._-")[:_STEM_CHARS].rstrip("._-") or "env"
    return f"{stem}-{hashlib.sha256(label.encode('utf-8')).hexdigest()[:10]}"


def agent_styles(agents: Sequence[str]) -> dict[str, tuple[str, str]]:
    """Colour and marker of each agent from its position in `agents`, so every figure of an env agrees."""
    return {agent: (PALETTE[i % len(PALETTE)], _MARKERS[i % len(_MARKERS)]) for i, agent in enumerate(agents)}


def _save_atomic(figure: Figure, path: Path, file_format: str) -> None:
    """Save a figure under a temporary name in the target folder, then rename it into place (no link followed)."""
    metadata = {"Date": None} if file_format == "svg" else None
    write_atomic(path, lambda stream: figure.savefig(stream, format=file_format, dpi=_DPI, metadata=metadata))


def _save_both(figure: Figure, out_dir: Path, stem: str) -> list[Path]:
    """Write `<stem>.png` and `<stem>.svg` into out_dir, release the figure, and return both paths."""
    out_dir = ensure_folder(out_dir)
    paths = []
    for file_format in ("png", "svg"):
        path = out_dir / f"{stem}.{file_format}"
        _save_atomic(figure, path, file_format)
        paths.append(path)
        # The first save placed every axes; keeping those positions spares a second layout pass.
        figure.set_layout_engine("none")
    figure.clear()
    return paths


def _finish(axes: Axes, xlabel: str, ylabel: str, title: str | None = None, legend: bool = True) -> None:
    """Labels, light grid and a frameless legend shared by every panel; the legend sits outside the panel, to its
    right, so no number of variants hides the data (the constrained layout makes room for it)."""
    axes.set_xlabel(xlabel)
    axes.set_ylabel(ylabel)
    if title:
        axes.set_title(title)
    axes.grid(True, color=_GRID_COLOUR, linewidth=0.6)
    if legend and axes.get_legend_handles_labels()[0]:
        _legend_beside(axes)


def _legend_beside(axes: Axes) -> None:
    """A frameless legend to the right of the panel, outside the data area."""
    axes.legend(loc="upper left", bbox_to_anchor=(1.02, 1.0), borderaxespad=0.0, fontsize="small", frameon=False)


def _draw_bands(axes: Axes, bands: pd.DataFrame, styles: dict[str, tuple[str, str]]) -> None:
    """One mean line and shaded band per agent of `bands` that has a style, in style order."""
    for agent, (colour, marker) in styles.items():
        rows = bands[bands["agent"] == agent].sort_values("real_steps")
        rows = rows[rows["mean"].notna()]
        if rows.empty:
            continue
        axes.fill_between(rows["real_steps"], rows["low"], rows["high"], color=colour, alpha=0.18, linewidth=0)
        axes.plot(
            rows["real_steps"],
            rows["mean"],
            color=colour,
            linewidth=1.8,
            marker=marker,
            markersize=4,
            markevery=max(1, len(rows) // 10),
            label=agent,
        )


def _draw_threshold_line(axes: Axes, threshold: float | None) -> None:
    """Dashed horizontal line at the return threshold, when there is one."""
    if threshold is not None:
        axes.axhline(
            threshold, color=_THRESHOLD_COLOUR, linestyle="--", linewidth=1.2, label=f"threshold {threshold:g}"
        )


def _draw(
    bands: pd.DataFrame,
    agents: list[str],
    threshold: float | None,
    title: str,
    changes: Sequence[int] = (),
    ylabel: str = "mean greedy evaluation return",
) -> Figure:
    """Build the figure: one line and shaded band per agent, a dashed threshold line, labelled change events."""
    figure = Figure(figsize=(7.0, 4.5), layout="constrained")
    axes = figure.add_subplot()
    _draw_bands(axes, bands, agent_styles(agents))
    _draw_threshold_line(axes, threshold)
    for i, step in enumerate(changes):
        axes.axvline(step, color="#555555", linestyle=":", linewidth=1.2, label="the map changes" if i == 0 else None)
        axes.annotate(
            f"phase {i + 2} from {step:,}",
            xy=(step, 1.0),
            xycoords=("data", "axes fraction"),
            xytext=(3, -3),
            textcoords="offset points",
            ha="left",
            va="top",
            fontsize="small",
            color="#555555",
        )
    _finish(axes, "real environment steps", ylabel, title)
    return figure


def plot_curves(
    bands: pd.DataFrame,
    env: str,
    *,
    agent_order: Sequence[str],
    threshold: float | None,
    out_dir: Path,
    title: str,
    changes: Sequence[int] = (),
    ylabel: str = "mean greedy evaluation return",
    stem: str = "curves",
) -> list[Path]:
    """Write `<stem>_<env>.png` and `.svg` for one environment and return their paths.

    Shaded areas are the bootstrap bands from `curve_bands`; dotted vertical lines, labelled with the phase they
    start, mark the real steps after which a changing environment switched maps. Figures are built without
    pyplot, so no global figure state is touched and nothing stays open after the call.
    """
    env_bands = bands[bands["env"] == env]
    if env_bands.empty:
        raise ValueError(f"no curve bands for environment {env!r}")
    agents = ordered_labels(pd.unique(env_bands["agent"]), agent_order)
    figure = _draw(env_bands, agents, threshold, title, changes, ylabel)
    return _save_both(figure, out_dir, f"{stem}_{safe_name(env)}")


def plot_threshold(
    km_steps: pd.DataFrame,
    censored: pd.DataFrame,
    env: str,
    *,
    agents: Sequence[str],
    budget: int,
    threshold_text: str,
    out_dir: Path,
    title: str,
) -> list[Path]:
    """Write `threshold_<env>.png/.svg`: Kaplan-Meier share of trials not yet at the threshold vs real steps.

    Parameters
    ----------
    km_steps : DataFrame
        Step-function vertices per agent with columns agent, time, survival, low, high, starting at
        (0, 1) and ending at the last observed step; drawn as post steps with a shaded pointwise band.
    censored : DataFrame
        Columns agent, time, survival: where trials stopped without reaching the threshold (drawn as "+").
    """
    figure = Figure(figsize=(9.0, 4.5), layout="constrained")
    axes = figure.add_subplot()
    for agent, (colour, _) in agent_styles(agents).items():
        rows = km_steps[km_steps["agent"] == agent]
        if rows.empty:
            continue
        axes.fill_between(rows["time"], rows["low"], rows["high"], step="post", color=colour, alpha=0.1, linewidth=0)
        axes.step(rows["time"], rows["survival"], where="post", color=colour, linewidth=1.8, label=agent)
        marks = censored[censored["agent"] == agent]
        axes.plot(marks["time"], marks["survival"], linestyle="none", marker="+", markersize=8, color=colour)
    axes.axhline(0.5, color=_THRESHOLD_COLOUR, linestyle=":", linewidth=1.0, label="half of the trials")
    axes.set_xlim(0, 1.02 * max(float(budget), float(km_steps["time"].max()) if len(km_steps) else 1.0))
    axes.set_ylim(-0.02, 1.02)
    _finish(axes, "real environment steps", f"share of trials not yet at\n{threshold_text}", title, legend=False)
    _legend_beside(axes)
    return _save_both(figure, out_dir, f"threshold_{safe_name(env)}")


def plot_model_error(
    return_bands: pd.DataFrame,
    error_bands: pd.DataFrame,
    env: str,
    *,
    agents: Sequence[str],
    threshold: float | None,
    out_dir: Path,
    title: str,
    held_out: pd.DataFrame | None = None,
) -> list[Path]:
    """Write `model_error_<env>.png/.svg`: the return curves beside the learned models' errors over real steps.

    After the return panel come, where measured: the mean total-variation distance of each learned transition
    model to the true table (`error_bands`), and one panel per horizon of the errors on held-out real
    transitions (`held_out`, columns of `runner.analysis.model_errors.MODEL_ERROR_COLUMNS`: one step, then open
    loop after 5 and 20 steps), all with their bands. Agents without a model have no line there but keep their
    colour; the legend sits beside the last panel.
    """
    held_out = held_out if held_out is not None else pd.DataFrame(columns=["steps_ahead", "agent"])
    panels: list[tuple[str, str, pd.DataFrame]] = []
    if len(error_bands) and error_bands["mean"].notna().any():
        panels.append(("model error (mean total-variation distance)", "distance to the true table", error_bands))
    for steps_ahead in sorted(pd.unique(held_out["steps_ahead"])):
        rows = held_out[held_out["steps_ahead"] == steps_ahead]
        what = "one step" if steps_ahead == 1 else f"open loop, {steps_ahead} steps"
        panels.append((f"held-out error in spreads ({what})", f"held-out error, {what}", rows))
    figure = Figure(figsize=(4.2 * (1 + len(panels)) + 2.0, 4.5), layout="constrained")
    axes = figure.subplots(1, 1 + len(panels), sharex=True, squeeze=False)[0]
    styles = agent_styles(agents)
    _draw_bands(axes[0], return_bands, styles)
    _draw_threshold_line(axes[0], threshold)
    _finish(axes[0], "real environment steps", "mean greedy evaluation return", "return", legend=False)
    for panel, (ylabel, panel_title, bands) in zip(axes[1:], panels, strict=True):
        present = set(bands["agent"])
        _draw_bands(panel, bands, {agent: style for agent, style in styles.items() if agent in present})
        panel.set_ylim(bottom=0.0)
        _finish(panel, "real environment steps", ylabel, panel_title, legend=False)
    handles: dict[str, object] = {}
    for panel in axes:
        for handle, label in zip(*panel.get_legend_handles_labels(), strict=True):
            handles.setdefault(label, handle)
    axes[-1].legend(
        list(handles.values()),
        list(handles),
        loc="upper left",
        bbox_to_anchor=(1.02, 1.0),
        borderaxespad=0.0,
        fontsize="small",
        frameon=False,
    )
    figure.suptitle(title)
    return _save_both(figure, out_dir, f"model_error_{safe_name(env)}")


def plot_model_honesty(
    honesty: pd.DataFrame, env: str, *, agents: Sequence[str], out_dir: Path, title: str
) -> list[Path]:
    """Write `model_honesty_<env>.png/.svg`: is each probabilistic model's stated uncertainty honest?

    Left: the spread a model predicts against the error it makes on held-out real transitions, one point per
    evaluation point (mean over seeds; filled one step ahead, hollow after 5 steps of sampled rollouts), with
    the diagonal where they agree: below it the model is overconfident, above it timid. Right: the share of
    held-out values inside its 95% predictive interval over real steps, with the 0.95 an honest model keeps.
    `honesty` has the columns of `runner.analysis.model_errors.HONESTY_TABLE_COLUMNS`.
    """
    figure = Figure(figsize=(12.0, 4.5), layout="constrained")
    scatter, coverage = figure.subplots(1, 2)
    styles = agent_styles(agents)
    present = [agent for agent in agents if agent in set(honesty["agent"])]
    for agent in present:
        colour, marker = styles[agent]
        for steps_ahead, rows in honesty[honesty["agent"] == agent].groupby("steps_ahead", sort=True):
            rows = rows.sort_values("real_steps")
            what = "one step" if steps_ahead == 1 else f"{steps_ahead} steps"
            filled = steps_ahead == 1
            scatter.scatter(
                rows["spread"],
                rows["error"],
                marker=marker,
                s=28,
                facecolors=colour if filled else "none",
                edgecolors=colour,
                label=f"{agent}, {what}",
            )
            coverage.plot(
                rows["real_steps"],
                rows["coverage"],
                color=colour,
                marker=marker,
                markersize=4,
                linewidth=1.6,
                linestyle="-" if filled else ":",
                markerfacecolor=colour if filled else "none",
                label=f"{agent}, {what}",
            )
    values = honesty[["spread", "error"]].to_numpy(dtype=float)
    values = values[np.isfinite(values) & (values > 0)]
    if values.size:
        low, high = values.min() / 1.5, values.max() * 1.5
        scatter.plot([low, high], [low, high], color=_THRESHOLD_COLOUR, linestyle="--", linewidth=1.0, label="honest")
        scatter.set_xscale("log")
        scatter.set_yscale("log")
        for axis in (scatter.xaxis, scatter.yaxis):
            axis.set_minor_formatter(NullFormatter())
    _finish(
        scatter, "predicted spread (in spreads of the data)", "held-out error (same units)", "spread vs error", False
    )
    coverage.axhline(0.95, color=_THRESHOLD_COLOUR, linestyle="--", linewidth=1.0, label="0.95 (honest)")
    coverage.set_ylim(-0.02, 1.02)
    _finish(coverage, "real environment steps", "share inside the 95% interval", "interval coverage", legend=False)
    _legend_beside(coverage)
    figure.suptitle(title)
    return _save_both(figure, out_dir, f"model_honesty_{safe_name(env)}")


@dataclass(frozen=True)
class BudgetFamily:
    """Agent variants that differ only in one planning parameter, with their results per value.

    `rows` has one row per variant with columns value, agent, auc_mean, auc_low, auc_high, median_steps,
    median_low, median_high, planning_per_real, cpu_us_per_real, cpu_us_low, cpu_us_high.
    """

    name: str
    param: str
    colour: str
    marker: str
    rows: pd.DataFrame


@dataclass(frozen=True)
class BudgetReference:
    """The baseline agent's AUC, median real steps to threshold and CPU microseconds per real step."""

    label: str
    auc: float
    median_steps: float
    cpu_us_per_real: float


def _budget_axis(axes: Axes, values: np.ndarray) -> None:
    """Log x axis, or symmetric log when 0 is among the values so that 0 gets its own tick at the left."""
    positive = values[values > 0]
    top = float(positive.max()) * 1.5 if positive.size else 1.0
    if (values <= 0).any():
        linthresh = float(positive.min()) if positive.size else 1.0
        axes.set_xscale("symlog", linthresh=linthresh, linscale=0.6)
        axes.set_xlim(float(values.min()) - 0.4 * linthresh, top)
    else:
        axes.set_xscale("log")
        axes.set_xlim(float(positive.min()) / 1.5, top)
    ticks = np.unique(values)
    axes.set_xticks(ticks, [f"{tick:g}" for tick in ticks])
    axes.minorticks_off()


# Values spanning more than this ratio (largest over smallest positive) get a logarithmic axis.
LOG_SPAN = 30.0


def _spans_orders(values: np.ndarray) -> bool:
    """True when the positive finite values span more than LOG_SPAN (and none is zero or negative)."""
    values = np.asarray(values, dtype=float)
    values = values[np.isfinite(values)]
    if values.size == 0 or (values <= 0).any():
        return False
    return float(values.max()) / float(values.min()) > LOG_SPAN


def _error_bar(axes: Axes, x: np.ndarray, columns: Sequence[np.ndarray], style: dict[str, object]) -> None:
    """Points joined by a line with asymmetric error bars; NaN bounds draw no bar, inf bounds reach the top.

    `columns` holds the estimate, the low bound and the high bound, each of shape (n,).
    """
    mean, low, high = (np.asarray(column, dtype=float) for column in columns)
    finite = np.r_[mean[np.isfinite(mean)], high[np.isfinite(high)], 0.0]
    upper = np.where(np.isinf(high), finite.max() * 1.08, high)
    yerr = np.nan_to_num(np.vstack([np.clip(mean - low, 0, None), np.clip(upper - mean, 0, None)]))
    axes.errorbar(x, mean, yerr=yerr, capsize=3, linewidth=1.6, markersize=5, **style)


def _note_if_empty(axes: Axes, text: str) -> None:
    """Write a short note in the middle of a panel that has nothing drawn."""
    if not axes.lines or all(np.isnan(np.asarray(line.get_ydata(), dtype=float)).all() for line in axes.lines):
        axes.text(0.5, 0.5, text, transform=axes.transAxes, ha="center", va="center", color=_THRESHOLD_COLOUR)


def plot_budget(
    families: Sequence[BudgetFamily],
    env: str,
    *,
    reference: BudgetReference | None,
    budget: int,
    out_dir: Path,
    title: str,
) -> list[Path]:
    """Write `budget_<env>.png/.svg`: what a planning budget buys (AUC, median steps) and what it costs.

    Four panels against the planning parameter of each family: AUC with its interval, Kaplan-Meier median
    real steps to threshold with its interval (no point where fewer than half the trials reached it), planning
    updates per real step, and measured CPU microseconds per real step (median over seeds) with its interval;
    the CPU axis is logarithmic when its values span more than LOG_SPAN. The baseline, when given, is a dotted
    reference line. A budget of 0 sits at the left end of a symmetric-log axis.
    """
    if not families:
        raise ValueError("plot_budget needs at least one family of variants")
    figure = Figure(figsize=(11.0, 7.5), layout="constrained")
    panels = figure.subplots(2, 2)
    auc_axes, steps_axes, planning_axes, cpu_axes = panels.ravel()
    for family in families:
        rows = family.rows.sort_values("value")
        x = rows["value"].to_numpy(dtype=float)
        style: dict[str, object] = {"color": family.colour, "marker": family.marker, "label": family.name}
        _error_bar(auc_axes, x, [rows[f"auc_{part}"] for part in ("mean", "low", "high")], style)
        _error_bar(steps_axes, x, [rows[f"median_{part}"] for part in ("steps", "low", "high")], style)
        planning_axes.plot(x, rows["planning_per_real"].to_numpy(dtype=float), linewidth=1.6, markersize=5, **style)
        _error_bar(cpu_axes, x, [rows[c] for c in ("cpu_us_per_real", "cpu_us_low", "cpu_us_high")], style)
    _note_if_empty(steps_axes, "no median: no threshold, or fewer than half the trials reached it")
    if reference is not None:
        label = f"baseline {reference.label}"
        for axes, value in (
            (auc_axes, reference.auc),
            (steps_axes, reference.median_steps),
            (cpu_axes, reference.cpu_us_per_real),
        ):
            if math.isfinite(value):
                axes.axhline(value, color=_THRESHOLD_COLOUR, linestyle=":", linewidth=1.1, label=label)
    values = np.concatenate([family.rows["value"].to_numpy(dtype=float) for family in families])
    xlabel = f"planning budget ({', '.join(sorted({family.param for family in families}))})"
    for axes, ylabel, panel_title in (
        (auc_axes, "AUC (time-averaged return)", "return over the budget"),
        (steps_axes, "median real steps to threshold", "real steps to threshold"),
        (planning_axes, "planning updates per real step", "planning compute"),
        (cpu_axes, "CPU microseconds per real step (median)", "CPU time"),
    ):
        _budget_axis(axes, values)
        _finish(axes, xlabel, ylabel, panel_title, legend=axes is auc_axes)
    steps_axes.set_ylim(0, budget * 1.05)
    planning_axes.set_ylim(bottom=0)
    cpu_values = [family.rows[c].to_numpy(dtype=float) for family in families for c in ("cpu_us_low", "cpu_us_high")]
    if reference is not None:
        cpu_values.append(np.array([reference.cpu_us_per_real]))
    if _spans_orders(np.concatenate(cpu_values)):
        cpu_axes.set_yscale("log")
        cpu_axes.set_ylabel("CPU microseconds per real step (median, log scale)")
    else:
        cpu_axes.set_ylim(bottom=0)
    figure.suptitle(title)
    return _save_both(figure, out_dir, f"budget_{safe_name(env)}")


def plot_costs(
    curves: pd.DataFrame,
    env: str,
    *,
    agents: Sequence[str],
    unit: str,
    user_price: float | None,
    crossings: Sequence[tuple[str, float]],
    out_dir: Path,
    title: str,
) -> list[Path]:
    """Write `costs_<env>.png/.svg`: median total cost to the threshold against the price of a real step.

    `curves` comes from `runner.analysis.costs.cost_curves` (agent, step_price, median, low, high); both axes
    are logarithmic. `crossings` lists (agent, price) break-even points against the baseline, marked on the
    agent's line; `user_price` (in `unit` per real step), when given, is a vertical line.
    """
    figure = Figure(figsize=(7.5, 5.0), layout="constrained")
    axes = figure.add_subplot()
    styles = agent_styles(agents)
    for agent, (colour, marker) in styles.items():
        rows = curves[(curves["agent"] == agent) & curves["median"].notna()].sort_values("step_price")
        if rows.empty:
            continue
        axes.fill_between(rows["step_price"], rows["low"], rows["high"], color=colour, alpha=0.15, linewidth=0)
        axes.plot(
            rows["step_price"],
            rows["median"],
            color=colour,
            linewidth=1.8,
            marker=marker,
            markersize=4,
            markevery=max(1, len(rows) // 8),
            label=agent,
        )
    for agent, price in crossings:
        rows = curves[(curves["agent"] == agent) & curves["median"].notna()].sort_values("step_price")
        if rows.empty or not np.isfinite(price) or price <= 0:
            continue
        level = np.exp(np.interp(np.log(price), np.log(rows["step_price"]), np.log(rows["median"])))
        axes.plot([price], [level], marker="o", markersize=9, markerfacecolor="white", color=styles[agent][0])
    if user_price is not None:
        axes.axvline(user_price, color=_THRESHOLD_COLOUR, linestyle="--", linewidth=1.2, label="your price")
    axes.set_xscale("log")
    axes.set_yscale("log")
    _finish(axes, f"price of one real step ({unit}, log scale)", f"median total cost to threshold ({unit})", title)
    _legend_beside(axes)
    return _save_both(figure, out_dir, f"costs_{safe_name(env)}")


def plot_frontier(
    points: pd.DataFrame,
    env: str,
    *,
    agents: Sequence[str],
    budget: int,
    out_dir: Path,
    title: str,
) -> list[Path]:
    """Write `frontier_<env>.png/.svg`: median real steps to threshold against CPU time per real step.

    `points` has one row per agent with cpu_us_per_real, cpu_us_low, cpu_us_high, median_steps, median_low,
    median_high and on_frontier. Both coordinates carry their intervals as error bars; variants that no other
    is clearly ahead of (see `pareto_front` in report.py) are ringed; variants whose median was not reached
    within the budget sit above the budget line, hollow; variants without CPU times are not drawn. An axis
    whose values span more than LOG_SPAN is logarithmic.
    """
    figure = Figure(figsize=(7.5, 5.0), layout="constrained")
    axes = figure.add_subplot()
    ceiling = budget * 1.12
    for agent, (colour, marker) in agent_styles(agents).items():
        row = points[(points["agent"] == agent) & points["cpu_us_per_real"].notna()]
        if row.empty:
            continue
        x = row["cpu_us_per_real"].to_numpy(dtype=float)
        x_low, x_high = row["cpu_us_low"].to_numpy(dtype=float), row["cpu_us_high"].to_numpy(dtype=float)
        xerr = np.nan_to_num(np.vstack([np.clip(x - x_low, 0, None), np.clip(x_high - x, 0, None)]))
        median = row["median_steps"].to_numpy(dtype=float)
        if np.isnan(median[0]):
            axes.errorbar(
                x,
                [ceiling],
                xerr=xerr,
                linestyle="none",
                marker=marker,
                markersize=8,
                markerfacecolor="white",
                markeredgecolor=colour,
                color=colour,
                capsize=3,
                label=f"{agent} (median not reached)",
            )
            continue
        low, high = row["median_low"].to_numpy(dtype=float), row["median_high"].to_numpy(dtype=float)
        upper = np.where(np.isinf(high), ceiling, high)
        yerr = np.nan_to_num(np.vstack([np.clip(median - low, 0, None), np.clip(upper - median, 0, None)]))
        axes.errorbar(
            x,
            median,
            xerr=xerr,
            yerr=yerr,
            color=colour,
            marker=marker,
            markersize=7,
            capsize=3,
            linestyle="none",
            label=agent,
        )
        if bool(row["on_frontier"].iloc[0]):
            axes.plot(
                x,
                median,
                linestyle="none",
                marker="o",
                markersize=16,
                markerfacecolor="none",
                markeredgecolor=_THRESHOLD_COLOUR,
                markeredgewidth=1.2,
            )
    axes.plot(
        [],
        [],
        linestyle="none",
        marker="o",
        markersize=12,
        markerfacecolor="none",
        color=_THRESHOLD_COLOUR,
        label="no other clearly ahead",
    )
    axes.axhline(budget, color=_THRESHOLD_COLOUR, linestyle=":", linewidth=1.0, label=f"budget ({budget:,} real steps)")
    drawn = points[points["cpu_us_per_real"].notna()]
    xlabel = "CPU microseconds per real step (median over seeds)"
    if _spans_orders(drawn[["cpu_us_low", "cpu_us_per_real", "cpu_us_high"]].to_numpy(dtype=float).ravel()):
        axes.set_xscale("log")
        xlabel += ", log scale"
    steps = drawn["median_steps"].to_numpy(dtype=float)
    if _spans_orders(np.r_[steps[np.isfinite(steps)], budget]):
        axes.set_yscale("log")
        axes.set_ylim(np.nanmin(steps) / 1.5, budget * 1.4)
        ylabel = "median real steps to threshold (log scale)"
    else:
        axes.set_ylim(0, budget * 1.2)
        ylabel = "median real steps to threshold"
    _finish(axes, xlabel, ylabel, title)
    _legend_beside(axes)
    return _save_both(figure, out_dir, f"frontier_{safe_name(env)}")
