"""Arithmetic helpers shared by the dynamics kernels, so they round exactly as gymnasium's numpy code does.

Gymnasium's classic-control code mixes Python floats, numpy float64 scalars and float32 arrays. Three rules of
numpy 2 decide its last bits, and the kernels follow them:

- `x ** 2` on a numpy scalar calls C's `pow`, which differs from `x * x` in the last bit for about 1 value in
  1,700 (measured on this machine: 12 of 20,000 normal draws). LLVM folds `pow(x, 2.0)` into `x * x`, so the
  kernels pass the exponent at run time (`params[...]` holds 2.0) and `c_square` keeps the libm call, or
  returns `x * x` where that is certainly what the call would return (see its docstring).
- A float32 operand with a Python float (a "weak" scalar, NEP 50) computes in float32: the Python float is
  rounded to float32 first. `as_f32` rounds a double to the nearest float32 and back; one float32 operation
  equals rounding the exact double result once (a double holds every float32 sum or product to within half a
  float32 unit), so `as_f32(a * b)` is numpy's float32 product.
- Comparisons of a float32 with a Python float also round the Python float to float32 first.
"""

from __future__ import annotations

import math

import numpy as np
from llvmlite import ir
from numba import njit, types
from numba.core import cgutils
from numba.extending import intrinsic

from runner.streams import uniform

__all__ = ["as_f32", "c_powf", "c_square", "fused_multiply_add", "uniform_between"]


@njit(cache=True, error_model="numpy")
def as_f32(x):
    """x rounded to the nearest float32, returned as a float64."""
    return np.float64(np.float32(x))


_SQUARE_LOW, _SQUARE_HIGH = 2.0**-960, 2.0**960
"""Squares outside this range (or near it) take the libm call: the error term below could underflow there."""
_EXPONENT_BITS = 0x7FF0000000000000
_FRACTION_BITS = 0x000FFFFFFFFFFFFF
_ULP_OF_ONE = 2.0**-52
"""A double's exponent and fraction fields, and the spacing of doubles in [1, 2): the unit in the last place of
p is its leading bit times this, read from p's bits (no `frexp`/`ldexp` calls, which cost more than the rest)."""


@intrinsic
def fused_multiply_add(typingctx, a, b, c):
    """a * b + c rounded once (LLVM's `llvm.fma`: the processor's instruction, or libm's `fma` without one)."""
    signature = types.float64(types.float64, types.float64, types.float64)

    def codegen(context, builder, sig, args):
        double = ir.DoubleType()
        fma = cgutils.get_or_insert_function(builder.module, ir.FunctionType(double, [double] * 3), "llvm.fma.f64")
        return builder.call(fma, args)

    return signature, codegen


@njit(cache=True, error_model="numpy")
def c_square(x, two):
    """C's pow(x, two) for two == 2.0 given at run time (a literal 2.0 lets LLVM fold the call into x * x),
    without the libm call when its result is certain.

    The exact error of the rounded square p = x * x is one fused multiply-add, x * x - p (the error of a rounded
    product is itself a double, so the result is exact). When x^2 lies within 0.45 of a unit in the last place
    of p (and p is not a power of two, where the spacing of doubles changes), x^2 is at least 0.05 units away
    from every rounding boundary, and `pow` returns p: its result is the rounded exact value give or take 0.04
    units (Arm's optimized-routines pow.c, used by glibc since 2.28 (from memory), states a worst-case error of
    0.54 units for any y, almost all of it the final rounding). Otherwise (about 1 call in 10) it calls `pow`,
    about three times slower. Tested equal to numpy's scalar `x ** 2` on 300,000 values.
    """
    p = x * x
    magnitude = abs(p)
    if _SQUARE_LOW < magnitude < _SQUARE_HIGH:
        err = fused_multiply_add(x, x, -p)
        bits = np.float64(magnitude).view(np.int64)
        if bits & _FRACTION_BITS != 0:  # not a power of two
            binade = np.int64(bits & _EXPONENT_BITS).view(np.float64)  # 2 ** floor(log2 p): p's leading bit
            if abs(err) <= 0.45 * _ULP_OF_ONE * binade:
                return p
    return math.pow(x, two)


@njit(cache=True, error_model="numpy")
def c_powf(x, y):
    """C's powf(x, y) on float32 values (as numpy's float32 scalar `x ** 2` does), returned as a float64."""
    return np.float64(math.pow(np.float32(x), np.float32(y)))


@njit(cache=True, error_model="numpy")
def uniform_between(stream, low, high):
    """A draw from [low, high) as numpy's Generator.uniform computes it: low + (high - low) * u."""
    return low + (high - low) * uniform(stream)
