"""The report's display tables (shared by Markdown and HTML) and its single self-contained HTML page.

The page embeds every figure as a base64 PNG and carries its own style, so it can be mailed or archived and
still reads offline. It is rendered from a jinja2 template with autoescaping, never assembled from strings.
"""

from __future__ import annotations

import base64
import json
import math
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING

import jinja2
import numpy as np
import pandas as pd

from runner.analysis.bootstrap import interval_caption
from runner.analysis.costs import BREAK_EVEN_COLUMNS, COST_COLUMNS, COST_TRIAL_COLUMNS, format_cpu_time
from runner.analysis.measures import MEASURES
from runner.analysis.methods import method_lines
from runner.analysis.seeds import COLLAPSE_DROP, COLLAPSE_POINTS, OUTLIER_Z, SEED_FLAG_COLUMNS
from runner.analysis.tables import format_interval, format_number
from runner.analysis.versions import VERSION_COLUMNS
from runner.safe_files import write_atomic

if TYPE_CHECKING:
    from runner.analysis.report import ExperimentFacts

__all__ = [
    "CAUTION",
    "FAILURE_COLUMNS",
    "RUN_COLUMNS",
    "TRIAL_COLUMNS",
    "EnvPage",
    "ExperimentRecords",
    "ReportTables",
    "TableView",
    "advice_note",
    "advice_view",
    "break_even_view",
    "comparisons_view",
    "costs_view",
    "earnings_view",
    "efficiency_view",
    "env_views",
    "frontier_view",
    "glance_sentences",
    "markdown_sections",
    "recovery_view",
    "render_page",
    "seeds_view",
    "summary_view",
    "threshold_view",
    "windows_view",
    "write_page",
]

CAUTION = (
    "Results in simulation do not make a policy safe on a real system. Real deployments defer to the "
    "domain's own safety practice and rules."
)
# Rows shown per table on the page and in the Markdown; longer tables are cut with a note (the CSVs hold all).
_PAGE_ROWS = 200
_TEMPLATE = "report.html.j2"
_WIDE_COLUMNS = frozenset({"note", "message", "command", "platform", "versions"})
RUN_COLUMNS = [
    "run_id",
    "started",
    "finished",
    "outcome",
    "command",
    "experiment_file",
    "experiment_text",
    "experiment_hash",
    "versions",
    "platform",
    "jobs",
]
FAILURE_COLUMNS = ["env", "agent", "seed", "trial_id", "run_id", "error_type", "message", "at", "stored_later"]
TRIAL_COLUMNS = ["env", "agent", "seed", "trial_id"]


def _empty(columns: Sequence[str]) -> pd.DataFrame:
    """An empty frame with the given columns."""
    return pd.DataFrame(columns=list(columns))


@dataclass(frozen=True)
class ReportTables:
    """Every computed table of a report, shared by the CSV files, the Markdown, the figures and the page."""

    bands: pd.DataFrame
    scores: pd.DataFrame
    summary: pd.DataFrame
    crossings: pd.DataFrame
    tsummary: pd.DataFrame
    efficiency: pd.DataFrame
    comparisons: pd.DataFrame
    advice: pd.DataFrame
    compute: pd.DataFrame
    frontier: pd.DataFrame
    earning_bands: pd.DataFrame = field(default_factory=pd.DataFrame)
    earnings: pd.DataFrame = field(default_factory=pd.DataFrame)
    recovery: pd.DataFrame = field(default_factory=pd.DataFrame)
    rsummary: pd.DataFrame = field(default_factory=pd.DataFrame)
    rratios: pd.DataFrame = field(default_factory=pd.DataFrame)
    windows: pd.DataFrame = field(default_factory=pd.DataFrame)
    break_even: pd.DataFrame = field(default_factory=lambda: _empty(BREAK_EVEN_COLUMNS))
    costs: pd.DataFrame = field(default_factory=lambda: _empty(COST_COLUMNS))
    priced: pd.DataFrame = field(default_factory=lambda: _empty(COST_TRIAL_COLUMNS))
    seed_flags: pd.DataFrame = field(default_factory=lambda: _empty(SEED_FLAG_COLUMNS))
    model_errors: pd.DataFrame = field(default_factory=pd.DataFrame)
    model_honesty: pd.DataFrame = field(default_factory=pd.DataFrame)


@dataclass(frozen=True)
class ExperimentRecords:
    """What the store knows besides metric rows: runs (provenance), failures, missing and undeclared trials.

    runs: run_id, started, finished, outcome, command, experiment_file, experiment_text, experiment_hash,
    versions (JSON text), platform, jobs.
    failures: env, agent, seed, trial_id, run_id, error_type, message, at, stored_later.
    missing and undeclared: env, agent, seed, trial_id (undeclared also version).
    versions: the experiment file's versions (`runner.analysis.versions.VERSION_COLUMNS`).
    """

    runs: pd.DataFrame = field(default_factory=lambda: _empty(RUN_COLUMNS))
    failures: pd.DataFrame = field(default_factory=lambda: _empty(FAILURE_COLUMNS))
    missing: pd.DataFrame = field(default_factory=lambda: _empty(TRIAL_COLUMNS))
    undeclared: pd.DataFrame = field(default_factory=lambda: _empty(TRIAL_COLUMNS))
    versions: pd.DataFrame = field(default_factory=lambda: _empty(VERSION_COLUMNS))


