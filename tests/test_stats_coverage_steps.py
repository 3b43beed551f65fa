"""Coverage of the intervals on real steps to threshold at 10 seeds: the Kaplan-Meier median's (cloglog,
as statsmodels' SurvfuncRight.quantile_ci) and the paired percentile-bootstrap efficiency ratio's.

Step counts are drawn from distributions whose medians are known, so the true median and the true ratio of
medians are known; the test prints its coverage table (run with -s to see it). Both intervals depend only on
the order of the seeds' step counts, so their coverage is the same for every continuous distribution: drawn
from the same normal deviates pushed through different monotone maps, the rows of the table agree exactly, and
that agreement is checked too."""

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


def _coverage(kind: str, replications: int) -> tuple[float, float]:
    rng = np.random.default_rng(20261203)
    ratio_hits = median_hits = 0
    for replication in range(replications):
        base, plan = _draw(kind, _BASE, rng), _draw(kind, _PLAN, rng)
        rows = [{"env": "e", "agent": "base", "seed": s, "steps": base[s], "reached": True} for s in range(_SEEDS)]
        rows += [{"env": "e", "agent": "plan", "seed": s, "steps": plan[s], "reached": True} for s in range(_SEEDS)]
        table = efficiency_ratios(pd.DataFrame(rows), "base", n_resamples=1000, seed=replication)
        ratio_hits += bool(table["low"].iloc[0] <= _BASE / _PLAN <= table["high"].iloc[0])
        _, low, high = km_quantile(plan, np.ones(_SEEDS, dtype=bool), 0.5)
        median_hits += bool(low <= _PLAN <= high)
    return ratio_hits / replications, median_hits / replications


@pytest.mark.slow
def test_step_intervals_cover_at_ten_seeds(capsys):
    kinds = ("normal", "lognormal(0, 0.5)", "lognormal(0, 1)")
    table = {kind: _coverage(kind, 2000) for kind in kinds}
    with capsys.disabled():
        print("\nsteps to threshold, 10 seeds, 2,000 replications: coverage of 95% intervals")
        print(f"{'data':<20} {'ratio (percentile)':>19} {'KM median (cloglog)':>20}")
        for kind, (ratio, median) in table.items():
            print(f"{kind:<20} {ratio:>19.3f} {median:>20.3f}")
    for kind, (ratio, median) in table.items():
        floor = 0.90 if kind == "lognormal(0, 1)" else 0.92
        assert floor <= ratio <= 0.97, (kind, ratio)
        assert floor <= median <= 0.97, (kind, median)
    assert len(set(table.values())) == 1, table
