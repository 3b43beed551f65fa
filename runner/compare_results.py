"""`stepmeter compare`: the curves and tables of several results folders in one report, when they can be compared.

Two experiments can share a report only when they measured the same thing the same way: the same environments
(by their resolved specs, change events included) and the same protocol (real steps, evaluation every and
episodes with their step cap, primary measure, consecutive points, and each environment's thresholds). Otherwise
one line says the first difference. Agent labels are prefixed with their experiment's name ("warehouse: dyna");
environments take the first folder's labels. Seeds are paired across folders as within one experiment: seed k
gives every agent the same environment randomness, whichever experiment ran it. Nothing is re-run and no code
named by a stored spec is imported; every spec must still hash to its trial id.
"""

from __future__ import annotations

import json
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import pandas as pd

from runner.analysis.frames import load_results, open_store
from runner.analysis.report import ExperimentFacts, ReportOutput, write_report
from runner.errors import StoreError
from runner.experiment_report import variant_params
from runner.plan import trial_id
from runner.wording import count

__all__ = ["ComparedFolder", "compare_folders", "why_not_comparable"]


@dataclass(frozen=True)
class ComparedFolder:
    """One results folder's facts, its environments by spec, and its evaluation protocol."""

    folder: Path
    facts: dict[str, Any]
    envs: dict[str, str]
    """Environment label -> canonical JSON of its spec."""
    evaluation: dict[str, str]
    """Environment label -> canonical JSON of its evaluation protocol (every, episodes, step cap)."""
    params: dict[str, dict]

    @property
    def name(self) -> str:
        """The experiment's name."""
        return str(self.facts["name"])


def _read(folder: Path) -> ComparedFolder:
    """A folder's facts and its declared environments and evaluation protocol."""
    with open_store(folder) as store:
        facts = store.facts()
        for stored_id, text in store.query("SELECT trial_id, spec FROM declared"):
            if trial_id(json.loads(text)) != stored_id:
                raise StoreError(f"{folder}: trial {stored_id}: its stored spec does not hash to its id (edited)")
        specs = store.query("SELECT env_label, spec, min(position) FROM declared GROUP BY env_label")
        params = variant_params(store)
    envs, evaluation = {}, {}
    for label, text, _ in specs:
        spec = json.loads(text)
        envs[str(label)] = json.dumps(spec.get("env"), sort_keys=True)
        ev = spec.get("evaluation", {})
        evaluation[str(label)] = json.dumps({k: ev.get(k) for k in ("every", "episodes", "step_cap")}, sort_keys=True)
    if not envs:
        raise StoreError(f"{folder}: no declared trials to compare")
    return ComparedFolder(folder, facts, envs, evaluation, params)


def _differs(what: str, first: ComparedFolder, other: ComparedFolder, a: Any, b: Any) -> str:
    return f"cannot compare {first.folder} and {other.folder}: {what} {a} against {b}"


def why_not_comparable(folders: Sequence[ComparedFolder]) -> str | None:
    """None when every folder measured the same environments with the same protocol; else the first reason."""
    first = folders[0]
    by_spec = {spec: label for label, spec in first.envs.items()}
    for other in folders[1:]:
        for key, what in (
            ("real_steps", "real steps"),
            ("measure", "primary measure"),
            ("consecutive", "consecutive points at the threshold"),
        ):
            if first.facts.get(key) != other.facts.get(key):
                return _differs(what, first, other, first.facts.get(key), other.facts.get(key))
        if set(first.envs.values()) != set(other.envs.values()):
            only = sorted(set(first.envs) - {by_spec.get(spec) for spec in other.envs.values()})
            where = f" ({', '.join(only)} of the first has no match)" if only else ""
            return f"cannot compare {first.folder} and {other.folder}: their environments differ{where}"
        for label, spec in other.envs.items():
            mine = by_spec[spec]
            if first.evaluation[mine] != other.evaluation[label]:
                return _differs(f"evaluation of {mine}", first, other, first.evaluation[mine], other.evaluation[label])
            for key in ("thresholds", "earning_thresholds"):
                a = (first.facts.get(key) or {}).get(mine)
                b = (other.facts.get(key) or {}).get(label)
                if a != b:
                    return _differs(f"{key.replace('_', ' ')[:-1]} of {mine}", first, other, a, b)
    return None


def _combined_frame(folders: Sequence[ComparedFolder]) -> tuple[pd.DataFrame, int]:
    """Every folder's current trials, agents prefixed with the experiment name, environments renamed to the
    first folder's labels; a trial stored in several folders (the same spec, so the same id) is kept once, under
    the first folder that has it. Returns the frame and how many trials were such repeats."""
    by_spec = {spec: label for label, spec in folders[0].envs.items()}
    parts = []
    seen: set[str] = set()
    repeats = 0
    for item in folders:
        frame = load_results(item.folder, params=False)
        ids = set(frame["trial_id"])
        repeated = ids & seen
        repeats += len(repeated)
        seen |= ids
        frame = frame[~frame["trial_id"].isin(repeated)].copy()
        rename = {label: by_spec[spec] for label, spec in item.envs.items()}
        frame["env"] = frame["env"].map(rename)
        frame["agent"] = item.name + ": " + frame["agent"].astype(str)
        parts.append(frame)
    return pd.concat(parts, ignore_index=True), repeats


def _names(folders: Sequence[ComparedFolder]) -> list[str]:
    """Experiment names, or folder paths when two experiments share a name (so prefixes stay distinct)."""
    names = [f.name for f in folders]
    return names if len(set(names)) == len(names) else [str(f.folder) for f in folders]


def compare_folders(folders: Sequence[str | Path], out_dir: str | Path) -> tuple[ReportOutput, str]:
    """Write one report of several results folders into `out_dir`; StoreError (one line) when they differ.

    Returns the report output and a note on trials stored in more than one folder ('' when there are none).
    """
    if len(folders) < 2:
        raise StoreError("compare needs at least two results folders")
    read = [_read(Path(folder)) for folder in folders]
    names = _names(read)
    read = [
        ComparedFolder(f.folder, {**f.facts, "name": name}, f.envs, f.evaluation, f.params)
        for f, name in zip(read, names, strict=True)
    ]
    reason = why_not_comparable(read)
    if reason is not None:
        raise StoreError(reason)
    frame, repeats = _combined_frame(read)
    first = read[0].facts
    agent_order = [f"{f.name}: {label}" for f in read for label in f.facts["agent_order"]]
    baseline = f"{read[0].name}: {first['baseline']}" if first.get("baseline") else None
    facts = ExperimentFacts(
        name=" vs ".join(names),
        budget=int(first["real_steps"]),
        baseline=baseline,
        thresholds=dict(first["thresholds"]),
        earning_thresholds=dict(first.get("earning_thresholds") or {}),
        measure=str(first.get("measure", "greedy_return")),
        env_order=list(first["env_order"]),
        agent_order=agent_order,
        consecutive=int(first.get("consecutive", 1)),
        changes={env: list(steps) for env, steps in first.get("changes", {}).items()},
        confidence=float(first.get("confidence", 0.95)),
        n_resamples=int(first.get("resamples", 2000)),
        description=f"{len(read)} results folders compared: " + ", ".join(str(f.folder) for f in read),
        variant_params={f"{f.name}: {label}": p for f in read for label, p in f.params.items()},
    )
    note = (
        f"{count(repeats, 'trial')} stored in more than one folder (the same spec) "
        f"{'is' if repeats == 1 else 'are'} shown once, under the first folder's label"
        if repeats
        else ""
    )
    return write_report(frame, facts, Path(out_dir)), note
