"""All seeding in one place: a trial seed splits into independent streams with numpy's SeedSequence.

Seed k gives the environment the same stream whatever the agent, so agents are compared on paired seeds.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from runner.streams import new_stream

__all__ = ["TrialStreams", "trial_streams"]


@dataclass(frozen=True)
class TrialStreams:
    """The random streams of one trial: gymnasium seeds for the two environment copies, compiled streams
    (`runner.streams`) for the agent and for tie-breaking in greedy evaluation."""

    env_seed: int
    eval_env_seed: int
    agent: np.ndarray
    evaluation: np.ndarray


def trial_streams(seed: int) -> TrialStreams:
    """Derive the environment, agent and evaluation streams of a trial from its seed."""
    env_ss, agent_ss, eval_ss = np.random.SeedSequence(seed).spawn(3)
    eval_env_ss, eval_policy_ss = eval_ss.spawn(2)
    return TrialStreams(
        env_seed=int(env_ss.generate_state(1, dtype=np.uint32)[0]),
        eval_env_seed=int(eval_env_ss.generate_state(1, dtype=np.uint32)[0]),
        agent=new_stream(agent_ss),
        evaluation=new_stream(eval_policy_ss),
    )
