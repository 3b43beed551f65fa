"""How many seeds per agent an experiment needs to detect a given difference in mean score, from a pilot experiment.

Uses the exact power of the two-sided two-sample t-test (noncentral t), so small seed counts are not
overestimated the way a normal approximation would.
"""

from __future__ import annotations

from collections.abc import Iterable, Sequence
from itertools import combinations, pairwise

import numpy as np
import pandas as pd
from scipy import stats

from runner.analysis.tables import ordered_labels

__all__ = [
    "ADVICE_COLUMNS",
    "ADVICE_SHARES",
    "ADVICE_TABLE_COLUMNS",
    "achieved_power",
    "advice_pairs",
    "advice_table",
    "seeds_advice",
    "seeds_needed",
]

ADVICE_SHARES = (0.05, 0.1, 0.2)
"""Differences to detect by default, as shares of an environment's return range, so they read in return units
whatever the reward scale."""

ADVICE_COLUMNS = [
    "env",
    "agent_a",
    "agent_b",
    "n_a",
    "n_b",
    "sd_a",
    "sd_b",
    "observed_difference",
    "difference",
    "seeds_needed",
    "power_now",
]


def _effect_size(sd_a: float, sd_b: float, difference: float) -> float:
    """Standardised difference |difference| / pooled sd, the pooled sd of equal groups being sqrt of mean variance."""
    if sd_a < 0 or sd_b < 0 or not np.isfinite([sd_a, sd_b, difference]).all():
        raise ValueError("standard deviations must be finite and non-negative, the difference finite")
    if difference == 0:
        raise ValueError("a difference of zero cannot be detected; give the smallest difference that matters")
    pooled = np.sqrt((sd_a**2 + sd_b**2) / 2.0)
    return np.inf if pooled == 0 else abs(difference) / pooled


def _power(n_seeds: np.ndarray, effect: float, alpha: float) -> np.ndarray:
    """Power of the two-sided equal-size two-sample t-test with `n_seeds` per group (both rejection tails).

    Parameters
    ----------
    n_seeds : ndarray, shape (k,)
        Seeds per agent, each at least 2.

    Returns
    -------
    ndarray, shape (k,)
    """
    n = np.asarray(n_seeds, dtype=float)
    df = 2.0 * n - 2.0
    noncentrality = effect * np.sqrt(n / 2.0)
    critical = stats.t.isf(alpha / 2.0, df)
    # scipy's nct.cdf can return NaN far out in the lower tail (seen with scipy 1.17 at noncentrality >= 10);
    # that wrong-direction term is then below nct.cdf(+critical), itself negligible, so it counts as zero.
    wrong_side = np.nan_to_num(stats.nct.cdf(-critical, df, noncentrality), nan=0.0)
    return stats.nct.sf(critical, df, noncentrality) + wrong_side


def _check_levels(alpha: float, power: float | None = None) -> None:
    """Reject significance levels and power targets outside (0, 1)."""
    if not 0.0 < alpha < 1.0:
        raise ValueError(f"alpha must lie strictly between 0 and 1, got {alpha}")
    if power is not None and not alpha < power < 1.0:
        raise ValueError(f"power must lie strictly between alpha and 1, got {power}")


def achieved_power(sd_a: float, sd_b: float, difference: float, n_seeds: int, alpha: float = 0.05) -> float:
    """Probability that a two-sided two-sample t-test with `n_seeds` per agent detects `difference` in means."""
    _check_levels(alpha)
    if n_seeds < 2:
        raise ValueError(f"a two-sample t-test needs at least 2 seeds per agent, got {n_seeds}")
    effect = _effect_size(sd_a, sd_b, difference)
    if np.isinf(effect):
        return 1.0
    return float(_power(np.array([n_seeds]), effect, alpha)[0])


def seeds_needed(
    sd_a: float,
    sd_b: float,
    difference: float,
    alpha: float = 0.05,
    power: float = 0.8,
    max_seeds: int = 10000,
) -> int:
    """Smallest number of seeds per agent giving the two-sided two-sample t-test at least `power`.

    Equal group sizes, pooled sd sqrt((sd_a^2 + sd_b^2) / 2), power from the noncentral t distribution with
    2n - 2 degrees of freedom and noncentrality (difference / sd) sqrt(n / 2). Power grows with n, so a
    doubling search followed by bisection needs only a few evaluations. Both sds zero gives 2 (the minimum).
    Raises ValueError when more than `max_seeds` would be needed.
    """
    _check_levels(alpha, power)
    effect = _effect_size(sd_a, sd_b, difference)
    if np.isinf(effect) or _power(np.array([2]), effect, alpha)[0] >= power:
        return 2
    low, high = 2, 4
    while _power(np.array([high]), effect, alpha)[0] < power:
        if high >= max_seeds:
            raise ValueError(f"more than {max_seeds} seeds per agent would be needed to detect {difference}")
        low, high = high, min(2 * high, max_seeds)
    while high - low > 1:
        middle = (low + high) // 2
        if _power(np.array([middle]), effect, alpha)[0] >= power:
            high = middle
        else:
            low = middle
    return high


def _pairs(agents: list[str], baseline: str | None) -> list[tuple[str, str]]:
    """All pairs in order, or each agent against the baseline."""
    if baseline is None:
        return list(combinations(agents, 2))
    if baseline not in agents:
        raise ValueError(f"baseline {baseline!r} has no trials in this environment")
    return [(agent, baseline) for agent in agents if agent != baseline]


