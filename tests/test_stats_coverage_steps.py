"""Coverage of the intervals on real steps to threshold at 10 seeds: the Kaplan-Meier median's (cloglog,
as statsmodels' SurvfuncRight.quantile_ci) and the paired percentile-bootstrap efficiency ratio's.

Step counts are drawn from distributions whose medians are known, so the true median and the true ratio of
medians are known; the test prints its coverage table (run with -s to see it). Both intervals depend only on
the order of the seeds' step counts, so their coverage is the same for every continuous distribution: drawn
from the same normal deviates pushed through different monotone maps, they give the same hits replication by
replication, which is checked on a prefix of the replications instead of recomputing the whole table per
distribution."""

import numpy as np
import pandas as pd
import pytest

from runner.analysis.efficiency import efficiency_ratios
from runner.analysis.threshold import km_quantile

_SEEDS = 10
_BASE, _PLAN = 20_000.0, 5_000.0  # true medians of the baseline's and the planning agent's steps


def _draw(kind: str, median: float, rng: np.random.Generator) -> np.ndarray:
    """Steps to threshold with the given true median (all trials reach it)."""
    if kind == "normal":
        return np.round(rng.normal(median, 0.15 * median, _SEEDS))
    sigma = {"lognormal(0, 0.5)": 0.5, "lognormal(0, 1)": 1.0}[kind]
    return np.round(median * np.exp(rng.normal(0.0, sigma, _SEEDS)))


def _hits(kind: str, replications: int) -> tuple[np.ndarray, np.ndarray]:
    """Per replication, whether the efficiency ratio's interval and the KM median's interval hold the truth."""
    rng = np.random.default_rng(20261203)
    ratio_hits = np.zeros(replications, dtype=bool)
    median_hits = np.zeros(replications, dtype=bool)
    for replication in range(replications):
        base, plan = _draw(kind, _BASE, rng), _draw(kind, _PLAN, rng)
        rows = [{"env": "e", "agent": "base", "seed": s, "steps": base[s], "reached": True} for s in range(_SEEDS)]
        rows += [{"env": "e", "agent": "plan", "seed": s, "steps": plan[s], "reached": True} for s in range(_SEEDS)]
        table = efficiency_ratios(pd.DataFrame(rows), "base", n_resamples=1000, seed=replication)
        ratio_hits[replication] = table["low"].iloc[0] <= _BASE / _PLAN <= table["high"].iloc[0]
        _, low, high = km_quantile(plan, np.ones(_SEEDS, dtype=bool), 0.5)
        median_hits[replication] = low <= _PLAN <= high
    return ratio_hits, median_hits


@pytest.mark.slow
def test_step_intervals_cover_at_ten_seeds(capsys):
    """Coverage over 2,000 replications of normal step counts; the lognormal ones give the same hits replication
    by replication (checked on the first 200: the same deviates through monotone maps), so their coverage is the
    same and is not recomputed."""
    replications, checked = 2000, 200
    ratio_hits, median_hits = _hits("normal", replications)
    for kind in ("lognormal(0, 0.5)", "lognormal(0, 1)"):
        ratio_same, median_same = _hits(kind, checked)
        assert (ratio_same == ratio_hits[:checked]).all(), kind
        assert (median_same == median_hits[:checked]).all(), kind
    ratio, median = float(ratio_hits.mean()), float(median_hits.mean())
    with capsys.disabled():
        print(f"\nsteps to threshold, 10 seeds, {replications:,} replications: coverage of 95% intervals")
        print(f"{'data':<20} {'ratio (percentile)':>19} {'KM median (cloglog)':>20}")
        print(f"{'normal':<20} {ratio:>19.3f} {median:>20.3f}")
        print(f"lognormal(0, 0.5) and lognormal(0, 1): the same hits in the first {checked} replications")
    assert 0.92 <= ratio <= 0.97, ratio
    assert 0.92 <= median <= 0.97, median
