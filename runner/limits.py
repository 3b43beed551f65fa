"""The ranges every number of an experiment must fit, and what an experiment will cost before it runs.

Limits keep each value inside what the store (SQLite's signed 64-bit integers), the trial loops and memory can
hold, so a mistyped number is one line at `check` time instead of a crash in every trial. The cost figures let
`check` and `run` say how many metric rows, how much disk and how much report memory an experiment needs.
"""

from __future__ import annotations

from dataclasses import dataclass

__all__ = [
    "CONFIRM_METRIC_ROWS",
    "CONFIRM_TRIALS",
    "MAX_ENVIRONMENTS",
    "MAX_EPISODES",
    "MAX_METRIC_ROWS",
    "MAX_POINTS_PER_TRIAL",
    "MAX_REAL_STEPS",
    "MAX_REWARD",
    "MAX_SEED",
    "MAX_STEP_CAP",
    "MAX_TRIALS",
    "MAX_VARIANTS",
    "ExperimentSize",
]

MAX_SEED = 2**63 - 1
"""Seeds are stored as SQLite integers (signed 64 bits)."""
MAX_REAL_STEPS = 10**12
"""Real steps per trial: about a day and a half at the compiled path's 8 M steps/s."""
MAX_POINTS_PER_TRIAL = 100_000
"""Evaluation points (metric rows) per trial: a trial holds all its rows in memory until it is stored."""
MAX_EPISODES = 100_000
"""Greedy evaluation episodes per evaluation point."""
MAX_STEP_CAP = 10**9
"""Longest episode (step_limit) and evaluation episode cap (step_cap)."""
MAX_REWARD = 1e9
"""Largest magnitude of a grid reward or a threshold: sums of many such rewards stay exact in float64."""
MAX_ENVIRONMENTS = 1_000
MAX_VARIANTS = 10_000
"""Agent variants in all: `check` expands 10,000 in about a second, and no report of more is readable."""
MAX_TRIALS = 1_000_000
"""Hard cap on trials: each is one row of the store's `declared` table and one planned spec in memory."""
MAX_METRIC_ROWS = 50_000_000
"""Hard cap on expected metric rows (trials x evaluation points); the report holds them all in memory."""
CONFIRM_TRIALS = 100_000
"""`run` asks before starting an experiment of more trials than this (`--yes` answers for you)."""
CONFIRM_METRIC_ROWS = 10_000_000
"""... or of more expected metric rows than this (about 5 GB of report memory)."""

# Measured on this project's store and report (README, Performance: 10,000 trials x 200 points, 2 M rows,
# 957 MiB report peak); the store figure from a demo store's file size over its metric rows.
_REPORT_BYTES_PER_ROW = 500
_STORE_BYTES_PER_ROW = 160


@dataclass(frozen=True)
class ExperimentSize:
    """How big an experiment is: trials, metric rows, and the disk and report memory they need."""

    trials: int
    points_per_trial: int

    @property
    def metric_rows(self) -> int:
        """Expected rows of the `metrics` table once every trial is stored."""
        return self.trials * self.points_per_trial

    @property
    def store_bytes(self) -> int:
        """Rough size of the store once every trial is stored."""
        return self.metric_rows * _STORE_BYTES_PER_ROW

    @property
    def report_bytes(self) -> int:
        """Rough peak memory of `stepmeter report` over all rows."""
        return self.metric_rows * _REPORT_BYTES_PER_ROW

    def needs_confirmation(self) -> bool:
        """True when the experiment is large enough that `run` should ask before starting."""
        return self.trials > CONFIRM_TRIALS or self.metric_rows > CONFIRM_METRIC_ROWS

    def describe(self) -> str:
        """'2,000 trials, 42,000 metric rows (about 6.7 MB on disk, 21 MB of memory for the report)'."""
        return (
            f"{self.trials:,} trials, {self.metric_rows:,} metric rows (about {_bytes(self.store_bytes)} on disk, "
            f"{_bytes(self.report_bytes)} of memory for the report)"
        )


def _bytes(n: int) -> str:
    for unit, size in (("GB", 10**9), ("MB", 10**6), ("kB", 10**3)):
        if n >= size:
            return f"{n / size:.3g} {unit}"
    return f"{n} bytes"
