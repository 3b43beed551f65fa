"""Write an experiment's report folder: figures, CSV tables, a Markdown summary, an HTML page and terminal text.

The numbers answer four questions per environment: how fast each agent learns (AUC, curves), how many real
steps it needs to reach the threshold (Kaplan-Meier, censored trials kept), what planning saves and costs
against the baseline (ratios, budget and frontier figures), and whether differences are real (Welch-Holm,
probability of improvement, seeds advice). Work is vectorised over trials; loops run over environments and
agent variants only, so experiments of many seeds stay fast.
"""

from __future__ import annotations

import json
import math
import re
from collections.abc import Mapping
from dataclasses import dataclass, field, replace
from pathlib import Path

import numpy as np
import pandas as pd
from scipy import special

from runner.agents import AGENTS, agent_class
from runner.analysis.adaptation import (
    RECOVERY_COLUMNS,
    RECOVERY_RATIO_COLUMNS,
    RECOVERY_SUMMARY_COLUMNS,
    adaptation_sentences,
    recovery_ratios,
    recovery_summary,
    recovery_times,
    window_means,
)
from runner.analysis.bootstrap import interval_caption, keyed_rng, median_and_interval
from runner.analysis.compare import PAIRWISE_COLUMNS, pairwise_welch
from runner.analysis.costs import (
    BREAK_EVEN_COLUMNS,
    COST_COLUMNS,
    Prices,
    break_even_prices,
    break_even_sentences,
    cost_curves,
    cost_trials,
    decision_sentences,
    total_costs,
)
from runner.analysis.curves import curve_bands, trial_scores
from runner.analysis.efficiency import EFFICIENCY_COLUMNS, efficiency_ratios, efficiency_sentences
from runner.analysis.measures import EARNING_COLUMNS, GREEDY_RETURN, MEASURES, earning_summary, with_earning_rate
from runner.analysis.methods import method_lines
from runner.analysis.model_errors import held_out_error_bands, model_honesty_table
from runner.analysis.page import (
    EnvPage,
    ExperimentRecords,
    ReportTables,
    glance_sentences,
    markdown_sections,
    write_page,
)
from runner.analysis.plots import (
    BudgetFamily,
    BudgetReference,
    agent_styles,
    plot_budget,
    plot_costs,
    plot_curves,
    plot_frontier,
    plot_model_error,
    plot_model_honesty,
    plot_threshold,
)
from runner.analysis.power import ADVICE_SHARES, ADVICE_TABLE_COLUMNS, advice_table
from runner.analysis.seed_plots import plot_seed_curves
from runner.analysis.seeds import seed_flags
from runner.analysis.tables import ordered_labels, summary_table, to_markdown, to_terminal
from runner.analysis.threshold import (
    CROSSING_COLUMNS,
    THRESHOLD_SUMMARY_COLUMNS,
    kaplan_meier,
    steps_to_threshold,
    threshold_summary,
)
from runner.params import budget_params
from runner.safe_files import ensure_folder, remove_leftovers, write_atomic

__all__ = [
    "ADVICE_SHARES",
    "COMPUTE_COLUMNS",
    "FRONTIER_COLUMNS",
    "REQUIRED_COLUMNS",
    "ExperimentFacts",
    "ReportOutput",
    "budget_families",
    "compute_table",
    "pareto_front",
    "threshold_warnings",
    "write_report",
]

REQUIRED_COLUMNS = (
    "env",
    "agent",
    "kind",
    "trial_id",
    "seed",
    "point",
    "real_steps",
    "eval_return",
    "real_updates",
    "planning_updates",
    "wall_seconds",
)
COMPUTE_COLUMNS = [
    "env",
    "agent",
    "trials",
    "updates_per_real",
    "planning_per_real",
    "cpu_us_per_real",
    "cpu_us_low",
    "cpu_us_high",
]
FRONTIER_COLUMNS = [
    "env",
    "agent",
    "kind",
    "updates_per_real",
    "planning_per_real",
    "cpu_us_per_real",
    "cpu_us_low",
    "cpu_us_high",
    "reached_share",
    "median_steps",
    "median_low",
    "median_high",
    "first_point",
    "on_frontier",
]
_LABEL_PARAMS = re.compile(r"^(?P<base>.*?) \((?P<inner>[^()]*)\)$")
_TRIAL_KEYS = ["env", "agent", "kind", "trial_id", "seed"]


@dataclass(frozen=True)
class ExperimentFacts:
    """What the report needs to know about an experiment beyond its metric rows.

    `consecutive` is how many evaluation points in a row the return must stay at or above the threshold;
    `variant_params` maps an agent label to its parameters, used to find families that vary a planning
    budget (labels such as "Dyna-Q (planning_steps=5)" are parsed when it is empty). `measure` is the primary
    measure (`greedy_return` against `thresholds`, or `earning_rate` against `earning_thresholds`): time to
    threshold, the ratios against the baseline, adaptation after changes and the headline follow it.
    """

    name: str
    budget: int
    baseline: str | None
    thresholds: dict[str, float | None]
    env_order: list[str]
    agent_order: list[str]
    confidence: float = 0.95
    n_resamples: int = 2000
    changes: dict[str, list[int]] = field(default_factory=dict)
    seed: int = 0
    consecutive: int = 1
    description: str = ""
    variant_params: dict[str, dict] = field(default_factory=dict)
    measure: str = GREEDY_RETURN
    earning_thresholds: dict[str, float | None] = field(default_factory=dict)

    costs: dict[str, object] | None = None

    @property
    def primary_thresholds(self) -> dict[str, float | None]:
        """Thresholds of the primary measure, per environment."""
        return self.thresholds if self.measure == GREEDY_RETURN else self.earning_thresholds

    @property
    def prices(self) -> Prices:
        """The user's prices from the experiment's `costs` block, or CPU-seconds alone without one."""
        if not self.costs:
            return Prices()
        return Prices(str(self.costs["unit"]), float(self.costs["real_step"]), float(self.costs["cpu_second"]))


@dataclass(frozen=True)
class ReportOutput:
    """Files written by `write_report` in writing order, the efficiency sentences, and the terminal text."""

    files: list[Path]
    terminal_text: str
    headline: list[str] = field(default_factory=list)
    warnings: list[str] = field(default_factory=list)


def write_csv(path: Path, table: pd.DataFrame) -> Path:
    """Write one table as CSV atomically (see `_write_text_atomic`)."""
    return _write_text_atomic(path, table.to_csv(index=False))


