"""Compiled per-chunk kernels: weighted sums of f(k) over sub-blocks, in one pass.

Every average and bound in `upscale.methods` reduces to sums of the form
``S = sum(w * f(k))`` and ``W = sum(w)`` over the cells of each (sub-)block,
with ``f(k)`` one of k, 1/k, ln k or k**p, or ``W`` alone (`block_counts`). The kernels below compute
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

Layers may be grouped unevenly (``sub[0]`` the sizes of the groups, see
`upscale.grid.blocks.Size`): the compiled loops take the coarse layer of
every fine layer, so a block's layers are added one after the other in the
same order (and with the same fused multiply-adds) whether its layers are
written ``2`` or ``2,2,...``. Adding the sums of single layers afterwards
(`numpy.add.reduceat`) would not give the same bits: the compiled loops
contract ``S += w * s`` into a fused multiply-add (measured).
"""

from __future__ import annotations

import math

import numba as nb
import numpy as np

from .._elementary import JIT as _JIT
from .._elementary import LN2, MANTISSA, UNIT_EXPONENT, as_float, as_int, exp, ln
from ..grid.blocks import axis_edges

#: f(k) selectors for `block_sums`: k, 1/k, k**exponent.
LINEAR, RECIPROCAL, POWER = 1, -1, 2

@nb.njit(**_JIT)
def _coarse_shape(shape, layer_of, sy, sx):
    return (
        layer_of[-1] + 1 if shape[0] else 0,
        (shape[1] + sy - 1) // sy,
        (shape[2] + sx - 1) // sx,
    )


def _layer_of(size, layers):
    """The coarse layer of each of `layers` fine layers, int64 of shape (layers,), for a `Size`."""
    edges = axis_edges(size, layers)
    return np.repeat(np.arange(edges.size - 1, dtype=np.int64), np.diff(edges))


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


def block_sums(k, wz, sub, mode, skip, exponent=1.0):
    """Weighted sums of f(k) over sub-blocks of `k`.

    Parameters
    ----------
    k : ndarray of shape (L, M, N), float32 or float64
        Cell values; NaN marks inactive cells.
    wz : ndarray of shape (L,)
        Weight of every cell of each layer (its thickness in m).
    sub : (int or tuple of int, int, int)
        Sub-block size in cells ``(layers, rows, columns)``; layers a whole
        number or the sizes of the groups, top down.
    mode : int
        ``LINEAR`` (f = k), ``RECIPROCAL`` (f = 1/k) or
        ``POWER`` (f = k**exponent, for positive k).
    skip : bool
        True: leave inactive cells out of S and W. False: count them as k = 0.
    exponent : float
        The exponent of ``POWER``.

    Returns
    -------
    S, W : ndarray of shape (L', ceil(M/sy), ceil(N/sx))
        ``sum(w * f(k))`` and ``sum(w)`` over each sub-block; L' = ceil(L/sz)
        or the number of groups.
    """
    return _block_sums(k, wz, _layer_of(sub[0], k.shape[0]), sub[1], sub[2], mode, skip, exponent)


@nb.njit(**_JIT)
def _block_sums(k, wz, layer_of, sy, sx, mode, skip, exponent):
    L, M, N = k.shape
    S = np.zeros(_coarse_shape(k.shape, layer_of, sy, sx))
    W = np.zeros(S.shape)
    fill = np.inf if (mode == RECIPROCAL and not skip) else 0.0  # an inactive cell in series blocks flow
    row_s = np.zeros(N)
    row_w = np.zeros(N)
    scratch = np.empty(N)
    rows = 0
    for layer in range(L):
        cl = layer_of[layer]
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


def block_counts(k, wz, sub):
    """``W`` of `block_sums` with ``skip=True`` alone: the weight of the active cells of each sub-block.

    A kernel of its own, so that a run needing only the active volume (the
    flow-based methods) does not compile every mode of `block_sums`; the sums
    are added in the same order, so W is the same to the bit.

    Parameters as `block_sums`.

    Returns
    -------
    W : ndarray of shape (L', ceil(M/sy), ceil(N/sx))
        ``sum(w)`` over the active cells of each sub-block.
    """
    return _block_counts(k, wz, _layer_of(sub[0], k.shape[0]), sub[1], sub[2])


@nb.njit(**_JIT)
def _block_counts(k, wz, layer_of, sy, sx):
    L, M, N = k.shape
    W = np.zeros(_coarse_shape(k.shape, layer_of, sy, sx))
    row_w = np.zeros(N)
    for layer in range(L):
        cl = layer_of[layer]
        for i in range(M):
            _add_active(k[layer, i], row_w)
            if (i + 1) % sy == 0 or i == M - 1:
                ci = i // sy
                w = wz[layer]
                for cj in range(W.shape[2]):
                    c = 0.0
                    for j in range(cj * sx, min(N, cj * sx + sx)):
                        c += row_w[j]
                    W[cl, ci, cj] += w * c
                row_w[:] = 0.0
    return W


def block_log_sums(k, wz, sub):
    """Weighted sums of ln k over sub-blocks of `k`, skipping inactive cells.

    The logarithm of a product is the sum of the logarithms: each cell is
    split exactly into mantissa and binary exponent, the exponents are summed
    as integers and the mantissas (in [1, 2)) multiplied, and one logarithm
    is taken per block and layer instead of one per cell. Values must be
    positive and finite where active.

    Parameters and returns as `block_sums` with f = ln k and ``skip=True``.
    """
    return _block_log_sums(k, wz, _layer_of(sub[0], k.shape[0]), sub[1], sub[2])


@nb.njit(**_JIT)
def _block_log_sums(k, wz, layer_of, sy, sx):
    L, M, N = k.shape
    S = np.zeros(_coarse_shape(k.shape, layer_of, sy, sx))
    W = np.zeros(S.shape)
    mant = np.ones(N)
    expo = np.zeros(N, np.int64)
    count = np.zeros(N)
    rows_in_product = 0
    for layer in range(L):
        cl = layer_of[layer]
        for i in range(M):
            row = k[layer, i]
            for j in range(N):
                v = np.float64(row[j])
                ok = v == v
                bits = as_int(v)
                expo[j] += ((bits >> 52) - 1023) if ok else 0
                mant[j] *= as_float((bits & MANTISSA) | UNIT_EXPONENT) if ok else 1.0
                count[j] += np.float64(ok)
            rows_in_product += 1
            flush = (i + 1) % sy == 0 or i == M - 1
            if flush or rows_in_product == 512:
                # renormalise each running product to [1, 2) before it can overflow
                for j in range(N):
                    bits = as_int(mant[j])
                    expo[j] += (bits >> 52) - 1023
                    mant[j] = as_float((bits & MANTISSA) | UNIT_EXPONENT)
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
                        total += e * LN2 + math.log(p)
                    S[cl, ci, cj] += w * total
                    W[cl, ci, cj] += w * c
                mant[:] = 1.0
                expo[:] = 0
                count[:] = 0.0
    return S, W

