"""Compiled per-chunk kernels: weighted sums of f(k) over sub-blocks, in one pass.

Every average and bound in `upscale.methods` reduces to sums of the form
``S = sum(w * f(k))`` and ``W = sum(w)`` over the cells of each (sub-)block,
with ``f(k)`` one of k, 1/k, ln k or a constant. The kernels below compute
them in a single pass over the input without temporaries, so a float32
raster is read once and never copied to float64.

Layout of the pass: rows are accumulated element-wise into a buffer one row
long (a contiguous, vectorised loop), and the buffer is folded into block
sums once per group of rows. Weights vary per layer only (``wz``); within a
layer every cell of a fine grid has the same area and volume, so the weight
cancels. Blocks at the end of each axis may be smaller (edge blocks); the
sums then run over the cells that exist.

NaN marks an inactive cell. With ``skip=True`` inactive cells are left out
(nodata-aware averages); with ``skip=False`` they count as impermeable
cells, k = 0, which is what the flow bounds need.
"""

from __future__ import annotations

import math

import numba as nb
import numpy as np
from llvmlite import ir
from numba.core import types
from numba.extending import intrinsic

#: Reassociation lets the compiler vectorise the sums; NaN and inf stay IEEE.
_FAST = {"reassoc", "nsz", "contract"}
_JIT = dict(nogil=True, cache=True, fastmath=_FAST, error_model="numpy")

#: f(k) selectors for `block_sums`: 0, k, 1/k, k**exponent.
COUNT, LINEAR, RECIPROCAL, POWER = 0, 1, -1, 2

_MANTISSA = (1 << 52) - 1
_UNIT_EXPONENT = 1023 << 52
_LN2 = math.log(2.0)
_SQRT2 = math.sqrt(2.0)
_TWO52 = 2.0**52
_TWO52_BITS = 0x4330000000000000  # bits of 2**52: OR-ing a small integer in gives 2**52 + it
_LN2_HIGH = 6.93147180369123816490e-01  # ln 2 split so n * _LN2_HIGH is exact for |n| < 2**11
_LN2_LOW = 1.90821492927058770002e-10
_EXP_MAX = 709.782712893384  # ln of the largest float64
_EXP_MIN = -708.3964185322641  # ln of the smallest normal float64


@intrinsic
def _bits(typingctx, x):  # noqa: D103 (reinterpret float64 as int64)
    def codegen(context, builder, signature, args):
        return builder.bitcast(args[0], ir.IntType(64))

    return types.int64(types.float64), codegen


@intrinsic
def _from_bits(typingctx, x):  # noqa: D103 (reinterpret int64 as float64)
    def codegen(context, builder, signature, args):
        return builder.bitcast(args[0], ir.DoubleType())

    return types.float64(types.int64), codegen


@nb.njit(inline="always", **_JIT)
def ln(v):
    """Natural logarithm of a positive, finite, normal float64 in a form the compiler vectorises.

    ``v = m * 2**e`` with m reduced to [1/sqrt(2), sqrt(2)); then
    ``ln m = 2 atanh(s)``, ``s = (m - 1) / (m + 1)``, |s| < 0.172, summed as the
    odd series to s**19 (truncation below 1e-15 relative). The library ``log``
    is a call the loop vectoriser cannot see through. Subnormal values (below
    2.2e-308) are not handled; no permeability in any unit comes near them.
    """
    bits = _bits(v)
    exponent = _from_bits((bits >> 52) | _TWO52_BITS) - (_TWO52 + 1023.0)
    m = _from_bits((bits & _MANTISSA) | _UNIT_EXPONENT)
    big = m > _SQRT2
    m = m * 0.5 if big else m
    exponent = exponent + 1.0 if big else exponent
    s = (m - 1.0) / (m + 1.0)
    s2 = s * s
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
    return exponent * _LN2 + 2.0 * s * p


@nb.njit(inline="always", **_JIT)
def exp(x):
    """Exponential of a float64 in a form the compiler vectorises; companion of `ln`.

    ``x = n ln 2 + r`` with |r| <= ln(2)/2 (ln 2 in two parts, so r is exact),
    ``exp(r)`` from its Taylor series to r**13 (truncation below 1e-17), and
    the factor ``2**n`` built from its bits. Saturates to inf above ln(max
    float) and to 0 below ln(min normal float).
    """
    xc = min(max(x, _EXP_MIN), _EXP_MAX)
    n = np.floor(xc / _LN2 + 0.5)
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
    scale = _from_bits((_bits(n + (_TWO52 + 1023.0)) & 0x7FF) << 52)
    result = p * scale
    result = np.inf if x > _EXP_MAX else result
    return 0.0 if x < _EXP_MIN else result


