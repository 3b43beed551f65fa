"""The study store: one SQLite database per study under results/<study>/.

Tables: `meta` (the current study's facts as JSON), `runs` (provenance of each invocation), `trials`
(finished trials with their canonical spec), `metrics` (one row per trial and evaluation point),
`declared` (the trials the study file currently declares) and `failures`. A finished trial is written in
one transaction, so a trial is either fully stored or absent. Only the parent process writes.
"""

from __future__ import annotations

import json
import shutil
import sqlite3
from collections.abc import Iterable
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

import numpy as np

from runner.errors import StoreError
from runner.plan import PlannedTrial
from runner.trial import METRIC_COLUMNS

__all__ = ["DB_NAME", "SCHEMA_VERSION", "Store", "remove_store", "study_dir"]

DB_NAME = "study.sqlite"
SCHEMA_VERSION = 3
INT_COLUMNS = {"real_steps", "episodes", "real_updates", "planning_updates", "model_updates", "env_phase"}

_SCHEMA = f"""
CREATE TABLE IF NOT EXISTS meta (key TEXT PRIMARY KEY, value TEXT NOT NULL);
CREATE TABLE IF NOT EXISTS runs (
    run_id INTEGER PRIMARY KEY, started TEXT NOT NULL, finished TEXT, outcome TEXT,
    command TEXT NOT NULL, study_file TEXT NOT NULL, study_text TEXT NOT NULL, study_hash TEXT NOT NULL,
    versions TEXT NOT NULL, platform TEXT NOT NULL, jobs INTEGER NOT NULL
);
CREATE TABLE IF NOT EXISTS trials (
    trial_id TEXT PRIMARY KEY, spec TEXT NOT NULL, env_label TEXT NOT NULL, agent_label TEXT NOT NULL,
    kind TEXT NOT NULL, seed INTEGER NOT NULL, run_id INTEGER NOT NULL, trial_path TEXT NOT NULL,
    finished TEXT NOT NULL, wall_seconds REAL NOT NULL
);
CREATE TABLE IF NOT EXISTS metrics (
    trial_id TEXT NOT NULL REFERENCES trials(trial_id), point INTEGER NOT NULL,
    {", ".join(f"{c} {'INTEGER' if c in INT_COLUMNS else 'REAL'}" for c in METRIC_COLUMNS)},
    PRIMARY KEY (trial_id, point)
) WITHOUT ROWID;
CREATE TABLE IF NOT EXISTS declared (
    position INTEGER PRIMARY KEY, trial_id TEXT NOT NULL UNIQUE, env_label TEXT NOT NULL,
    agent_label TEXT NOT NULL, kind TEXT NOT NULL, seed INTEGER NOT NULL, spec TEXT NOT NULL
);
CREATE TABLE IF NOT EXISTS failures (
    failure_id INTEGER PRIMARY KEY, trial_id TEXT NOT NULL, run_id INTEGER NOT NULL, error_type TEXT NOT NULL,
    message TEXT NOT NULL, traceback TEXT NOT NULL, at TEXT NOT NULL
);
"""


def study_dir(results_root: str | Path, study_name: str) -> Path:
    """results/<study>; the name was validated to hold no path separators."""
    root = Path(results_root).resolve()
    target = (root / study_name).resolve()
    if target.parent != root:
        raise StoreError(f"study name {study_name!r} would leave the results folder {root}")
    return target


def remove_store(folder: str | Path) -> None:
    """Delete a study's database and report so the study starts over (the lock file stays)."""
    folder = Path(folder)
    for name in (DB_NAME, f"{DB_NAME}-wal", f"{DB_NAME}-shm"):
        (folder / name).unlink(missing_ok=True)
    report = folder / "report"
    if report.is_dir():
        shutil.rmtree(report)


def _now() -> str:
    return datetime.now(UTC).isoformat(timespec="seconds")


