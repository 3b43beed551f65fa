"""The experiment store: one SQLite database per experiment under results/<experiment>/.

Tables: `meta` (the current experiment's facts as JSON), `runs` (provenance of each invocation), `trials`
(finished trials with their canonical spec), `metrics` (one row per trial and evaluation point),
`declared` (the trials the experiment file currently declares) and `failures`. A finished trial is written in
one transaction, so a trial is either fully stored or absent. Only the parent process writes.
"""

from __future__ import annotations

import json
import os
import shutil
import sqlite3
from collections.abc import Iterable, Iterator
from contextlib import closing, contextmanager
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

import numpy as np

from runner.errors import StoreError
from runner.metrics import INT_COLUMNS, METRIC_COLUMNS
from runner.plan import PlannedTrial
from runner.safe_files import TEMP_SUFFIX, check_no_links, ensure_folder
from runner.store_faults import describe_fault

__all__ = ["DB_NAME", "INT_COLUMNS", "SCHEMA_VERSION", "Store", "experiment_dir", "remove_store"]

DB_NAME = "experiment.sqlite"
SCHEMA_VERSION = 4
_SIDE_FILES = ("-wal", "-shm", "-journal")
"""Files SQLite keeps beside the database; each is checked for symbolic links like the database itself."""
_PREVIOUS_SCHEMA_VERSION = 3
"""Stores of version 3 hold the same tables under another file name; `migrate_store` copies them over."""

_SCHEMA = f"""
CREATE TABLE IF NOT EXISTS meta (key TEXT PRIMARY KEY, value TEXT NOT NULL);
CREATE TABLE IF NOT EXISTS runs (
    run_id INTEGER PRIMARY KEY, started TEXT NOT NULL, finished TEXT, outcome TEXT,
    command TEXT NOT NULL, experiment_file TEXT NOT NULL, experiment_text TEXT NOT NULL, experiment_hash TEXT NOT NULL,
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


def experiment_dir(results_root: str | Path, experiment_name: str) -> Path:
    """results/<experiment>; the name was validated to hold no path separators."""
    root = Path(results_root).resolve()
    target = (root / experiment_name).resolve()
    if target.parent != root:
        raise StoreError(f"experiment name {experiment_name!r} would leave the results folder {root}")
    return target


def remove_store(folder: str | Path) -> None:
    """Delete an experiment's database and report so the experiment starts over (the lock file stays)."""
    folder = Path(folder)
    for name in (DB_NAME, *(f"{DB_NAME}{side}" for side in _SIDE_FILES)):
        (folder / name).unlink(missing_ok=True)
    report = folder / "report"
    if report.is_symlink():
        report.unlink()
    elif report.is_dir():
        shutil.rmtree(report)


def _previous_release_store(folder: Path) -> Path | None:
    """A database of the previous release in `folder` (another file name, store version 3), if there is one."""
    if not folder.is_dir():
        return None
    for candidate in sorted(folder.glob("*.sqlite")):
        if candidate.name == DB_NAME or candidate.is_symlink():
            continue
        try:
            with closing(sqlite3.connect(f"file:{candidate}?mode=ro", uri=True)) as conn:
                row = conn.execute("SELECT value FROM meta WHERE key='schema_version'").fetchone()
        except sqlite3.DatabaseError:
            continue
        if row is not None and row[0] == str(_PREVIOUS_SCHEMA_VERSION):
            return candidate
    return None


def migrate_store(folder: str | Path) -> tuple[Path, int]:
    """Copy a previous-release store of `folder` into a store of this release; return the old file and trials.

    The tables keep their columns in the same order (only names changed), so rows are copied by position;
    metric columns that the previous release did not record (see `runner.metrics`) stay empty (NaN).
    The old file is left in place; the new store is written to a temporary name and renamed when complete.
    """
    folder = Path(folder)
    previous = _previous_release_store(folder)
    if previous is None:
        raise StoreError(f"{folder}: no store of the previous stepmeter release to migrate")
    target = folder / DB_NAME
    if target.exists():
        raise StoreError(f"{target}: already exists; remove it first to migrate {previous.name} again")
    partial = folder / f".{DB_NAME}.migrating"
    partial.unlink(missing_ok=True)
    try:
        with closing(sqlite3.connect(f"file:{partial}", uri=True)) as conn:
            conn.executescript(_SCHEMA)
            conn.execute("ATTACH DATABASE ? AS old", (f"file:{previous}?mode=ro",))
            for table in ("runs", "trials", "declared", "failures"):
                conn.execute(f"INSERT INTO main.{table} SELECT * FROM old.{table}")
            kept = [r[1] for r in conn.execute("PRAGMA old.table_info(metrics)")]
            names = ", ".join(kept)
            conn.execute(f"INSERT INTO main.metrics ({names}) SELECT {names} FROM old.metrics")
            conn.execute("INSERT INTO main.meta SELECT * FROM old.meta WHERE key != 'schema_version'")
            conn.execute("INSERT INTO main.meta VALUES ('schema_version', ?)", (str(SCHEMA_VERSION),))
            conn.commit()
            trials = int(conn.execute("SELECT count(*) FROM main.trials").fetchone()[0])
            conn.execute("DETACH DATABASE old")
        partial.replace(target)
    except sqlite3.DatabaseError as err:
        partial.unlink(missing_ok=True)
        raise StoreError(f"{previous}: could not be migrated ({err})") from None
    return previous, trials


def _refuse_unusable_file(path: Path) -> None:
    """A database path that is a folder, or an empty file, is refused: SQLite would silently start afresh."""
    if path.is_dir():
        raise StoreError(f"{path}: expected the experiment's database but found a folder; move it away and run again")
    wal = path.with_name(f"{path.name}-wal")
    if path.stat().st_size == 0 and not (wal.is_file() and wal.stat().st_size > 0):
        raise StoreError(
            f"{path}: the database is empty (0 bytes), so its stored trials are gone; nothing was replaced: "
            "restore it from a backup, or run the experiment with --start-over to start afresh"
        )