@dataclass(frozen=True)
class EnvPage:
    """One environment's section: its name, threshold wording and PNG paths of its figures (None if absent)."""

    env: str
    threshold_text: str | None
    figures: dict[str, Path | None]


@dataclass(frozen=True)
class TableView:
    """A table ready to show: text cells, which columns are numbers (right-aligned), and a note under it."""

    headers: list[str]
    rows: list[list[str]]
    numeric: list[bool]
    note: str = ""
    title: str = ""

    @property
    def wide(self) -> list[bool]:
        """Columns of running text (notes, messages, commands) that get room to wrap on the page."""
        return [header in _WIDE_COLUMNS for header in self.headers]

    def frame(self) -> pd.DataFrame:
        """The cells as a frame of strings (for the Markdown renderer)."""
        return pd.DataFrame(self.rows, columns=self.headers, dtype=object)


_Column = tuple[str, bool, Callable[[pd.Series], str]]


def _view(table: pd.DataFrame, columns: Sequence[_Column], note: str = "", title: str = "") -> TableView:
    """Apply each column's formatter to the first _PAGE_ROWS rows; a note says how many more the CSV holds."""
    rows = [[render(row) for _, _, render in columns] for _, row in table.head(_PAGE_ROWS).iterrows()]
    if len(table) > _PAGE_ROWS:
        extra = f"{len(table) - _PAGE_ROWS} more rows are not shown here; the CSV files and the store hold them all."
        note = f"{note} {extra}".strip()
    return TableView([h for h, _, _ in columns], rows, [n for _, n, _ in columns], note, title)


def _steps(value: float) -> str:
    """Real steps as a grouped integer; NaN reads "not reached", infinity "unbounded"."""
    if pd.isna(value):
        return "not reached"
    if math.isinf(float(value)):
        return "unbounded"
    return f"{float(value):,.0f}"


def _steps_interval(estimate: float, low: float, high: float, first_point: float = math.nan) -> str:
    """Steps with their interval, e.g. "1,200 [1,000, 1,600]"; bounds that could not be found read "n/a".

    An estimate at the first evaluation point (`first_point`) reads "at or before 1,000": the protocol cannot
    tell when in that first interval the threshold was reached, so no interval is given.
    """
    if not pd.isna(estimate) and not pd.isna(first_point) and 0 < float(estimate) <= float(first_point):
        return f"at or before {_steps(estimate)}"
    bounds = ["n/a" if pd.isna(bound) else _steps(bound) for bound in (low, high)]
    return f"{_steps(estimate)} [{bounds[0]}, {bounds[1]}]"


def _first(row: pd.Series) -> float:
    """A summary row's first evaluation step after 0 (NaN when the table does not carry it)."""
    return float(row["first_point"]) if "first_point" in row.index and not pd.isna(row["first_point"]) else math.nan


_FINER = (
    ' "at or before": the median falls at the first evaluation point, so it is only bounded; a finer evaluation '
    "`every` would measure it."
)


def _p_value(value: float) -> str:
    """A p-value with three decimals, "<0.001" below that, "n/a" when undefined."""
    if pd.isna(value):
        return "n/a"
    return "<0.001" if value < 0.001 else f"{value:.3f}"


def _number(value: object) -> str:
    """A number to about three significant digits, "n/a" when missing."""
    return "n/a" if pd.isna(value) else format_number(float(value))  # type: ignore[arg-type]


def summary_view(rows: pd.DataFrame, confidence: float = 0.95) -> TableView:
    """AUC and final return with intervals, planning ratio and wall time per agent of one environment."""
    columns: list[_Column] = [
        ("agent", False, lambda r: str(r["agent"])),
        ("seeds", True, lambda r: str(int(r["seeds"]))),
        ("AUC mean [low, high]", True, lambda r: format_interval(r["auc_mean"], r["auc_low"], r["auc_high"])),
        (
            "final return mean [low, high]",
            True,
            lambda r: format_interval(r["final_mean"], r["final_low"], r["final_high"]),
        ),
        ("planning updates per real step", True, lambda r: _number(r["planning_per_real"])),
        ("wall seconds per trial", True, lambda r: _number(r["wall_seconds"])),
    ]
    note = (
        "AUC: the time-averaged greedy evaluation return over the real-step budget, in return units. "
        f"[low, high]: {interval_caption(confidence)}."
    )
    return _view(rows, columns, note, "Summary")


def threshold_view(rows: pd.DataFrame, confidence: float) -> TableView:
    """Share of trials that reached the threshold and Kaplan-Meier quartiles of real steps, per agent."""
    columns: list[_Column] = [
        ("agent", False, lambda r: str(r["agent"])),
        ("trials", True, lambda r: str(int(r["trials"]))),
        ("reached", True, lambda r: f"{int(r['reached'])} ({float(r['reached_share']):.0%})"),
        (
            "median real steps [low, high]",
            True,
            lambda r: _steps_interval(r["median_steps"], r["median_low"], r["median_high"], _first(r)),
        ),
        ("25% of trials by", True, lambda r: _steps_interval(r["q25_steps"], r["q25_low"], r["q25_high"], _first(r))),
        ("75% of trials by", True, lambda r: _steps_interval(r["q75_steps"], r["q75_low"], r["q75_high"], _first(r))),
    ]
    note = (
        "Kaplan-Meier estimates: a trial that never reached the threshold counts as censored at its last step, "
        f'never dropped. Intervals are {confidence:.0%} (complementary log-log). "not reached": fewer than that '
        'share of trials is estimated to get there within the budget; "unbounded": the data set no upper end.'
    )
    return _view(rows, columns, note + _FINER, "Real steps to threshold")


