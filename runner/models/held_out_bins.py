"""Held-out model errors of a tabular model on bins, in compiled code and from Python.

A tabular agent on a grid of bins predicts the next observation as an expected bin centre
(`runner.models.bin_prediction`). The step-by-step path measures it with `runner.models.held_out.model_errors`
through `bin_predictor`; the compiled loop on compiled dynamics calls `bin_model_errors` at each evaluation
point on the same held-out transitions, passed in as arrays (`held_out_arrays`). Both compute the same numbers
(root mean square over transitions and varying dimensions, each divided by its spread; mean absolute reward
error; open-loop errors after `ROLLOUT_STEPS`), which `tests/test_bin_model_error.py` checks on a fixed model.
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

import gymnasium as gym
import numpy as np
from numba import literally, njit

from runner.compiled_trial import agent_predict
from runner.envs.bins import bin_centres, bin_index
from runner.models.bin_prediction import grid_arrays
from runner.models.held_out import ROLLOUT_STEPS, HeldOut

__all__ = [
    "bin_arrays",
    "bin_model_errors",
    "bin_predictor",
    "error_sums",
    "held_out_arrays",
    "held_out_errors",
    "root_mean",
    "scaled_squares",
    "score_one_step",
    "score_open_loop",
]

_SHORT, _LONG = ROLLOUT_STEPS


def bin_arrays(edges: list[list[float]], space: gym.spaces.Box) -> tuple[tuple, tuple]:
    """(bins, grid) of a grid of bins over `space`: bins = (edges, edge_offsets, strides) as `bin_index` reads
    them, grid = (centres, centre_offsets, strides) as the prediction kernels read it."""
    rows = [np.asarray(e, dtype=np.float64) for e in edges]
    counts = [e.size + 1 for e in rows]
    strides = np.array([int(np.prod(counts[d + 1 :])) for d in range(len(counts))], dtype=np.int64)
    offsets = np.concatenate(([0], np.cumsum([e.size for e in rows]))).astype(np.int64)
    bins = (np.concatenate(rows), offsets, strides)
    return bins, grid_arrays(bin_centres(edges, space), strides)


def held_out_arrays(held: HeldOut | None, dim: int) -> tuple[np.ndarray, ...]:
    """(starts, actions, observations, rewards, lengths, spread) of a held-out set of discrete-action runs, with
    actions padded into an int64 array (n_runs, length); no runs when `held` is None (nothing is measured)."""
    if held is None:
        return (
            np.zeros((0, dim)),
            np.zeros((0, 1), dtype=np.int64),
            np.zeros((0, 1, dim)),
            np.zeros((0, 1)),
            np.zeros(0, dtype=np.int64),
            np.zeros(dim),
        )
    actions = np.zeros(held.rewards.shape, dtype=np.int64)
    for i, run in enumerate(held.actions):
        actions[i, : len(run)] = [int(a) for a in run]
    return held.starts, actions, held.observations, held.rewards, held.lengths, held.spread


def bin_predictor(agent: Any, bins: tuple, grid: tuple) -> Callable[[np.ndarray, Any], tuple[np.ndarray, float]]:
    """`predict(observation, action) -> (next observation, reward)` of a tabular agent's model on bins."""
    edges, edge_offsets, strides = bins
    dim = edge_offsets.size - 1

    def predict(observation: np.ndarray, action: Any) -> tuple[np.ndarray, float]:
        state = bin_index(np.asarray(observation, dtype=np.float64), edges, edge_offsets, strides)
        out = np.zeros(dim)
        reward = agent.predict_kernel(agent.arrays_, state, int(action), grid, out)
        return out, float(reward)

    return predict


@njit(cache=True)
def scaled_squares(predicted, real, spread):
    """Sum of squared errors over the dimensions that vary, each divided by its spread."""
    total = 0.0
    for d in range(real.shape[0]):
        if spread[d] > 0:
            total += ((predicted[d] - real[d]) / spread[d]) ** 2
    return total


@njit(cache=True)
def root_mean(total, count, varying):
    """Root mean of a sum of squares over `count` transitions and `varying` dimensions; NaN when empty."""
    if count == 0 or varying == 0:
        return np.nan
    return np.sqrt(total / (count * varying))


_ONE_STEP, _REWARD_ERROR, _TRANSITIONS, _SHORT_SUM, _N_SHORT, _LONG_SUM, _N_LONG = range(7)


@njit(cache=True)
def error_sums():
    """Empty running sums of a held-out measurement: one-step squares, absolute reward errors, transitions,
    open-loop squares after the short rollout and their count, after the long rollout and their count."""
    return np.zeros(7)


@njit(cache=True)
def score_one_step(sums, predicted, real, predicted_reward, real_reward, spread):
    """Add one held-out transition's one-step prediction (next observation and reward) to `sums`."""
    sums[_ONE_STEP] += scaled_squares(predicted, real, spread)
    sums[_REWARD_ERROR] += abs(predicted_reward - real_reward)
    sums[_TRANSITIONS] += 1


@njit(cache=True)
def score_open_loop(sums, t, imagined, real, spread):
    """Add the open-loop prediction `imagined` after t + 1 of the model's own steps, at the rollout lengths."""
    if t + 1 == _SHORT:
        sums[_SHORT_SUM] += scaled_squares(imagined, real, spread)
        sums[_N_SHORT] += 1
    if t + 1 == _LONG:
        sums[_LONG_SUM] += scaled_squares(imagined, real, spread)
        sums[_N_LONG] += 1


@njit(cache=True)
def held_out_errors(sums, spread):
    """(one-step error, mean absolute reward error, open-loop errors after 5 and 20 steps) from the running sums;
    NaN where nothing was measured."""
    varying = 0
    for d in range(spread.shape[0]):
        if spread[d] > 0:
            varying += 1
    transitions = sums[_TRANSITIONS]
    mean_reward_error = sums[_REWARD_ERROR] / transitions if transitions > 0 else np.nan
    return (
        root_mean(sums[_ONE_STEP], transitions, varying),
        mean_reward_error,
        root_mean(sums[_SHORT_SUM], sums[_N_SHORT], varying),
        root_mean(sums[_LONG_SUM], sums[_N_LONG], varying),
    )


@njit(cache=True)
def bin_model_errors(kind, arrays, bins, grid, held):
    """(one-step error, mean absolute reward error, open-loop errors after 5 and 20 steps) of agent kind `kind`'s
    model on bins over the held-out arrays (see `runner.models.held_out`); NaN when there are no runs."""
    edges, edge_offsets, strides = bins
    starts, actions, observations, rewards, lengths, spread = held
    dim = starts.shape[1]
    predicted = np.zeros(dim)
    imagined = np.zeros(dim)
    sums = error_sums()
    for i in range(starts.shape[0]):
        imagined[:] = starts[i]
        for t in range(lengths[i]):
            before = starts[i] if t == 0 else observations[i, t - 1]
            s = bin_index(before, edges, edge_offsets, strides)
            reward = agent_predict(literally(kind), arrays, s, actions[i, t], grid, predicted)
            score_one_step(sums, predicted, observations[i, t], reward, rewards[i, t], spread)
            s = bin_index(imagined, edges, edge_offsets, strides)
            agent_predict(literally(kind), arrays, s, actions[i, t], grid, imagined)
            score_open_loop(sums, t, imagined, observations[i, t], spread)
    return held_out_errors(sums, spread)
