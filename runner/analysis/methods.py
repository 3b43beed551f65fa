"""The published statistics the report uses, where it uses them, and their sources: the report's Methods section.

Only methods the analysis code really runs are listed; a new statistic adds its line here (see DEVELOPERS.md).
"""

from __future__ import annotations

from dataclasses import dataclass

from runner.analysis.bootstrap import INTERVAL_METHOD, interval_caption

__all__ = ["METHODS", "Method", "method_lines"]


@dataclass(frozen=True)
class Method:
    """One statistical method: its name, what the report computes with it, and its published source."""

    name: str
    used_for: str
    source: str


METHODS: tuple[Method, ...] = (
    Method(
        "Studentized bootstrap (bootstrap-t) interval of a mean",
        "means over seeds: AUC and final return, learning-curve bands, reward earned while learning, the measure "
        "in windows around a change",
        "Efron & Tibshirani (1993), An Introduction to the Bootstrap, Chapman & Hall, chapter 12",
    ),
    Method(
        "Percentile bootstrap interval",
        "statistics that are not means: ratios of median real steps (seeds resampled in pairs), CPU time per real "
        "step (median), total costs and break-even prices, probability of improvement",
        "Efron & Tibshirani (1993), An Introduction to the Bootstrap, Chapman & Hall, chapter 13",
    ),
    Method(
        "Kaplan-Meier estimator",
        "real steps to threshold and to recover after a change, with trials that never get there kept as censored",
        "Kaplan & Meier (1958), Nonparametric estimation from incomplete observations, Journal of the American "
        "Statistical Association 53, 457-481",
    ),
    Method(
        "Greenwood's variance with a complementary log-log interval",
        "pointwise intervals of the Kaplan-Meier curves and of their quartiles",
        "Greenwood (1926), The natural duration of cancer, Reports on Public Health and Medical Subjects 33; "
        "Kalbfleisch & Prentice (1980), The Statistical Analysis of Failure Time Data, Wiley",
    ),
    Method(
        "Welch's unequal-variance t-test",
        "whether the difference in mean AUC (or reward per real step) between two variants is real",
        "Welch (1947), The generalization of 'Student's' problem when several different population variances are "
        "involved, Biometrika 34, 28-35",
    ),
    Method(
        "Holm's step-down adjustment",
        "the p-values of all compared pairs of one environment, so the chance of any false alarm stays at the level",
        "Holm (1979), A simple sequentially rejective multiple test procedure, Scandinavian Journal of Statistics "
        "6, 65-70",
    ),
    Method(
        "Probability of improvement",
        "chance that a random trial of one variant scores above one of another (ties count half)",
        "Agarwal, Schwarzer, Castro, Courville & Bellemare (2021), Deep reinforcement learning at the edge of the "
        "statistical precipice, NeurIPS 34",
    ),
    Method(
        "Seeds needed by power analysis",
        "seeds per agent to detect a chosen difference in mean AUC (exact power of the two-sample t-test)",
        "Colas, Sigaud & Oudeyer (2018), How many random seeds? Statistical power analysis in deep reinforcement "
        "learning experiments, arXiv:1806.08295",
    ),
    Method(
        "Modified z-score",
        "seeds far from their agent's other seeds (0.6745 x distance from the median / MAD beyond 3.5)",
        "Iglewicz & Hoaglin (1993), How to Detect and Handle Outliers, ASQC Quality Press",
    ),
)


def method_lines(confidence: float) -> list[str]:
    """One sentence per method for the report: name, use and source, led by the interval convention."""
    lead = (
        f"Every interval of a mean is a {interval_caption(confidence, INTERVAL_METHOD)}; other intervals name "
        "their method where they are shown."
    )
    return [lead, *(f"{method.name}: {method.used_for}. Source: {method.source}." for method in METHODS)]
