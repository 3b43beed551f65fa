"""Pairwise comparison of agent variants in one environment: Welch tests, Holm adjustment, P(X > Y).

Answers "is this difference real?" for pairs of agents without assuming equal variances, while keeping
the chance of any false alarm among the pairs of an environment at the nominal level. Up to ALL_PAIRS_UP_TO
variants every pair is compared; beyond that, each variant against the baseline and against its nearest rivals
by mean score, so 1,000 variants make about 3,000 comparisons instead of half a million.
"""

from __future__ import annotations

from collections.abc import Sequence
from itertools import combinations

import numpy as np
import pandas as pd
from scipy import stats

from runner.analysis.bootstrap import keyed_rng
from runner.analysis.tables import ordered_labels

__all__ = [
    "ALL_PAIRS_UP_TO",
    "NEAREST_RIVALS",
    "PAIRWISE_COLUMNS",
    "comparison_pairs",
    "holm_adjust",
    "pairwise_welch",
    "probability_of_improvement",
    "welch_test",
]

PAIRWISE_COLUMNS = [
    "env",
    "agent_a",
    "agent_b",
    "n_a",
    "n_b",
    "mean_a",
    "mean_b",
    "difference",
    "t",
    "df",
    "p_value",
    "p_holm",
    "probability_of_improvement",
    "poi_low",
    "poi_high",
]
ALL_PAIRS_UP_TO = 12
"""Environments with at most this many variants compare every pair (66 pairs at most)."""
NEAREST_RIVALS = 2
"""Beyond that, each variant is compared with this many variants ranked just below it by mean score."""
# Resamples handled per matrix product in the probability-of-improvement bootstrap (bounds memory).
_BATCH = 256


def welch_test(x: np.ndarray, y: np.ndarray) -> tuple[float, float, float]:
    """Welch's unequal-variance t-test of mean(x) - mean(y), as (t, df, two-sided p).

    NaN for all three when a side has fewer than two values or both sides are constant (no spread to test
    against).

    Parameters
    ----------
    x : ndarray, shape (n_x,)
    y : ndarray, shape (n_y,)
    """
    a, b = np.asarray(x, dtype=float), np.asarray(y, dtype=float)
    if a.size < 2 or b.size < 2:
        return np.nan, np.nan, np.nan
    var_a, var_b = a.var(ddof=1) / a.size, b.var(ddof=1) / b.size
    if var_a + var_b == 0.0:
        return np.nan, np.nan, np.nan
    t_value = (a.mean() - b.mean()) / np.sqrt(var_a + var_b)
    df = (var_a + var_b) ** 2 / (var_a**2 / (a.size - 1) + var_b**2 / (b.size - 1))
    return float(t_value), float(df), float(2.0 * stats.t.sf(abs(t_value), df))


def holm_adjust(p_values: np.ndarray) -> np.ndarray:
    """Holm's step-down adjusted p-values: controls the chance of any false rejection among the family.

    The k-th smallest of m p-values is multiplied by (m - k + 1), made non-decreasing in that order and capped
    at 1. NaN p-values stay NaN and do not count towards m.

    Parameters
    ----------
    p_values : ndarray, shape (m,)

    Returns
    -------
    ndarray, shape (m,)
    """
    values = np.asarray(p_values, dtype=float)
    adjusted = np.full(values.shape, np.nan)
    valid = np.flatnonzero(~np.isnan(values))
    order = valid[np.argsort(values[valid], kind="stable")]
    multipliers = np.arange(order.size, 0, -1)
    adjusted[order] = np.minimum(1.0, np.maximum.accumulate(multipliers * values[order]))
    return adjusted


def _row_counts(index: np.ndarray, n_distinct: int, picks: np.ndarray) -> np.ndarray:
    """How often each distinct value appears in each resample, shape (n_resamples, n_distinct)."""
    flat = index[picks] + n_distinct * np.arange(picks.shape[0])[:, None]
    return np.bincount(flat.ravel(), minlength=picks.shape[0] * n_distinct).reshape(picks.shape[0], n_distinct)


def _improvement(x_counts: np.ndarray, y_counts: np.ndarray) -> np.ndarray:
    """Pairs with X above Y plus half the ties, from counts over the same sorted distinct values (last axis)."""
    below = np.cumsum(y_counts, axis=-1) - y_counts
    return np.sum(x_counts * (below + 0.5 * y_counts), axis=-1)


