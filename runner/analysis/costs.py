"""The decision: total cost to reach the threshold, and the price of a real step at which planning pays.

A trial reaches the threshold after `steps` real steps having spent `cpu_seconds` of training CPU time (acting,
learning and planning; evaluation excluded). At a price `p` per real step and `c` per CPU-second its total cost
to the threshold is `steps * p + cpu_seconds * c`. Trials that never reach the threshold are censored at their
budget, as for steps to threshold, so medians are Kaplan-Meier medians and no trial is dropped.

The break-even price of a variant against a rival that needs more real steps is the CPU time it spends beyond
the rival's divided by the real steps it saves, both as medians over seeds: above that price per real step
(in CPU-seconds) the variant is the cheaper way to the threshold. Intervals resample seeds, keeping the two
trials of a seed together (percentile bootstrap, as for the efficiency ratios).
"""

from __future__ import annotations

import itertools
import warnings
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
import pandas as pd

from runner.analysis.bootstrap import keyed_rng
from runner.analysis.efficiency import MIN_ESTIMABLE_SHARE, seed_counts, weighted_km_medians
from runner.analysis.tables import format_number

__all__ = [
    "BREAK_EVEN_COLUMNS",
    "COST_COLUMNS",
    "COST_TRIAL_COLUMNS",
    "Prices",
    "break_even_prices",
    "break_even_sentences",
    "cost_curves",
    "cost_trials",
    "decision_sentences",
    "format_cpu_time",
    "total_costs",
]

COST_TRIAL_COLUMNS = ["env", "agent", "kind", "trial_id", "seed", "steps", "reached", "cpu_seconds"]
COST_COLUMNS = [
    "env",
    "agent",
    "trials",
    "reached",
    "median_steps",
    "median_cpu_seconds",
    "median_cost",
    "unit",
    "rival",
    "difference",
    "low",
    "high",
    "confidence",
    "note",
]
BREAK_EVEN_COLUMNS = [
    "env",
    "agent",
    "rival",
    "steps_saved",
    "extra_cpu_seconds",
    "price",
    "low",
    "high",
    "confidence",
    "verdict",
    "estimable_share",
    "note",
]
# Verdicts of a break-even row: planning pays above `price`; the variant is cheaper at any price; it saves no
# real steps, so no price makes it cheaper; or a median is undefined (survival never fell to one half).
VERDICTS = ("above", "always", "never", "undefined")


@dataclass(frozen=True)
class Prices:
    """What one real step and one CPU-second cost, in `unit`; without a user's prices, CPU-seconds themselves."""

    unit: str = "CPU-seconds"
    real_step: float | None = None
    cpu_second: float = 1.0

    @property
    def step_in_cpu_seconds(self) -> float | None:
        """The user's price of a real step expressed in CPU-seconds (None without a price)."""
        return None if self.real_step is None else self.real_step / self.cpu_second


def cost_trials(frame: pd.DataFrame, crossings: pd.DataFrame) -> pd.DataFrame:
    """Steps to threshold (from `steps_to_threshold`) with the training CPU seconds spent by then.

    The CPU time is read at the evaluation point where the threshold run starts, or at the trial's last point
    when it never reached it (censored). Columns: COST_TRIAL_COLUMNS; NaN CPU time where the store has none.
    """
    if crossings.empty:
        return pd.DataFrame(columns=COST_TRIAL_COLUMNS)
    if "cpu_seconds" not in frame.columns:
        return crossings.assign(cpu_seconds=np.nan)[COST_TRIAL_COLUMNS]
    points = frame[["trial_id", "real_steps", "cpu_seconds"]].drop_duplicates(["trial_id", "real_steps"])
    merged = crossings.merge(
        points.rename(columns={"real_steps": "steps"}).astype({"steps": float}),
        on=["trial_id", "steps"],
        how="left",
        validate="one_to_one",
    )
    return merged[COST_TRIAL_COLUMNS]