def efficiency_view(
    rows: pd.DataFrame, title: str = "Real steps against the baseline", confidence: float = 0.95
) -> TableView:
    """Baseline median over agent median of real steps to threshold, with its paired-bootstrap interval."""

    def ratio(r: pd.Series) -> str:
        if pd.isna(r["ratio"]):
            return "n/a"
        if r.get("bound") == "at least":
            return f">= {_number(r['ratio'])}"
        if r.get("bound") == "at most":
            return f"<= {_number(r['ratio'])}"
        return format_interval(r["ratio"], r["low"], r["high"]) if not pd.isna(r["low"]) else _number(r["ratio"])

    columns: list[_Column] = [
        ("agent", False, lambda r: str(r["agent"])),
        ("baseline", False, lambda r: str(r["baseline"])),
        ("real-step ratio [low, high]", True, ratio),
        ("agent median steps", True, lambda r: _steps(r["agent_median"])),
        ("baseline median steps", True, lambda r: _steps(r["baseline_median"])),
        (
            "reached (agent / baseline / paired seeds)",
            True,
            lambda r: f"{int(r['agent_reached'])} / {int(r['baseline_reached'])} / {int(r['paired_seeds'])}",
        ),
        ("note", False, lambda r: str(r["note"]) if isinstance(r["note"], str) else ""),
    ]
    note = (
        "A ratio above 1 means the agent needed fewer real steps than the baseline; an interval that includes 1 "
        f"shows no clear difference. [low, high]: {interval_caption(confidence, 'percentile')}, seeds resampled "
        'in pairs (both agents\' trials of a seed together). ">= x": a median at the first evaluation point is only '
        "bounded, so the ratio is too and gets no interval."
    )
    return _view(rows, columns, note, title)


def earnings_view(rows: pd.DataFrame, confidence: float = 0.95) -> TableView:
    """Reward earned while learning per agent: in total, per real step, and over the last evaluation interval."""
    columns: list[_Column] = [
        ("agent", False, lambda r: str(r["agent"])),
        ("seeds", True, lambda r: str(int(r["seeds"]))),
        (
            "reward earned [low, high]",
            True,
            lambda r: format_interval(r["earned_mean"], r["earned_low"], r["earned_high"]),
        ),
        ("per real step [low, high]", True, lambda r: format_interval(r["rate_mean"], r["rate_low"], r["rate_high"])),
        (
            "per real step, last interval [low, high]",
            True,
            lambda r: format_interval(r["final_rate_mean"], r["final_rate_low"], r["final_rate_high"]),
        ),
    ]
    note = (
        "Reward of every real step taken while learning, exploration included (the measure of Sutton & Barto "
        "2018, Examples 8.2 and 8.3); per real step it is the earning rate. Means over seeds; [low, high]: "
        f"{interval_caption(confidence)}."
    )
    return _view(rows, columns, note, "Reward earned while learning")


def recovery_view(rows: pd.DataFrame, confidence: float) -> TableView:
    """Per change and agent: seeds that regained the threshold and Kaplan-Meier quartiles of real steps after it."""

    def first(r: pd.Series) -> float:
        return float(r["first_point"])

    columns: list[_Column] = [
        ("change", False, lambda r: f"{int(r['change'])} at {_steps(r['at'])}"),
        ("agent", False, lambda r: str(r["agent"])),
        ("regained", True, lambda r: f"{int(r['reached'])} of {int(r['trials'])}"),
        (
            "median real steps after the change [low, high]",
            True,
            lambda r: _steps_interval(r["median_steps"], r["median_low"], r["median_high"], first(r)),
        ),
        ("25% by", True, lambda r: _steps_interval(r["q25_steps"], r["q25_low"], r["q25_high"], first(r))),
        ("75% by", True, lambda r: _steps_interval(r["q75_steps"], r["q75_low"], r["q75_high"], first(r))),
    ]
    note = (
        "Real steps from the change until the measure is back at the threshold, within the phase the change "
        "starts; seeds that never get back are censored at the phase end (Kaplan-Meier, "
        f"{confidence:.0%} complementary log-log intervals)." + _FINER
    )
    return _view(rows, columns, note, "Adaptation after the change")


def windows_view(rows: pd.DataFrame, confidence: float = 0.95) -> TableView:
    """The measure in windows before, just after and at the end of the phase each change starts."""
    columns: list[_Column] = [
        ("change", False, lambda r: f"{int(r['change'])} at {_steps(r['at'])}"),
        ("agent", False, lambda r: str(r["agent"])),
        ("window", False, lambda r: f"{r['window']} ({_steps(r['from_step'])}-{_steps(r['to_step'])}]"),
        ("seeds", True, lambda r: str(int(r["seeds"]))),
        ("mean [low, high]", True, lambda r: format_interval(r["mean"], r["low"], r["high"])),
    ]
    note = (
        "The primary measure averaged over each window's evaluation points, then over seeds; [low, high]: "
        f"{interval_caption(confidence)}. Windows are a quarter of the shorter neighbouring phase."
    )
    return _view(rows, columns, note, "The measure around each change")


