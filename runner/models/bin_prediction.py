"""Compiled helpers that turn a tabular model on bins into a predicted next observation.

A tabular agent on a grid of bins (`runner.envs.bins`) learns which bin follows a (bin, action) pair, not which
observation. Its prediction of the next observation is the expected bin centre under its learned next-bin
distribution: the sum over learned successors of probability x centre, dimension by dimension (for a
last-outcome model, the centre of the one bin it remembers). Outcomes that ended the episode have no next bin,
so they are left out and the rest renormalised; a pair the model has never seen (or has only seen end an
episode) predicts the centre of its own bin, no movement, with reward 0. The centres are `bin_centres`
(outer bins as wide as their neighbours, so the clipping range of `counts` bins).

`grid` is the tuple (centres, centre_offsets, strides): every dimension's centres concatenated, dimension d owning
`centres[centre_offsets[d]:centre_offsets[d + 1]]`, and the row-major strides of the bins.
"""

import numpy as np
from numba import njit

__all__ = ["add_bin_centre", "grid_arrays", "no_prediction", "own_bin_centre"]


def grid_arrays(centres: list[np.ndarray], strides: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """The `grid` tuple of per-dimension centres (see `runner.envs.bins.bin_centres`) and the bins' strides."""
    offsets = np.concatenate(([0], np.cumsum([c.size for c in centres]))).astype(np.int64)
    return np.concatenate(centres).astype(np.float64), offsets, np.asarray(strides, dtype=np.int64)


@njit(cache=True)
def add_bin_centre(out, target, weight, grid):
    """Add `weight` x the centre of bin `target` to `out` (one entry per observation dimension)."""
    centres, offsets, strides = grid
    for d in range(out.shape[0]):
        count = offsets[d + 1] - offsets[d]
        k = (target // strides[d]) % count
        out[d] += weight * centres[offsets[d] + k]


@njit(cache=True)
def own_bin_centre(out, state, grid):
    """Predict no movement: the centre of the bin the agent is in (unseen pairs)."""
    out[:] = 0.0
    add_bin_centre(out, state, 1.0, grid)


@njit(cache=True)
def no_prediction(arrays, state, action, grid, out):
    """For kinds without a learned model: no prediction (NaN)."""
    out[:] = np.nan
    return np.nan