def _by_agent(trials: pd.DataFrame) -> dict[str, pd.DataFrame]:
    """Each agent's trials indexed by seed, split once (looking agents up one by one is quadratic in agents)."""
    return {str(agent): side.set_index("seed") for agent, side in trials.groupby("agent", sort=False)}


def _paired(sides: dict[str, pd.DataFrame], agent: str, rival: str) -> tuple[pd.DataFrame, pd.DataFrame]:
    """The trials of `agent` and `rival` on the seeds both ran, indexed by seed in the same order."""
    mine, theirs = sides[agent], sides[rival]
    if mine.index.equals(theirs.index):  # the usual case: both ran the same seeds in the same order
        return mine, theirs
    seeds = [seed for seed in theirs.index if seed in mine.index]
    return mine.loc[seeds], theirs.loc[seeds]


def _medians(side: pd.DataFrame, column: str, weights: np.ndarray, scale: float = 1.0) -> np.ndarray:
    """Kaplan-Meier medians of one column (steps or CPU seconds) for each row of integer resampling weights."""
    values = side[column].to_numpy(dtype=float) * scale
    return weighted_km_medians(values, side["reached"].to_numpy(dtype=bool), weights)


def _totals(side: pd.DataFrame, prices: Prices) -> np.ndarray:
    """Total cost of each trial to the threshold (or to its budget when censored), in the prices' unit."""
    return side["steps"].to_numpy(dtype=float) * float(prices.real_step) + side["cpu_seconds"].to_numpy(
        dtype=float
    ) * float(prices.cpu_second)


def _percentile(values: np.ndarray, confidence: float) -> tuple[float, float]:
    """Percentile interval of resampled values that may hold +inf (kept in place, never interpolated)."""
    lower, upper = np.quantile(values, [(1.0 - confidence) / 2.0, (1.0 + confidence) / 2.0], method="inverted_cdf")
    return float(lower), float(upper)


def total_costs(
    trials: pd.DataFrame,
    prices: Prices,
    agents: Sequence[str],
    *,
    confidence: float = 0.95,
    n_resamples: int = 2000,
    seed: int = 0,
) -> pd.DataFrame:
    """Per (env, agent): Kaplan-Meier median total cost to the threshold at the user's prices.

    Each agent is compared with the cheapest other agent of its environment (the cheapest with the runner-up):
    `difference` is its median total cost minus the rival's, with a paired percentile bootstrap interval over
    the seeds both ran. Needs `prices.real_step`. Rows follow `agents` within each environment.
    """
    if prices.real_step is None:
        raise ValueError("total costs need the price of a real step")
    rows = []
    ones = None
    for env, env_trials in trials.groupby("env", sort=False):
        sides = _by_agent(env_trials)
        present = [agent for agent in agents if agent in sides]
        medians = {}
        for agent in present:
            side = sides[agent]
            ones = np.ones((1, len(side)))
            medians[agent] = (
                float(_medians(side, "steps", ones)[0]),
                float(_medians(side, "cpu_seconds", ones)[0]),
                float(weighted_km_medians(_totals(side, prices), side["reached"].to_numpy(dtype=bool), ones)[0]),
                len(side),
                int(side["reached"].sum()),
            )
        ranked = sorted((cost, agent) for agent, (_, _, cost, _, _) in medians.items() if np.isfinite(cost))
        for agent in present:
            steps, cpu, cost, n, reached = medians[agent]
            row = {"env": env, "agent": agent, "trials": n, "reached": reached, "median_steps": steps}
            row.update(median_cpu_seconds=cpu, median_cost=cost, unit=prices.unit, confidence=confidence)
            row.update(rival="", difference=np.nan, low=np.nan, high=np.nan, note="")
            others = [other for _, other in ranked if other != agent]
            if not np.isfinite(cost):
                row["note"] = f"{reached} of {n} trials reached the threshold, so the median cost is undefined"
            elif not others:
                row["note"] = "no other agent has a defined median cost"
            else:
                row.update(_cost_difference(sides, env, agent, others[0], prices, confidence, n_resamples, seed))
            rows.append(row)
    return pd.DataFrame.from_records(rows, columns=COST_COLUMNS)


