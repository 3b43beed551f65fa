"""Adaptation after a change: how many real steps each agent needs to regain the threshold once the map changes.

Environments with change events (grid maps with `changes:`) record their phase in every metric row
(`env_phase`: how many changes have happened). For the change that starts phase p at real step `at`, a trial's
recovery time is the real steps from `at` to the first evaluation point of phase p that starts a run of
`consecutive` points at or above the threshold. A trial that never gets there within the phase is censored at
the phase's last evaluation point, never dropped, so Kaplan-Meier medians and paired ratios against the
baseline (`threshold.py`, `efficiency.py`) apply unchanged. Windows before and after each change show the
measure itself: what an agent had, what it kept right after the change, and what it ended the phase with.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence

import numpy as np
import pandas as pd

from runner.analysis.bootstrap import keyed_rng, mean_and_interval
from runner.analysis.efficiency import EFFICIENCY_COLUMNS, efficiency_ratios
from runner.analysis.threshold import THRESHOLD_SUMMARY_COLUMNS, steps_to_threshold, threshold_summary

__all__ = [
    "RECOVERY_COLUMNS",
    "RECOVERY_RATIO_COLUMNS",
    "RECOVERY_SUMMARY_COLUMNS",
    "WINDOW_COLUMNS",
    "WINDOW_NAMES",
    "adaptation_sentences",
    "recovery_ratios",
    "recovery_summary",
    "recovery_times",
    "window_means",
]

_TRIAL_KEYS = ["env", "agent", "kind", "trial_id", "seed"]
_CHANGE_KEYS = ["env", "change", "at", "phase_end", "first_point"]
RECOVERY_COLUMNS = [*_TRIAL_KEYS, *_CHANGE_KEYS[1:], "steps", "reached"]
RECOVERY_SUMMARY_COLUMNS = [*_CHANGE_KEYS, *(c for c in THRESHOLD_SUMMARY_COLUMNS if c != "env")]
RECOVERY_RATIO_COLUMNS = [*_CHANGE_KEYS, *(c for c in EFFICIENCY_COLUMNS if c != "env")]
WINDOW_NAMES = ("before", "just after", "end of phase")
WINDOW_COLUMNS = ["env", "change", "at", "agent", "window", "from_step", "to_step", "seeds", "mean", "low", "high"]


def _phase_bounds(changes: Sequence[int], budget: int, index: int) -> tuple[int, int, int]:
    """(start of the phase before change `index`, the change step, end of the phase it starts)."""
    previous = 0 if index == 0 else int(changes[index - 1])
    end = int(changes[index + 1]) if index + 1 < len(changes) else int(budget)
    return previous, int(changes[index]), end


def recovery_times(
    frame: pd.DataFrame,
    changes: Mapping[str, Sequence[int]],
    thresholds: Mapping[str, float | None],
    *,
    column: str = "eval_return",
    consecutive: int = 1,
) -> pd.DataFrame:
    """One row per (trial, change): real steps from the change until `column` regains the threshold in that phase.

    Columns: env, agent, kind, trial_id, seed, change (1 for the first), at (the change's real step),
    phase_end (last real step evaluated in the phase), first_point (real steps from the change to the phase's
    first evaluation point: the finest recovery time the protocol can measure), steps, reached. Trials that do
    not regain it are censored at the phase's last evaluation point (steps = phase_end - at, reached False).
    Environments without changes or without a threshold are skipped.
    """
    parts = []
    for env, steps in changes.items():
        threshold = thresholds.get(env)
        if not steps or threshold is None:
            continue
        in_env = frame[frame["env"] == env]
        for index, at in enumerate(steps):
            rows = in_env[in_env["env_phase"] == index + 1]
            if rows.empty:
                continue
            crossings = steps_to_threshold(rows, {env: threshold}, consecutive, column=column)
            phase_end = int(rows["real_steps"].max())
            first_point = int(rows["real_steps"].min()) - int(at)
            parts.append(
                crossings.assign(
                    change=index + 1,
                    at=int(at),
                    phase_end=phase_end,
                    first_point=first_point,
                    steps=crossings["steps"].to_numpy(dtype=float) - float(at),
                )[RECOVERY_COLUMNS]
            )
    if not parts:
        return pd.DataFrame({c: pd.Series(dtype=object) for c in RECOVERY_COLUMNS})
    return pd.concat(parts, ignore_index=True)


def _by_change(per_trial: pd.DataFrame):
    """Groups of `per_trial` per (env, change), in order of appearance, with the change's keys."""
    for _, group in per_trial.groupby(["env", "change"], sort=False):
        first = group.iloc[0]
        yield {key: first[key] for key in _CHANGE_KEYS}, group


def recovery_summary(per_trial: pd.DataFrame, confidence: float = 0.95) -> pd.DataFrame:
    """Per (env, change, agent): trials, how many regained the threshold, Kaplan-Meier quartiles with intervals.

    The quartiles are real steps after the change (see `threshold.threshold_summary`, whose columns follow the
    change keys env, change, at, phase_end, first_point).
    """
    parts = []
    for keys, group in _by_change(per_trial):
        table = threshold_summary(group, confidence)
        parts.append(table.drop(columns=["env"]).assign(**keys)[RECOVERY_SUMMARY_COLUMNS])
    if not parts:
        return pd.DataFrame(columns=RECOVERY_SUMMARY_COLUMNS)
    return pd.concat(parts, ignore_index=True)


def recovery_ratios(
    per_trial: pd.DataFrame, baseline: str, *, confidence: float = 0.95, n_resamples: int = 2000, seed: int = 0
) -> pd.DataFrame:
    """Per (env, change, agent other than `baseline`): baseline's median recovery steps over the agent's.

    A ratio above 1 means the agent regained the threshold in fewer real steps; intervals resample paired seeds
    exactly as `efficiency.efficiency_ratios` does (censored trials kept).
    """
    parts = []
    for keys, group in _by_change(per_trial):
        table = efficiency_ratios(
            group,
            baseline,
            confidence=confidence,
            n_resamples=n_resamples,
            seed=seed,
            resolution={str(keys["env"]): float(keys["first_point"])},
        )
        if len(table):
            parts.append(table.drop(columns=["env"]).assign(**keys)[RECOVERY_RATIO_COLUMNS])
    if not parts:
        return pd.DataFrame(columns=RECOVERY_RATIO_COLUMNS)
    return pd.concat(parts, ignore_index=True).astype({"includes_one": "boolean"})


def _windows(changes: Sequence[int], budget: int, index: int, every: int) -> list[tuple[str, int, int]]:
    """Real-step windows (name, from, to] around change `index`: a quarter of the shorter neighbouring phase."""
    previous, at, end = _phase_bounds(changes, budget, index)
    width = max(int(every), min(at - previous, end - at) // 4)
    return [
        (WINDOW_NAMES[0], max(previous, at - width), at),
        (WINDOW_NAMES[1], at, min(end, at + width)),
        (WINDOW_NAMES[2], max(at, end - width), end),
    ]


def window_means(
    frame: pd.DataFrame,
    changes: Mapping[str, Sequence[int]],
    budget: int,
    *,
    column: str = "eval_return",
    confidence: float = 0.95,
    n_resamples: int = 2000,
    seed: int = 0,
) -> pd.DataFrame:
    """Per (env, change, agent, window): the measure's mean over the window, averaged over seeds with an interval.

    Windows are (from_step, to_step] in real steps: "before" ends at the change, "just after" starts there,
    "end of phase" ends where the phase does; each is a quarter of the shorter neighbouring phase (at least one
    evaluation interval). A trial's value is the mean of `column` over its evaluation points in the window.
    """
    rows = []
    for env, steps in changes.items():
        in_env = frame[(frame["env"] == env) & frame[column].notna()]
        if not steps or in_env.empty:
            continue
        positive = in_env.loc[in_env["real_steps"] > 0, "real_steps"]
        every = int(positive.min()) if len(positive) else 1
        for index, at in enumerate(steps):
            for name, start, stop in _windows(steps, budget, index, every):
                inside = in_env[(in_env["real_steps"] > start) & (in_env["real_steps"] <= stop)]
                per_trial = inside.groupby(["agent", "trial_id"], sort=False)[column].mean()
                for agent, values in per_trial.groupby(level="agent", sort=False):
                    samples = values.to_numpy(dtype=float)
                    mean, low, high = mean_and_interval(
                        samples,
                        confidence=confidence,
                        n_resamples=n_resamples,
                        rng=keyed_rng(seed, "window", str(env), str(index), name, str(agent)),
                    )
                    rows.append(
                        {
                            "env": env,
                            "change": index + 1,
                            "at": int(at),
                            "agent": agent,
                            "window": name,
                            "from_step": start,
                            "to_step": stop,
                            "seeds": samples.size,
                            "mean": float(mean),
                            "low": float(low),
                            "high": float(high),
                        }
                    )
    return pd.DataFrame.from_records(rows, columns=WINDOW_COLUMNS)


def _steps_text(value: float) -> str:
    return f"{float(value):,.0f}"


def _agent_part(row: pd.Series) -> str:
    """One agent's share of seeds that regained the threshold and its median, e.g. "Dyna-Q in 12 of 12 seeds,
    median 1,200 real steps [800, 1,600]"."""
    text = f"{row['agent']} in {int(row['reached'])} of {int(row['trials'])} seeds"
    median = row["median_steps"]
    if int(row["reached"]) == 0:
        return text
    if pd.isna(median):
        return f"{text} (too few for a median within the phase)"
    if float(median) <= float(row["first_point"]):
        return f"{text}, median at or before {_steps_text(median)} real steps (the first evaluation after the change)"
    low, high = row["median_low"], row["median_high"]
    bounds = ["n/a" if pd.isna(b) else ("unbounded" if np.isinf(float(b)) else _steps_text(b)) for b in (low, high)]
    return f"{text}, median {_steps_text(median)} real steps [{bounds[0]}, {bounds[1]}]"


def adaptation_sentences(summary: pd.DataFrame, threshold_text: Mapping[str, str], confidence: float) -> list[str]:
    """One sentence per (env, change): who regained the threshold after the change, in how many seeds, how fast.

    Agents are listed fastest first (by Kaplan-Meier median; those without a median after, most seeds first).
    `threshold_text` words each environment's threshold, e.g. "an earning rate of 0.02 reward per real step".
    """
    sentences = []
    for (env, change), group in summary.groupby(["env", "change"], sort=False):
        ranked = group.assign(_missing=group["median_steps"].isna(), _reached=-group["reached"])
        ranked = ranked.sort_values(["_missing", "median_steps", "_reached"], kind="stable")
        first = ranked.iloc[0]
        left = int(first["phase_end"]) - int(first["at"])
        which = "" if summary.loc[summary["env"] == env, "change"].nunique() == 1 else f" (change {int(change)})"
        regained = ranked[ranked["reached"] > 0]
        parts = [_agent_part(row) for _, row in regained.iterrows()]
        never = ranked[ranked["reached"] == 0]
        if len(never):
            counts = sorted({int(n) for n in never["trials"]})
            of = f"{counts[0]} seeds" if len(counts) == 1 else "all their seeds"
            names = ", ".join(str(agent) for agent in never["agent"])
            parts.append(f"not by {names} (0 of {of}{' each' if len(never) > 1 else ''})")
        sentences.append(
            f"On {env}, after the map changed at {_steps_text(first['at'])} real steps{which}, "
            f"{threshold_text.get(env, 'the threshold')} was regained within the {_steps_text(left)} steps "
            f"left in the phase by: {'; '.join(parts)} ({confidence:.0%} intervals; Kaplan-Meier, seeds that never "
            "regained it censored at the phase end)."
        )
    return sentences
