"""Make the report of a stored experiment: read its facts, rows and records, write figures, tables and the page."""

from __future__ import annotations

import json
from pathlib import Path

import pandas as pd

from runner.analysis.frames import load_results, missing_trials, open_store, undeclared_trials
from runner.analysis.page import FAILURE_COLUMNS, RUN_COLUMNS, ExperimentRecords
from runner.analysis.report import ExperimentFacts, ReportOutput, write_csv, write_report
from runner.analysis.versions import experiment_versions, trial_versions, versions_note, versions_table
from runner.safe_files import ensure_folder
from runner.store import Store
from runner.store_check import refuse_incomplete
from runner.wording import count

__all__ = ["experiment_records", "report_experiment", "variant_params"]


def experiment_records(folder: str | Path | Store) -> ExperimentRecords:
    """Runs (provenance), failures with their trial labels, missing and undeclared trials (with the version of
    the experiment file each belongs to) and the versions of a stored experiment.

    A failure's labels come from the current declaration, or from the stored trial when the experiment file no
    longer declares it; `stored_later` says whether some run stored a result for that trial afterwards.
    """
    with open_store(folder) as store:
        runs = store.query(f"SELECT {', '.join(RUN_COLUMNS)} FROM runs ORDER BY run_id")
        failures = store.query(
            "SELECT d.env_label, d.agent_label, d.seed, f.trial_id, f.run_id, f.error_type, f.message, f.at, "
            "f.trial_id IN (SELECT trial_id FROM trials) FROM failures f "
            "LEFT JOIN declared d ON d.trial_id = f.trial_id ORDER BY f.failure_id"
        )
        versions = experiment_versions(store)
        belongs = trial_versions(store, versions)
    failure_frame = pd.DataFrame.from_records(failures, columns=FAILURE_COLUMNS)
    undeclared = undeclared_trials(folder)
    undeclared["version"] = [f"v{belongs[t]}" for t in undeclared["trial_id"]]
    return ExperimentRecords(
        runs=pd.DataFrame.from_records(runs, columns=RUN_COLUMNS),
        failures=failure_frame.astype({"stored_later": bool}),
        missing=missing_trials(folder),
        undeclared=undeclared,
        versions=versions_table(versions),
    )


def variant_params(store: Store) -> dict[str, dict]:
    """Each declared agent label's parameters, read from the stored trial specs (one spec per label suffices)."""
    # SQLite takes the bare `spec` column from the row holding min(position) of each group.
    rows = store.query("SELECT agent_label, spec, min(position) FROM declared GROUP BY agent_label")
    params: dict[str, dict] = {}
    for label, spec, _ in rows:
        value = json.loads(spec).get("agent", {}).get("params", {})
        params[str(label)] = dict(value) if isinstance(value, dict) else {}
    return params


def report_experiment(folder: str | Path, out_dir: str | Path | None = None) -> tuple[ReportOutput, str]:
    """Write the report of results/<experiment> into its report/ folder (or out_dir).

    Returns the report output and a one-line note on declared trials with no stored result. Everything is
    read in one transaction, so a run writing meanwhile cannot make the tables disagree; a store with an
    incomplete trial is refused with one line (a run re-runs such trials).
    """
    folder = Path(folder)
    with open_store(folder) as store, store.snapshot():
        refuse_incomplete(store)
        facts = store.facts()
        params = variant_params(store)
        frame = load_results(store, params=False)  # the report reads parameters per variant (variant_params)
        records = experiment_records(store)
        versions_line = versions_note(experiment_versions(store), len(records.undeclared))
    missing = records.missing
    experiment_facts = ExperimentFacts(
        name=facts["name"],
        budget=facts["real_steps"],
        baseline=facts["baseline"],
        thresholds=facts["thresholds"],
        earning_thresholds=dict(facts.get("earning_thresholds") or {}),
        measure=str(facts.get("measure", "greedy_return")),
        env_order=facts["env_order"],
        agent_order=facts["agent_order"],
        consecutive=int(facts.get("consecutive", 1)),
        changes={env: list(steps) for env, steps in facts.get("changes", {}).items()},
        confidence=float(facts.get("confidence", 0.95)),
        n_resamples=int(facts.get("resamples", 2000)),
        description=str(facts.get("description") or ""),
        variant_params=params,
        costs=facts.get("costs"),
    )
    target = Path(out_dir) if out_dir else ensure_folder(folder / "report", below=folder)
    output = write_report(frame, experiment_facts, target, records)
    output.files.append(write_csv(target / "versions.csv", records.versions))
    declared = frame["trial_id"].nunique() + len(missing)
    note = f"{declared - len(missing):,} of {count(declared, 'declared trial')} have stored results"
    if len(missing):
        note += f"; {len(missing):,} missing (not run yet, interrupted or failed): run the experiment again to add them"
    if versions_line:
        note += "\n" + versions_line
    elif len(records.undeclared):
        note += f"\n{count(len(records.undeclared), 'stored trial')} no longer declared left out of this report"
    return output, note