def _cost_difference(
    sides: dict[str, pd.DataFrame],
    env: object,
    agent: str,
    rival: str,
    prices: Prices,
    confidence: float,
    n_resamples: int,
    seed: int,
) -> dict[str, object]:
    """Median total cost of `agent` minus `rival`'s on their paired seeds, with a paired percentile interval."""
    mine, theirs = _paired(sides, agent, rival)
    out: dict[str, object] = {"rival": rival}
    if mine.empty:
        out["note"] = f"no seed was run by both {agent} and {rival}"
        return out
    env = str(env)
    weights = np.vstack([np.ones(len(mine)), seed_counts(len(mine), n_resamples, keyed_rng(seed, "cost", env, agent))])
    reached = [side["reached"].to_numpy(dtype=bool) for side in (mine, theirs)]
    difference = weighted_km_medians(_totals(mine, prices), reached[0], weights) - weighted_km_medians(
        _totals(theirs, prices), reached[1], weights
    )
    out["difference"] = float(difference[0])
    resampled = difference[1:]
    finite = resampled[np.isfinite(resampled)]
    if finite.size / n_resamples < MIN_ESTIMABLE_SHARE:
        out["note"] = f"interval not computed: only {finite.size / n_resamples:.0%} of resamples had both medians"
        return out
    out["low"], out["high"] = _percentile(finite, confidence)
    return out


def _break_even(steps_saved: np.ndarray, extra_cpu: np.ndarray) -> np.ndarray:
    """Price of a real step (CPU-seconds) above which the variant is cheaper: 0 when it is cheaper at any price,
    +inf when it saves no steps, NaN when a median is undefined."""
    with np.errstate(divide="ignore", invalid="ignore"):
        price = np.where(steps_saved > 0, np.maximum(extra_cpu / steps_saved, 0.0), np.inf)
    return np.where(np.isnan(steps_saved) | np.isnan(extra_cpu), np.nan, price)


def _rivals(sides: dict[str, pd.DataFrame], agents: Sequence[str], baseline: str | None) -> list[tuple[str, str]]:
    """Pairs to price: every agent against the baseline, and each agent against its nearest rival that needs
    more real steps (the next one up when agents are ranked by median steps)."""
    present = [agent for agent in agents if agent in sides]
    has_baseline = baseline in set(present)
    pairs = [(agent, baseline) for agent in present if has_baseline and agent != baseline]
    chosen = set(pairs)
    medians = {}
    for agent in present:
        side = sides[agent]
        medians[agent] = float(_medians(side, "steps", np.ones((1, len(side))))[0])
    ladder = sorted((steps, agent) for agent, steps in medians.items() if np.isfinite(steps))
    for (_, better), (_, worse) in itertools.pairwise(ladder):
        if worse != baseline and (better, worse) not in chosen:
            pairs.append((better, worse))
            chosen.add((better, worse))
    return pairs