def advice_pairs(means: pd.Series, baseline: str | None) -> list[tuple[str, str, str]]:
    """Who to advise on: every agent against the baseline, then each agent against the one ranked just above it
    by mean score (close contenders, the comparisons most in need of seeds), each pair once.

    `means` maps agent label to mean score, in the report's agent order. Returns (agent, against, why) triples.
    """
    agents = list(means.index)
    pairs = [(agent, baseline, "against the baseline") for agent in agents if baseline in agents and agent != baseline]
    seen = {frozenset(pair[:2]) for pair in pairs}
    ranked = means.sort_values(ascending=False, kind="stable").index.tolist()
    for better, worse in pairwise(ranked):
        if frozenset((better, worse)) not in seen:
            seen.add(frozenset((better, worse)))
            pairs.append((worse, better, "against the next better"))
    return pairs


def seeds_advice(
    scores: pd.DataFrame,
    env: str,
    differences: Iterable[float],
    *,
    baseline: str | None = None,
    agent_order: Sequence[str] = (),
    metric: str = "auc",
    alpha: float = 0.05,
    power: float = 0.8,
    max_seeds: int = 10000,
    pairs: Sequence[tuple[str, str]] | None = None,
) -> pd.DataFrame:
    """Seeds per agent needed to detect each requested difference in mean `metric`, from a pilot experiment.

    One row per (pair of agents, difference): the given `pairs`, else every pair in `agent_order` order, or each
    agent against `baseline`. Columns: env, agent_a, agent_b, n_a, n_b, the pilot sds (ddof=1), the observed mean
    difference, the requested difference, seeds_needed (NA when a side has fewer than 2 pilot trials or more than
    `max_seeds` would be needed) and power_now (power at the smaller pilot size, NA below 2 trials).
    Pilot sds are themselves uncertain with few seeds; treat the answer as a guide, not a guarantee.
    """
    _check_levels(alpha, power)
    wanted = [float(value) for value in differences]
    in_env = scores[scores["env"] == env]
    agents = ordered_labels(in_env["agent"], agent_order)
    values = {agent: in_env.loc[in_env["agent"] == agent, metric].to_numpy(dtype=float) for agent in agents}
    rows = []
    for first, second in pairs if pairs is not None else _pairs(agents, baseline):
        x, y = values[first], values[second]
        sd_a = float(x.std(ddof=1)) if x.size > 1 else np.nan
        sd_b = float(y.std(ddof=1)) if y.size > 1 else np.nan
        usable = bool(np.isfinite([sd_a, sd_b]).all())
        for difference in wanted:
            needed: int | None = None
            if usable:
                try:
                    needed = seeds_needed(sd_a, sd_b, difference, alpha, power, max_seeds)
                except ValueError:
                    needed = None
            now = achieved_power(sd_a, sd_b, difference, min(x.size, y.size), alpha) if usable else np.nan
            rows.append(
                {
                    "env": env,
                    "agent_a": first,
                    "agent_b": second,
                    "n_a": x.size,
                    "n_b": y.size,
                    "sd_a": sd_a,
                    "sd_b": sd_b,
                    "observed_difference": float(x.mean() - y.mean()),
                    "difference": difference,
                    "seeds_needed": pd.NA if needed is None else needed,
                    "power_now": now,
                }
            )
    return pd.DataFrame.from_records(rows, columns=ADVICE_COLUMNS).astype({"seeds_needed": "Int64"})


ADVICE_TABLE_COLUMNS = [*ADVICE_COLUMNS, "share_of_range", "return_range", "pair"]


def advice_table(
    scores: pd.DataFrame,
    env: str,
    return_range: float,
    *,
    baseline: str | None,
    agent_order: Sequence[str] = (),
    differences: Iterable[float] | None = None,
    alpha: float = 0.05,
    power: float = 0.8,
) -> pd.DataFrame:
    """The seeds advice of `stepmeter seeds` and of the report, in one form: AUC differences in return units,
    each also given as a share of the environment's return range (highest minus lowest stored evaluation
    return), for every agent against the baseline and against its closest better-ranked contender.

    `differences` default to ADVICE_SHARES of the range. Columns ADVICE_TABLE_COLUMNS (`pair` says why a pair
    is there). Empty when the range is not positive or fewer than two agents have trials.
    """
    in_env = scores[scores["env"] == env]
    agents = ordered_labels(in_env["agent"], agent_order)
    if not np.isfinite(return_range) or return_range <= 0 or len(agents) < 2:
        return pd.DataFrame(columns=ADVICE_TABLE_COLUMNS)
    reference = baseline if baseline in agents else agents[0]
    means = in_env.groupby("agent", sort=False)["auc"].mean().reindex(agents)
    chosen = advice_pairs(means, reference)
    wanted = [float(d) for d in differences] if differences is not None else [s * return_range for s in ADVICE_SHARES]
    table = seeds_advice(
        in_env, env, wanted, agent_order=agents, alpha=alpha, power=power, pairs=[p[:2] for p in chosen]
    )
    why = {p[:2]: p[2] for p in chosen}
    return table.assign(
        share_of_range=table["difference"] / return_range,
        return_range=return_range,
        pair=[why[(a, b)] for a, b in zip(table["agent_a"], table["agent_b"], strict=True)],
    )
