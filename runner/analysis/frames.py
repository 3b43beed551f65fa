"""Load a stored study as tidy pandas frames."""

from __future__ import annotations

from pathlib import Path

import pandas as pd

from runner.store import DB_NAME, Store
from runner.trial import METRIC_COLUMNS

__all__ = ["load_failures", "load_results", "missing_trials", "open_store", "undeclared_trials"]


def open_store(path: str | Path) -> Store:
    """Open a study store given its folder (results/<study>) or its database file."""
    path = Path(path)
    return Store(path.parent if path.name == DB_NAME else path)


def load_results(path: str | Path) -> pd.DataFrame:
    """One row per (declared trial, evaluation point) of a stored study.

    Columns: env, agent, kind, trial_id, seed, point, then the metric columns (real_steps, episodes,
    eval_return, train_return, real_updates, planning_updates, model_updates, model_tv_error,
    model_reward_error, wall_seconds). Only trials
    the study file currently declares are included, in declaration order.
    """
    with open_store(path) as store:
        metric_sql = ", ".join(f"m.{c}" for c in METRIC_COLUMNS)
        rows = store.query(
            "SELECT d.env_label, d.agent_label, d.kind, d.trial_id, d.seed, m.point, "
            f"{metric_sql} FROM declared d JOIN metrics m ON m.trial_id = d.trial_id "
            "ORDER BY d.position, m.point"
        )
    columns = ["env", "agent", "kind", "trial_id", "seed", "point", *METRIC_COLUMNS]
    frame = pd.DataFrame.from_records(rows, columns=columns)
    floats = ("eval_return", "train_return", "model_tv_error", "model_reward_error", "wall_seconds")
    return frame.astype(dict.fromkeys(floats, "float64"))


def missing_trials(path: str | Path) -> pd.DataFrame:
    """Declared trials that have no stored result (not run yet, interrupted or failed)."""
    with open_store(path) as store:
        rows = store.query(
            "SELECT d.env_label, d.agent_label, d.seed, d.trial_id FROM declared d "
            "WHERE d.trial_id NOT IN (SELECT trial_id FROM trials) ORDER BY d.position"
        )
    return pd.DataFrame.from_records(rows, columns=["env", "agent", "seed", "trial_id"])


def undeclared_trials(path: str | Path) -> pd.DataFrame:
    """Stored trials the current study file no longer declares (kept in the store, left out of reports)."""
    with open_store(path) as store:
        rows = store.query(
            "SELECT env_label, agent_label, seed, trial_id FROM trials "
            "WHERE trial_id NOT IN (SELECT trial_id FROM declared) ORDER BY env_label, agent_label, seed"
        )
    return pd.DataFrame.from_records(rows, columns=["env", "agent", "seed", "trial_id"])


def load_failures(path: str | Path) -> pd.DataFrame:
    """Every recorded failure, newest last."""
    with open_store(path) as store:
        rows = store.query(
            "SELECT f.trial_id, f.run_id, f.error_type, f.message, f.at FROM failures f ORDER BY f.failure_id"
        )
    return pd.DataFrame.from_records(rows, columns=["trial_id", "run_id", "error_type", "message", "at"])
