"""Per-(env, agent) summary of trial scores with bootstrap intervals, rendered as Markdown or plain text."""

from __future__ import annotations

import math
from collections.abc import Iterable, Sequence

import pandas as pd

from runner.analysis.bootstrap import keyed_rng, mean_and_interval

__all__ = [
    "SUMMARY_COLUMNS",
    "format_interval",
    "format_number",
    "ordered_labels",
    "summary_table",
    "to_markdown",
    "to_terminal",
]

SUMMARY_COLUMNS = [
    "env",
    "agent",
    "kind",
    "seeds",
    "auc_mean",
    "auc_low",
    "auc_high",
    "final_mean",
    "final_low",
    "final_high",
    "planning_per_real",
    "wall_seconds",
]
_INTERVALS = {"auc": "AUC mean [low, high]", "final": "final return mean [low, high]"}
_PLAIN_HEADERS = {
    "env": "environment",
    "agent": "agent",
    "kind": "kind",
    "seeds": "seeds",
    "planning_per_real": "planning updates per real step",
    "wall_seconds": "wall seconds per trial",
}


def ordered_labels(present: Iterable[str], preferred: Sequence[str]) -> list[str]:
    """Labels in the preferred order, followed by any other present labels in sorted order.

    Preferred labels that are not present are dropped, so declared-but-missing agents leave no empty rows.
    """
    seen = list(dict.fromkeys(str(label) for label in present))
    ordered = [label for label in dict.fromkeys(preferred) if label in seen]
    return ordered + sorted(label for label in seen if label not in ordered)


def summary_table(
    scores: pd.DataFrame,
    *,
    agent_order: Sequence[str],
    env_order: Sequence[str] = (),
    confidence: float = 0.95,
    n_resamples: int = 2000,
    seed: int = 0,
) -> pd.DataFrame:
    """Mean AUC and final return per (env, agent) with percentile bootstrap intervals over seeds.

    AUC and final return are resampled with the same seed indices so their intervals stay paired. Rows
    follow `env_order` then `agent_order`; unlisted labels come after the listed ones, sorted.
    """
    rows = []
    envs = ordered_labels(scores["env"], env_order)
    for env in envs:
        env_scores = scores[scores["env"] == env]
        for agent in ordered_labels(env_scores["agent"], agent_order):
            group = env_scores[env_scores["agent"] == agent]
            mean, low, high = mean_and_interval(
                group[["auc", "final_return"]].to_numpy(dtype=float),
                confidence=confidence,
                n_resamples=n_resamples,
                rng=keyed_rng(seed, "summary", env, agent),
            )
            rows.append(
                {
                    "env": env,
                    "agent": agent,
                    "kind": str(group["kind"].iloc[0]),
                    "seeds": len(group),
                    "auc_mean": mean[0],
                    "auc_low": low[0],
                    "auc_high": high[0],
                    "final_mean": mean[1],
                    "final_low": low[1],
                    "final_high": high[1],
                    "planning_per_real": float(group["planning_per_real"].mean()),
                    "wall_seconds": float(group["wall_seconds"].mean()),
                }
            )
    return pd.DataFrame.from_records(rows, columns=SUMMARY_COLUMNS)


def _decimals(value: float, significant: int) -> int:
    """Decimal places that show `significant` digits of a value in fixed notation (0 for large values)."""
    if not math.isfinite(value) or value == 0.0:
        return significant - 1
    return max(0, significant - 1 - math.floor(math.log10(abs(value))))


def _fixed(value: float, decimals: int) -> str:
    """Fixed-notation text for a value, "n/a" for a missing one."""
    if pd.isna(value):
        return "n/a"
    return f"{float(value):.{decimals}f}"


def format_number(value: float, significant: int = 3) -> str:
    """Format a number to about `significant` digits in fixed notation, never dropping integer digits."""
    if pd.isna(value):
        return "n/a"
    return _fixed(value, _decimals(float(value), significant))