def _write_text_atomic(path: Path, text: str) -> Path:
    """Write text under a temporary name in the same folder, then rename, so readers never see half a file."""
    return write_atomic(path, lambda stream: stream.write(text.encode("utf-8")))


def _sort_by_order(frame: pd.DataFrame, envs: list[str], agents: list[str], last: str | None = None) -> pd.DataFrame:
    """Sort rows by the report's environment and agent order, then by the `last` column when given."""
    env_rank = frame["env"].map({env: rank for rank, env in enumerate(envs)})
    agent_rank = frame["agent"].map({agent: rank for rank, agent in enumerate(agents)})
    keyed = frame.assign(_env_rank=env_rank, _agent_rank=agent_rank)
    keys = ["_env_rank", "_agent_rank", *([last] if last else [])]
    keyed = keyed.sort_values(keys, kind="stable")
    return keyed.drop(columns=["_env_rank", "_agent_rank"]).reset_index(drop=True)


# --- per-trial and per-variant compute -----------------------------------------------------------------------


def _last_rows(frame: pd.DataFrame) -> pd.DataFrame:
    """The last evaluation point of every trial (one row per trial), found without a per-trial loop."""
    last = frame.groupby(["env", "agent", "trial_id"], sort=False, observed=True)["point"].idxmax()
    columns = [
        c
        for c in (*_TRIAL_KEYS, "real_steps", "real_updates", "planning_updates", "model_updates", "cpu_seconds")
        if c in frame.columns
    ]
    return frame.loc[last.to_numpy(), columns].reset_index(drop=True)


def compute_table(frame: pd.DataFrame, envs: list[str], agents: list[str], facts: ExperimentFacts) -> pd.DataFrame:
    """Per (env, agent): updates and planning updates per real step, and measured CPU microseconds per real step.

    `updates_per_real` counts every update an agent makes per real step (real, planning and model updates),
    so model-free agents sit at about 1 rather than 0; but a value-iteration backup and a sample update count
    alike there, so compute is compared on `cpu_us_per_real`: each trial's CPU time spent acting, learning and
    planning (evaluation excluded) over its real steps, median over seeds with a percentile bootstrap interval
    (a median, so not bootstrap-t). Stores without CPU times give NaN.
    """
    last = _last_rows(frame)
    steps = last["real_steps"].to_numpy(dtype=float)
    model = last["model_updates"].to_numpy(dtype=float) if "model_updates" in last else 0.0
    total = last["real_updates"].to_numpy(dtype=float) + last["planning_updates"].to_numpy(dtype=float) + model
    cpu = last["cpu_seconds"].to_numpy(dtype=float) if "cpu_seconds" in last else np.full(len(last), np.nan)
    with np.errstate(divide="ignore", invalid="ignore"):
        per_trial = last[["env", "agent"]].assign(
            updates_per_real=np.where(steps > 0, total / steps, np.nan),
            planning_per_real=np.where(steps > 0, last["planning_updates"].to_numpy(dtype=float) / steps, np.nan),
            cpu_us_per_real=np.where(steps > 0, 1e6 * cpu / steps, np.nan),
        )
    rows = []
    for (env, agent), group in per_trial.groupby(["env", "agent"], sort=False):
        cpu_us = group["cpu_us_per_real"].dropna().to_numpy()
        median, low, high = (np.nan,) * 3
        if cpu_us.size:
            median, low, high = median_and_interval(
                cpu_us,
                confidence=facts.confidence,
                n_resamples=facts.n_resamples,
                rng=keyed_rng(facts.seed, "cpu", str(env), str(agent)),
            )
        rows.append(
            {
                "env": env,
                "agent": agent,
                "trials": len(group),
                "updates_per_real": float(group["updates_per_real"].mean()),
                "planning_per_real": float(group["planning_per_real"].mean()),
                "cpu_us_per_real": median,
                "cpu_us_low": low,
                "cpu_us_high": high,
            }
        )
    return _sort_by_order(pd.DataFrame.from_records(rows, columns=COMPUTE_COLUMNS), envs, agents)


# --- threshold, efficiency, comparisons, advice -------------------------------------------------------------


def _threshold_label(facts: ExperimentFacts, env: str) -> str:
    """Wording of one environment's primary threshold, including how long the measure must stay above it."""
    value = facts.primary_thresholds.get(env)
    if value is None:
        return "the threshold"
    held = f" held for {facts.consecutive} evaluations in a row" if facts.consecutive > 1 else ""
    return f"{MEASURES[facts.measure].threshold_text(value)}{held}"


