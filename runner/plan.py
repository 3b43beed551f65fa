"""Expand an experiment into trial specs; a trial's id is a hash of its canonical spec.

Labels are not part of the spec, so renaming an agent or adding another changes no trial id, and the
same experiment is never run twice.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

from runner.agents import agent_class
from runner.config import Experiment
from runner.tags import seen_env_spec
from runner.trial_spec import SPEC_FORMAT, TrialSpec, canonical_json, trial_id

__all__ = ["SPEC_FORMAT", "PlannedTrial", "canonical_json", "plan_trials", "trial_id"]


@dataclass(frozen=True)
class PlannedTrial:
    """One trial to run: its id, its spec (what defines the experiment) and its labels in the experiment."""

    trial_id: str
    spec: dict[str, Any]
    env_label: str
    agent_label: str
    seed: int


def plan_trials(experiment: Experiment) -> list[PlannedTrial]:
    """Every (environment, agent variant, seed) of the experiment, environments first, then agents, then seeds.

    Kinds that take box observations run on a binned environment's box itself (`runner.tags.seen_env_spec`)."""
    ev = experiment.evaluation
    trials = []
    for env in experiment.environments:
        for agent in experiment.agents:
            env_spec = seen_env_spec(agent_class(agent.kind).tags, env.spec)
            for seed in experiment.seeds:
                spec = TrialSpec.build(
                    env_spec,
                    agent.kind,
                    agent.params_on(env.label),
                    seed,
                    experiment.real_steps,
                    every=ev.every,
                    episodes=ev.episodes,
                    step_cap=env.step_cap,
                    training_window=ev.training_window,
                ).as_dict()
                trials.append(PlannedTrial(trial_id(spec), spec, env.label, agent.label, seed))
    return trials