def comparisons_view(rows: pd.DataFrame, confidence: float, score: str = "AUC") -> TableView:
    """Welch-Holm tests and probability of improvement on a per-trial score (AUC, or reward earned per real
    step when that is the primary measure) for every pair of agents of one environment."""
    alpha = 1.0 - confidence
    columns: list[_Column] = [
        ("agent A", False, lambda r: str(r["agent_a"])),
        ("agent B", False, lambda r: str(r["agent_b"])),
        (f"mean {score} A", True, lambda r: _number(r["mean_a"])),
        (f"mean {score} B", True, lambda r: _number(r["mean_b"])),
        ("A - B", True, lambda r: _number(r["difference"])),
        ("Welch t (df)", True, lambda r: "n/a" if pd.isna(r["t"]) else f"{r['t']:.2f} ({r['df']:.1f})"),
        ("p", True, lambda r: _p_value(r["p_value"])),
        ("Holm p", True, lambda r: _p_value(r["p_holm"])),
        (
            "P(A > B) [low, high]",
            True,
            lambda r: format_interval(r["probability_of_improvement"], r["poi_low"], r["poi_high"]),
        ),
        (
            f"differs at {alpha:.0%}",
            False,
            lambda r: "n/a" if pd.isna(r["p_holm"]) else ("yes" if r["p_holm"] < alpha else "no"),
        ),
    ]
    note = (
        f"Welch's t-test on {score} (unequal variances), Holm-adjusted over the pairs of this environment so the "
        f"chance of any false alarm stays at {alpha:.0%}. P(A > B): chance that a random trial of A scores a higher "
        f"{score} than one of B (ties count half), with a {interval_caption(confidence, 'percentile')}; 0.5 means "
        "no tendency either way."
    )
    return _view(rows, columns, note, f"Are the differences real? ({score})")


def frontier_view(rows: pd.DataFrame, confidence: float = 0.95) -> TableView:
    """CPU time per real step against median real steps to threshold, and which variants none is clearly ahead of."""

    def cpu(r: pd.Series) -> str:
        if pd.isna(r["cpu_us_per_real"]):
            return "n/a"
        return format_interval(r["cpu_us_per_real"], r["cpu_us_low"], r["cpu_us_high"])

    columns: list[_Column] = [
        ("agent", False, lambda r: str(r["agent"])),
        ("CPU µs per real step, median [low, high]", True, cpu),
        ("updates per real step", True, lambda r: _number(r["updates_per_real"])),
        ("planning updates per real step", True, lambda r: _number(r["planning_per_real"])),
        (
            "median real steps [low, high]",
            True,
            lambda r: _steps_interval(r["median_steps"], r["median_low"], r["median_high"], _first(r)),
        ),
        ("no other clearly ahead", False, lambda r: "yes" if bool(r["on_frontier"]) else ""),
    ]
    note = (
        "Compute is measured CPU time spent acting, learning and planning (evaluation excluded) per real step, "
        f"median over seeds with a {interval_caption(confidence, 'percentile')}; updates per real step (real, "
        "planning and model updates) are shown beside it but count a value-iteration backup and a sample update "
        "alike. A variant is clearly ahead of another on one axis when its interval lies wholly below the other's "
        "(Kaplan-Meier complementary log-log intervals for the steps; a median at the first evaluation point is "
        'read as "0 to that point"); a variant is marked when no other is clearly ahead on one axis without being '
        "clearly behind on the other. Variants whose median was not reached are not ranked. CPU times depend on "
        "the machine and on what else it ran: compare them within one run."
    )
    return _view(rows, columns, note, "Compute against real steps")


def seeds_view(rows: pd.DataFrame) -> TableView:
    """Seeds a mean hides: runs that collapsed after reaching the threshold or lie far from the other seeds."""
    columns: list[_Column] = [
        ("agent", False, lambda r: str(r["agent"])),
        ("seed", True, lambda r: str(int(r["seed"]))),
        ("trial id", False, lambda r: str(r["trial_id"])),
        ("flag", False, lambda r: str(r["flag"])),
        ("note", False, lambda r: str(r["detail"])),
    ]
    note = (
        "collapsed: reached the threshold, then the mean of its last "
        f"{COLLAPSE_POINTS} evaluations fell more than {COLLAPSE_DROP:.0%} of the environment's observed range "
        "below it. far from the rest: a modified z-score (0.6745 x distance from the median / MAD over the agent's "
        f"seeds) beyond {OUTLIER_Z:g}. The per-seed figure draws them dark; `stepmeter rerun` re-runs a trial "
        "by its id."
    )
    return _view(rows, columns, note, "Seeds to look at")


def _cpu_price(value: float) -> str:
    """A price of a real step in CPU time, or what a verdict means when there is no finite price."""
    if pd.isna(value):
        return "n/a"
    return "none" if np.isinf(value) else format_cpu_time(float(value))


