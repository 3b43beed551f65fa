"""Re-run stored trials from their stored specs and check that every metric row comes out bit for bit."""

from __future__ import annotations

import json
import re
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from runner.analysis.frames import open_store
from runner.errors import StoreError
from runner.metrics import METRIC_COLUMNS, TIMING_COLUMNS
from runner.provenance import WORKER_THREADS, platform_text, versions
from runner.schedule import warm_up
from runner.trial import run_trial
from runner.trust import check_stored_spec

__all__ = ["RerunCheck", "compare_rows", "rerun_trials", "select_trials"]

_ID = re.compile(r"^[0-9a-f]{4,16}$")


@dataclass
class RerunCheck:
    """The outcome of re-running one stored trial."""

    trial_id: str
    label: str
    trial_path: str
    difference: str | None
    provenance: list[str] = field(default_factory=list)

    @property
    def matched(self) -> bool:
        return self.difference is None


def compare_rows(stored: np.ndarray, fresh: np.ndarray, columns: list[str]) -> str | None:
    """None when equal bit for bit (NaN equals NaN); else the first differing row and column and the largest
    difference. Both arrays have shape (n_points, len(columns))."""
    if stored.shape != fresh.shape:
        return f"{stored.shape[0]} stored rows against {fresh.shape[0]} fresh rows"
    same = (stored == fresh) | (np.isnan(stored) & np.isnan(fresh))
    if same.all():
        return None
    row, col = np.argwhere(~same)[0]
    gaps = np.where(same, 0.0, np.abs(np.nan_to_num(stored - fresh, nan=np.inf)))
    worst_row, worst_col = np.unravel_index(np.argmax(gaps), gaps.shape)
    return (
        f"first difference at row {row} (point {row}), column {columns[col]}: stored {float(stored[row, col])!r}, "
        f"now {float(fresh[row, col])!r}; largest difference {gaps[worst_row, worst_col]:.6g} "
        f"in {columns[worst_col]} at row {worst_row}"
    )


def select_trials(folder: str | Path, ids: list[str], sample: int | None, every: bool, seed: int) -> list[str]:
    """Resolve full ids or unique prefixes, or draw a random sample of K stored trials, or take them all."""
    with open_store(folder) as store:
        stored = sorted(store.stored_ids())
    if not stored:
        raise StoreError(f"{folder}: no stored trials to re-run")
    if every:
        return stored
    if sample is not None:
        rng = np.random.default_rng(seed)
        return sorted(rng.choice(stored, size=min(sample, len(stored)), replace=False).tolist())
    chosen = []
    for given in ids:
        if not _ID.match(given):
            raise StoreError(f"{given!r} is not a trial id; expected 4 to 16 hex digits as in `stepmeter report`")
        matches = [t for t in stored if t.startswith(given)]
        if len(matches) != 1:
            what = "no stored trial" if not matches else f"{len(matches)} stored trials"
            raise StoreError(f"{folder}: {what} with id {given!r}; give more digits of one stored id")
        chosen.append(matches[0])
    return chosen


def rerun_trials(folder: str | Path, trial_ids: list[str], *, trust_code: bool = False) -> list[RerunCheck]:
    """Re-run each trial on the path it was stored from and compare its rows with the stored ones.

    Every chosen spec is checked first (`runner.trust.check_stored_spec`): one that no longer hashes to its id,
    or that names code outside stepmeter without `trust_code`, stops the command before anything is imported
    or run.
    """
    columns = [c for c in METRIC_COLUMNS if c not in TIMING_COLUMNS]
    now_versions, now_platform = versions(), platform_text()
    records = []
    with open_store(folder) as store:
        for trial_id in trial_ids:
            spec, path, env, agent, seed, run_versions, run_platform = store.query(
                "SELECT t.spec, t.trial_path, t.env_label, t.agent_label, t.seed, r.versions, r.platform "
                "FROM trials t JOIN runs r ON r.run_id = t.run_id WHERE t.trial_id = ?",
                (trial_id,),
            )[0]
            check_stored_spec(trial_id, json.loads(spec), trust_code=trust_code, where=str(folder))
            rows = store.query(
                f"SELECT {', '.join(columns)} FROM metrics WHERE trial_id = ? ORDER BY point", (trial_id,)
            )
            records.append(
                (
                    trial_id,
                    json.loads(spec),
                    path,
                    f"{env} / {agent} / seed {seed}",
                    json.loads(run_versions),
                    run_platform,
                    np.array(rows, dtype=np.float64),
                )
            )
    warm_up([(spec, path) for _, spec, path, *_ in records])
    checks = []
    for trial_id, spec, path, label, run_versions, run_platform, stored in records:
        result = run_trial(spec, path)
        fresh = np.column_stack([result.rows[c] for c in columns])
        changed = [
            f"{name} {now_versions.get(name, 'absent')} (stored {old})"
            for name, old in run_versions.items()
            if name != WORKER_THREADS and now_versions.get(name) != old
        ]
        if run_platform != now_platform:
            changed.append(f"platform {now_platform} (stored {run_platform})")
        checks.append(RerunCheck(trial_id, label, path, compare_rows(stored, fresh, columns), changed))
    return checks
