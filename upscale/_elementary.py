"""Elementary functions and bit tricks in a form numba's loop vectoriser can use.

LLVM vectorises a loop only if it can see through everything in its body; a
call to the C library's ``log`` or ``exp`` stops it. `ln` and `exp` here are
written out (range reduction on the float's exponent bits, then a short
series), accurate to a few units in the last place, so the kernels that
call them for every cell run in SIMD lanes. `JIT` holds the compiler options
every kernel of the package uses.

Kept rather than ``math.log``/``math.exp`` (measured for issue 15, one thread,
16.8 M float32 cells, best of 5, 2-core machine under load): with the
library functions the value scan every run makes of its input
(`upscale.stats`) falls from 99–123 to 50–58 M cells/s and the power average
from 85–87 to 32 M cells/s (``tests/benchmarks/bench_averages.py``: 0.05 →
0.01 of ``numpy.sum``'s throughput); the outputs change in the last bits
(sums of ln k, powers), which ``tests/test_reference_outputs.py`` refuses;
and the first ``upscale run --method geometric`` would compile 4.9 CPU s
instead of 5.5, about the spread between runs
(``tests/benchmarks/bench_compile.py``).
"""

from __future__ import annotations

import math

import numba as nb
import numpy as np
from llvmlite import ir
from numba.core import types
from numba.extending import intrinsic

#: Reassociation lets the compiler vectorise sums; NaN and inf stay IEEE
#: (no ``nnan``/``ninf``), and division by zero follows IEEE, not Python.
JIT = dict(nogil=True, cache=True, fastmath={"reassoc", "nsz", "contract"}, error_model="numpy")

MANTISSA = (1 << 52) - 1
UNIT_EXPONENT = 1023 << 52
LN2 = math.log(2.0)
_SQRT2 = math.sqrt(2.0)
_TWO52 = 2.0**52
_TWO52_BITS = 0x4330000000000000  # bits of 2**52: OR-ing a small integer in gives 2**52 + it
_LN2_HIGH = 6.93147180369123816490e-01  # ln 2 split so n * _LN2_HIGH is exact for |n| < 2**11
_LN2_LOW = 1.90821492927058770002e-10
_EXP_MAX = 709.782712893384  # ln of the largest float64
_EXP_MIN = -708.3964185322641  # ln of the smallest normal float64


@intrinsic
def as_int(typingctx, x):
    """Reinterpret a float64 as the int64 with the same bits."""

    def codegen(context, builder, signature, args):
        return builder.bitcast(args[0], ir.IntType(64))

    return types.int64(types.float64), codegen


@intrinsic
def as_float(typingctx, x):
    """Reinterpret an int64 as the float64 with the same bits."""

    def codegen(context, builder, signature, args):
        return builder.bitcast(args[0], ir.DoubleType())

    return types.float64(types.int64), codegen


@nb.njit(inline="always", **JIT)
def ln(v):
    """Natural logarithm of a positive, finite, normal float64 in a form the compiler vectorises.

    ``v = m * 2**e`` with m reduced to [1/sqrt(2), sqrt(2)); then
    ``ln m = 2 atanh(s)``, ``s = (m - 1) / (m + 1)``, |s| < 0.172, summed as the
    odd series to s**19 (truncation below 1e-15 relative). The library ``log``
    is a call the loop vectoriser cannot see through. Subnormal values (below
    2.2e-308) are not handled; no permeability in any unit comes near them.
    """
    bits = as_int(v)
    exponent = as_float((bits >> 52) | _TWO52_BITS) - (_TWO52 + 1023.0)
    m = as_float((bits & MANTISSA) | UNIT_EXPONENT)
    big = m > _SQRT2
    m = m * 0.5 if big else m
    exponent = exponent + 1.0 if big else exponent
    s = (m - 1.0) / (m + 1.0)
    s2 = s * s
    # written out: a loop over a coefficient tuple measured 25 % slower in the scan
    p = 1.0 / 19.0
    p = p * s2 + 1.0 / 17.0
    p = p * s2 + 1.0 / 15.0
    p = p * s2 + 1.0 / 13.0
    p = p * s2 + 1.0 / 11.0
    p = p * s2 + 1.0 / 9.0
    p = p * s2 + 1.0 / 7.0
    p = p * s2 + 1.0 / 5.0
    p = p * s2 + 1.0 / 3.0
    p = p * s2 + 1.0
    return exponent * LN2 + 2.0 * s * p


@nb.njit(inline="always", **JIT)
def exp(x):
    """Exponential of a float64 in a form the compiler vectorises; companion of `ln`.

    ``x = n ln 2 + r`` with |r| <= ln(2)/2 (ln 2 in two parts, so r is exact),
    ``exp(r)`` from its Taylor series to r**13 (truncation below 1e-17), and
    the factor ``2**n`` built from its bits. Saturates to inf above ln(max
    float) and to 0 below ln(min normal float).
    """
    xc = min(max(x, _EXP_MIN), _EXP_MAX)
    n = np.floor(xc / LN2 + 0.5)
    r = (xc - n * _LN2_HIGH) - n * _LN2_LOW
    p = 1.0 / 6227020800.0
    p = p * r + 1.0 / 479001600.0
    p = p * r + 1.0 / 39916800.0
    p = p * r + 1.0 / 3628800.0
    p = p * r + 1.0 / 362880.0
    p = p * r + 1.0 / 40320.0
    p = p * r + 1.0 / 5040.0
    p = p * r + 1.0 / 720.0
    p = p * r + 1.0 / 120.0
    p = p * r + 1.0 / 24.0
    p = p * r + 1.0 / 6.0
    p = p * r + 0.5
    p = p * r + 1.0
    p = p * r + 1.0
    top = n > 1023.0  # 2**1024 is not a float64: take one factor 2 into p
    n = n - 1.0 if top else n
    p = p * 2.0 if top else p
    scale = as_float((as_int(n + (_TWO52 + 1023.0)) & 0x7FF) << 52)
    result = p * scale
    result = np.inf if x > _EXP_MAX else result
    return 0.0 if x < _EXP_MIN else result