@nb.njit(**_JIT)
def value_sums(k):
    """Counts and sums over all cells of `k` for the statistics of a property.

    Parameters
    ----------
    k : ndarray of shape (L, M, N)
        Values; NaN marks inactive cells.

    Returns
    -------
    sums : ndarray of shape (6,)
        Active cells, valid cells (finite and >= 0), positive finite cells, the
        sum of valid values, and the sums of ln k and (ln k)² over positive ones.
    low, high : float
        Smallest and largest valid value (inf and -inf when there is none).
    """
    active = 0.0
    valid = 0.0
    positive = 0.0
    total = 0.0
    log_sum = 0.0
    log_square = 0.0
    none = _bits(np.inf)
    low = none
    high = _bits(0.0)
    L, M, N = k.shape
    for layer in range(L):
        for i in range(M):
            row = k[layer, i]
            # separate loops: each stays simple enough for the vectoriser
            for j in range(N):
                v = np.float64(row[j])
                ok = (v >= 0.0) & (v < np.inf)
                active += np.float64(v == v)  # a bool -> float conversion vectorises
                valid += np.float64(ok)  # where a select between constants does not
                total += v if ok else 0.0
            for j in range(N):
                v = np.float64(row[j])
                good = (v > 0.0) & (v < np.inf)
                lv = ln(v if good else 1.0)
                positive += np.float64(good)
                log_sum += lv
                log_square += lv * lv
            for j in range(N):
                # non-negative floats order like their bit patterns: integer min/max vectorise
                v = np.float64(row[j])
                good = (v > 0.0) & (v < np.inf)
                zero = v == 0.0
                low = min(low, _bits(v) if good else (0 if zero else none))
                high = max(high, _bits(v) if good else 0)
    sums = np.array([active, valid, positive, total, log_sum, log_square])
    return sums, _from_bits(low), _from_bits(high)


@nb.njit(**_JIT)
def _coarse_shape(shape, sub):
    return (
        (shape[0] + sub[0] - 1) // sub[0],
        (shape[1] + sub[1] - 1) // sub[1],
        (shape[2] + sub[2] - 1) // sub[2],
    )


@nb.njit(inline="always", **_JIT)
def _add_values(row, acc, fill):
    for j in range(row.size):
        v = np.float64(row[j])
        acc[j] += v if v == v else fill


@nb.njit(inline="always", **_JIT)
def _add_reciprocals(row, acc, fill):
    for j in range(row.size):
        v = np.float64(row[j])
        acc[j] += 1.0 / v if v == v else fill


@nb.njit(**_JIT)
def _add_powers(row, acc, exponent, scratch):
    # two loops: ln and exp in one loop are too much for the vectoriser
    for j in range(row.size):
        v = np.float64(row[j])
        scratch[j] = exponent * ln(v if v > 0.0 else 1.0)
    for j in range(row.size):
        # zero -> 0 (the exponent is then > 0); NaN and the rest are left out
        acc[j] += exp(scratch[j]) if row[j] > 0.0 else 0.0


@nb.njit(inline="always", **_JIT)
def _add_active(row, acc):
    for j in range(row.size):
        acc[j] += np.float64(row[j] == row[j])


