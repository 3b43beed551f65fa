"""How many times fewer real steps an agent needs than a baseline to reach the threshold, with paired intervals.

The ratio compares Kaplan-Meier medians of steps to threshold, so trials that never reached it count as
censored at their budget. Seeds are the unit of resampling and stay paired across the two agents.
"""

from __future__ import annotations

from collections.abc import Mapping

import numpy as np
import pandas as pd

from runner.analysis.bootstrap import keyed_rng
from runner.analysis.tables import format_number

__all__ = [
    "EFFICIENCY_COLUMNS",
    "MIN_ESTIMABLE_SHARE",
    "efficiency_ratios",
    "efficiency_sentences",
    "seed_counts",
    "weighted_km_medians",
]

EFFICIENCY_COLUMNS = [
    "env",
    "agent",
    "baseline",
    "ratio",
    "low",
    "high",
    "confidence",
    "includes_one",
    "agent_median",
    "baseline_median",
    "agent_reached",
    "baseline_reached",
    "paired_seeds",
    "estimable_share",
    "note",
    "bound",
]
# Percentile bounds are only reported when at least this share of resamples gives a ratio (see efficiency_ratios).
MIN_ESTIMABLE_SHARE = 0.9
# Survival within this distance above one half counts as having dropped to it (cumulative products round).
_TOLERANCE = 1e-10
# Resamples handled per matrix product, which bounds memory for experiments with many seeds.
_BATCH = 512


def weighted_km_medians(times: np.ndarray, reached: np.ndarray, weights: np.ndarray) -> np.ndarray:
    """Kaplan-Meier median of steps to threshold for many integer-weighted copies of the same trials.

    A row of `weights` holds how often each trial appears in one resample; the median is the first event
    time where weighted survival is <= 0.5, NaN when survival never gets there.

    Parameters
    ----------
    times : ndarray, shape (n_trials,)
    reached : ndarray of bool, shape (n_trials,)
    weights : ndarray, shape (n_rows, n_trials)

    Returns
    -------
    ndarray, shape (n_rows,)
    """
    unique, inverse = np.unique(times, return_inverse=True)
    events = np.zeros((times.size, unique.size))
    events[np.arange(times.size), inverse] = reached
    at_risk_matrix = (times[:, None] >= unique[None, :]).astype(float)
    medians = np.full(weights.shape[0], np.nan)
    for start in range(0, weights.shape[0], _BATCH):
        block = weights[start : start + _BATCH]
        count = block @ events
        at_risk = block @ at_risk_matrix
        with np.errstate(divide="ignore", invalid="ignore"):
            factor = np.where(at_risk > 0, 1.0 - count / at_risk, 1.0)
        below = np.cumprod(factor, axis=1) <= 0.5 + _TOLERANCE
        found = below.any(axis=1)
        medians[start : start + _BATCH] = np.where(found, unique[below.argmax(axis=1)], np.nan)
    return medians


def seed_counts(n_seeds: int, n_resamples: int, rng: np.random.Generator) -> np.ndarray:
    """How often each seed is drawn in each with-replacement resample, shape (n_resamples, n_seeds)."""
    picks = rng.integers(0, n_seeds, size=(n_resamples, n_seeds)) + n_seeds * np.arange(n_resamples)[:, None]
    return np.bincount(picks.ravel(), minlength=n_resamples * n_seeds).reshape(n_resamples, n_seeds).astype(float)


def _by_seed(group: pd.DataFrame, env: str, agent: str) -> pd.DataFrame:
    """Trials of one agent indexed by seed, refusing two trials with the same seed (pairing would be ambiguous)."""
    if group["seed"].duplicated().any():
        raise ValueError(f"{agent!r} on {env!r} has more than one trial for the same seed")
    return group.set_index("seed")[["steps", "reached"]]


def _median_note(label: str, median: float, reached: int, paired: int) -> str:
    """Why one side has no usable median, or an empty string when it has one."""
    if np.isnan(median):
        return (
            f"{label} got {reached} of {paired} paired trials to the threshold, so its median is undefined "
            "(Kaplan-Meier survival never fell to one half)"
        )
    if median == 0.0:
        return f"{label} met the threshold at step 0, so no ratio can be formed"
    return ""


def _coarse_note(label: str, resolution: float, *, both: bool) -> str:
    """Why a median at the first evaluation point gives only a bound on the ratio."""
    who = "both medians fall" if both else f"the median of {label} falls"
    return (
        f"{who} at the first evaluation point (at or before {resolution:,.0f} real steps), so the data "
        "bound the ratio but give no interval; a finer evaluation `every` would measure it"
    )


