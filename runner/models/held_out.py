"""How far a learned function model is from the real environment, on real transitions it never learned from.

At the start of a trial, `collect_held_out` records `sequences` short runs of uniformly random actions from the
environment's start states, on a copy of the environment with its own stream from the trial seed (so every agent
of a seed is judged on the same transitions, and none of them ever sees them). At every evaluation point,
`model_errors` asks the agent's `predict(observation, action) -> (next_observation, reward)`:

- one-step error: for every held-out transition, the prediction from the real observation against the real next
  observation;
- open-loop error after k steps: from each run's start, the model's own predictions fed back for k steps under
  the run's actions, against the real observation after k steps (runs that ended before k steps are left out).

Errors are root mean squares over transitions and dimensions, each dimension divided by its spread (the standard
deviation of the held-out observations; dimensions that never vary are left out), so 1 means "off by a typical
spread". The reward error is the mean absolute one-step reward error.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

import gymnasium as gym
import numpy as np

__all__ = ["ROLLOUT_STEPS", "HeldOut", "collect_held_out", "held_out_columns", "model_errors"]

ROLLOUT_STEPS = (5, 20)
"""The open-loop horizons reported beside the one-step error (metric columns model_error_5 and model_error_20)."""


@dataclass(frozen=True)
class HeldOut:
    """`starts` (n_runs, dim); `actions` a list per run; `observations` (n_runs, length, dim) after each action;
    `rewards` (n_runs, length); `lengths` (n_runs,) steps before the run ended; `spread` (dim,)."""

    starts: np.ndarray
    actions: list[list[Any]]
    observations: np.ndarray
    rewards: np.ndarray
    lengths: np.ndarray
    spread: np.ndarray


def collect_held_out(env: gym.Env, sequence: np.random.SeedSequence, sequences: int = 50, length: int = 20) -> HeldOut:
    """Record `sequences` runs of at most `length` random actions (drawn from `sequence`) from reset states."""
    rng = np.random.default_rng(sequence)
    env.action_space.seed(int(rng.integers(2**31)))
    dim = int(np.prod(env.observation_space.shape))
    starts = np.zeros((sequences, dim))
    observations = np.zeros((sequences, length, dim))
    rewards = np.zeros((sequences, length))
    lengths = np.zeros(sequences, dtype=np.int64)
    actions: list[list[Any]] = []
    for i in range(sequences):
        obs, _ = env.reset(seed=int(rng.integers(2**31)))
        starts[i] = np.asarray(obs, dtype=np.float64).ravel()
        run = []
        for t in range(length):
            action = env.action_space.sample()
            obs, reward, terminated, truncated, _ = env.step(action)
            run.append(action)
            observations[i, t] = np.asarray(obs, dtype=np.float64).ravel()
            rewards[i, t] = float(reward)
            lengths[i] = t + 1
            if terminated or truncated:
                break
        actions.append(run)
    seen = np.concatenate([starts, *(observations[i, : lengths[i]] for i in range(sequences))])
    return HeldOut(starts, actions, observations, rewards, lengths, seen.std(axis=0))


def _rms(errors: list[np.ndarray], spread: np.ndarray) -> float:
    varying = spread > 0
    if not errors or not varying.any():
        return float("nan")
    scaled = np.array(errors)[:, varying] / spread[varying]
    return float(np.sqrt(np.mean(scaled**2)))


def model_errors(
    predict: Callable[[np.ndarray, Any], tuple[Any, float]], held: HeldOut
) -> tuple[float, float, float, float]:
    """(one-step error, one-step mean absolute reward error, open-loop error after 5 steps, after 20 steps)."""
    one_step, reward_errors = [], []
    rollouts: dict[int, list[np.ndarray]] = {k: [] for k in ROLLOUT_STEPS}
    for i, run in enumerate(held.actions):
        previous = held.starts[i]
        imagined = held.starts[i]
        for t, action in enumerate(run):
            predicted, reward = predict(previous.copy(), action)
            one_step.append(np.asarray(predicted, dtype=np.float64).ravel() - held.observations[i, t])
            reward_errors.append(abs(float(reward) - held.rewards[i, t]))
            previous = held.observations[i, t]
            imagined = np.asarray(predict(imagined.copy(), action)[0], dtype=np.float64).ravel()
            if t + 1 in rollouts:
                rollouts[t + 1].append(imagined - held.observations[i, t])
    return (
        _rms(one_step, held.spread),
        float(np.mean(reward_errors)) if reward_errors else float("nan"),
        *(_rms(rollouts[k], held.spread) for k in ROLLOUT_STEPS),
    )


def held_out_columns(
    held: HeldOut | None, honesty: Callable[[HeldOut], Any] | None, predict: Callable[[np.ndarray, Any], Any] | None
) -> dict[str, float]:
    """The metric columns a model's held-out measurement fills at an evaluation point: all of `honesty(held)`'s
    (`runner.neural.model_error.ModelHonesty.columns`: errors, predicted spread, coverage) when it gives one, else
    the errors of `predict` (`model_errors`), else none (no held-out set or no model)."""
    if held is None:
        return {}
    measured = honesty(held) if honesty is not None else None
    if measured is not None:
        return measured.columns()
    if predict is None:
        return {}
    one_step, reward_error, short, long = model_errors(predict, held)
    return {
        "model_error_1": one_step,
        "model_reward_error": reward_error,
        "model_error_5": short,
        "model_error_20": long,
    }
