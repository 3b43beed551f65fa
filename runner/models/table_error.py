"""Compiled helpers that read the true outcome distribution of a (state, action) pair from a flat table.

The table tuple is the one the compiled trial path uses: (start_cdf, offsets, cdf, next_state, reward,
terminated, step_limit). Learned models record an ended episode as successor `n_states`; so do these helpers.
"""

import numpy as np
from numba import njit

__all__ = ["no_model_error", "true_mean_reward", "true_probability"]


@njit(cache=True)
def _outcome_probability(cdf, offsets, j, pair):
    return cdf[j] - (cdf[j - 1] if j > offsets[pair] else 0.0)


@njit(cache=True)
def true_probability(table, pair, target, n_states):
    """P(target | pair) under the table; target `n_states` means "the episode ended"."""
    _, offsets, cdf, next_state, _, terminated, _ = table
    total = 0.0
    for j in range(offsets[pair], offsets[pair + 1]):
        outcome = n_states if terminated[j] else next_state[j]
        if outcome == target:
            total += _outcome_probability(cdf, offsets, j, pair)
    return total


@njit(cache=True)
def true_mean_reward(table, pair):
    """Expected reward of a (state, action) pair under the table."""
    _, offsets, cdf, _, reward, _, _ = table
    total = 0.0
    for j in range(offsets[pair], offsets[pair + 1]):
        total += _outcome_probability(cdf, offsets, j, pair) * reward[j]
    return total


@njit(cache=True)
def no_model_error(arrays, table):
    """For model-free agents: no model, so no model error."""
    return np.nan, np.nan
