"""Clocks readable from compiled code without leaving it: `wall_clock()` and `cpu_clock()` in seconds.

They call the C library's `clock_gettime` straight from the machine code, with the clocks Python itself uses for
`time.perf_counter` and `time.process_time`, so their readings agree with Python's. Reading the time through
numba's object mode instead would compile a fresh wrapper in every process (object-mode blocks are never
cached), about 0.3 s per clock in each worker; and it costs microseconds per look.
"""

from __future__ import annotations

import ctypes
import time

from llvmlite import ir
from numba import njit, types
from numba.core import cgutils
from numba.extending import intrinsic

__all__ = ["cpu_clock", "wall_clock"]

_WALL = time.CLOCK_MONOTONIC
_CPU = time.CLOCK_PROCESS_CPUTIME_ID
_LONG = ir.IntType(8 * ctypes.sizeof(ctypes.c_long))
"""`struct timespec` is two C longs (seconds, nanoseconds) on the POSIX systems stepmeter runs on."""


@intrinsic
def _clock_gettime(typingctx, clock_id):
    """Seconds on the POSIX clock `clock_id`, as a float64."""
    signature = types.float64(clock_id)

    def codegen(context, builder, sig, args):
        timespec = ir.LiteralStructType([_LONG, _LONG])
        function_type = ir.FunctionType(ir.IntType(32), [ir.IntType(32), timespec.as_pointer()])
        function = cgutils.get_or_insert_function(builder.module, function_type, "clock_gettime")
        slot = cgutils.alloca_once(builder, timespec)
        builder.call(function, [builder.trunc(args[0], ir.IntType(32)), slot])
        seconds = builder.sitofp(builder.load(cgutils.gep_inbounds(builder, slot, 0, 0)), ir.DoubleType())
        nanoseconds = builder.sitofp(builder.load(cgutils.gep_inbounds(builder, slot, 0, 1)), ir.DoubleType())
        return builder.fadd(seconds, builder.fmul(nanoseconds, ir.Constant(ir.DoubleType(), 1e-9)))

    return signature, codegen


@njit(cache=True)
def wall_clock():
    """`time.perf_counter()` from compiled code."""
    return _clock_gettime(_WALL)


@njit(cache=True)
def cpu_clock():
    """`time.process_time()` from compiled code."""
    return _clock_gettime(_CPU)
