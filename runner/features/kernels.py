"""Compiled feature kernels shared by every linear agent: an observation in, active indices and values out.

A feature map is a tuple of arrays (see `runner.features.spec.build_feature_map`):
`(ints, floats, low, high, table)` with `ints = [kind, dims, tilings, tiles, hash_size, n_features, n_active]`,
`floats = [width]`, the scaling bounds, and a table: the tilings' offsets (tiles), or Fourier coefficient
vectors or RBF centres (one row per feature). Every kind writes `n_active` (index, value) pairs, so linear
values are `sum_i w[idx[i]] * val[i]` whether the features are sparse (tiles) or dense (RBF, Fourier, raw).
"""

import numpy as np
from numba import njit

__all__ = ["FOURIER", "KIND_CODES", "RAW", "RBF", "TILES", "feature_values", "scaled", "tile_indices", "tile_shifts"]

TILES, RBF, FOURIER, RAW = 0, 1, 2, 3
KIND_CODES = {"tiles": TILES, "rbf": RBF, "fourier": FOURIER, "raw": RAW}
_KIND, _DIMS, _TILINGS, _TILES, _HASH, _N_FEATURES, _N_ACTIVE = range(7)
_FNV_OFFSET = np.uint64(14695981039346656037)
_FNV_PRIME = np.uint64(1099511628211)


@njit(cache=True, inline="always")
def scaled(obs, low, high, d):
    """Dimension d of the observation scaled to [0, 1] by the bounds, clipped."""
    x = (obs[d] - low[d]) / (high[d] - low[d])
    return min(max(x, 0.0), 1.0)


def tile_shifts(tilings: int, dims: int) -> np.ndarray:
    """Offsets of the tilings in tile widths: ((t * (2d + 1)) mod tilings) / tilings (shape (tilings, dims))."""
    t, d = np.meshgrid(np.arange(tilings), np.arange(dims), indexing="ij")
    return ((t * (2 * d + 1)) % tilings) / tilings


@njit(cache=True, inline="always")
def tile_indices(obs, ints, low, high, shifts, out):
    """One active tile per tiling (Sutton & Barto 2018, section 9.5.4).

    Tiling t is shifted along dimension d by ((t * (2d + 1)) mod tilings) / tilings of a tile width (the
    asymmetric offsets the book recommends), so each tiling covers [0, 1] with `tiles + 1` tiles per dimension.
    Without hashing, tiling t owns the block [t * (tiles + 1)**dims, (t + 1) * (tiles + 1)**dims); with hashing,
    (t, tile coordinates) are hashed (FNV-1a, common practice) into [0, hash_size). `shifts[t, d]` holds the
    offsets (`tile_shifts`).
    """
    dims, tilings, tiles, hash_size = ints[_DIMS], ints[_TILINGS], ints[_TILES], ints[_HASH]
    per_tiling = ints[_N_FEATURES] // tilings
    for t in range(tilings):
        index = 0
        h = (_FNV_OFFSET ^ np.uint64(t)) * _FNV_PRIME
        for d in range(dims):
            coord = np.int64(scaled(obs, low, high, d) * tiles + shifts[t, d])  # non-negative: truncation floors
            index = index * (tiles + 1) + coord
            if hash_size > 0:
                h = (h ^ np.uint64(coord)) * _FNV_PRIME
        out[t] = np.int64(h % np.uint64(hash_size)) if hash_size > 0 else t * per_tiling + index


@njit(cache=True, inline="always")
def feature_values(obs, fmap, idx, val):
    """Write the active (index, value) pairs of an observation into idx and val; return how many there are."""
    ints, floats, low, high, table = fmap
    kind, dims, n_features = ints[_KIND], ints[_DIMS], ints[_N_FEATURES]
    if kind == TILES:
        tile_indices(obs, ints, low, high, table, idx)
        for t in range(ints[_TILINGS]):
            val[t] = 1.0
        return ints[_TILINGS]
    if kind == RAW:
        for d in range(dims):
            idx[d] = d
            val[d] = obs[d]
        idx[dims] = dims
        val[dims] = 1.0
        return dims + 1
    width = floats[0]
    for i in range(n_features):
        total = 0.0
        for d in range(dims):
            s = scaled(obs, low, high, d)
            if kind == FOURIER:
                total += table[i, d] * s
            else:
                total += (s - table[i, d]) ** 2
        idx[i] = i
        val[i] = np.cos(np.pi * total) if kind == FOURIER else np.exp(-total / (2.0 * width * width))
    return n_features
