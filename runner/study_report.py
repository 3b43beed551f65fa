"""Make the report of a stored study: read its facts and rows, write figures and tables."""

from __future__ import annotations

from pathlib import Path

from runner.analysis.frames import load_results, missing_trials, open_store, undeclared_trials
from runner.analysis.report import ReportOutput, StudyFacts, write_report

__all__ = ["report_study"]


def report_study(folder: str | Path, out_dir: str | Path | None = None) -> tuple[ReportOutput, str]:
    """Write the report of results/<study> into its report/ folder (or out_dir).

    Returns the report output and a one-line note on declared trials with no stored result.
    """
    folder = Path(folder)
    with open_store(folder) as store:
        facts = store.facts()
    frame = load_results(folder)
    missing = missing_trials(folder)
    study_facts = StudyFacts(
        name=facts["name"],
        budget=facts["real_steps"],
        baseline=facts["baseline"],
        thresholds=facts["thresholds"],
        env_order=facts["env_order"],
        agent_order=facts["agent_order"],
    )
    output = write_report(frame, study_facts, Path(out_dir) if out_dir else folder / "report")
    declared = frame["trial_id"].nunique() + len(missing)
    note = f"{declared - len(missing)} of {declared} declared trials have stored results"
    if len(missing):
        note += f"; {len(missing)} missing (not run yet, interrupted or failed): run the study again to add them"
    extra = undeclared_trials(folder)
    if len(extra):
        kinds = sorted({f"{e} / {a}" for e, a in zip(extra["env"], extra["agent"], strict=True)})
        note += f"\n{len(extra)} stored trials are no longer declared by the study file and are left out: " + "; ".join(
            kinds
        )
    return output, note