def break_even_view(rows: pd.DataFrame) -> TableView:
    """Break-even prices of a real step: above them the agent is the cheaper way to the threshold."""
    verdicts = {
        "above": "pays above this price",
        "always": "cheaper at any price",
        "never": "saves no real steps",
        "undefined": "median undefined",
    }
    columns: list[_Column] = [
        ("agent", False, lambda r: str(r["agent"])),
        ("against", False, lambda r: str(r["rival"])),
        ("real steps saved (median)", True, lambda r: _number(r["steps_saved"])),
        ("extra CPU time (median)", True, lambda r: _cpu_price(r["extra_cpu_seconds"])),
        ("break-even CPU time per real step", True, lambda r: _cpu_price(r["price"])),
        ("interval", True, lambda r: f"{_cpu_price(r['low'])} to {_cpu_price(r['high'])}"),
        ("verdict", False, lambda r: verdicts.get(str(r["verdict"]), str(r["verdict"]))),
    ]
    note = (
        "Break-even price: the CPU time an agent spends beyond its rival to reach the threshold divided by the real "
        "steps it saves (Kaplan-Meier medians over seeds; CPU time counts acting, learning and planning, not "
        "evaluation). If a real step costs you more CPU time than this, the agent is the cheaper way to the "
        "threshold. Intervals: paired percentile bootstrap over seeds. Rivals: the baseline, and the nearest agent "
        "that needs more real steps."
    )
    return _view(rows, columns, note, "When does planning pay? Break-even price of a real step")


def costs_view(rows: pd.DataFrame) -> TableView:
    """Median total cost to the threshold at the user's prices, against the cheapest rival."""
    unit = str(rows["unit"].iloc[0]) if len(rows) else ""
    columns: list[_Column] = [
        ("agent", False, lambda r: str(r["agent"])),
        ("reached", True, lambda r: f"{int(r['reached'])}/{int(r['trials'])}"),
        ("median real steps", True, lambda r: _number(r["median_steps"])),
        ("median CPU time", True, lambda r: _cpu_price(r["median_cpu_seconds"])),
        (f"median total cost ({unit})", True, lambda r: _number(r["median_cost"])),
        ("against", False, lambda r: str(r["rival"])),
        (
            f"difference ({unit}) [low, high]",
            True,
            lambda r: format_interval(r["difference"], r["low"], r["high"]) if r["rival"] else "",
        ),
    ]
    note = (
        "Total cost to the threshold = real steps x your price of a real step + training CPU seconds x your price of "
        "a CPU-second, per trial; Kaplan-Meier medians over seeds (trials that never reached the threshold are "
        "censored at their budget). Difference: this agent's median minus its rival's, paired percentile bootstrap."
    )
    return _view(rows, columns, note, "Total cost to the threshold at your prices")


def advice_note(rows: pd.DataFrame, power: float = 0.8, alpha: float = 0.05) -> str:
    """How the seeds advice was computed, naming the shares of the return range that were asked for."""
    shares = sorted({float(share) for share in rows["share_of_range"]}) if len(rows) else []
    listed = ", ".join(f"{share:.0%}" for share in shares) or "chosen shares"
    return (
        f"Differences to detect are {listed} of each environment's return range (highest minus lowest evaluation "
        "return stored for it), so they read in return units like the AUC itself, whatever the reward scale. "
        f"Seeds needed: the smallest equal number per agent for a two-sided two-sample t-test at {alpha:.0%} to "
        f"detect that difference in mean AUC with {power:.0%} power, from the pilot spreads of this experiment; those "
        "spreads are themselves uncertain with few seeds, so read the numbers as a guide. Each agent is compared "
        "with the baseline and with the agent ranked just above it (close contenders need the most seeds); "
        "`stepmeter seeds` prints the same advice."
    )


def advice_view(rows: pd.DataFrame, *, with_env: bool = True, title: str = "Seeds advice") -> TableView:
    """Seeds per agent needed to detect chosen AUC differences against the reference agent."""

    def needed(r: pd.Series) -> str:
        if pd.isna(r["seeds_needed"]):
            return "n/a" if pd.isna(r["sd_a"]) or pd.isna(r["sd_b"]) else "more than 10,000"
        return str(int(r["seeds_needed"]))

    columns: list[_Column] = [("environment", False, lambda r: str(r["env"]))] if with_env else []
    columns += [
        ("agent", False, lambda r: str(r["agent_a"])),
        ("against", False, lambda r: str(r["agent_b"])),
        ("why this pair", False, lambda r: str(r.get("pair", ""))),
        ("pilot seeds", True, lambda r: f"{int(r['n_a'])} / {int(r['n_b'])}"),
        ("observed AUC difference", True, lambda r: _number(r["observed_difference"])),
        (
            "difference to detect",
            True,
            lambda r: f"{_number(r['difference'])} ({float(r['share_of_range']):.0%} of range)",
        ),
        ("seeds needed per agent", True, needed),
        ("power with pilot seeds", True, lambda r: "n/a" if pd.isna(r["power_now"]) else f"{r['power_now']:.0%}"),
    ]
    return _view(rows, columns, advice_note(rows) if with_env else "", title)


def _env_rows(table: pd.DataFrame, env: str) -> pd.DataFrame:
    """Rows of one environment (an empty table stays empty)."""
    return table[table["env"] == env] if len(table) else table