def _pair_row(
    env: str,
    agent: str,
    baseline: str,
    agent_trials: pd.DataFrame,
    baseline_trials: pd.DataFrame,
    *,
    confidence: float,
    n_resamples: int,
    seed: int,
    resolution: float,
) -> dict[str, object]:
    """Ratio, interval and counts for one agent against the baseline on one environment.

    A median at the first evaluation point (`resolution` real steps) only says "at or before" that step, so a
    ratio involving it is a bound ("at least" or "at most" in `bound`) without an interval.
    """
    seeds = [value for value in baseline_trials.index if value in agent_trials.index]
    row: dict[str, object] = {"env": env, "agent": agent, "baseline": baseline, "confidence": confidence}
    row.update(ratio=np.nan, low=np.nan, high=np.nan, includes_one=pd.NA, paired_seeds=len(seeds))
    row.update(agent_median=np.nan, baseline_median=np.nan, agent_reached=0, baseline_reached=0)
    row.update(estimable_share=np.nan, note="", bound="")
    if not seeds:
        row["note"] = f"no seed was run by both {agent} and {baseline}"
        return row
    mine, theirs = agent_trials.loc[seeds], baseline_trials.loc[seeds]
    times = [frame["steps"].to_numpy(dtype=float) for frame in (mine, theirs)]
    reached = [frame["reached"].to_numpy(dtype=bool) for frame in (mine, theirs)]
    ones = np.ones((1, len(seeds)))
    agent_median, baseline_median = (
        float(weighted_km_medians(t, r, ones)[0]) for t, r in zip(times, reached, strict=True)
    )
    row.update(agent_median=agent_median, baseline_median=baseline_median)
    row.update(agent_reached=int(reached[0].sum()), baseline_reached=int(reached[1].sum()))
    notes = [
        _median_note(agent, agent_median, int(reached[0].sum()), len(seeds)),
        _median_note(baseline, baseline_median, int(reached[1].sum()), len(seeds)),
    ]
    if any(notes):
        row["note"] = "; ".join(note for note in notes if note)
        return row
    row["ratio"] = baseline_median / agent_median
    coarse = [median <= resolution for median in (agent_median, baseline_median)]
    if any(coarse):
        row["note"] = _coarse_note(agent if coarse[0] else baseline, resolution, both=all(coarse))
        if all(coarse):
            row["ratio"] = np.nan
        else:
            row["bound"] = "at least" if coarse[0] else "at most"
        return row
    counts = seed_counts(len(seeds), n_resamples, keyed_rng(seed, "efficiency", env, agent, baseline))
    with np.errstate(divide="ignore", invalid="ignore"):
        baseline_medians = weighted_km_medians(times[1], reached[1], counts)
        resampled = baseline_medians / weighted_km_medians(times[0], reached[0], counts)
    finite = resampled[np.isfinite(resampled)]
    share = finite.size / n_resamples
    row["estimable_share"] = share
    if share < MIN_ESTIMABLE_SHARE:
        row["note"] = (
            f"interval not computed: only {share:.0%} of resamples had both medians defined "
            f"(at least {MIN_ESTIMABLE_SHARE:.0%} needed)"
        )
        return row
    low, high = np.quantile(finite, [(1.0 - confidence) / 2.0, (1.0 + confidence) / 2.0])
    row.update(low=float(low), high=float(high), includes_one=bool(low <= 1.0 <= high))
    return row


def efficiency_ratios(
    per_trial: pd.DataFrame,
    baseline: str,
    *,
    confidence: float = 0.95,
    n_resamples: int = 2000,
    seed: int = 0,
    resolution: Mapping[str, float] | None = None,
) -> pd.DataFrame:
    """Per (env, agent other than `baseline`): baseline's median real steps to threshold over the agent's.

    A ratio above 1 means the agent needs fewer real steps. Medians are Kaplan-Meier medians (trials that
    never reached the threshold are censored at their budget) computed on the seeds both agents ran; other
    seeds are left out. The interval is a percentile bootstrap that resamples those paired seeds, keeping
    both trials of a seed together. A resample where either median is undefined (survival never falls to one
    half) or zero gives no ratio: such resamples are counted as not estimable, `estimable_share` reports the
    share that were, and bounds are computed from the estimable ones only when that share is at least
    MIN_ESTIMABLE_SHARE (90%), otherwise they are NaN. A NaN ratio or bounds come with a `note` saying why.
    `resolution` gives each environment's first evaluation step after 0: a median there means "at or before
    it", so the ratio is only a bound (`bound` "at least" or "at most", no interval; NaN when both medians are
    there). Without it, medians are taken at face value.

    Parameters
    ----------
    per_trial : DataFrame
        One row per trial with env, agent, seed, steps and reached (from `steps_to_threshold`).
    baseline : str
        Agent label every other agent is compared with; environments where it is missing are skipped.
    """
    if not 0.0 < confidence < 1.0:
        raise ValueError(f"confidence must lie strictly between 0 and 1, got {confidence}")
    if n_resamples < 1:
        raise ValueError(f"n_resamples must be at least 1, got {n_resamples}")
    rows = []
    for env, env_trials in per_trial.groupby("env", sort=False):
        agents = {str(agent): group for agent, group in env_trials.groupby("agent", sort=False)}
        if baseline not in agents:
            continue
        baseline_trials = _by_seed(agents[baseline], str(env), baseline)
        for agent, group in agents.items():
            if agent == baseline:
                continue
            rows.append(
                _pair_row(
                    str(env),
                    agent,
                    baseline,
                    _by_seed(group, str(env), agent),
                    baseline_trials,
                    confidence=confidence,
                    n_resamples=n_resamples,
                    seed=seed,
                    resolution=float((resolution or {}).get(str(env), 0.0)),
                )
            )
    table = pd.DataFrame.from_records(rows, columns=EFFICIENCY_COLUMNS)
    return table.astype({"includes_one": "boolean"})


