"""Coverage of the report's 95% intervals at 10 seeds, by simulation: summary means and curve bands.

Run with `pytest -s` (or see the captured output) for the coverage table; it is printed either way.
"""

import numpy as np
import pandas as pd
import pytest

from runner.analysis.bootstrap import INTERVAL_METHOD, INTERVAL_METHODS, mean_and_interval
from runner.analysis.curves import curve_bands

# name -> (draw(rng, shape), true mean, lowest coverage asserted). Lognormal(0, 1) has skewness about 6; the
# issue asks for at least 0.90 there, 0.92-0.97 elsewhere.
_DISTRIBUTIONS = {
    "normal": (lambda rng, shape: rng.normal(0.0, 1.0, shape), 0.0, 0.92),
    "lognormal(0, 0.5)": (lambda rng, shape: rng.lognormal(0.0, 0.5, shape), float(np.exp(0.125)), 0.92),
    "t(3)": (lambda rng, shape: rng.standard_t(3, shape), 0.0, 0.92),
    "lognormal(0, 1)": (lambda rng, shape: rng.lognormal(0.0, 1.0, shape), float(np.exp(0.5)), 0.90),
}
_SEEDS = 10


def _summary_coverage(draw, true_mean: float, method: str, replications: int) -> float:
    """Share of replications whose interval of the mean over 10 seeds holds the true mean.

    Each replication is one column, so one call bootstraps them all; columns share resampled seed indices,
    which leaves each column's coverage exact and only correlates the replications' errors a little.
    """
    data = draw(np.random.default_rng(2024), (_SEEDS, replications))
    _, low, high = mean_and_interval(data, n_resamples=2000, rng=np.random.default_rng(7), method=method)
    return float(np.mean((low <= true_mean) & (true_mean <= high)))


def _band_coverage(draw, true_mean: float, replications: int) -> float:
    """Share of curve points whose band holds the true mean: one agent, 10 trials, one replication per point."""
    values = draw(np.random.default_rng(99), (_SEEDS, replications))
    frame = pd.DataFrame(
        {
            "env": "aisle",
            "agent": "dyna",
            "trial_id": np.repeat([f"t{seed}" for seed in range(_SEEDS)], replications),
            "point": np.tile(np.arange(replications), _SEEDS),
            "real_steps": np.tile(np.arange(replications) * 100, _SEEDS),
            "eval_return": values.ravel(),
        }
    )
    bands = curve_bands(frame, seed=3)
    assert (bands["n_seeds"] == _SEEDS).all()
    return float(np.mean((bands["low"] <= true_mean) & (true_mean <= bands["high"])))


def _coverage_table(replications: int) -> dict[str, dict[str, float]]:
    """Coverage per distribution for every method's summary interval and for the curve bands."""
    table = {}
    for name, (draw, true_mean, _) in _DISTRIBUTIONS.items():
        row = {method: _summary_coverage(draw, true_mean, method, replications) for method in INTERVAL_METHODS}
        row["bands"] = _band_coverage(draw, true_mean, replications)
        table[name] = row
    return table


def _print_table(table: dict[str, dict[str, float]], replications: int, capsys) -> None:
    """Print the coverage table past pytest's capture."""
    columns = [*INTERVAL_METHODS, "bands"]
    with capsys.disabled():
        print(f"\ncoverage of 95% intervals of the mean, {_SEEDS} seeds, {replications:,} replications")
        print(f"{'distribution':<20}" + "".join(f"{column:>13}" for column in columns))
        for name, row in table.items():
            print(f"{name:<20}" + "".join(f"{row[column]:>13.3f}" for column in columns))
        print(f"bands use the report's method, {INTERVAL_METHOD}")


def test_report_method_covers_at_ten_seeds(capsys):
    replications = 2000
    table = _coverage_table(replications)
    _print_table(table, replications, capsys)
    for name, (_, _, lowest) in _DISTRIBUTIONS.items():
        # the targets: within [0.92, 0.97] (at least 0.90 for lognormal(0, 1)) at 10 seeds
        for column in (INTERVAL_METHOD, "bands"):
            assert lowest <= table[name][column] <= 0.97, (name, column, table[name])
    # the percentile method is the one that undercovers at 10 seeds; the report does not use it for means
    assert table["normal"]["percentile"] < 0.92


@pytest.mark.slow
def test_report_method_covers_with_more_replications(capsys):
    replications = 20000
    table = _coverage_table(replications)
    _print_table(table, replications, capsys)
    for name, (_, _, lowest) in _DISTRIBUTIONS.items():
        for column in (INTERVAL_METHOD, "bands"):
            assert lowest <= table[name][column] <= 0.97, (name, column, table[name])
