"""Counter-based random numbers and a prefetch hint for the compiled kernels.

Private to :mod:`service.analytics`; shared by the forward-simulation kernels
(:mod:`._kernels`) and the RR-set kernels (:mod:`._rr_kernels`,
:mod:`._rr_lanes`), so both draw from the same generator.

SplitMix64 [1]_: a stream is a 64-bit state advanced by the golden-ratio
increment ``GAMMA``; each output is ``mix64(state)``. Because the state after
``k`` steps is simply ``start + k * GAMMA``, a kernel can give every run or RR
set its own stream (its start a hash of a key and the run number) and results
never depend on how the work was split into batches, threads or lanes.

numba's on-disk cache keys a function on its own file only: after editing this
module, clear ``__pycache__`` (or touch the kernel files) so that dependants
are recompiled.

References
----------
.. [1] G. L. Steele, D. Lea, C. H. Flood (2014). Fast splittable pseudorandom
   number generators. OOPSLA '14.
"""

from __future__ import annotations

from typing import Any

import numpy as np
from llvmlite import ir
from numba import njit, types
from numba.core import cgutils
from numba.extending import intrinsic

__all__ = [
    "GAMMA",
    "M1",
    "M2",
    "S11",
    "S27",
    "S30",
    "S31",
    "S32",
    "LO32",
    "TWO_M53",
    "TWO_53",
    "mix64",
    "unit_open0",
    "unit",
    "prefetch",
    "ctz",
]

GAMMA = np.uint64(0x9E3779B97F4A7C15)
M1 = np.uint64(0xBF58476D1CE4E5B9)
M2 = np.uint64(0x94D049BB133111EB)
S11 = np.uint64(11)
S27 = np.uint64(27)
S30 = np.uint64(30)
S31 = np.uint64(31)
S32 = np.uint64(32)
LO32 = np.uint64(0xFFFFFFFF)
TWO_M53 = 2.0**-53
TWO_53 = 9007199254740992.0


@njit(cache=True, nogil=True, inline="always")
def mix64(z: np.uint64) -> np.uint64:
    """The SplitMix64 output function (a bijection of 64-bit words)."""
    z = (z ^ (z >> S30)) * M1
    z = (z ^ (z >> S27)) * M2
    return z ^ (z >> S31)


@njit(cache=True, nogil=True, inline="always")
def unit_open0(x: np.uint64) -> float:
    """A uniform number in (0, 1] from the top 53 bits of ``x`` (safe to take the log of)."""
    return (float(x >> S11) + 1.0) * TWO_M53


@njit(cache=True, nogil=True, inline="always")
def unit(x: np.uint64) -> float:
    """A uniform number in [0, 1) from the top 53 bits of ``x``."""
    return float(x >> S11) * TWO_M53


def _prefetch(typingctx, arr, idx):  # type: ignore[no-untyped-def]
    """Hint the CPU to load ``arr[idx]`` into cache (``llvm.prefetch``; no effect on results)."""
    sig = types.void(arr, idx)

    def codegen(context, builder, signature, args):  # type: ignore[no-untyped-def]
        aty = signature.args[0]
        ary = context.make_array(aty)(context, builder, args[0])
        ptr = cgutils.get_item_pointer(  # type: ignore[no-untyped-call]  # numba is untyped
            context, builder, aty, ary, [args[1]], wraparound=False, boundscheck=False
        )
        i32 = ir.IntType(32)
        ptr = builder.bitcast(ptr, ir.IntType(8).as_pointer())
        fnty = ir.FunctionType(ir.VoidType(), [ptr.type, i32, i32, i32])
        fn = cgutils.get_or_insert_function(  # type: ignore[no-untyped-call]
            builder.module, fnty, "llvm.prefetch.p0"
        )
        # read access, high temporal locality, data cache
        builder.call(fn, [ptr, ir.Constant(i32, 0), ir.Constant(i32, 3), ir.Constant(i32, 1)])
        return context.get_dummy_value()

    return sig, codegen


def _ctz(typingctx, x):  # type: ignore[no-untyped-def]
    """The index of the lowest set bit of a non-zero int64 (``llvm.cttz``)."""
    sig = types.int64(types.int64)

    def codegen(context, builder, signature, args):  # type: ignore[no-untyped-def]
        i64 = ir.IntType(64)
        fnty = ir.FunctionType(i64, [i64, ir.IntType(1)])
        fn = cgutils.get_or_insert_function(  # type: ignore[no-untyped-call]
            builder.module, fnty, "llvm.cttz.i64"
        )
        return builder.call(fn, [args[0], ir.Constant(ir.IntType(1), 1)])

    return sig, codegen


# numba's intrinsic wrapper is typed with the code generator's signature, not the
# call's; the kernels call these with (array, index) and (int64,).
prefetch: Any = intrinsic(_prefetch)
ctz: Any = intrinsic(_ctz)