def format_interval(mean: float, low: float, high: float) -> str:
    """Render a mean and its interval as "0.512 [0.47, 0.55]": 3 digits for the mean, 2 for both bounds.

    Both bounds share one number of decimals so that, for example, 0.996 and 1.03 read "1.00, 1.03".
    """
    bounds = [float(bound) for bound in (low, high) if not pd.isna(bound)]
    decimals = max((_decimals(bound, 2) for bound in bounds), default=1)
    return f"{format_number(mean, 3)} [{_fixed(low, decimals)}, {_fixed(high, decimals)}]"


def _format_column(values: pd.Series) -> list[str]:
    """Text for one plain column: integers as is, floats with decimals shared across the column."""
    if pd.api.types.is_integer_dtype(values):
        return [str(int(value)) for value in values]
    if not pd.api.types.is_numeric_dtype(values):
        return [str(value) for value in values]
    finite = [abs(float(value)) for value in values if not pd.isna(value) and math.isfinite(float(value))]
    decimals = _decimals(max(finite, default=0.0), 3)
    return [_fixed(value, decimals) for value in values]


def _display_frame(table: pd.DataFrame) -> tuple[list[str], list[list[str]], list[bool]]:
    """Collapse interval triples into one text column each; return headers, text rows and numeric flags."""
    headers: list[str] = []
    columns: list[list[str]] = []
    numeric: list[bool] = []
    for name in table.columns:
        prefix = str(name).rsplit("_", 1)[0]
        if prefix in _INTERVALS and str(name).endswith(("_low", "_high")):
            continue
        if prefix in _INTERVALS and str(name).endswith("_mean"):
            headers.append(_INTERVALS[prefix])
            columns.append(
                [
                    format_interval(m, lo, hi)
                    for m, lo, hi in zip(table[name], table[f"{prefix}_low"], table[f"{prefix}_high"], strict=True)
                ]
            )
            numeric.append(True)
            continue
        headers.append(_PLAIN_HEADERS.get(str(name), str(name)))
        columns.append(_format_column(table[name]))
        numeric.append(pd.api.types.is_numeric_dtype(table[name]))
    rows = [list(row) for row in zip(*columns, strict=True)] if columns else []
    return headers, rows, numeric


def _escape_cell(text: str) -> str:
    """Escape characters that would break a Markdown pipe-table cell."""
    return text.replace("\\", "\\\\").replace("|", "\\|").replace("\n", " ")


def to_markdown(table: pd.DataFrame) -> str:
    """Render a table as a Markdown pipe table, collapsing mean/low/high columns into "m [lo, hi]" cells."""
    headers, rows, numeric = _display_frame(table)
    lines = [
        "| " + " | ".join(_escape_cell(h) for h in headers) + " |",
        "| " + " | ".join("---:" if is_num else "---" for is_num in numeric) + " |",
    ]
    lines += ["| " + " | ".join(_escape_cell(cell) for cell in row) + " |" for row in rows]
    return "\n".join(lines) + "\n"


def _aligned(headers: list[str], rows: list[list[str]], numeric: list[bool]) -> list[str]:
    """Lay out headers and rows in padded columns: text left-aligned, numbers right-aligned."""
    widths = [max(len(cell) for cell in column) for column in zip(headers, *rows, strict=True)]

    def _line(cells: list[str]) -> str:
        padded = [
            cell.rjust(width) if is_num else cell.ljust(width)
            for cell, width, is_num in zip(cells, widths, numeric, strict=True)
        ]
        return "  ".join(padded).rstrip()

    return [_line(headers), "  ".join("-" * width for width in widths), *(_line(row) for row in rows)]


def to_terminal(table: pd.DataFrame) -> str:
    """Plain-text summary: one aligned block per environment with seeds, AUC, final return and planning."""
    shown = [c for c in SUMMARY_COLUMNS if c not in ("env", "kind", "wall_seconds")]
    blocks = []
    for env in pd.unique(table["env"]):
        headers, rows, numeric = _display_frame(table.loc[table["env"] == env, shown])
        blocks.append("\n".join([f"Environment: {env}", *_aligned(headers, rows, numeric)]))
    return "\n\n".join(blocks) + "\n" if blocks else ""
