"""Load a stored experiment as tidy pandas frames."""

from __future__ import annotations

import json
from contextlib import AbstractContextManager, nullcontext
from pathlib import Path

import numpy as np
import pandas as pd

from runner.analysis.versions import experiment_versions, trial_versions
from runner.metrics import INT_COLUMNS, METRIC_COLUMNS
from runner.store import DB_NAME, Store

_CHUNK = 100_000
"""Rows fetched at a time: straight into float arrays, so no per-row Python objects pile up."""

__all__ = ["VERSION_CHOICES", "load_failures", "load_results", "missing_trials", "open_store", "undeclared_trials"]


def open_store(path: str | Path | Store) -> AbstractContextManager[Store]:
    """Open an experiment store given its folder (results/<experiment>) or its database file.

    Given an open Store, hand it back unclosed, so several readers can share one snapshot (`Store.snapshot`).
    """
    if isinstance(path, Store):
        return nullcontext(path)
    path = Path(path)
    return Store(path.parent if path.name == DB_NAME else path)


VERSION_CHOICES = ("current", "all")


def load_results(path: str | Path | Store, *, versions: str = "current", params: bool = True) -> pd.DataFrame:
    """One row per (trial, evaluation point) of a stored experiment.

    Columns: env, agent, kind, trial_id, seed, version (the number of the experiment file's version the trial
    belongs to, 1 the oldest), point, the metric columns (see `runner.metrics`), then with `params` one
    `param_<name>` column per agent parameter (empty where a kind has no such parameter).
    `versions="current"` gives the trials the experiment file currently declares, in declaration order;
    `versions="all"` adds the stored trials of earlier versions after them, labelled as they were then, a label
    that now means something else marked with its version ("dyna (v1)").
    """
    if versions not in VERSION_CHOICES:
        raise ValueError(f"versions must be one of {VERSION_CHOICES}, got {versions!r}")
    with open_store(path) as store:
        known = experiment_versions(store)
        current = next((v.number for v in known if v.current), len(known))
        trials = pd.DataFrame.from_records(
            store.query("SELECT env_label, agent_label, kind, trial_id, seed, spec FROM declared ORDER BY position"),
            columns=["env", "agent", "kind", "trial_id", "seed", "spec"],
        )
        trials["version"] = current
        if versions == "all":
            earlier = pd.DataFrame.from_records(
                store.query(
                    "SELECT env_label, agent_label, kind, trial_id, seed, spec FROM trials "
                    "WHERE trial_id NOT IN (SELECT trial_id FROM declared) "
                    "ORDER BY run_id, env_label, agent_label, seed"
                ),
                columns=["env", "agent", "kind", "trial_id", "seed", "spec"],
            )
            if len(earlier):
                belongs = trial_versions(store, known)
                earlier["version"] = [belongs[t] for t in earlier["trial_id"]]
                trials = _told_apart(pd.concat([trials, earlier], ignore_index=True), current)
        values = _metric_values(store, trials, declared_only=versions == "current")
    where = values[:, 0].astype(np.int64)
    frame = pd.DataFrame({name: trials[name].to_numpy()[where] for name in ("env", "agent", "kind", "trial_id")})
    frame["seed"] = trials["seed"].to_numpy(dtype=np.int64)[where]
    frame["version"] = trials["version"].to_numpy(dtype=np.int64)[where]
    frame["point"] = values[:, 1].astype(np.int64)
    for column, name in enumerate(METRIC_COLUMNS, start=2):
        frame[name] = values[:, column].astype(np.int64) if name in INT_COLUMNS else values[:, column]
    if params:
        table = _param_table(trials["spec"])
        for name in table.columns:
            frame[f"param_{name}"] = table[name].to_numpy()[where]
    return frame


def _metric_values(store: Store, trials: pd.DataFrame, *, declared_only: bool) -> np.ndarray:
    """Metric rows as floats: column 0 the trial's row in `trials`, 1 the point, then METRIC_COLUMNS."""
    metric_sql = ", ".join(f"m.{c}" for c in METRIC_COLUMNS)
    if declared_only:
        # Declared positions are 0..n-1 in order, the same as the rows of `trials`.
        sql = (
            f"SELECT d.position, m.point, {metric_sql} FROM declared d JOIN metrics m ON m.trial_id = d.trial_id "
            "ORDER BY d.position, m.point"
        )
        cursor = store.conn.execute(sql)
        chunks = []
        while rows := cursor.fetchmany(_CHUNK):
            chunks.append(np.array(rows, dtype=np.float64))
        values = np.concatenate(chunks) if chunks else np.empty((0, 2 + len(METRIC_COLUMNS)))
        positions = np.array([r[0] for r in store.query("SELECT position FROM declared ORDER BY position")])
        values[:, 0] = np.searchsorted(positions, values[:, 0].astype(np.int64))
        return values
    parts = []
    for i, trial in enumerate(trials["trial_id"]):
        rows = store.query(
            f"SELECT ?, m.point, {metric_sql} FROM metrics m WHERE m.trial_id = ? ORDER BY m.point", (i, trial)
        )
        if rows:
            parts.append(np.array(rows, dtype=np.float64))
    return np.concatenate(parts) if parts else np.empty((0, 2 + len(METRIC_COLUMNS)))


def _told_apart(trials: pd.DataFrame, current: int) -> pd.DataFrame:
    """Mark labels of earlier versions that now stand for another trial set-up with their version.

    A (environment, agent) label pair whose trials differ in more than their seed across versions gets the
    version on the part that changed: the environment label when that environment's spec changed, else the
    agent label. Trials of the current version keep their labels.
    """
    specs = [json.loads(text) for text in trials["spec"]]
    setup = [json.dumps({k: v for k, v in spec.items() if k != "seed"}, sort_keys=True) for spec in specs]
    env_spec = [json.dumps(spec.get("env"), sort_keys=True) for spec in specs]
    trials = trials.assign(_setup=setup, _env=env_spec)
    setups = trials.groupby(["env", "agent"])["_setup"].nunique()
    env_specs = trials.groupby("env")["_env"].nunique()
    envs, agents = trials["env"].tolist(), trials["agent"].tolist()
    for i, (env, agent, version) in enumerate(zip(envs, agents, trials["version"], strict=True)):
        if version == current or setups[(env, agent)] < 2:
            continue
        if env_specs[env] > 1:
            envs[i] = f"{env} (v{version})"
        else:
            agents[i] = f"{agent} (v{version})"
    return trials.assign(env=envs, agent=agents).drop(columns=["_setup", "_env"])


def _param_table(specs: pd.Series) -> pd.DataFrame:
    """One row per trial spec, one column per agent parameter name (in order of first appearance)."""
    records = [json.loads(s).get("agent", {}).get("params", {}) for s in specs]
    return pd.DataFrame.from_records(records, index=range(len(records)))


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
