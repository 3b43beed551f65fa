"""Observations on a grid of bins: a box observation becomes one whole number, so the tabular kinds run on it.

State aggregation (Sutton & Barto 2018, section 9.3): each dimension is cut at increasing interior edges; a value
falls in bin `i` when `edges[i - 1] <= value < edges[i]` (values below the first edge in bin 0, values at or
above the last in the last bin, so everything outside the edges is clipped into the outer bins), which is what
`numpy.digitize(value, edges)` returns. The bins of all dimensions combine in row-major order (the last
dimension varies fastest), as `numpy.ravel_multi_index` does.

An experiment gives the edges per dimension, or per-dimension `counts` of equal-width bins over `low`..`high`
(defaulting to the observation space's bounds where they are finite); the resolved spec always stores the edges.
"""

from __future__ import annotations

import itertools
import math
from typing import Any

import gymnasium as gym
import numpy as np
from numba import njit

__all__ = [
    "MAX_BINS_PER_DIMENSION",
    "MAX_BIN_STATES",
    "BinnedObservation",
    "BinsError",
    "bin_centres",
    "bin_index",
    "resolve_bins",
]

MAX_BINS_PER_DIMENSION = 10_000
MAX_BIN_STATES = 1_000_000
"""Most states a grid of bins may have: the tabular kinds keep arrays of states x actions (x successors)."""
_KEYS = ("counts", "low", "high", "edges")


class BinsError(ValueError):
    """A `bins:` block is malformed; `key` is the key at fault (a key path below `bins`), `message` says why."""

    def __init__(self, key: tuple, message: str) -> None:
        super().__init__(message)
        self.key = key


def _numbers(key: tuple, value: Any, size: int, what: str) -> list[float]:
    """A list of `size` finite numbers, or one number repeated."""
    if isinstance(value, (int, float)) and not isinstance(value, bool):
        value = [value] * size
    if not isinstance(value, list) or len(value) != size:
        raise BinsError(key, f"expected {what} for each of the {size} observation dimensions, got {value!r}")
    for i, item in enumerate(value):
        if isinstance(item, bool) or not isinstance(item, (int, float)) or not math.isfinite(item):
            raise BinsError((*key, i), f"expected a finite number, got {item!r}")
    return [float(v) for v in value]


def _space_bounds(space: gym.spaces.Box, which: str) -> list[float | None]:
    bounds = space.low if which == "low" else space.high
    return [float(b) if np.isfinite(b) else None for b in np.asarray(bounds, dtype=np.float64)]


def resolve_bins(data: Any, space: gym.Space) -> dict[str, list[list[float]]]:
    """The resolved `{"edges": [[...], ...]}` of a `bins:` block for a box observation space; BinsError if bad."""
    if not isinstance(space, gym.spaces.Box) or len(space.shape) != 1:
        raise BinsError((), f"expected an environment with flat box observations to bin, it gives {space}")
    if not isinstance(data, dict):
        raise BinsError((), "expected a mapping with counts (and low, high) or edges")
    unknown = [k for k in data if k not in _KEYS]
    if unknown:
        raise BinsError((unknown[0],), f"unknown key; expected one of {', '.join(_KEYS)}")
    size = int(space.shape[0])
    if "edges" in data:
        if any(k in data for k in ("counts", "low", "high")):
            raise BinsError(("edges",), "expected either edges or counts (with low and high), not both")
        edges = data["edges"]
        if not isinstance(edges, list) or len(edges) != size:
            raise BinsError(("edges",), f"expected a list of interior edges for each of the {size} dimensions")
        resolved = []
        for d, row in enumerate(edges):
            if not isinstance(row, list):
                raise BinsError(("edges", d), f"expected a list of strictly increasing edges, got {row!r}")
            values = _numbers(("edges", d), row, len(row), "a list of edges")
            if not values or any(b <= a for a, b in itertools.pairwise(values)):
                raise BinsError(("edges", d), f"expected at least one strictly increasing edge, got {row!r}")
            if len(values) + 1 > MAX_BINS_PER_DIMENSION:
                raise BinsError(("edges", d), f"expected at most {MAX_BINS_PER_DIMENSION - 1:,} edges")
            resolved.append(values)
    else:
        if "counts" not in data:
            raise BinsError((), "expected counts (bins per dimension, with low and high) or edges")
        counts = data["counts"]
        if isinstance(counts, int) and not isinstance(counts, bool):
            counts = [counts] * size
        if not isinstance(counts, list) or len(counts) != size:
            raise BinsError(("counts",), f"expected a bin count for each of the {size} dimensions, got {counts!r}")
        for d, c in enumerate(counts):
            if isinstance(c, bool) or not isinstance(c, int) or not 1 <= c <= MAX_BINS_PER_DIMENSION:
                raise BinsError(("counts", d), f"expected a whole number in [1, {MAX_BINS_PER_DIMENSION:,}], got {c!r}")
        ranges = {}
        for which in ("low", "high"):
            if which in data:
                ranges[which] = _numbers((which,), data[which], size, "a number")
            else:
                bounds = _space_bounds(space, which)
                missing = [d for d, b in enumerate(bounds) if b is None]
                if missing:
                    raise BinsError(
                        (),
                        f"missing {which}: observation dimension {missing[0]} is unbounded, so give {which} "
                        f"(a number per dimension) to clip it",
                    )
                ranges[which] = bounds
        resolved = []
        for d, (c, lo, hi) in enumerate(zip(counts, ranges["low"], ranges["high"], strict=True)):
            if not lo < hi:
                raise BinsError(("high", d), f"expected high above low ({lo:g}), got {hi:g}")
            resolved.append([float(e) for e in np.linspace(lo, hi, c + 1)[1:-1]])
    states = math.prod(len(e) + 1 for e in resolved)
    if states > MAX_BIN_STATES:
        raise BinsError((), f"expected at most {MAX_BIN_STATES:,} bins in all, these make {states:,}")
    return {"edges": resolved}