def probability_of_improvement(
    x: np.ndarray,
    y: np.ndarray,
    *,
    confidence: float = 0.95,
    n_resamples: int = 2000,
    rng: np.random.Generator,
) -> tuple[float, float, float]:
    """P(X > Y) + P(X = Y) / 2 over all pairs of trials, with a percentile bootstrap interval.

    The interval resamples the trials of each agent independently (the two agents' trials are not paired).
    Bounds are widened if needed to contain the estimate. Each resample costs O(distinct values) through
    cumulative counts over the merged sorted values, so thousands of trials stay cheap.

    Parameters
    ----------
    x : ndarray, shape (n_x,)
        Scores of the first agent's trials.
    y : ndarray, shape (n_y,)
        Scores of the second agent's trials.
    """
    if not 0.0 < confidence < 1.0:
        raise ValueError(f"confidence must lie strictly between 0 and 1, got {confidence}")
    if n_resamples < 1:
        raise ValueError(f"n_resamples must be at least 1, got {n_resamples}")
    a, b = np.asarray(x, dtype=float), np.asarray(y, dtype=float)
    if a.size == 0 or b.size == 0:
        raise ValueError("probability_of_improvement needs at least one trial on each side")
    if np.isnan(a).any() or np.isnan(b).any():
        raise ValueError("scores must not contain NaN")
    values = np.unique(np.r_[a, b])
    x_index, y_index = np.searchsorted(values, a), np.searchsorted(values, b)
    n_values = values.size
    estimate = float(_improvement(np.bincount(x_index, minlength=n_values), np.bincount(y_index, minlength=n_values)))
    estimate /= a.size * b.size
    resampled = np.empty(n_resamples)
    for start in range(0, n_resamples, _BATCH):
        rows = min(_BATCH, n_resamples - start)
        resampled_x = _row_counts(x_index, n_values, rng.integers(0, a.size, size=(rows, a.size)))
        resampled_y = _row_counts(y_index, n_values, rng.integers(0, b.size, size=(rows, b.size)))
        resampled[start : start + rows] = _improvement(resampled_x, resampled_y) / (a.size * b.size)
    low, high = np.quantile(resampled, [(1.0 - confidence) / 2.0, (1.0 + confidence) / 2.0])
    return estimate, float(min(low, estimate)), float(max(high, estimate))


def comparison_pairs(means: dict[str, float], baseline: str | None = None) -> list[tuple[str, str]]:
    """Which (agent_a, agent_b) pairs to compare, agent_a earlier in `means`' order.

    Every pair when there are at most ALL_PAIRS_UP_TO agents. Otherwise each agent with the baseline (when it is
    one of them) and with the NEAREST_RIVALS agents ranked just below it by mean (ties broken by order): the
    comparisons a reader asks of a long sweep, in a number that grows linearly with the agents.
    """
    agents = list(means)
    if len(agents) <= ALL_PAIRS_UP_TO:
        return list(combinations(agents, 2))
    position = {agent: i for i, agent in enumerate(agents)}

    def ordered(a: str, b: str) -> tuple[str, str]:
        return (a, b) if position[a] < position[b] else (b, a)

    ranked = sorted(agents, key=lambda agent: (-means[agent], position[agent]))
    chosen: set[tuple[str, str]] = set()
    for i, agent in enumerate(ranked):
        chosen.update(ordered(agent, rival) for rival in ranked[i + 1 : i + 1 + NEAREST_RIVALS])
        if baseline in position and agent != baseline:
            chosen.add(ordered(agent, baseline))
    return sorted(chosen, key=lambda pair: (position[pair[0]], position[pair[1]]))


def pairwise_welch(
    scores: pd.DataFrame,
    env: str,
    agent_order: Sequence[str],
    metric: str = "auc",
    *,
    confidence: float = 0.95,
    n_resamples: int = 2000,
    seed: int = 0,
    baseline: str | None = None,
) -> pd.DataFrame:
    """Pairs of agent variants in one environment: mean difference, Welch test, Holm p, P(A > B).

    Pairs (agent_a, agent_b) follow `agent_order` (unlisted agents after, sorted), agent_a first; which pairs
    is `comparison_pairs` (every pair for a few agents). The Holm adjustment runs over the compared pairs of
    this environment only; `probability_of_improvement` is the chance
    that a random trial of agent_a scores above one of agent_b (ties count half), with a bootstrap interval
    keyed on the seed and the two labels.

    Parameters
    ----------
    scores : DataFrame
        One row per trial with env, agent and the `metric` column (see `trial_scores`).
    """
    in_env = scores[scores["env"] == env]
    agents = ordered_labels(in_env["agent"], agent_order)
    groups = {agent: side[metric].to_numpy(dtype=float) for agent, side in in_env.groupby("agent", sort=False)}
    values = {agent: groups[agent] for agent in agents}
    means = {agent: float(values[agent].mean()) for agent in agents}
    rows = []
    for first, second in comparison_pairs(means, baseline):
        x, y = values[first], values[second]
        t_value, df, p_value = welch_test(x, y)
        poi, poi_low, poi_high = probability_of_improvement(
            x,
            y,
            confidence=confidence,
            n_resamples=n_resamples,
            rng=keyed_rng(seed, "improvement", str(env), metric, first, second),
        )
        rows.append(
            {
                "env": env,
                "agent_a": first,
                "agent_b": second,
                "n_a": x.size,
                "n_b": y.size,
                "mean_a": float(x.mean()),
                "mean_b": float(y.mean()),
                "difference": float(x.mean() - y.mean()),
                "t": t_value,
                "df": df,
                "p_value": p_value,
                "probability_of_improvement": poi,
                "poi_low": poi_low,
                "poi_high": poi_high,
            }
        )
    table = pd.DataFrame.from_records(rows, columns=PAIRWISE_COLUMNS)
    table["p_holm"] = holm_adjust(table["p_value"].to_numpy(dtype=float))
    return table