def break_even_prices(
    trials: pd.DataFrame,
    agents: Sequence[str],
    baseline: str | None,
    *,
    confidence: float = 0.95,
    n_resamples: int = 2000,
    seed: int = 0,
) -> pd.DataFrame:
    """Per environment, the break-even price of a real step for each agent against the baseline and against
    its nearest rival that needs more real steps (see the module docstring).

    `price`, `low` and `high` are in CPU-seconds per real step; `verdict` is one of VERDICTS. The interval is a
    paired percentile bootstrap over the seeds both agents ran; resamples where a median is undefined are not
    estimable, and bounds are given only when at least MIN_ESTIMABLE_SHARE of resamples were.
    """
    rows = []
    for env, env_trials in trials.groupby("env", sort=False):
        sides = _by_agent(env_trials)
        for agent, rival in _rivals(sides, agents, baseline):
            mine, theirs = _paired(sides, agent, rival)
            row: dict[str, object] = {"env": env, "agent": agent, "rival": rival, "confidence": confidence}
            row.update(steps_saved=np.nan, extra_cpu_seconds=np.nan, price=np.nan, low=np.nan, high=np.nan)
            row.update(verdict="undefined", estimable_share=np.nan, note="")
            if mine.empty:
                row["note"] = f"no seed was run by both {agent} and {rival}"
                rows.append(row)
                continue
            rng = keyed_rng(seed, "break-even", str(env), agent, rival)
            weights = np.vstack([np.ones(len(mine)), seed_counts(len(mine), n_resamples, rng)])
            saved = _medians(theirs, "steps", weights) - _medians(mine, "steps", weights)
            extra = _medians(mine, "cpu_seconds", weights) - _medians(theirs, "cpu_seconds", weights)
            prices = _break_even(saved, extra)
            row.update(steps_saved=float(saved[0]), extra_cpu_seconds=float(extra[0]), price=float(prices[0]))
            if np.isnan(prices[0]):
                row["note"] = "a median of steps or CPU time to the threshold is undefined"
                rows.append(row)
                continue
            row["verdict"] = "never" if np.isinf(prices[0]) else "always" if prices[0] == 0.0 else "above"
            resampled = prices[1:]
            share = float(np.mean(~np.isnan(resampled)))
            row["estimable_share"] = share
            if share < MIN_ESTIMABLE_SHARE:
                row["note"] = f"interval not computed: only {share:.0%} of resamples had every median defined"
            else:
                row["low"], row["high"] = _percentile(resampled[~np.isnan(resampled)], confidence)
            rows.append(row)
    return pd.DataFrame.from_records(rows, columns=BREAK_EVEN_COLUMNS)


def cost_curves(
    trials: pd.DataFrame,
    env: str,
    agents: Sequence[str],
    prices: Prices,
    step_prices: np.ndarray,
    *,
    confidence: float = 0.95,
    n_resamples: int = 400,
    seed: int = 0,
) -> pd.DataFrame:
    """Median total cost to the threshold of each agent at each price of a real step, with a percentile band.

    `step_prices` are prices of a real step in the prices' unit; CPU time is charged at `prices.cpu_second`.
    Columns: agent, step_price, median, low, high. The band resamples seeds (it guides the eye; the tables
    carry the intervals that are tested).
    """
    env_trials = trials[trials["env"] == env]
    parts = []
    for agent in agents:
        side = env_trials[env_trials["agent"] == agent]
        if side.empty:
            continue
        steps = side["steps"].to_numpy(dtype=float)
        cpu = side["cpu_seconds"].to_numpy(dtype=float) * prices.cpu_second
        reached = side["reached"].to_numpy(dtype=bool)
        weights = np.vstack(
            [np.ones(len(side)), seed_counts(len(side), n_resamples, keyed_rng(seed, "cost-curve", env, agent))]
        )
        medians = np.array([weighted_km_medians(steps * price + cpu, reached, weights) for price in step_prices])
        with warnings.catch_warnings():  # a price where no resample has a median leaves the band empty there
            warnings.simplefilter("ignore", RuntimeWarning)
            low, high = np.nanquantile(medians[:, 1:], [(1.0 - confidence) / 2.0, (1.0 + confidence) / 2.0], axis=1)
        parts.append(
            pd.DataFrame({"agent": agent, "step_price": step_prices, "median": medians[:, 0], "low": low, "high": high})
        )
    return pd.concat(parts, ignore_index=True) if parts else pd.DataFrame(columns=["agent", "step_price", "median"])


def format_cpu_time(seconds: float) -> str:
    """A CPU time in the unit that reads best: s, ms, us or ns, three significant digits."""
    if seconds == 0.0:
        return "0"
    if abs(seconds) >= 1000.0:
        return f"{_money(seconds)} s"
    for unit, scale in (("s", 1.0), ("ms", 1e-3), ("us", 1e-6)):
        if abs(seconds) >= scale:
            return f"{_digits(seconds / scale)} {unit}"
    return f"{_digits(seconds / 1e-9)} ns"


