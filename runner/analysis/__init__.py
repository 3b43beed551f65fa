"""Analysis of stored results: bootstrap intervals, learning-curve bands, summary tables, figures, reports."""

from runner.analysis.bootstrap import keyed_rng, mean_and_interval, percentile_interval
from runner.analysis.curves import curve_bands, normalized_auc, trial_scores
from runner.analysis.plots import plot_curves
from runner.analysis.report import ExperimentFacts, ReportOutput, write_report
from runner.analysis.tables import ordered_labels, summary_table, to_markdown, to_terminal

__all__ = [
    "ExperimentFacts",
    "ReportOutput",
    "curve_bands",
    "keyed_rng",
    "mean_and_interval",
    "normalized_auc",
    "ordered_labels",
    "percentile_interval",
    "plot_curves",
    "summary_table",
    "to_markdown",
    "to_terminal",
    "trial_scores",
    "write_report",
]