def env_views(data: ReportTables, facts: ExperimentFacts, env: str) -> dict[str, TableView | None]:
    """Every table of one environment keyed by its place on the page (None when it does not apply)."""
    views: dict[str, TableView | None] = {"summary": summary_view(_env_rows(data.summary, env), facts.confidence)}
    tsummary = _env_rows(data.tsummary, env)
    views["threshold"] = threshold_view(tsummary, facts.confidence) if len(tsummary) else None
    efficiency = _env_rows(data.efficiency, env)
    views["efficiency"] = efficiency_view(efficiency, confidence=facts.confidence) if len(efficiency) else None
    comparisons = _env_rows(data.comparisons, env)
    score = "AUC" if facts.measure == "greedy_return" else "reward per real step"
    views["comparisons"] = comparisons_view(comparisons, facts.confidence, score) if len(comparisons) else None
    frontier = _env_rows(data.frontier, env)
    views["frontier"] = frontier_view(frontier, facts.confidence) if len(frontier) else None
    earnings = _env_rows(data.earnings, env)
    views["earnings"] = earnings_view(earnings, facts.confidence) if len(earnings) else None
    recovery = _env_rows(data.rsummary, env)
    views["recovery"] = recovery_view(recovery, facts.confidence) if len(recovery) else None
    ratios = _env_rows(data.rratios, env)
    views["recovery_ratios"] = (
        efficiency_view(ratios, "Real steps to recover against the baseline", facts.confidence) if len(ratios) else None
    )
    windows = _env_rows(data.windows, env)
    views["windows"] = windows_view(windows, facts.confidence) if len(windows) else None
    flagged = _env_rows(data.seed_flags, env)
    views["seeds"] = seeds_view(flagged) if len(flagged) else None
    break_even = _env_rows(data.break_even, env)
    views["break_even"] = break_even_view(break_even) if len(break_even) else None
    costs = _env_rows(data.costs, env)
    views["costs"] = costs_view(costs) if len(costs) else None
    return views


def markdown_sections(data: ReportTables, facts: ExperimentFacts, env: str | None) -> list[TableView]:
    """Tables for the Markdown report: one environment's extra tables, or (env None) the seeds advice."""
    if env is None:
        return [advice_view(data.advice)] if len(data.advice) else []
    views = env_views(data, facts, env)
    return [view for key, view in views.items() if key != "summary" and view is not None]


def _records_views(records: ExperimentRecords) -> dict[str, TableView]:
    """Failures, missing and undeclared trials as tables."""
    trial: list[_Column] = [
        ("environment", False, lambda r: str(r["env"])),
        ("agent", False, lambda r: str(r["agent"])),
        ("seed", True, lambda r: "" if pd.isna(r["seed"]) else str(int(r["seed"]))),
        ("trial id", False, lambda r: str(r["trial_id"])),
    ]
    failures: list[_Column] = [
        (
            "trial",
            False,
            lambda r: (
                f"{r['env']} / {r['agent']} / seed {r['seed']}"
                if isinstance(r["env"], str)
                else f"trial {r['trial_id']} (no longer declared)"
            ),
        ),
        ("error type", False, lambda r: str(r["error_type"])),
        ("message", False, lambda r: str(r["message"])),
        ("when", False, lambda r: str(r["at"])),
        ("run", True, lambda r: str(r["run_id"])),
        ("stored later", False, lambda r: "yes" if bool(r["stored_later"]) else "no"),
    ]
    return {
        "failures": _view(records.failures, failures, title="Failures"),
        "missing": _view(records.missing, trial, title="Missing trials"),
        "undeclared": _view(
            records.undeclared,
            [*trial, ("version", False, lambda r: str(r.get("version", "")))],
            title="Stored but undeclared trials",
        ),
        "versions": _view(
            records.versions,
            [
                ("version", False, lambda r: str(r["version"])),
                ("hash", False, lambda r: str(r["hash"])),
                ("first run", False, lambda r: str(r["first_run"])),
                ("runs", True, lambda r: str(r["runs"])),
                ("trials stored", True, lambda r: f"{int(r['trials_stored']):,}"),
                ("current", False, lambda r: str(r["current"])),
                ("what changed from the version before", False, lambda r: str(r["changes"])),
            ],
            title="Versions of the experiment file",
        ),
    }


def _runs(runs: pd.DataFrame) -> list[dict[str, object]]:
    """Each run's provenance as a title and (label, value) pairs, oldest first, at most _PAGE_ROWS runs."""
    described = []
    for _, run in runs.tail(_PAGE_ROWS).iterrows():
        outcome = "unfinished" if pd.isna(run["outcome"]) else str(run["outcome"])
        described.append(
            {
                "title": f"Run {run['run_id']}: {outcome}",
                "items": [
                    ("started", str(run["started"])),
                    ("finished", "not recorded" if pd.isna(run["finished"]) else str(run["finished"])),
                    ("command", str(run["command"])),
                    ("processes", str(run["jobs"])),
                    ("experiment file", str(run["experiment_file"])),
                    ("experiment hash", str(run["experiment_hash"])),
                    ("platform", str(run["platform"])),
                    ("versions", _versions(run["versions"])),
                ],
            }
        )
    return described