def _earned_per_step(frame: pd.DataFrame) -> pd.DataFrame:
    """Per trial: reward earned while learning over its real steps (the mean of its earning-rate curve)."""
    last = frame.loc[
        frame.groupby("trial_id", sort=False)["point"].idxmax(), ["trial_id", "real_steps", "reward_earned"]
    ]
    steps = last["real_steps"].to_numpy(dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        rate = np.where(steps > 0, last["reward_earned"].to_numpy(dtype=float) / steps, np.nan)
    return pd.DataFrame({"trial_id": last["trial_id"].to_numpy(), "earned_per_step": rate})


def _first_points(frame: pd.DataFrame) -> dict[str, float]:
    """Each environment's first evaluation step after 0: a crossing there only says "at or before" it."""
    positive = frame.loc[frame["real_steps"] > 0, ["env", "real_steps"]]
    return {str(env): float(step) for env, step in positive.groupby("env", sort=False)["real_steps"].min().items()}


def _efficiency(
    crossings: pd.DataFrame, facts: ExperimentFacts, envs: list[str], agents: list[str], first: dict[str, float]
) -> pd.DataFrame:
    """Real-step ratios of every agent against the baseline, in report order (empty without a baseline)."""
    if not facts.baseline or crossings.empty:
        return pd.DataFrame(columns=EFFICIENCY_COLUMNS)
    ratios = efficiency_ratios(
        crossings,
        facts.baseline,
        confidence=facts.confidence,
        n_resamples=facts.n_resamples,
        seed=facts.seed,
        resolution=first,
    )
    return _sort_by_order(ratios, envs, agents) if len(ratios) else ratios


def threshold_warnings(frame: pd.DataFrame, facts: ExperimentFacts, envs: list[str]) -> list[str]:
    """Warnings for return thresholds that untrained agents already meet: greedy returns at step 0 at or above them.

    (The earning rate is undefined at step 0, so its threshold gets no such warning.)
    """
    warnings = []
    start = frame[frame["point"] == 0]
    for env in envs:
        value = facts.thresholds.get(env)
        rows = start[start["env"] == env]
        if value is None or rows.empty:
            continue
        met = rows["eval_return"].to_numpy(dtype=float) >= value
        if met.any():
            who = sorted(set(rows.loc[met, "agent"]), key=list(rows["agent"]).index)
            warnings.append(
                f"On {env}, {int(met.sum())} of {met.size} trials already met the return threshold {value:g} at "
                f"step 0, before learning anything ({', '.join(who)}): the threshold does not tell trained from "
                "untrained agents; raise it, shorten the evaluation cap (evaluation.step_cap or step_limit), or "
                "give a per-step cost (step_reward) so that reaching the goal sooner scores higher."
            )
    return warnings


# Flagged trials named one by one in a warning; the rest are counted (the table and CSV list them all).
_NAMED_FLAGS = 5


def seed_warnings(flags: pd.DataFrame, envs: list[str]) -> list[str]:
    """One warning per environment with flagged seeds, naming the first few by agent, seed and trial id."""
    warnings = []
    for env in envs:
        rows = flags[flags["env"] == env] if len(flags) else flags
        if rows.empty:
            continue
        named = [
            f"{row['agent']} seed {int(row['seed'])} {row['flag']} (trial {row['trial_id']})"
            for _, row in rows.head(_NAMED_FLAGS).iterrows()
        ]
        more = f" and {len(rows) - _NAMED_FLAGS} more" if len(rows) > _NAMED_FLAGS else ""
        noun = "seed is" if len(rows) == 1 else "seeds are"
        warnings.append(
            f"On {env}, {len(rows)} {noun} unlike the mean: {'; '.join(named)}{more}. See 'Seeds to look at', "
            "flagged_seeds.csv and the per-seed figures."
        )
    return warnings


def _adaptation(
    frame: pd.DataFrame, facts: ExperimentFacts, envs: list[str], agents: list[str]
) -> tuple[pd.DataFrame, pd.DataFrame, pd.DataFrame, pd.DataFrame]:
    """Recovery times per trial, their Kaplan-Meier summary, paired ratios and the windows around each change."""
    column = MEASURES[facts.measure].column
    changes = {env: steps for env, steps in facts.changes.items() if steps and env in envs}
    if not changes or "env_phase" not in frame.columns:
        empty = (RECOVERY_COLUMNS, RECOVERY_SUMMARY_COLUMNS, RECOVERY_RATIO_COLUMNS)
        return (*(pd.DataFrame(columns=c) for c in empty), pd.DataFrame())
    options = {"confidence": facts.confidence, "n_resamples": facts.n_resamples, "seed": facts.seed}
    per_trial = recovery_times(frame, changes, facts.primary_thresholds, column=column, consecutive=facts.consecutive)
    summary = recovery_summary(per_trial, facts.confidence) if len(per_trial) else None
    ratios = recovery_ratios(per_trial, facts.baseline, **options) if facts.baseline and len(per_trial) else None
    windows = window_means(frame, changes, facts.budget, column=column, **options)

    def ordered(table: pd.DataFrame | None, columns: list[str]) -> pd.DataFrame:
        if table is None or table.empty:
            return pd.DataFrame(columns=columns)
        return _sort_by_order(table, envs, agents).sort_values(["change"], kind="stable").reset_index(drop=True)

    return (
        ordered(per_trial, RECOVERY_COLUMNS),
        ordered(summary, RECOVERY_SUMMARY_COLUMNS),
        ordered(ratios, RECOVERY_RATIO_COLUMNS),
        ordered(windows, list(windows.columns)),
    )


def _comparisons(scores: pd.DataFrame, envs: list[str], agents: list[str], facts: ExperimentFacts) -> pd.DataFrame:
    """Welch-Holm tests and probability of improvement for pairs of variants (`comparison_pairs`), env by env, on
    the primary measure's per-trial score: AUC of the greedy return, or reward earned per real step over the trial."""
    metric = "auc" if facts.measure == GREEDY_RETURN else "earned_per_step"
    parts = [
        pairwise_welch(
            scores,
            env,
            agents,
            metric,
            confidence=facts.confidence,
            n_resamples=facts.n_resamples,
            seed=facts.seed,
            baseline=facts.baseline,
        )
        for env in envs
    ]
    parts = [part for part in parts if len(part)]
    return pd.concat(parts, ignore_index=True) if parts else pd.DataFrame(columns=PAIRWISE_COLUMNS)


FIGURE_AGENTS = 12
"""Most variants drawn in one figure (lines, bands, legend entries) or advised on in `seeds_advice.csv`; the
other tables and CSVs keep every variant."""


def _leading_agents(means: pd.Series, agents: list[str], baseline: str | None) -> list[str]:
    """The baseline (when given) and the best variants by mean AUC, FIGURE_AGENTS in all, in `agents` order."""
    best = means.sort_values(ascending=False, kind="stable").index.tolist()
    chosen = [baseline] if baseline in best else []
    chosen += [agent for agent in best if agent not in chosen][: FIGURE_AGENTS - len(chosen)]
    kept = set(chosen)
    return [agent for agent in agents if agent in kept]


def _advice(
    frame: pd.DataFrame, scores: pd.DataFrame, envs: list[str], agents: list[str], facts: ExperimentFacts
) -> pd.DataFrame:
    """Seeds per agent needed to detect AUC differences of ADVICE_SHARES of each env's return range
    (`advice_table`, the same advice as `stepmeter seeds`).

    Beyond FIGURE_AGENTS variants, only the ones the figures draw are advised on (the baseline and the best).
    """
    ranges = frame.groupby("env", sort=False)["eval_return"].agg(["min", "max"])
    parts = []
    for env in envs:
        span = float(ranges.loc[env, "max"] - ranges.loc[env, "min"])
        in_env = scores[scores["env"] == env]
        env_agents = ordered_labels(in_env["agent"], agents)
        if len(env_agents) > FIGURE_AGENTS:
            reference = facts.baseline if facts.baseline in env_agents else env_agents[0]
            means = in_env.groupby("agent", sort=False)["auc"].mean()
            in_env = in_env[in_env["agent"].isin(_leading_agents(means, env_agents, reference))]
        table = advice_table(in_env, env, span, baseline=facts.baseline, agent_order=agents)
        if len(table):
            parts.append(table)
    return pd.concat(parts, ignore_index=True) if parts else pd.DataFrame(columns=ADVICE_TABLE_COLUMNS)


# --- figure data ----------------------------------------------------------------------------------------------


def _km_band(survival: np.ndarray, se: np.ndarray, confidence: float) -> tuple[np.ndarray, np.ndarray]:
    """Pointwise interval of Kaplan-Meier survival on the complementary log-log scale (stays inside [0, 1])."""
    z = special.ndtri((1.0 + confidence) / 2.0)
    with np.errstate(divide="ignore", invalid="ignore"):
        spread = z * se / (survival * np.abs(np.log(survival)))
        low, high = survival ** np.exp(spread), survival ** np.exp(-spread)
    usable = np.isfinite(low) & np.isfinite(high)
    return np.where(usable, low, survival), np.where(usable, high, survival)


def _km_figure_data(crossings: pd.DataFrame, env: str, confidence: float) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Step vertices (agent, time, survival, low, high) and censoring marks (agent, time, survival) of one env."""
    curves, marks = [], []
    for agent, group in crossings[crossings["env"] == env].groupby("agent", sort=False):
        times, reached = group["steps"].to_numpy(dtype=float), group["reached"].to_numpy(dtype=bool)
        km = kaplan_meier(times, reached)
        survival, se = km["survival"].to_numpy(), km["greenwood_se"].to_numpy()
        low, high = _km_band(survival, se, confidence)
        end = float(times.max())
        last = survival[-1] if survival.size else 1.0
        curves.append(
            pd.DataFrame(
                {
                    "agent": agent,
                    "time": np.r_[0.0, km["time"].to_numpy(dtype=float), end],
                    "survival": np.r_[1.0, survival, last],
                    "low": np.r_[1.0, low, low[-1] if low.size else 1.0],
                    "high": np.r_[1.0, high, high[-1] if high.size else 1.0],
                }
            )
        )
        censored = np.unique(times[~reached])
        index = np.searchsorted(km["time"].to_numpy(dtype=float), censored, side="right") - 1
        level = np.where(index >= 0, survival[np.maximum(index, 0)] if survival.size else 1.0, 1.0)
        marks.append(pd.DataFrame({"agent": agent, "time": censored, "survival": level}))
    empty = pd.DataFrame(columns=["agent", "time", "survival"])
    return (
        pd.concat(curves, ignore_index=True) if curves else empty.assign(low=[], high=[]),
        pd.concat(marks, ignore_index=True) if marks else empty,
    )


def _model_error_bands(frame: pd.DataFrame, env: str, confidence: float) -> pd.DataFrame:
    """Mean model total-variation error per agent and point with a normal band, for agents that have one.

    The band is the mean plus or minus the normal quantile times the standard error over the trials with a
    value at that point: it only guides the eye in a figure (no table reports it), and one grouped pass over
    the rows keeps it cheap for thousands of trials. Columns as `curve_bands` (env, agent, point, real_steps,
    mean, low, high, n_seeds).
    """
    if "model_tv_error" not in frame.columns:
        return pd.DataFrame()
    in_env = frame["env"] == env
    has_error = frame.loc[in_env & frame["model_tv_error"].notna(), "agent"].unique()
    if has_error.size == 0:
        return pd.DataFrame()
    rows = frame.loc[in_env & frame["agent"].isin(has_error), ["env", "agent", "point", "real_steps", "model_tv_error"]]
    grouped = rows.groupby(["env", "agent", "point"], sort=True, observed=True)
    bands = grouped["model_tv_error"].agg(["mean", "std", "count"]).join(grouped["real_steps"].first())
    half = special.ndtri((1.0 + confidence) / 2.0) * bands["std"].fillna(0.0) / np.sqrt(bands["count"].clip(lower=1))
    bands = bands.assign(low=bands["mean"] - half, high=bands["mean"] + half, n_seeds=bands["count"])
    return bands.reset_index()[["env", "agent", "point", "real_steps", "mean", "low", "high", "n_seeds"]]


def _label_params(agent: str) -> tuple[str, dict[str, object]]:
    """Base label and the "name=value" parameters of a label such as "Dyna-Q (planning_steps=5)"."""
    match = _LABEL_PARAMS.match(agent)
    if not match:
        return agent, {}
    params: dict[str, object] = {}
    for part in match["inner"].split(", "):
        name, sep, value = part.partition("=")
        if not sep:
            return agent, {}
        try:
            params[name.strip()] = float(value)
        except ValueError:
            params[name.strip()] = value.strip()
    return match["base"], params


def _family_name(agent: str, param: str) -> str:
    """The agent's label without the "param=value" part, naming the family it belongs to."""
    base, params = _label_params(agent)
    others = [
        f"{name}={value:g}" if isinstance(value, float) else f"{name}={value}"
        for name, value in params.items()
        if name != param
    ]
    return f"{base} ({', '.join(others)})" if others else base


def _budget_params(kind: str) -> tuple[str, ...]:
    """Parameters a registered kind declares as planning budgets.

    Only registered kinds are looked up: a report never imports users' own modules (see `runner/trust.py`), so
    their variants get no budget figure.
    """
    if kind not in AGENTS.names():
        return ()
    return budget_params(agent_class(kind).schema)


def budget_families(
    agents: list[str], kinds: Mapping[str, str], variant_params: Mapping[str, Mapping[str, object]]
) -> list[tuple[str, str, list[tuple[float, str]]]]:
    """Groups of variants that differ only in a planning parameter, as (param, family name, [(value, agent)]).

    Parameters come from `variant_params` when it has an entry for the agent, else from the label's
    "(name=value, ...)" suffix. A planning parameter is one the agent kind's schema declares with the role
    PLANNING_BUDGET (whatever its name: `planning_steps`, `replays`, `simulations`); a family needs at least two
    distinct values. Families follow the order of their first member in `agents`.
    """
    groups: dict[tuple[str, str], list[tuple[float, str]]] = {}
    for agent in agents:
        base, parsed = _label_params(agent)
        params = dict(variant_params.get(agent) or parsed)
        identity = "" if agent in variant_params else base
        budgets = _budget_params(kinds.get(agent, ""))
        for param, value in params.items():
            if param not in budgets or isinstance(value, bool) or not isinstance(value, int | float):
                continue
            others = json.dumps({k: v for k, v in params.items() if k != param}, sort_keys=True, default=str)
            groups.setdefault((param, f"{kinds.get(agent, '')}|{identity}|{others}"), []).append((float(value), agent))
    return [
        (param, _family_name(members[0][1], param), members)
        for (param, _), members in groups.items()
        if len({value for value, _ in members}) >= 2
    ]


def _bounds(estimate: np.ndarray, low: np.ndarray | None, high: np.ndarray | None) -> tuple[np.ndarray, np.ndarray]:
    """Interval bounds of each point: the estimate itself without bounds, unbounded where a bound is unknown."""
    if low is None or high is None:
        return estimate, estimate
    low, high = np.asarray(low, dtype=float), np.asarray(high, dtype=float)
    return np.where(np.isnan(low), -np.inf, low), np.where(np.isnan(high), np.inf, high)


def pareto_front(
    compute: np.ndarray,
    steps: np.ndarray,
    *,
    compute_bounds: tuple[np.ndarray, np.ndarray] | None = None,
    steps_bounds: tuple[np.ndarray, np.ndarray] | None = None,
) -> np.ndarray:
    """True for points that no other point is clearly ahead of.

    A point j is ahead of i on an axis when j's interval lies wholly below i's (j's high < i's low), and
    behind when wholly above. i is off the front when some j is ahead on one axis and not behind on the other.
    Without bounds the intervals are the points themselves, which is the usual Pareto front (none needs no
    more compute and no more steps while needing strictly less of one). A NaN bound counts as unbounded, so
    an unknown interval never separates. Points with a NaN coordinate are never on the front and never beat
    another point.

    Parameters
    ----------
    compute, steps : ndarray, shape (n,)
    compute_bounds, steps_bounds : pair of ndarray, shape (n,), optional
        Low and high bound of each point's interval.

    Returns
    -------
    ndarray of bool, shape (n,)
    """
    x, y = np.asarray(compute, dtype=float), np.asarray(steps, dtype=float)
    x_low, x_high = _bounds(x, *(compute_bounds or (None, None)))
    y_low, y_high = _bounds(y, *(steps_bounds or (None, None)))
    valid = np.isfinite(x) & np.isfinite(y)
    # [i, j]: is j ahead of / behind i on each axis
    x_ahead, x_behind = x_high[None, :] < x_low[:, None], x_low[None, :] > x_high[:, None]
    y_ahead, y_behind = y_high[None, :] < y_low[:, None], y_low[None, :] > y_high[:, None]
    beaten = (((x_ahead & ~y_behind) | (y_ahead & ~x_behind)) & valid[None, :]).any(axis=1)
    return valid & ~beaten


def _step_bounds(joined: pd.DataFrame) -> tuple[np.ndarray, np.ndarray]:
    """Bounds of median real steps; a median at the first evaluation point only says "at or before" it."""
    median = joined["median_steps"].to_numpy(dtype=float)
    low = joined["median_low"].to_numpy(dtype=float)
    high = joined["median_high"].to_numpy(dtype=float)
    if "first_point" in joined:
        first = joined["first_point"].to_numpy(dtype=float)
        coarse = median <= first
        low, high = np.where(coarse, 0.0, low), np.where(coarse, first, high)
    return low, high


def _frontier(
    compute: pd.DataFrame, summary: pd.DataFrame, tsummary: pd.DataFrame, envs: list[str], agents: list[str]
) -> pd.DataFrame:
    """Per (env, agent) with a threshold: CPU time per real step, KM median steps, and whether it is on the front.

    The front compares intervals (CPU microseconds per real step, median real steps to threshold), so a
    variant is ahead of another only when one of its intervals separates from the other's.
    """
    if tsummary.empty:
        return pd.DataFrame(columns=FRONTIER_COLUMNS)
    keep = ["env", "agent", "reached_share", "median_steps", "median_low", "median_high"]
    medians = tsummary[keep].assign(
        first_point=tsummary["first_point"].astype(float) if "first_point" in tsummary else np.nan
    )
    kinds = summary[["env", "agent", "kind"]]
    joined = compute.merge(medians, on=["env", "agent"]).merge(kinds, on=["env", "agent"])
    flags = pd.Series(False, index=joined.index)
    for _, group in joined.groupby("env", sort=False):
        flags[group.index] = pareto_front(
            group["cpu_us_per_real"].to_numpy(dtype=float),
            group["median_steps"].to_numpy(dtype=float),
            compute_bounds=(group["cpu_us_low"].to_numpy(dtype=float), group["cpu_us_high"].to_numpy(dtype=float)),
            steps_bounds=_step_bounds(group),
        )
    return _sort_by_order(joined.assign(on_frontier=flags)[FRONTIER_COLUMNS], envs, agents)


def _budget_rows(
    members: list[tuple[float, str]], env: str, summary: pd.DataFrame, tsummary: pd.DataFrame, compute: pd.DataFrame
) -> pd.DataFrame:
    """One row per family member with its budget value, AUC, median steps and compute (see BudgetFamily)."""
    base = pd.DataFrame({"value": [value for value, _ in members], "agent": [agent for _, agent in members]})
    auc = summary.loc[summary["env"] == env, ["agent", "auc_mean", "auc_low", "auc_high"]]
    steps_columns = ["agent", "median_steps", "median_low", "median_high"]
    steps = (
        tsummary.loc[tsummary["env"] == env, steps_columns] if len(tsummary) else pd.DataFrame(columns=steps_columns)
    )
    cost = compute.loc[
        compute["env"] == env, ["agent", "planning_per_real", "cpu_us_per_real", "cpu_us_low", "cpu_us_high"]
    ]
    joined = base.merge(auc, on="agent").merge(steps, on="agent", how="left").merge(cost, on="agent")
    return joined.astype({c: float for c in ("median_steps", "median_low", "median_high")})


# --- writing --------------------------------------------------------------------------------------------------


@dataclass
class _Figures:
    """PNG paths of one environment's figures (None when the figure does not apply) and every file written."""

    png: dict[str, Path | None] = field(default_factory=dict)
    files: list[Path] = field(default_factory=list)

    def add(self, key: str, paths: list[Path]) -> None:
        """Record a written figure: its PNG (first path) for the page, every path for the file list."""
        self.png[key] = paths[0]
        self.files += paths


def _only(table: pd.DataFrame, agents: list[str]) -> pd.DataFrame:
    """The rows of `agents` (a table without an agent column, e.g. an empty one, is kept as it is)."""
    return table[table["agent"].isin(agents)] if "agent" in table.columns else table


def _figure_agents(env: str, agents: list[str], data: ReportTables, facts: ExperimentFacts) -> list[str]:
    """The variants an environment's figures draw: all of them, or the baseline and the best by mean AUC.

    A figure of 1,000 lines is unreadable and its legend alone takes minutes to lay out.
    """
    rows = data.summary[data.summary["env"] == env]
    if len(rows) <= FIGURE_AGENTS:
        return agents
    return _leading_agents(rows.set_index("agent")["auc_mean"], agents, facts.baseline)


def _env_figures(
    env: str, all_agents: list[str], data: ReportTables, frame: pd.DataFrame, facts: ExperimentFacts, out_dir: Path
) -> _Figures:
    """Write every figure of one environment (at most FIGURE_AGENTS variants in each, said in the title)."""
    figures = _Figures(
        png=dict.fromkeys(
            (
                "curves",
                "curves_seeds",
                "earning",
                "earning_seeds",
                "threshold",
                "model_error",
                "model_honesty",
                "budget",
                "frontier",
                "costs",
            )
        )
    )
    agents = _figure_agents(env, all_agents, data, facts)
    title = f"{facts.name}: {env}"
    if len(agents) < len(all_agents):
        title += f" ({len(agents)} of {len(all_agents)} variants: baseline and best AUC)"
        frame = frame[frame["agent"].isin(agents)]
        data = replace(
            data,
            bands=data.bands[data.bands["agent"].isin(agents)],
            crossings=data.crossings[data.crossings["agent"].isin(agents)],
            frontier=data.frontier[data.frontier["agent"].isin(agents)],
            earning_bands=_only(data.earning_bands, agents),
        )
    threshold = facts.thresholds.get(env)
    env_bands = data.bands[data.bands["env"] == env]
    figures.add(
        "curves",
        plot_curves(
            env_bands,
            env,
            agent_order=agents,
            threshold=threshold,
            out_dir=out_dir,
            title=title,
            changes=facts.changes.get(env, ()),
        ),
    )
    flagged = set(data.seed_flags.loc[data.seed_flags["env"] == env, "trial_id"].astype(str))
    seed_figure = {"frame": frame, "env": env, "agents": agents, "flagged": flagged, "out_dir": out_dir, "title": title}
    seed_figure["changes"] = facts.changes.get(env, ())
    figures.add(
        "curves_seeds", plot_seed_curves(**seed_figure, column="eval_return", threshold=facts.thresholds.get(env))
    )
    earning_bands = data.earning_bands[data.earning_bands["env"] == env] if len(data.earning_bands) else None
    if earning_bands is not None and earning_bands["mean"].notna().any():
        figures.add(
            "earning",
            plot_curves(
                earning_bands,
                env,
                agent_order=agents,
                threshold=facts.earning_thresholds.get(env),
                out_dir=out_dir,
                title=title,
                changes=facts.changes.get(env, ()),
                ylabel=MEASURES["earning_rate"].axis,
                stem="earning",
            ),
        )
        figures.add(
            "earning_seeds",
            plot_seed_curves(
                **seed_figure,
                column="earning_rate",
                threshold=facts.earning_thresholds.get(env),
                ylabel="reward earned per real step",
                stem="earning",
            ),
        )
    threshold = facts.primary_thresholds.get(env)
    if threshold is not None and len(data.crossings):
        km_steps, censored = _km_figure_data(data.crossings, env, facts.confidence)
        if len(km_steps):
            figures.add(
                "threshold",
                plot_threshold(
                    km_steps,
                    censored,
                    env,
                    agents=agents,
                    budget=facts.budget,
                    threshold_text=_threshold_label(facts, env),
                    out_dir=out_dir,
                    title=title,
                ),
            )
    errors = _model_error_bands(frame, env, facts.confidence)
    held_out = data.model_errors[data.model_errors["env"] == env] if len(data.model_errors) else data.model_errors
    if (len(errors) and errors["mean"].notna().any()) or len(held_out):
        figures.add(
            "model_error",
            plot_model_error(
                env_bands,
                errors,
                env,
                agents=agents,
                threshold=threshold,
                out_dir=out_dir,
                title=title,
                held_out=_only(held_out, agents),
            ),
        )
    honesty = _only(data.model_honesty[data.model_honesty["env"] == env], agents) if len(data.model_honesty) else None
    if honesty is not None and len(honesty):
        figures.add("model_honesty", plot_model_honesty(honesty, env, agents=agents, out_dir=out_dir, title=title))
    styles = agent_styles(agents)
    kinds = dict(zip(data.summary["agent"], data.summary["kind"], strict=True))
    families = [
        BudgetFamily(
            name, param, *styles[members[0][1]], _budget_rows(members, env, data.summary, data.tsummary, data.compute)
        )
        for param, name, members in budget_families(agents, kinds, facts.variant_params)
    ]
    families = [family for family in families if len(family.rows) >= 2]
    if families:
        figures.add(
            "budget",
            plot_budget(
                families,
                env,
                reference=_reference(env, agents, data, facts),
                budget=facts.budget,
                out_dir=out_dir,
                title=title,
            ),
        )
    cost_figure = _cost_figure(env, agents, data, facts, out_dir, title)
    if cost_figure:
        figures.add("costs", cost_figure)
    points = data.frontier[data.frontier["env"] == env]
    if len(points) and points["median_steps"].notna().any():
        figures.add(
            "frontier", plot_frontier(points, env, agents=agents, budget=facts.budget, out_dir=out_dir, title=title)
        )
    return figures


def _cost_figure(
    env: str, agents: list[str], data: ReportTables, facts: ExperimentFacts, out_dir: Path, title: str
) -> list[Path]:
    """Total cost against the price of a real step for one environment (no figure without CPU times)."""
    priced = data.priced[data.priced["env"] == env] if len(data.priced) else data.priced
    if priced.empty or not priced["reached"].any():
        return []
    prices = facts.prices
    steps, cpu = priced["steps"].to_numpy(dtype=float), priced["cpu_seconds"].to_numpy(dtype=float)
    scale = cpu[steps > 0] / steps[steps > 0]
    scale = scale[scale > 0]
    if scale.size == 0:
        return []
    marks = data.break_even[(data.break_even["env"] == env) & (data.break_even["rival"] == facts.baseline)]
    found = marks.loc[marks["verdict"] == "above", "price"].to_numpy(dtype=float)
    anchors = np.r_[scale, found, [prices.step_in_cpu_seconds or scale.min()]]
    grid = np.geomspace(anchors.min() / 30.0, anchors.max() * 30.0, 60) * prices.cpu_second
    curves = cost_curves(priced, env, agents, prices, grid, confidence=facts.confidence, seed=facts.seed)
    return plot_costs(
        curves,
        env,
        agents=agents,
        unit=prices.unit,
        user_price=prices.real_step,
        crossings=[
            (str(row["agent"]), float(row["price"]) * prices.cpu_second)
            for _, row in marks.iterrows()
            if row["verdict"] == "above"
        ],
        out_dir=out_dir,
        title=title,
    )


def _reference(env: str, agents: list[str], data: ReportTables, facts: ExperimentFacts) -> BudgetReference | None:
    """The baseline's numbers in one environment for the budget figure, or None without a baseline there."""
    if facts.baseline not in agents:
        return None

    def value(table: pd.DataFrame, column: str) -> float:
        if table.empty:
            return math.nan
        rows = table.loc[(table["env"] == env) & (table["agent"] == facts.baseline), column]
        return float(rows.iloc[0]) if len(rows) else math.nan

    return BudgetReference(
        label=str(facts.baseline),
        auc=value(data.summary, "auc_mean"),
        median_steps=value(data.tsummary, "median_steps"),
        cpu_us_per_real=value(data.compute, "cpu_us_per_real"),
    )


def _analyse(frame: pd.DataFrame, facts: ExperimentFacts, envs: list[str], agents: list[str]) -> ReportTables:
    """Every table of the report, computed once and shared by the CSV, Markdown, figures and page."""
    bands = curve_bands(frame, confidence=facts.confidence, n_resamples=facts.n_resamples, seed=facts.seed)
    scores = trial_scores(frame)
    if "reward_earned" in frame.columns:
        scores = scores.merge(_earned_per_step(frame), on="trial_id", how="left")
    summary = summary_table(
        scores,
        agent_order=agents,
        env_order=envs,
        confidence=facts.confidence,
        n_resamples=facts.n_resamples,
        seed=facts.seed,
    )
    column = MEASURES[facts.measure].column
    first = _first_points(frame)
    crossings = steps_to_threshold(frame, facts.primary_thresholds, facts.consecutive, column=column)
    if len(crossings):
        crossings = _sort_by_order(crossings, envs, agents, "seed")
        tsummary = _sort_by_order(threshold_summary(crossings, facts.confidence), envs, agents)
    else:
        crossings = pd.DataFrame(columns=CROSSING_COLUMNS)
        tsummary = pd.DataFrame(columns=THRESHOLD_SUMMARY_COLUMNS)
    tsummary = tsummary.assign(first_point=tsummary["env"].map(first).astype(float))
    compute = compute_table(frame, envs, agents, facts)
    recovery, rsummary, rratios, windows = _adaptation(frame, facts, envs, agents)
    has_earning = "earning_rate" in frame.columns
    earning_bands = (
        curve_bands(
            frame, confidence=facts.confidence, n_resamples=facts.n_resamples, seed=facts.seed, column="earning_rate"
        )
        if has_earning
        else pd.DataFrame()
    )
    earnings = (
        _sort_by_order(
            earning_summary(frame, confidence=facts.confidence, n_resamples=facts.n_resamples, seed=facts.seed),
            envs,
            agents,
        )
        if has_earning
        else pd.DataFrame(columns=EARNING_COLUMNS)
    )
    priced = cost_trials(frame, crossings)
    priced = priced[priced["cpu_seconds"].notna()] if len(priced) else priced
    options = {"confidence": facts.confidence, "n_resamples": facts.n_resamples, "seed": facts.seed}
    break_even = (
        _sort_by_order(break_even_prices(priced, agents, facts.baseline, **options), envs, agents)
        if len(priced)
        else pd.DataFrame(columns=BREAK_EVEN_COLUMNS)
    )
    costs = (
        _sort_by_order(total_costs(priced, facts.prices, agents, **options), envs, agents)
        if len(priced) and facts.prices.real_step is not None
        else pd.DataFrame(columns=COST_COLUMNS)
    )
    flags = seed_flags(
        frame,
        scores,
        facts.primary_thresholds,
        column=column,
        score="auc" if facts.measure == GREEDY_RETURN or "earned_per_step" not in scores else "earned_per_step",
    )
    return ReportTables(
        bands=bands,
        scores=scores,
        summary=summary,
        crossings=crossings,
        tsummary=tsummary,
        efficiency=_efficiency(crossings, facts, envs, agents, first),
        comparisons=_comparisons(scores, envs, agents, facts),
        advice=_advice(frame, scores, envs, agents, facts),
        compute=compute,
        frontier=_frontier(compute, summary, tsummary, envs, agents),
        earning_bands=earning_bands,
        earnings=earnings,
        recovery=recovery,
        rsummary=rsummary,
        rratios=rratios,
        windows=windows,
        break_even=break_even,
        costs=costs,
        priced=priced,
        seed_flags=_sort_by_order(flags, envs, agents, "seed") if len(flags) else flags,
        model_errors=_sort_by_order(
            held_out_error_bands(frame, confidence=facts.confidence, n_resamples=facts.n_resamples, seed=facts.seed),
            envs,
            agents,
        ),
        model_honesty=_sort_by_order(model_honesty_table(frame), envs, agents, "point"),
    )


def _headline(data: ReportTables, facts: ExperimentFacts, labels: dict[str, str]) -> list[str]:
    """The report's first sentences: the decision at the user's prices (when given), real-step ratios against
    the baseline, then the break-even price of a real step for each agent against the baseline; then, for
    environments that change, who adapts and how fast.

    For an environment that changes, "who adapts, and how fast" is the headline: steps (and costs) to first reach
    the threshold from the start say nothing about the change, so they stay in that environment's tables.
    """
    changing = {env for env, steps in facts.changes.items() if steps}

    def steady(table: pd.DataFrame) -> pd.DataFrame:
        return table[~table["env"].isin(changing)] if len(table) else table

    costs, efficiency, break_even = steady(data.costs), steady(data.efficiency), steady(data.break_even)
    decision = decision_sentences(costs, facts.prices) if len(costs) else []
    ratios = efficiency_sentences(efficiency, labels) if len(efficiency) else []
    against_baseline = break_even[break_even["rival"] == facts.baseline] if facts.baseline else None
    prices = break_even_sentences(against_baseline, facts.prices) if against_baseline is not None else []
    adaptation = adaptation_sentences(data.rsummary, labels, facts.confidence) if len(data.rsummary) else []
    return [*decision, *ratios, *prices, *adaptation]


def _markdown(
    data: ReportTables,
    facts: ExperimentFacts,
    envs: list[str],
    headline: list[str],
    glance: list[str],
    warnings: list[str],
) -> str:
    """Compose the Markdown report: experiment facts, headline, then per environment every table, then advice."""
    baseline = f"`{facts.baseline}`" if facts.baseline else "none declared"
    lines = [f"# {facts.name}", ""]
    if facts.description:
        lines += [facts.description, ""]
    lines += [
        f"Real-step budget per trial: {facts.budget}.",
        "",
        f"Baseline agent: {baseline}.",
        "",
        "AUC is the time-averaged greedy evaluation return over the real-step budget; each interval of a mean is "
        f"a {interval_caption(facts.confidence)} ({facts.n_resamples} resamples).",
    ]
    lines += ["", f"Primary measure: {MEASURES[facts.measure].noun}."]
    if headline or glance:
        lines += ["", "## Headline", "", *(f"- {sentence}" for sentence in [*headline, *glance])]
    if warnings:
        lines += ["", "## Warnings", "", *(f"- {warning}" for warning in warnings)]
    for env in envs:
        lines += ["", f"## {env}", ""]
        if facts.primary_thresholds.get(env) is not None:
            lines += [f"Threshold: {_threshold_label(facts, env)}.", ""]
        lines.append(to_markdown(data.summary[data.summary["env"] == env].drop(columns=["env"])).rstrip("\n"))
        for view in markdown_sections(data, facts, env):
            lines += ["", f"### {view.title}", "", to_markdown(view.frame()).rstrip("\n"), "", view.note]
    for view in markdown_sections(data, facts, None):
        lines += ["", f"## {view.title}", "", to_markdown(view.frame()).rstrip("\n"), "", view.note]
    lines += ["", "## Methods", "", *(f"- {line}" for line in method_lines(facts.confidence))]
    return "\n".join(lines) + "\n"


def _interval_names(confidence: float) -> dict[str, str]:
    """The method behind the low/high columns of each CSV, written in its last column `interval`."""
    mean = interval_caption(confidence)
    paired = f"{interval_caption(confidence, 'percentile')}, seeds resampled in pairs"
    km = f"{confidence:.0%} Kaplan-Meier interval, Greenwood variance on the complementary log-log scale"
    return {
        "summary.csv": mean,
        "curves.csv": mean,
        "model_errors.csv": mean,
        "earnings.csv": mean,
        "change_windows.csv": mean,
        "threshold_summary.csv": km,
        "recovery_summary.csv": km,
        "efficiency.csv": paired,
        "recovery_ratios.csv": paired,
        "break_even.csv": paired,
        "costs.csv": paired,
        "comparisons.csv": f"probability of improvement: {interval_caption(confidence, 'percentile')}",
        "frontier.csv": f"CPU time: {interval_caption(confidence, 'percentile')} of the median; steps: {km}",
    }


def _write_tables(
    data: ReportTables, envs: list[str], agents: list[str], out_dir: Path, confidence: float = 0.95
) -> list[Path]:
    """Write every CSV of the report in a fixed order; tables with intervals name their method in `interval`."""
    tables = {
        "summary.csv": data.summary,
        "trial_scores.csv": _sort_by_order(data.scores, envs, agents, "seed"),
        "curves.csv": _sort_by_order(data.bands, envs, agents, "point"),
        "steps_to_threshold.csv": data.crossings,
        "threshold_summary.csv": data.tsummary,
        "efficiency.csv": data.efficiency,
        "comparisons.csv": data.comparisons,
        "seeds_advice.csv": data.advice,
        "frontier.csv": data.frontier,
        "break_even.csv": data.break_even,
        "flagged_seeds.csv": data.seed_flags,
    }
    # Written only when they apply: earnings need `reward_earned`, the adaptation tables a map that changes.
    optional = {
        "earnings.csv": data.earnings,
        "recovery.csv": data.recovery,
        "recovery_summary.csv": data.rsummary,
        "recovery_ratios.csv": data.rratios,
        "change_windows.csv": data.windows,
        "model_errors.csv": data.model_errors,
        "model_honesty.csv": data.model_honesty,
    }
    tables.update({name: table for name, table in optional.items() if len(table)})
    if len(data.costs):
        tables["costs.csv"] = data.costs
    methods = _interval_names(confidence)
    tables = {
        name: table.assign(interval=methods[name]) if name in methods else table for name, table in tables.items()
    }
    return [_write_text_atomic(out_dir / name, table.to_csv(index=False)) for name, table in tables.items()]


def write_report(
    frame: pd.DataFrame, facts: ExperimentFacts, out_dir: Path, records: ExperimentRecords | None = None
) -> ReportOutput:
    """Write figures, CSV tables, `summary.md` and the self-contained `report.html` into `out_dir`.

    `records` (runs, failures, missing and undeclared trials from the store) only feed the HTML page. Every
    file is replaced atomically. Environments and agents missing from the declared orders are appended after
    the declared ones. Trials that never reach a threshold stay in every threshold table as censored.
    """
    if frame.empty:
        raise ValueError("no stored metric rows to report")
    missing = [column for column in REQUIRED_COLUMNS if column not in frame.columns]
    if facts.measure != GREEDY_RETURN and "reward_earned" not in frame.columns:
        missing.append("reward_earned")
    if missing:
        raise ValueError(f"results frame lacks columns: {', '.join(missing)}")
    if "reward_earned" in frame.columns:
        frame = with_earning_rate(frame)
    out_dir = ensure_folder(out_dir)
    remove_leftovers(out_dir)
    envs = ordered_labels(pd.unique(frame["env"]), facts.env_order)
    agents = ordered_labels(pd.unique(frame["agent"]), facts.agent_order)
    data = _analyse(frame, facts, envs, agents)
    labels = {env: _threshold_label(facts, env) for env in envs}
    headline = _headline(data, facts, labels)
    warnings = threshold_warnings(frame, facts, envs) + seed_warnings(data.seed_flags, envs)
    files: list[Path] = []
    pages = []
    for env in envs:
        env_agents = ordered_labels(data.summary.loc[data.summary["env"] == env, "agent"], agents)
        figures = _env_figures(env, env_agents, data, frame, facts, out_dir)
        files += figures.files
        pages.append(
            EnvPage(
                env=env,
                threshold_text=labels[env] if facts.primary_thresholds.get(env) is not None else None,
                figures=figures.png,
            )
        )
    files += _write_tables(data, envs, agents, out_dir, facts.confidence)
    glance = glance_sentences(data.tsummary, pages, facts.changes)
    markdown = _markdown(data, facts, envs, headline, glance, warnings)
    files.append(_write_text_atomic(out_dir / "summary.md", markdown))
    files.append(
        write_page(
            out_dir,
            facts=facts,
            data=data,
            envs=pages,
            headline=headline,
            records=records or ExperimentRecords(),
            warnings=warnings,
        )
    )
    header = f"{facts.name} (budget {facts.budget:,} real steps, baseline: {facts.baseline or 'none declared'})"
    lead = "\n".join([*headline, *(f"warning: {w}" for w in warnings)])
    lead = f"{lead}\n\n" if lead else ""
    terminal_text = f"{lead}{header}\n\n{to_terminal(data.summary)}"
    return ReportOutput(files=files, terminal_text=terminal_text, headline=headline, warnings=warnings)