class Store:
    """Read and write one study database."""

    def __init__(self, folder: str | Path, *, create: bool = False) -> None:
        self.folder = Path(folder)
        self.path = self.folder / DB_NAME
        if not self.path.exists():
            if not create:
                raise StoreError(f"{self.folder}: no stepmeter study here (missing {DB_NAME}); run the study first")
            self.folder.mkdir(parents=True, exist_ok=True)
        try:
            self.conn = sqlite3.connect(self.path, timeout=30.0)
            self.conn.execute("PRAGMA journal_mode=WAL")
            self.conn.execute("PRAGMA synchronous=NORMAL")
            self.conn.execute("PRAGMA foreign_keys=ON")
            if create:
                with self.conn:
                    self.conn.executescript(_SCHEMA)
                    self.conn.execute("INSERT OR IGNORE INTO meta VALUES ('schema_version', ?)", (str(SCHEMA_VERSION),))
            version = self.conn.execute("SELECT value FROM meta WHERE key='schema_version'").fetchone()
        except sqlite3.DatabaseError as err:
            raise StoreError(f"{self.path}: not a readable stepmeter database ({err})") from None
        if version is None or int(version[0]) != SCHEMA_VERSION:
            found = "no version" if version is None else f"store version {version[0]}"
            raise StoreError(
                f"{self.path}: written by another stepmeter release ({found}, this one reads {SCHEMA_VERSION}); "
                "run the study again with --start-over, or use the release that wrote it"
            )

    def close(self) -> None:
        """Close the connection."""
        self.conn.close()

    def __enter__(self) -> Store:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    def begin_run(
        self,
        *,
        command: str,
        study_file: str,
        study_text: str,
        study_hash: str,
        versions: dict[str, str],
        platform: str,
        jobs: int,
    ) -> int:
        """Record the provenance of this invocation and return its run id."""
        with self.conn:
            cur = self.conn.execute(
                "INSERT INTO runs (started, command, study_file, study_text, study_hash, versions, platform, jobs)"
                " VALUES (?, ?, ?, ?, ?, ?, ?, ?)",
                (
                    _now(),
                    command,
                    study_file,
                    study_text,
                    study_hash,
                    json.dumps(versions, sort_keys=True),
                    platform,
                    jobs,
                ),
            )
        return int(cur.lastrowid)

    def end_run(self, run_id: int, outcome: str) -> None:
        """Mark a run finished ('complete', 'interrupted', 'failures')."""
        with self.conn:
            self.conn.execute("UPDATE runs SET finished=?, outcome=? WHERE run_id=?", (_now(), outcome, run_id))

    def declare(self, facts: dict[str, Any], trials: Iterable[PlannedTrial]) -> None:
        """Replace the study's facts and its declared trials with those of the current study file."""
        with self.conn:
            self.conn.execute("INSERT OR REPLACE INTO meta VALUES ('facts', ?)", (json.dumps(facts),))
            self.conn.execute("DELETE FROM declared")
            self.conn.executemany(
                "INSERT INTO declared VALUES (?, ?, ?, ?, ?, ?, ?)",
                [
                    (
                        i,
                        t.trial_id,
                        t.env_label,
                        t.agent_label,
                        t.spec["agent"]["kind"],
                        t.seed,
                        json.dumps(t.spec, sort_keys=True),
                    )
                    for i, t in enumerate(trials)
                ],
            )

    def facts(self) -> dict[str, Any]:
        """The study's facts as stored by the latest run."""
        row = self.conn.execute("SELECT value FROM meta WHERE key='facts'").fetchone()
        if row is None:
            raise StoreError(f"{self.path}: no study has been declared in this store")
        return json.loads(row[0])

    def stored_ids(self) -> set[str]:
        """Ids of the trials already finished and stored."""
        return {r[0] for r in self.conn.execute("SELECT trial_id FROM trials")}

    def failed_ids(self) -> set[str]:
        """Ids of trials that failed and have no stored result."""
        return {
            r[0]
            for r in self.conn.execute(
                "SELECT trial_id FROM failures WHERE trial_id NOT IN (SELECT trial_id FROM trials)"
            )
        }

    def count_trials(self, run_id: int) -> int:
        """How many trials a run stored."""
        return int(self.conn.execute("SELECT count(*) FROM trials WHERE run_id=?", (run_id,)).fetchone()[0])

    def write_trial(self, trial: PlannedTrial, run_id: int, rows: dict[str, np.ndarray], trial_path: str) -> None:
        """Store a finished trial and all its metric rows in one transaction."""
        n = len(rows["real_steps"])
        columns: list[list] = [[trial.trial_id] * n, list(range(n))]
        for c in METRIC_COLUMNS:
            values = np.asarray(rows[c], dtype=np.float64)
            if c in INT_COLUMNS:
                columns.append(values.astype(np.int64).tolist())
            else:
                as_list = values.tolist()
                for i in np.flatnonzero(np.isnan(values)):
                    as_list[i] = None
                columns.append(as_list)
        placeholders = ", ".join("?" * (2 + len(METRIC_COLUMNS)))
        with self.conn:
            self.conn.execute(
                "INSERT INTO trials VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?)",
                (
                    trial.trial_id,
                    json.dumps(trial.spec, sort_keys=True),
                    trial.env_label,
                    trial.agent_label,
                    trial.spec["agent"]["kind"],
                    trial.seed,
                    run_id,
                    trial_path,
                    _now(),
                    float(rows["wall_seconds"][-1]),
                ),
            )
            self.conn.executemany(f"INSERT INTO metrics VALUES ({placeholders})", zip(*columns, strict=True))

    def write_failure(self, trial_id: str, run_id: int, error_type: str, message: str, traceback: str) -> None:
        """Record a failed trial; the study goes on."""
        with self.conn:
            self.conn.execute(
                "INSERT INTO failures (trial_id, run_id, error_type, message, traceback, at) VALUES (?, ?, ?, ?, ?, ?)",
                (trial_id, run_id, error_type, message, traceback, _now()),
            )

    def query(self, sql: str, params: tuple = ()) -> list[tuple]:
        """Run a read-only query (for analysis and listings)."""
        return self.conn.execute(sql, params).fetchall()