def _create_database(path: Path) -> None:
    """Write a new store's tables under a temporary name and rename it into place.

    So a database file that exists is never empty, and an empty one (with no write-ahead log holding its
    pages) can only be a truncated store, which `Store` refuses instead of starting afresh over it.
    """
    partial = path.with_name(f".{path.name}.{os.getpid()}.0{TEMP_SUFFIX}")
    partial.unlink(missing_ok=True)
    try:
        with closing(sqlite3.connect(partial)) as conn, conn:
            conn.executescript(_SCHEMA)
            conn.execute("INSERT INTO meta VALUES ('schema_version', ?)", (str(SCHEMA_VERSION),))
        os.replace(partial, path)
    finally:
        partial.unlink(missing_ok=True)


def _now() -> str:
    return datetime.now(UTC).isoformat(timespec="seconds")


class Store:
    """Read and write one experiment database."""

    def __init__(self, folder: str | Path, *, create: bool = False) -> None:
        self.folder = Path(folder)
        self.path = self.folder / DB_NAME
        for name in (self.path, *(self.folder / f"{DB_NAME}{side}" for side in _SIDE_FILES)):
            check_no_links(name, below=self.folder)
        existed = self.path.exists()
        if existed:
            _refuse_unusable_file(self.path)
        else:
            previous = _previous_release_store(self.folder)
            if previous is not None:
                raise StoreError(
                    f"{previous}: a store of the previous stepmeter release; run `stepmeter migrate {self.folder}` "
                    "to carry its trials over (the old file is kept)"
                )
            if not create:
                raise StoreError(
                    f"{self.folder}: no stepmeter experiment here (missing {DB_NAME}); run the experiment first"
                )
            ensure_folder(self.folder)
            _create_database(self.path)
        try:
            self.conn = sqlite3.connect(self.path, timeout=30.0)
            if existed and not self._has_meta():
                self.conn.close()
                raise StoreError(
                    f"{self.path}: not a stepmeter database (it has no `meta` table); nothing was changed: "
                    "move it away, or run the experiment with --start-over to replace it"
                )
            self.conn.execute("PRAGMA journal_mode=WAL")
            self.conn.execute("PRAGMA synchronous=NORMAL")
            self.conn.execute("PRAGMA foreign_keys=ON")
            if create:
                with self.conn:
                    self.conn.executescript(_SCHEMA)
                    self.conn.execute("INSERT OR IGNORE INTO meta VALUES ('schema_version', ?)", (str(SCHEMA_VERSION),))
            version = self.conn.execute("SELECT value FROM meta WHERE key='schema_version'").fetchone()
        except sqlite3.DatabaseError as err:
            raise StoreError(describe_fault(err, self.folder)) from None
        if version is None or int(version[0]) != SCHEMA_VERSION:
            found = "no version" if version is None else f"store version {version[0]}"
            raise StoreError(
                f"{self.path}: written by another stepmeter release ({found}, this one reads {SCHEMA_VERSION}); "
                "run the experiment again with --start-over, or use the release that wrote it"
            )
        self._add_new_metric_columns()

    def _add_new_metric_columns(self) -> None:
        """Metric columns added to the schema after this store was made join it empty (NaN), at the end, where
        `runner.metrics` appends them."""
        have = {row[1] for row in self.conn.execute("PRAGMA table_info(metrics)")}
        missing = [c for c in METRIC_COLUMNS if c not in have]
        if missing:
            with self.conn:
                for c in missing:
                    self.conn.execute(f"ALTER TABLE metrics ADD COLUMN {c} {'INTEGER' if c in INT_COLUMNS else 'REAL'}")

    def _has_meta(self) -> bool:
        return (
            self.conn.execute("SELECT count(*) FROM sqlite_master WHERE type='table' AND name='meta'").fetchone()[0]
            == 1
        )

    @contextmanager
    def snapshot(self) -> Iterator[Store]:
        """Read inside one transaction, so every query sees the same state even while a run keeps writing."""
        self.conn.execute("BEGIN")
        try:
            yield self
        finally:
            self.conn.rollback()

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
        experiment_file: str,
        experiment_text: str,
        experiment_hash: str,
        versions: dict[str, str],
        platform: str,
        jobs: int,
    ) -> int:
        """Record the provenance of this invocation and return its run id."""
        with self.conn:
            cur = self.conn.execute(
                "INSERT INTO runs (started, command, experiment_file, experiment_text, experiment_hash, versions,"
                " platform, jobs) VALUES (?, ?, ?, ?, ?, ?, ?, ?)",
                (
                    _now(),
                    command,
                    experiment_file,
                    experiment_text,
                    experiment_hash,
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
        """Replace the experiment's facts and its declared trials with those of the current experiment file."""
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
        """The experiment's facts as stored by the latest run."""
        row = self.conn.execute("SELECT value FROM meta WHERE key='facts'").fetchone()
        if row is None:
            raise StoreError(f"{self.path}: no experiment has been declared in this store")
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
        """Record a failed trial; the experiment goes on."""
        with self.conn:
            self.conn.execute(
                "INSERT INTO failures (trial_id, run_id, error_type, message, traceback, at) VALUES (?, ?, ?, ?, ?, ?)",
                (trial_id, run_id, error_type, message, traceback, _now()),
            )

    def query(self, sql: str, params: tuple = ()) -> list[tuple]:
        """Run a read-only query (for analysis and listings)."""
        return self.conn.execute(sql, params).fetchall()
