"""Is every stored trial whole? Checked before a run resumes and before a report is written.

A trial is written in one transaction, so a whole trial is what stepmeter itself leaves behind. A store edited
or damaged by hand can still hold a trial without all its metric rows (a deleted row, a dropped table), metric
rows of no trial, or a spec that no longer hashes to its id. A run re-runs such trials (their rows are removed
first, in one transaction); a report refuses to draw them.
"""

from __future__ import annotations

import json
import sqlite3
from dataclasses import dataclass

from runner.errors import StoreError
from runner.plan import trial_id
from runner.store import Store

__all__ = ["StoreHealth", "check_store", "refuse_incomplete", "repair_store"]


@dataclass(frozen=True)
class StoreHealth:
    """Trials that are not whole (with why, one reason per trial) and the count of metric rows of no trial."""

    incomplete: dict[str, str]
    orphan_rows: int

    @property
    def whole(self) -> bool:
        """True when nothing needs re-running or removing."""
        return not self.incomplete and not self.orphan_rows

    def describe(self) -> str:
        """One line: how many trials are incomplete, and why (the commonest reasons first)."""
        reasons: dict[str, int] = {}
        for why in self.incomplete.values():
            reasons[why] = reasons.get(why, 0) + 1
        ordered = sorted(reasons.items(), key=lambda item: -item[1])
        parts = [f"{n} {why}" for why, n in ordered]
        if self.orphan_rows:
            parts.append(f"{self.orphan_rows} metric rows of no stored trial")
        n = len(self.incomplete)
        head = f"{n} stored trial{'' if n == 1 else 's'} incomplete" if n else "no incomplete trials"
        return f"{head} ({'; '.join(parts)})"


def _expected_points(spec: dict) -> int:
    return int(spec["real_steps"]) // int(spec["evaluation"]["every"]) + 1


def check_store(store: Store) -> StoreHealth:
    """Find stored trials with missing metric rows, with specs that do not hash to their ids, and orphan rows.

    The database's own pages are checked first (`PRAGMA quick_check`); a damaged file is one StoreError line.
    """
    verdict = store.conn.execute("PRAGMA quick_check(1)").fetchone()
    if verdict is None or verdict[0] != "ok":
        raise sqlite3.DatabaseError(f"database disk image is malformed ({verdict[0] if verdict else 'no answer'})")
    counts = {
        tid: (n, first, last)
        for tid, n, first, last in store.conn.execute(
            "SELECT trial_id, count(*), min(point), max(point) FROM metrics GROUP BY trial_id"
        )
    }
    incomplete: dict[str, str] = {}
    for tid, spec_text in store.conn.execute("SELECT trial_id, spec FROM trials"):
        try:
            spec = json.loads(spec_text)
            expected = _expected_points(spec)
            hashed = trial_id(spec)
        except (ValueError, TypeError, KeyError):
            incomplete[tid] = "with an unreadable spec"
            continue
        if hashed != tid:
            incomplete[tid] = "with a spec that does not hash to its id"
        elif counts.get(tid) != (expected, 0, expected - 1):
            incomplete[tid] = "missing metric rows"
    stored = store.stored_ids()
    orphans = sum(n for tid, (n, _, _) in counts.items() if tid not in stored)
    return StoreHealth(incomplete, orphans)


def repair_store(store: Store) -> StoreHealth:
    """Remove incomplete trials and orphan metric rows in one transaction, so a run stores them afresh."""
    health = check_store(store)
    if health.whole:
        return health
    with store.conn:
        store.conn.executemany("DELETE FROM metrics WHERE trial_id=?", [(t,) for t in health.incomplete])
        store.conn.executemany("DELETE FROM trials WHERE trial_id=?", [(t,) for t in health.incomplete])
        store.conn.execute("DELETE FROM metrics WHERE trial_id NOT IN (SELECT trial_id FROM trials)")
    return health


def refuse_incomplete(store: Store) -> None:
    """Stop a report with one line when some stored trial is not whole (a run repairs the store)."""
    health = check_store(store)
    if not health.whole:
        raise StoreError(f"{store.path}: {health.describe()}; run the experiment again to re-run them, then report")