@nb.njit(**_JIT)
def block_sums(k, wz, sub, mode, skip, exponent=1.0):
    """Weighted sums of f(k) over sub-blocks of `k`.

    Parameters
    ----------
    k : ndarray of shape (L, M, N), float32 or float64
        Cell values; NaN marks inactive cells.
    wz : ndarray of shape (L,)
        Weight of every cell of each layer (its thickness in m).
    sub : (int, int, int)
        Sub-block size in cells ``(layers, rows, columns)``.
    mode : int
        ``COUNT`` (f = 0), ``LINEAR`` (f = k), ``RECIPROCAL`` (f = 1/k) or
        ``POWER`` (f = k**exponent, for positive k).
    skip : bool
        True: leave inactive cells out of S and W. False: count them as k = 0.
    exponent : float
        The exponent of ``POWER``.

    Returns
    -------
    S, W : ndarray of shape (ceil(L/sz), ceil(M/sy), ceil(N/sx))
        ``sum(w * f(k))`` and ``sum(w)`` over each sub-block.
    """
    L, M, N = k.shape
    sz, sy, sx = sub
    S = np.zeros(_coarse_shape(k.shape, sub))
    W = np.zeros(S.shape)
    fill = np.inf if (mode == RECIPROCAL and not skip) else 0.0  # an inactive cell in series blocks flow
    row_s = np.zeros(N)
    row_w = np.zeros(N)
    scratch = np.empty(N)
    rows = 0
    for layer in range(L):
        cl = layer // sz
        for i in range(M):
            row = k[layer, i]
            # one branch per row keeps every inner loop simple enough to vectorise
            if mode == LINEAR:
                _add_values(row, row_s, fill)
            elif mode == RECIPROCAL:
                _add_reciprocals(row, row_s, fill)
            elif mode == POWER:
                _add_powers(row, row_s, exponent, scratch)
            if skip:
                _add_active(row, row_w)
            rows += 1
            if (i + 1) % sy == 0 or i == M - 1:
                ci = i // sy
                w = wz[layer]
                for cj in range(S.shape[2]):
                    j0, j1 = cj * sx, min(N, cj * sx + sx)
                    s = 0.0
                    for j in range(j0, j1):
                        s += row_s[j]
                    S[cl, ci, cj] += w * s
                    if skip:
                        c = 0.0
                        for j in range(j0, j1):
                            c += row_w[j]
                        W[cl, ci, cj] += w * c
                    else:  # every cell counts: no need to add them up
                        W[cl, ci, cj] += w * rows * (j1 - j0)
                row_s[:] = 0.0
                row_w[:] = 0.0
                rows = 0
    return S, W


@nb.njit(**_JIT)
def block_log_sums(k, wz, sub):
    """Weighted sums of ln k over sub-blocks of `k`, skipping inactive cells.

    The logarithm of a product is the sum of the logarithms: each cell is
    split exactly into mantissa and binary exponent, the exponents are summed
    as integers and the mantissas (in [1, 2)) multiplied, and one logarithm
    is taken per block and layer instead of one per cell. Values must be
    positive and finite where active.

    Parameters and returns as `block_sums` with f = ln k and ``skip=True``.
    """
    L, M, N = k.shape
    sz, sy, sx = sub
    S = np.zeros(_coarse_shape(k.shape, sub))
    W = np.zeros(S.shape)
    mant = np.ones(N)
    expo = np.zeros(N, np.int64)
    count = np.zeros(N)
    rows_in_product = 0
    for layer in range(L):
        cl = layer // sz
        for i in range(M):
            row = k[layer, i]
            for j in range(N):
                v = np.float64(row[j])
                ok = v == v
                bits = _bits(v)
                expo[j] += ((bits >> 52) - 1023) if ok else 0
                mant[j] *= _from_bits((bits & _MANTISSA) | _UNIT_EXPONENT) if ok else 1.0
                count[j] += np.float64(ok)
            rows_in_product += 1
            flush = (i + 1) % sy == 0 or i == M - 1
            if flush or rows_in_product == 512:
                # renormalise each running product to [1, 2) before it can overflow
                for j in range(N):
                    bits = _bits(mant[j])
                    expo[j] += (bits >> 52) - 1023
                    mant[j] = _from_bits((bits & _MANTISSA) | _UNIT_EXPONENT)
                rows_in_product = 0
            if flush:
                ci = i // sy
                w = wz[layer]
                for cj in range(S.shape[2]):
                    total = 0.0
                    c = 0.0
                    for j0 in range(cj * sx, min(N, cj * sx + sx), 512):
                        p = 1.0
                        e = 0
                        for j in range(j0, min(N, cj * sx + sx, j0 + 512)):
                            p *= mant[j]
                            e += expo[j]
                            c += count[j]
                        total += e * _LN2 + math.log(p)
                    S[cl, ci, cj] += w * total
                    W[cl, ci, cj] += w * c
                mant[:] = 1.0
                expo[:] = 0
                count[:] = 0.0
    return S, W