def glance_sentences(
    tsummary: pd.DataFrame, pages: Sequence[EnvPage], changes: Mapping[str, Sequence[int]] | None = None
) -> list[str]:
    """One sentence per environment with a threshold: each agent's median real steps to it, fastest first.

    For an environment that changes (`changes`), the sentence says the steps count from the start, before the
    first change, so that it is not read as adaptation.
    """
    sentences = []
    for page in pages:
        rows = _env_rows(tsummary, page.env)
        if page.threshold_text is None or rows.empty:
            continue
        parts = []
        coarse = False
        for _, row in rows.sort_values("median_steps", na_position="last", kind="stable").iterrows():
            at_first = _steps_interval(row["median_steps"], np.nan, np.nan, _first(row)).startswith("at or")
            coarse = coarse or at_first
            if at_first:
                parts.append(f"{row['agent']} {_steps_interval(row['median_steps'], np.nan, np.nan, _first(row))}")
            elif pd.isna(row["median_steps"]):
                parts.append(
                    f"{row['agent']} not within the budget ({int(row['reached'])} of {int(row['trials'])} "
                    "trials reached it)"
                )
            elif pd.isna(row["median_low"]) and pd.isna(row["median_high"]):
                parts.append(f"{row['agent']} {_steps(row['median_steps'])}")
            else:
                parts.append(
                    f"{row['agent']} {_steps_interval(row['median_steps'], row['median_low'], row['median_high'])}"
                )
        finer = (
            " (at or before: the median falls at the first evaluation point; a finer evaluation `every` would "
            "measure it)"
            if coarse
            else ""
        )
        steps = (changes or {}).get(page.env)
        when = f" from the start (the map first changes at {int(steps[0]):,} real steps)" if steps else ""
        sentences.append(
            f"On {page.env}, median real steps{when} to reach {page.threshold_text}: {'; '.join(parts)}{finer}."
        )
    return sentences


def _versions(text: object) -> str:
    """Software versions of a run as "name version, ..." from their stored JSON text."""
    try:
        versions = json.loads(str(text))
    except json.JSONDecodeError:
        return str(text)
    if not isinstance(versions, dict):
        return str(text)
    return ", ".join(f"{name} {version}" for name, version in sorted(versions.items()))


def _data_uri(path: Path | None) -> str | None:
    """A PNG file as a base64 data URI, so the page needs no other file."""
    if path is None:
        return None
    return "data:image/png;base64," + base64.b64encode(Path(path).read_bytes()).decode("ascii")


_FIGURE_TEXT = {
    "curves": (
        "Learning curves",
        "Mean greedy evaluation return against real environment steps; shaded: {interval}; "
        "dotted vertical lines: the map changes, labelled with the phase they start (phase 1 is the first map).",
    ),
    "earning": (
        "Reward earned while learning",
        "Reward earned per real step over each evaluation interval, exploration included (the slope of the "
        "cumulative reward); shaded: {interval}; dotted vertical lines: the map changes.",
    ),
    "curves_seeds": (
        "Learning curves, seed by seed",
        "Greedy evaluation return of every seed (thin lines), one panel per agent, axes shared across panels; "
        "dark, labelled lines are seeds flagged below; dashed: the threshold; dotted: the map changes.",
    ),
    "earning_seeds": (
        "Reward earned while learning, seed by seed",
        "Reward earned per real step of every seed (thin lines), one panel per agent, axes shared across "
        "panels; dark, labelled lines are seeds flagged below; dashed: the threshold; dotted: the map changes.",
    ),
    "threshold": (
        "Time to threshold",
        "Share of trials that have not yet reached the threshold (Kaplan-Meier, with a pointwise interval); "
        "+ marks trials that stopped without reaching it. Lower and further left is better.",
    ),
    "budget": (
        "Planning budget: what it buys and what it costs",
        "Top: AUC ({interval}) and median real steps to threshold (Kaplan-Meier) against the parameter each agent "
        "kind declares as its planning budget (log axis; 0 at the left end). Bottom: planning updates and "
        "measured CPU microseconds per real step (median, {percentile}; log axis when the values span more than "
        "30x). Dotted: the baseline.",
    ),
    "frontier": (
        "Real steps against compute",
        "Median real steps to threshold (Kaplan-Meier) against measured CPU microseconds per real step (median, "
        "{percentile}); an axis is logarithmic when its values span more than 30x. Ringed variants have no "
        "other clearly ahead of them (an interval wholly below theirs on one axis, not wholly above on the "
        "other); hollow markers above the budget line did not reach a median.",
    ),
    "costs": (
        "Total cost against the price of a real step",
        "Median total cost to the threshold (real steps times their price plus training CPU seconds times theirs) "
        "against the price of one real step, both log axes; shaded: {percentile} (paired). Circles "
        "mark where an agent becomes cheaper than the baseline (its break-even price); dashed: your price.",
    ),
    "model_error": (
        "Learned model error",
        "Left: the return curves again. Then, where measured: the mean total-variation distance of each learned "
        "model to the true transitions, over the pairs it has tried (band: the mean plus or minus the normal "
        "quantile times its standard error over trials); and the error of each model's predicted next "
        "observation on held-out real transitions no agent learns from (50 runs of up to 20 random actions from "
        "start states, the same for every agent of a seed): one step ahead from each real observation, and open "
        "loop after 5 and 20 steps of the model's own predictions, each a root mean square over transitions and "
        "dimensions with every dimension divided by its spread (standard deviation) on the held-out set, so 1 "
        "is off by a typical spread (bands: {interval}; model_errors.csv). A tabular model on bins predicts the "
        "expected centre of its next bin.",
    ),
    "model_honesty": (
        "Is the model's uncertainty honest?",
        "For models that state their own uncertainty (ensembles, Gaussian processes). Left: the spread each "
        "model predicts for its error against the error it makes on the held-out real transitions, on the same "
        "scale (the root mean square of its predicted standard deviation, each dimension divided by its spread in "
        "the data), one point per evaluation point, the mean over seeds; filled one step ahead, hollow after 5 "
        "steps of sampled open-loop rollouts. On the dashed diagonal the two agree; below it the model is "
        "overconfident (its planning trusts predictions that are worse than it thinks), above it timid. Right: "
        "the share of held-out values inside the model's central 95% interval, 0.95 when honest "
        "(model_honesty.csv).",
    ),
}


