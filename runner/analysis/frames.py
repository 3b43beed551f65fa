"""Load a stored experiment as tidy pandas frames."""

from __future__ import annotations

from contextlib import AbstractContextManager, nullcontext
from pathlib import Path

import numpy as np
import pandas as pd

from runner.metrics import INT_COLUMNS, METRIC_COLUMNS
from runner.store import DB_NAME, Store

_CHUNK = 100_000
"""Rows fetched at a time: straight into float arrays, so no per-row Python objects pile up."""

__all__ = ["load_failures", "load_results", "missing_trials", "open_store", "undeclared_trials"]


def open_store(path: str | Path | Store) -> AbstractContextManager[Store]:
    """Open an experiment store given its folder (results/<experiment>) or its database file.

    Given an open Store, hand it back unclosed, so several readers can share one snapshot (`Store.snapshot`).
    """
    if isinstance(path, Store):
        return nullcontext(path)
    path = Path(path)
    return Store(path.parent if path.name == DB_NAME else path)


def load_results(path: str | Path | Store) -> pd.DataFrame:
    """One row per (declared trial, evaluation point) of a stored experiment.

    Columns: env, agent, kind, trial_id, seed, point, then the metric columns (real_steps, episodes,
    eval_return, train_return, real_updates, planning_updates, model_updates, model_tv_error,
    model_reward_error, wall_seconds). Only trials
    the experiment file currently declares are included, in declaration order.
    """
    with open_store(path) as store:
        declared = pd.DataFrame.from_records(
            store.query(
                "SELECT position, env_label, agent_label, kind, trial_id, seed FROM declared ORDER BY position"
            ),
            columns=["position", "env", "agent", "kind", "trial_id", "seed"],
        )
        metric_sql = ", ".join(f"m.{c}" for c in METRIC_COLUMNS)
        cursor = store.conn.execute(
            f"SELECT d.position, m.point, {metric_sql} FROM declared d JOIN metrics m ON m.trial_id = d.trial_id "
            "ORDER BY d.position, m.point"
        )
        chunks = []
        while rows := cursor.fetchmany(_CHUNK):
            chunks.append(np.array(rows, dtype=np.float64))
    values = np.concatenate(chunks) if chunks else np.empty((0, 2 + len(METRIC_COLUMNS)))
    where = np.searchsorted(declared["position"].to_numpy(), values[:, 0].astype(np.int64))
    frame = pd.DataFrame({name: declared[name].to_numpy()[where] for name in ("env", "agent", "kind", "trial_id")})
    frame["seed"] = declared["seed"].to_numpy(dtype=np.int64)[where]
    frame["point"] = values[:, 1].astype(np.int64)
    for column, name in enumerate(METRIC_COLUMNS, start=2):
        frame[name] = values[:, column].astype(np.int64) if name in INT_COLUMNS else values[:, column]
    return frame


def missing_trials(path: str | Path | Store) -> pd.DataFrame:
    """Declared trials that have no stored result (not run yet, interrupted or failed)."""
    with open_store(path) as store:
        rows = store.query(
            "SELECT d.env_label, d.agent_label, d.seed, d.trial_id FROM declared d "
            "WHERE d.trial_id NOT IN (SELECT trial_id FROM trials) ORDER BY d.position"
        )
    return pd.DataFrame.from_records(rows, columns=["env", "agent", "seed", "trial_id"])


def undeclared_trials(path: str | Path | Store) -> pd.DataFrame:
    """Stored trials the current experiment file no longer declares (kept in the store, left out of reports)."""
    with open_store(path) as store:
        rows = store.query(
            "SELECT env_label, agent_label, seed, trial_id FROM trials "
            "WHERE trial_id NOT IN (SELECT trial_id FROM declared) ORDER BY env_label, agent_label, seed"
        )
    return pd.DataFrame.from_records(rows, columns=["env", "agent", "seed", "trial_id"])


def load_failures(path: str | Path | Store) -> pd.DataFrame:
    """Every recorded failure, newest last."""
    with open_store(path) as store:
        rows = store.query(
            "SELECT f.trial_id, f.run_id, f.error_type, f.message, f.at FROM failures f ORDER BY f.failure_id"
        )
    return pd.DataFrame.from_records(rows, columns=["trial_id", "run_id", "error_type", "message", "at"])