def _money(value: float) -> str:
    """An amount in the user's unit: three significant digits, thousands separated, tiny amounts in e-notation."""
    if value != 0.0 and abs(value) < 1e-3:
        return f"{value:.3g}"
    return f"{float(f'{value:.3g}'):,.10g}"


def _digits(value: float) -> str:
    """Three significant digits without trailing zeros."""
    text = format_number(value, 3)
    return text.rstrip("0").rstrip(".") if "." in text else text


def _your_price(prices: Prices) -> str:
    """The user's price of a real step in CPU time, as a closing clause (empty without a costs block)."""
    if prices.step_in_cpu_seconds is None:
        return ""
    return f"; at your prices a real step costs as much as {format_cpu_time(prices.step_in_cpu_seconds)} of CPU time"


def break_even_sentences(table: pd.DataFrame, prices: Prices) -> list[str]:
    """One sentence per break-even row, saying above which price of a real step the agent is the cheaper way."""
    sentences = []
    for _, row in table.iterrows():
        env, agent, rival = row["env"], row["agent"], row["rival"]
        level = f"{round(100 * float(row['confidence']), 1):g}% paired percentile"
        if row["verdict"] == "undefined":
            sentences.append(f"On {env}, no break-even price for {agent} against {rival}: {row['note']}.")
            continue
        if row["verdict"] == "never":
            sentences.append(
                f"On {env}, {agent} needs no fewer real steps than {rival} (median), so there is no price of a "
                "real step at which it is the cheaper way to the threshold."
            )
            continue
        high = (
            "no upper bound: the data do not rule out that it never does"
            if np.isinf(row["high"])
            else format_cpu_time(float(row["high"]))
        )
        if np.isnan(row["low"]):
            interval = f" ({row['note']})"
        elif row["verdict"] == "always" and row["high"] == 0.0:
            interval = f" (so in the {level} interval too)"
        elif row["verdict"] == "always":
            interval = f" (the {level} interval of the break-even price reaches {high}, so this is not certain)"
        else:
            interval = f" ({level} interval {format_cpu_time(float(row['low']))} to {high})"
        if row["verdict"] == "always":
            sentences.append(
                f"On {env}, {agent} reaches the threshold in fewer real steps and no more CPU time than {rival} "
                f"(medians), so it is the cheaper way at any price of a real step{interval}."
            )
            continue
        sentences.append(
            f"On {env}, {agent} pays for its extra CPU time against {rival} once a real step costs more than "
            f"{format_cpu_time(float(row['price']))} of CPU time{interval}{_your_price(prices)}."
        )
    return sentences


def decision_sentences(costs: pd.DataFrame, prices: Prices) -> list[str]:
    """Per environment: which agent reaches the threshold at the lowest median total cost at the user's prices,
    and by how much it beats the runner-up, with the paired interval."""
    sentences = []
    unit = prices.unit
    at = f"at {_money(float(prices.real_step))} {unit} per real step and {_money(prices.cpu_second)} {unit}"
    at += " per CPU-second"
    for env, rows in costs.groupby("env", sort=False):
        defined = rows[np.isfinite(rows["median_cost"].to_numpy(dtype=float))]
        if defined.empty:
            sentences.append(f"On {env}, no agent reached the threshold in at least half its trials, {at}.")
            continue
        best = defined.loc[defined["median_cost"].idxmin()]
        head = (
            f"On {env}, {at}, {best['agent']} reaches the threshold at the lowest total cost: median "
            f"{_money(float(best['median_cost']))} {prices.unit}"
        )
        if not best["rival"]:
            sentences.append(f"{head}.")
            continue
        level = f"{round(100 * float(best['confidence']), 1):g}% paired percentile"
        saving = -float(best["difference"])
        interval = (
            f" ({level} interval {_money(-float(best['high']))} to {_money(-float(best['low']))})"
            if np.isfinite(best["low"])
            else f" ({best['note']})"
        )
        sentences.append(f"{head}, {_money(saving)} {prices.unit} less than {best['rival']}{interval}.")
    return sentences