def _figure(key: str, path: Path | None, env: str, confidence: float = 0.95) -> dict[str, str] | None:
    """Template data of one figure, or None when the figure was not drawn; the caption names its intervals."""
    uri = _data_uri(path)
    if uri is None:
        return None
    title, caption = _FIGURE_TEXT[key]
    caption = caption.format(
        interval=interval_caption(confidence), percentile=interval_caption(confidence, "percentile")
    )
    return {"title": title, "caption": caption, "src": uri, "alt": f"{title} for {env}", "file": Path(path).name}


def _env_context(page: EnvPage, index: int, data: ReportTables, facts: ExperimentFacts) -> dict[str, object]:
    """Template data of one environment: figures and tables in reading order."""
    views = env_views(data, facts, page.env)
    figures = {key: _figure(key, path, page.env, facts.confidence) for key, path in page.figures.items()}
    blocks = [
        ("figure", figures.get("curves")),
        ("table", views["summary"]),
        ("figure", figures.get("curves_seeds")),
        ("figure", figures.get("earning")),
        ("table", views["earnings"]),
        ("figure", figures.get("earning_seeds")),
        ("table", views["seeds"]),
        ("figure", figures.get("threshold")),
        ("table", views["threshold"]),
        ("table", views["efficiency"]),
        ("table", views["recovery"]),
        ("table", views["recovery_ratios"]),
        ("table", views["windows"]),
        ("table", views["comparisons"]),
        ("figure", figures.get("budget")),
        ("figure", figures.get("frontier")),
        ("table", views["frontier"]),
        ("figure", figures.get("costs")),
        ("table", views["costs"]),
        ("table", views["break_even"]),
        ("figure", figures.get("model_error")),
        ("figure", figures.get("model_honesty")),
    ]
    return {
        "name": page.env,
        "anchor": f"env-{index}",
        "threshold": page.threshold_text,
        "blocks": [{"kind": kind, "item": item} for kind, item in blocks if item is not None],
    }


def _headline_note(facts: ExperimentFacts, headline: list[str]) -> str:
    """Why there are no real-step ratios, when there are none."""
    if headline:
        return ""
    if not facts.baseline:
        return "No real-step ratios: the experiment declares no baseline agent."
    if all(value is None for value in facts.primary_thresholds.values()):
        return "No real-step ratios: no environment declares a return threshold."
    return "No real-step ratios could be formed (the baseline has no trials in an environment with a threshold)."


def _experiment_texts(runs: pd.DataFrame) -> list[dict[str, str]]:
    """Each distinct experiment file text the runs used, newest first, with its hash and file name."""
    texts = []
    for _, run in runs.iloc[::-1].drop_duplicates("experiment_hash").iterrows():
        texts.append(
            {
                "hash": str(run["experiment_hash"]),
                "file": str(run["experiment_file"]),
                "text": str(run["experiment_text"]),
                "run": str(run["run_id"]),
            }
        )
    return texts


def render_page(
    *,
    facts: ExperimentFacts,
    data: ReportTables,
    envs: Sequence[EnvPage],
    headline: list[str],
    records: ExperimentRecords,
    warnings: Sequence[str] = (),
) -> str:
    """The report page as HTML text."""
    environment = jinja2.Environment(
        loader=jinja2.FileSystemLoader(Path(__file__).parent / "templates"),
        autoescape=jinja2.select_autoescape(default=True, default_for_string=True),
        undefined=jinja2.StrictUndefined,
        trim_blocks=True,
        lstrip_blocks=True,
    )
    record_views = _records_views(records)
    thresholds = [
        {"env": page.env, "text": "none declared" if page.threshold_text is None else page.threshold_text}
        for page in envs
    ]
    return environment.get_template(_TEMPLATE).render(
        facts=facts,
        thresholds=thresholds,
        headline=headline,
        warnings=list(warnings),
        measure=MEASURES[facts.measure].noun,
        headline_note=_headline_note(facts, headline),
        caution=CAUTION,
        envs=[_env_context(page, index, data, facts) for index, page in enumerate(envs)],
        advice=[
            advice_view(group, with_env=False, title=str(env)) for env, group in data.advice.groupby("env", sort=False)
        ],
        advice_note=advice_note(data.advice),
        records=record_views,
        counts={key: len(getattr(records, key)) for key in ("failures", "missing", "undeclared", "runs", "versions")},
        runs=_runs(records.runs),
        glance=glance_sentences(data.tsummary, envs, facts.changes),
        experiment_texts=_experiment_texts(records.runs),
        methods=method_lines(facts.confidence),
    )


def write_page(
    out_dir: Path,
    *,
    facts: ExperimentFacts,
    data: ReportTables,
    envs: Sequence[EnvPage],
    headline: list[str],
    records: ExperimentRecords,
    warnings: Sequence[str] = (),
) -> Path:
    """Write `report.html` into out_dir atomically and return its path."""
    text = render_page(facts=facts, data=data, envs=envs, headline=headline, records=records, warnings=warnings)
    return write_atomic(Path(out_dir) / "report.html", lambda stream: stream.write(text.encode("utf-8")))
