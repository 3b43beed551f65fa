"""Random streams that compiled code can advance cheaply: numpy's SFC64 generator, stepped in numba.

Passing a `numpy.random.Generator` into a numba function costs about 10 microseconds per call (measured:
the argument's type is resolved in Python each time), more than a whole tabular update. So a stream here is
the 4-word state of a `numpy.random.SFC64` bit generator, seeded through `numpy.random.SeedSequence`, held in a
uint64 array that kernels advance in place. `next_word` reproduces `SFC64.random_raw()` and `uniform`
reproduces `Generator(SFC64).random()` bit for bit (tested against numpy).
"""

from __future__ import annotations

import numpy as np
from numba import njit

__all__ = ["as_stream", "below", "new_stream", "next_word", "uniform"]

_U11 = np.uint64(11)
_U3 = np.uint64(3)
_U24 = np.uint64(24)
_U40 = np.uint64(40)
_ONE = np.uint64(1)
_TWO_TO_MINUS_53 = 1.0 / 9007199254740992.0


def new_stream(seed: int | np.random.SeedSequence) -> np.ndarray:
    """A fresh stream (uint64 array of shape (4,)) from a seed or a SeedSequence."""
    sequence = seed if isinstance(seed, np.random.SeedSequence) else np.random.SeedSequence(seed)
    return np.random.SFC64(sequence).state["state"]["state"].astype(np.uint64).copy()


def as_stream(source: int | np.random.SeedSequence | np.ndarray) -> np.ndarray:
    """Accept a stream array as it is (it will be advanced in place), or build one from a seed."""
    if isinstance(source, np.ndarray):
        if source.dtype != np.uint64 or source.shape != (4,):
            raise ValueError(f"a stream is a uint64 array of shape (4,), got {source.dtype} {source.shape}")
        return source
    return new_stream(source)


@njit(cache=True)
def next_word(stream):
    """The next 64-bit output of the SFC64 recurrence; advances the stream in place."""
    tmp = stream[0] + stream[1] + stream[3]
    stream[3] += _ONE
    stream[0] = stream[1] ^ (stream[1] >> _U11)
    stream[1] = stream[2] + (stream[2] << _U3)
    stream[2] = ((stream[2] << _U24) | (stream[2] >> _U40)) + tmp
    return tmp


@njit(cache=True)
def uniform(stream):
    """A double in [0, 1) from the top 53 bits of the next word, as numpy's Generator.random() does."""
    return (next_word(stream) >> _U11) * _TWO_TO_MINUS_53


@njit(cache=True)
def below(stream, n):
    """An integer in [0, n): floor(uniform * n); the bias is at most n / 2**53 (common practice)."""
    return np.int64(uniform(stream) * n)
