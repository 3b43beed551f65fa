"""Expand an experiment into trial specs; a trial's id is a hash of its canonical spec.

Labels are not part of the spec, so renaming an agent or adding another changes no trial id, and the
same experiment is never run twice.
"""

from __future__ import annotations

import hashlib
import json
from dataclasses import dataclass
from typing import Any

from runner.config import Experiment

__all__ = ["SPEC_FORMAT", "PlannedTrial", "canonical_json", "plan_trials", "trial_id"]

SPEC_FORMAT = 1
"""Bumped when the meaning of a spec changes, so old ids never collide with new experiments."""


def canonical_json(spec: dict[str, Any]) -> str:
    """Sorted keys, no spaces: the same spec always gives the same text."""
    return json.dumps(spec, sort_keys=True, separators=(",", ":"), ensure_ascii=True, allow_nan=False)


def trial_id(spec: dict[str, Any]) -> str:
    """First 16 hex digits of the SHA-256 of the canonical spec."""
    return hashlib.sha256(canonical_json(spec).encode()).hexdigest()[:16]


@dataclass(frozen=True)
class PlannedTrial:
    """One trial to run: its id, its spec (what defines the experiment) and its labels in the experiment."""

    trial_id: str
    spec: dict[str, Any]
    env_label: str
    agent_label: str
    seed: int


def plan_trials(experiment: Experiment) -> list[PlannedTrial]:
    """Every (environment, agent variant, seed) of the experiment, environments first, then agents, then seeds."""
    ev = experiment.evaluation
    trials = []
    for env in experiment.environments:
        for agent in experiment.agents:
            for seed in experiment.seeds:
                spec = {
                    "format": SPEC_FORMAT,
                    "env": env.spec,
                    "agent": {"kind": agent.kind, "params": agent.params},
                    "seed": seed,
                    "real_steps": experiment.real_steps,
                    "evaluation": {
                        "every": ev.every,
                        "episodes": ev.episodes,
                        "step_cap": env.step_cap,
                        "training_window": ev.training_window,
                    },
                }
                spec = json.loads(canonical_json(spec))
                trials.append(PlannedTrial(trial_id(spec), spec, env.label, agent.label, seed))
    return trials
