"""Arithmetic helpers shared by the dynamics kernels, so they round exactly as gymnasium's numpy code does.

Gymnasium's classic-control code mixes Python floats, numpy float64 scalars and float32 arrays. Three rules of
numpy 2 decide its last bits, and the kernels follow them:

- `x ** 2` on a numpy scalar calls C's `pow`, which differs from `x * x` in the last bit for about 1 value in
  1,700 (measured on this machine: 12 of 20,000 normal draws). LLVM folds `pow(x, 2.0)` into `x * x`, so the
  kernels pass the exponent at run time (`params[...]` holds 2.0) and `c_pow` keeps the libm call.
- A float32 operand with a Python float (a "weak" scalar, NEP 50) computes in float32: the Python float is
  rounded to float32 first. `as_f32` rounds a double to the nearest float32 and back; one float32 operation
  equals rounding the exact double result once (a double holds every float32 sum or product to within half a
  float32 unit), so `as_f32(a * b)` is numpy's float32 product.
- Comparisons of a float32 with a Python float also round the Python float to float32 first.
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit

from runner.streams import uniform

__all__ = ["as_f32", "c_pow", "c_powf", "uniform_between"]


@njit(cache=True)
def as_f32(x):
    """x rounded to the nearest float32, returned as a float64."""
    return np.float64(np.float32(x))


@njit(cache=True)
def c_pow(x, y):
    """C's pow(x, y) for doubles; give `y` at run time so the compiler keeps the libm call."""
    return math.pow(x, y)


@njit(cache=True)
def c_powf(x, y):
    """C's powf(x, y) on float32 values (as numpy's float32 scalar `x ** 2` does), returned as a float64."""
    return np.float64(math.pow(np.float32(x), np.float32(y)))


@njit(cache=True)
def uniform_between(stream, low, high):
    """A draw from [low, high) as numpy's Generator.uniform computes it: low + (high - low) * u."""
    return low + (high - low) * uniform(stream)
