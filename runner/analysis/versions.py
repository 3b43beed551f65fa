"""Versions of an experiment file: every distinct text the runs used (by hash), what changed between them, and
which version each stored trial belongs to, so earlier trials of an edited experiment stay reachable.

Every run records the experiment file's text and hash (the `runs` table); the current declaration records them in
the store's facts. A version is numbered by its first appearance (v1 oldest). A trial stored by a run of an
earlier version and no longer declared belongs to that version; declared trials belong to the current version.
"""

from __future__ import annotations

import json
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import pandas as pd
import yaml

from runner.store import Store
from runner.wording import count
from runner.yaml_source import format_path

__all__ = [
    "VERSION_COLUMNS",
    "ExperimentVersion",
    "describe_changes",
    "experiment_versions",
    "trial_versions",
    "versions_note",
    "versions_table",
]

VERSION_COLUMNS = ["version", "hash", "first_run", "runs", "trials_stored", "current", "changes"]
_SHOWN_VALUE = 40
"""Longest old or new value written out in a change; longer ones (maps, descriptions) are only said to change."""


@dataclass(frozen=True)
class ExperimentVersion:
    """One distinct experiment file text: its number, hash, first run date, and what changed from the one before."""

    number: int
    hash: str
    first_run: str
    runs: int
    trials_stored: int
    current: bool
    changes: tuple[str, ...]
    text: str

    @property
    def name(self) -> str:
        """'v2'."""
        return f"v{self.number}"


def _shown(value: Any) -> str | None:
    """A value short enough to write in a change line, else None."""
    text = json.dumps(value, sort_keys=True) if isinstance(value, dict | list) else str(value)
    return None if "\n" in text or len(text) > _SHOWN_VALUE else text


def _diff(old: Any, new: Any, path: tuple, out: list[str]) -> None:
    """Append one line per changed key path of two parsed YAML documents."""
    where = format_path(path)
    if isinstance(old, dict) and isinstance(new, dict):
        for key in [*old, *(k for k in new if k not in old)]:
            if key not in new:
                out.append(f"{format_path((*path, key))} removed")
            elif key not in old:
                out.append(f"{format_path((*path, key))} added")
            else:
                _diff(old[key], new[key], (*path, key), out)
        return
    if isinstance(old, list) and isinstance(new, list):
        for i in range(max(len(old), len(new))):
            if i >= len(new):
                out.append(f"{format_path((*path, i))} removed")
            elif i >= len(old):
                out.append(f"{format_path((*path, i))} added")
            else:
                _diff(old[i], new[i], (*path, i), out)
        return
    if old == new and type(old) is type(new):
        return
    before, after = _shown(old), _shown(new)
    out.append(f"{where}: {before} -> {after}" if before is not None and after is not None else f"{where} changed")


def describe_changes(old_text: str, new_text: str) -> list[str]:
    """The key paths that differ between two experiment file texts ('environments[0].grid.map changed',
    'seeds: 10 -> 20'); comments and layout alone give 'only comments or layout changed'."""
    try:
        old, new = yaml.safe_load(old_text), yaml.safe_load(new_text)
    except yaml.YAMLError:
        return ["the text changed (an earlier text no longer parses)"]
    changes: list[str] = []
    _diff(old, new, (), changes)
    return changes or ["only comments or layout changed"]


def experiment_versions(store: Store) -> list[ExperimentVersion]:
    """Every version of the experiment file the store knows, oldest first; the current one is marked.

    Stores written before versions were recorded in the facts take the latest run's text as the current one.
    """
    runs = store.query("SELECT run_id, started, experiment_hash, experiment_text FROM runs ORDER BY run_id")
    stored = dict(
        store.query("SELECT r.experiment_hash, count(*) FROM trials t JOIN runs r ON r.run_id = t.run_id GROUP BY 1")
    )
    facts = store.facts()
    current = facts.get("experiment_hash") or (runs[-1][2] if runs else "")
    order: dict[str, dict[str, Any]] = {}
    for _, started, digest, text in runs:
        seen = order.setdefault(digest, {"first_run": started, "runs": 0, "text": text})
        seen["runs"] += 1
    if current and current not in order:
        order[current] = {"first_run": "", "runs": 0, "text": str(facts.get("experiment_text", ""))}
    versions = []
    previous_text: str | None = None
    for number, (digest, seen) in enumerate(order.items(), start=1):
        changes = () if previous_text is None else tuple(describe_changes(previous_text, seen["text"]))
        versions.append(
            ExperimentVersion(
                number=number,
                hash=digest,
                first_run=seen["first_run"],
                runs=seen["runs"],
                trials_stored=int(stored.get(digest, 0)),
                current=digest == current,
                changes=changes,
                text=seen["text"],
            )
        )
        previous_text = seen["text"]
    return versions


def trial_versions(store: Store, versions: Sequence[ExperimentVersion]) -> dict[str, int]:
    """Version number of every stored trial: the current one when it is declared, else that of the run that
    stored it."""
    number = {v.hash: v.number for v in versions}
    current = next((v.number for v in versions if v.current), len(versions))
    rows = store.query(
        "SELECT t.trial_id, r.experiment_hash, t.trial_id IN (SELECT trial_id FROM declared) "
        "FROM trials t JOIN runs r ON r.run_id = t.run_id"
    )
    return {trial: current if declared else number.get(digest, current) for trial, digest, declared in rows}


def versions_table(versions: Sequence[ExperimentVersion]) -> pd.DataFrame:
    """One row per version (columns VERSION_COLUMNS); `changes` joins the changed key paths with '; '."""
    rows = [
        {
            "version": v.name,
            "hash": v.hash[:12],
            "first_run": v.first_run or "not run since it was declared",
            "runs": v.runs,
            "trials_stored": v.trials_stored,
            "current": "yes" if v.current else "",
            "changes": "; ".join(v.changes) if v.changes else "first version",
        }
        for v in versions
    ]
    return pd.DataFrame.from_records(rows, columns=VERSION_COLUMNS)


def versions_note(versions: Sequence[ExperimentVersion], earlier_trials: int) -> str:
    """One line on the versions and the stored trials of earlier ones, or '' for a single version."""
    if len(versions) < 2:
        return ""
    current = next((v for v in versions if v.current), versions[-1])
    changed = "; ".join(current.changes) if current.changes else "see versions.csv"
    line = f"the experiment file has {count(len(versions), 'version')}; the current one is {current.name} ({changed})"
    if earlier_trials:
        line += (
            f"; {count(earlier_trials, 'stored trial')} of earlier versions "
            f"{'is' if earlier_trials == 1 else 'are'} left out of this report: "
            "runner.load_results(FOLDER, versions='all') includes them"
        )
    return line