def _label(threshold_label: str | Mapping[str, str], env: str) -> str:
    """Wording for the threshold of one environment."""
    if isinstance(threshold_label, str):
        return threshold_label
    return threshold_label.get(env, "the threshold")


def _number(value: float) -> str:
    """Three significant digits without trailing zeros, so a bound of 1.04 never reads as 1.0."""
    text = format_number(value, 3)
    return text.rstrip("0").rstrip(".") if "." in text else text


def _how_many(ratio: float, baseline: str) -> str:
    """How the agent's median real steps compare with the baseline's: "1.5x fewer real steps than B", or "as many
    real steps as B" when the medians are equal (a ratio of 1 is neither fewer nor more)."""
    if ratio == 1.0:
        return f"as many real steps as {baseline}"
    direction, factor = ("fewer", ratio) if ratio > 1.0 else ("more", 1.0 / ratio)
    return f"{_number(factor)}x {direction} real steps than {baseline}"


def _sentence(row: pd.Series, threshold_label: str | Mapping[str, str]) -> str:
    """One plain sentence for one row of `efficiency_ratios`."""
    env, agent, baseline, label = row["env"], row["agent"], row["baseline"], _label(threshold_label, row["env"])
    if pd.isna(row["ratio"]):
        return f"On {env}, there is no step ratio for {agent} against {baseline} to reach {label}: {row['note']}."
    ratio, low, high = float(row["ratio"]), float(row["low"]), float(row["high"])
    if row.get("bound") in ("at least", "at most"):
        direction, factor = ("fewer", ratio) if ratio >= 1.0 else ("more", 1.0 / ratio)
        return (
            f"On {env}, {agent} needed at least {_number(factor)}x {direction} real steps than {baseline} to "
            f"reach {label}: {row['note']}."
        )
    level = f"{round(100 * float(row['confidence']), 1):g}% paired percentile"
    counts = (
        f"{row['agent_reached']}/{row['paired_seeds']} and {row['baseline_reached']}/{row['paired_seeds']} "
        "paired seeds reached it"
    )
    if np.isnan(low):
        return (
            f"On {env}, {agent} needed {_how_many(ratio, baseline)} to reach {label}, "
            f"but without an interval ({row['note']}; {counts})."
        )
    if low <= 1.0 <= high:
        return (
            f"On {env}, the data do not show that {agent} and {baseline} differ in real steps to reach {label}: "
            f"the median ratio is {_number(ratio)} and its {level} interval "
            f"{_number(low)}-{_number(high)} includes 1 ({counts})."
        )
    if low > 1.0:
        return (
            f"On {env}, {agent} needed {_number(ratio)}x fewer real steps than {baseline} to reach "
            f"{label} ({level} interval {_number(low)}-{_number(high)}; {counts})."
        )
    return (
        f"On {env}, {agent} needed {_number(1.0 / ratio)}x more real steps than {baseline} to reach "
        f"{label} ({level} interval {_number(1.0 / high)}-{_number(1.0 / low)}; {counts})."
    )


def efficiency_sentences(ratios: pd.DataFrame, threshold_label: str | Mapping[str, str] = "the threshold") -> list[str]:
    """One plain-language sentence per row of `efficiency_ratios`, in the same order.

    `threshold_label` names the threshold, for example "a return of 0.9", either once for all environments
    or per environment (environments missing from the mapping read "the threshold").
    """
    return [_sentence(row, threshold_label) for _, row in ratios.iterrows()]