class BinnedObservation(gym.ObservationWrapper):
    """Replaces a flat box observation by the index of its bin (see the module docstring)."""

    def __init__(self, env: gym.Env, edges: list[list[float]]) -> None:
        super().__init__(env)
        self._edges = [np.asarray(e, dtype=np.float64) for e in edges]
        counts = [e.size + 1 for e in self._edges]
        self._strides = [math.prod(counts[d + 1 :]) for d in range(len(counts))]
        self.observation_space = gym.spaces.Discrete(math.prod(counts))

    def observation(self, observation: Any) -> int:
        """The bin index of a box observation."""
        values = np.asarray(observation, dtype=np.float64)
        index = 0
        for value, edges, stride in zip(values, self._edges, self._strides, strict=True):
            index += int(np.searchsorted(edges, value, side="right")) * stride
        return index


@njit(cache=True)
def bin_index(obs, edges, edge_offsets, strides):
    """The bin of an observation in compiled code: what `BinnedObservation.observation` returns, with every
    dimension's interior edges concatenated in `edges` (dimension d owns `edges[edge_offsets[d]:edge_offsets[d + 1]]`)
    and the row-major `strides` of the bins."""
    index = 0
    for d in range(obs.shape[0]):
        k = np.searchsorted(edges[edge_offsets[d] : edge_offsets[d + 1]], obs[d], side="right")
        index += k * strides[d]
    return index


def bin_centres(edges: list[list[float]], space: gym.spaces.Box) -> list[np.ndarray]:
    """The centre of every bin, per dimension: what a model that knows only bins predicts for a bin.

    Interior bins have two edges. The outer bins hold everything outside the edges, so they get the width of
    their neighbouring interior bin: for bins made from `counts` over `low`..`high` that is exactly the outer
    bin inside the clipping range (the resolved spec keeps only the edges, and this recovers `low` and `high`).
    A dimension cut at a single edge has no neighbour to copy: its outer bins reach the observation space's bound
    where it is finite, else they are centred on the edge itself.
    """
    low, high = _space_bounds(space, "low"), _space_bounds(space, "high")
    centres = []
    for d, row in enumerate(edges):
        e = np.asarray(row, dtype=np.float64)
        if e.size >= 2:
            first, last = e[0] - (e[1] - e[0]) / 2, e[-1] + (e[-1] - e[-2]) / 2
        else:
            first = (low[d] + e[0]) / 2 if low[d] is not None else e[0]
            last = (high[d] + e[0]) / 2 if high[d] is not None else e[0]
        centres.append(np.concatenate(([first], (e[:-1] + e[1:]) / 2, [last])))
    return centres
