"""All seeding in one place: a trial seed splits into independent streams with numpy's SeedSequence.

Seed k gives the environment the same stream whatever the agent, so agents are compared on paired seeds.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from runner.streams import new_stream

__all__ = ["TrialStreams", "held_out_sequence", "jax_key_data", "trial_streams"]


@dataclass(frozen=True)
class TrialStreams:
    """The random streams of one trial.

    `env` and `eval_env` seed the training and evaluation copies of the environment (a gymnasium reset seed,
    or a compiled stream on the compiled path); `agent` and `evaluation` are compiled streams
    (`runner.streams`) for the agent and for tie-breaking in greedy evaluation.
    """

    env: np.random.SeedSequence
    eval_env: np.random.SeedSequence
    agent: np.ndarray
    evaluation: np.ndarray

    @staticmethod
    def reset_seed(sequence: np.random.SeedSequence) -> int:
        """An integer seed for gymnasium's `reset(seed=...)` drawn from a sequence."""
        return int(sequence.generate_state(1, dtype=np.uint32)[0])


def trial_streams(seed: int) -> TrialStreams:
    """Derive the environment, agent and evaluation streams of a trial from its seed."""
    env_ss, agent_ss, eval_ss = np.random.SeedSequence(seed).spawn(3)
    eval_env_ss, eval_policy_ss = eval_ss.spawn(2)
    return TrialStreams(
        env=env_ss, eval_env=eval_env_ss, agent=new_stream(agent_ss), evaluation=new_stream(eval_policy_ss)
    )


def held_out_sequence(seed: int) -> np.random.SeedSequence:
    """The stream of a trial's held-out real transitions (`runner.models.held_out`): the trial seed's fourth
    child, independent of the three `trial_streams` spawns and the same for every agent of the seed."""
    return np.random.SeedSequence(seed, spawn_key=(3,))


def jax_key_data(source: int | np.random.SeedSequence | np.ndarray) -> np.ndarray:
    """Two uint32 words for `jax.random.wrap_key_data` (a threefry key): from a seed, a SeedSequence, or a compiled
    stream's state (`runner.streams`), always through a SeedSequence."""
    if isinstance(source, np.random.SeedSequence):
        sequence = source
    elif isinstance(source, np.ndarray):
        sequence = np.random.SeedSequence([int(word) for word in source.ravel()])
    else:
        sequence = np.random.SeedSequence(int(source))
    return sequence.generate_state(2, dtype=np.uint32)
