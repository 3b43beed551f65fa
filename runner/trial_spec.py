"""The trial spec: a typed, frozen value with one canonical JSON form, whose hash is the trial id.

`TrialSpec.build` is the one builder that plan, checks, tests and benchmarks use. The canonical form is the same
JSON document the store has always held (format 1), so the ids of stored trials do not change.
"""

from __future__ import annotations

import hashlib
import json
from dataclasses import dataclass
from typing import Any

__all__ = ["SPEC_FORMAT", "EvaluationSpec", "TrialSpec", "canonical_json", "trial_id"]

SPEC_FORMAT = 1
"""Bumped when the meaning of a spec changes, so old ids never collide with new experiments."""


def canonical_json(spec: dict[str, Any]) -> str:
    """Sorted keys, no spaces: the same spec always gives the same text."""
    return json.dumps(spec, sort_keys=True, separators=(",", ":"), ensure_ascii=True, allow_nan=False)


def trial_id(spec: dict[str, Any]) -> str:
    """First 16 hex digits of the SHA-256 of the canonical spec."""
    return hashlib.sha256(canonical_json(spec).encode()).hexdigest()[:16]


@dataclass(frozen=True)
class EvaluationSpec:
    """Every `every` real steps, `episodes` greedy episodes cut at `step_cap` steps; the training return is
    averaged over the last `training_window` episodes."""

    every: int
    episodes: int
    step_cap: int
    training_window: int


@dataclass(frozen=True)
class TrialSpec:
    """Everything that defines one trial (labels excluded): environment spec, agent kind and parameters, seed,
    budget of real steps and the evaluation protocol."""

    env: dict[str, Any]
    kind: str
    params: dict[str, Any]
    seed: int
    real_steps: int
    evaluation: EvaluationSpec
    format: int = SPEC_FORMAT

    @classmethod
    def build(
        cls,
        env: dict[str, Any],
        kind: str,
        params: dict[str, Any],
        seed: int,
        real_steps: int,
        *,
        every: int,
        episodes: int,
        step_cap: int,
        training_window: int,
    ) -> TrialSpec:
        """The one builder of trial specs; values pass through canonical JSON, so a spec equals its reloaded self."""
        spec = cls(
            env=env,
            kind=kind,
            params=params,
            seed=int(seed),
            real_steps=int(real_steps),
            evaluation=EvaluationSpec(int(every), int(episodes), int(step_cap), int(training_window)),
        )
        return cls.from_json(spec.to_json())

    def as_dict(self) -> dict[str, Any]:
        """The JSON document stored with every result (the form `runner.trial.run_trial` takes)."""
        ev = self.evaluation
        return {
            "format": self.format,
            "env": self.env,
            "agent": {"kind": self.kind, "params": self.params},
            "seed": self.seed,
            "real_steps": self.real_steps,
            "evaluation": {
                "every": ev.every,
                "episodes": ev.episodes,
                "step_cap": ev.step_cap,
                "training_window": ev.training_window,
            },
        }

    def to_json(self) -> str:
        """The canonical JSON text (sorted keys, no spaces)."""
        return canonical_json(self.as_dict())

    @classmethod
    def from_dict(cls, data: dict[str, Any]) -> TrialSpec:
        """The spec of a stored JSON document."""
        ev = data["evaluation"]
        return cls(
            env=data["env"],
            kind=data["agent"]["kind"],
            params=data["agent"]["params"],
            seed=data["seed"],
            real_steps=data["real_steps"],
            evaluation=EvaluationSpec(ev["every"], ev["episodes"], ev["step_cap"], ev["training_window"]),
            format=data["format"],
        )

    @classmethod
    def from_json(cls, text: str) -> TrialSpec:
        """The spec of a canonical JSON text."""
        return cls.from_dict(json.loads(text))

    @property
    def trial_id(self) -> str:
        """The hash of the canonical JSON: the trial's id."""
        return trial_id(self.as_dict())
