"""Symmetric banded systems: in-place LDLᵀ factorisation and solve, compiled.

A local flow problem on a small box of cells, numbered slice by slice, has
a symmetric positive-definite matrix whose non-zeros lie within `w` places of
the diagonal (the cells of one slice). Stored by its upper band,
``ab[i, j] = A[i, i + j]`` for ``0 <= j <= w``, it factors in ``n w²/2``
multiply-adds with no pivoting (Golub & Van Loan 2013, *Matrix
Computations*, §4.3: band Cholesky) — the same fill as a sparse direct
solver on a box, without the bookkeeping of one. These functions run inside
the compiled loops of `upscale.flow.local`, one small problem per call.
"""

from __future__ import annotations

import numba as nb
import numpy as np

#: Compiler options of the local solver. No fast-math: a result must not depend
#: on memory alignment, so chunked and whole-array runs agree to the bit. No C
#: function wrapper (nothing takes the kernels' addresses): less to compile. One
#: set for every kernel of the solver, inner ones included: numba compiles its own
#: helpers (``np.empty``, ``min``, ...) once per caller option set, so kernels
#: without a Python entry point (``no_cpython_wrapper``) made it compile each of
#: them twice (tests/benchmarks/bench_compile.py).
#: Kernels that only pass work on (``_one_box``, ``_live``, ...) are inlined by numba
#: (``inline="always"``): it links a called kernel's whole call tree into each caller's
#: code and optimises it there again, so every level of calls repeats the work below it.
EXACT_JIT = dict(nogil=True, cache=True, error_model="numpy", no_cfunc_wrapper=True)


@nb.njit(**EXACT_JIT)
def factor(ab: np.ndarray) -> None:
    """Overwrite the upper band of A with its LDLᵀ factors.

    Parameters
    ----------
    ab : ndarray of shape (n, w + 1)
        ``ab[i, j] = A[i, i + j]`` on entry; on exit ``ab[i, 0] = D[i]`` and
        ``ab[i, j] = U[i, i + j]`` (``A = Uᵀ D U``, U unit upper triangular).

    Examples
    --------
    >>> ab = np.array([[4.0, -2.0], [5.0, 0.0]])   # [[4, -2], [-2, 5]]
    >>> factor(ab); ab
    array([[ 4. , -0.5],
           [ 4. ,  0. ]])
    """
    n, width = ab.shape[0], ab.shape[1] - 1
    for i in range(n):
        d = ab[i, 0]
        top = min(width, n - 1 - i)
        pivot = ab[i]
        for j in range(1, top + 1):
            e = pivot[j]
            if e == 0.0:
                continue
            f = e / d
            row, source = ab[i + j], pivot[j : top + 1]
            for k in range(top + 1 - j):  # from 0: no negative-index wrap, so it vectorises
                row[k] -= f * source[k]
        for j in range(1, top + 1):
            pivot[j] /= d


@nb.njit(**EXACT_JIT)
def _forward(ab: np.ndarray, x: np.ndarray) -> None:
    """``x <- D⁻¹ U⁻ᵀ x``: the first half of `solve`."""
    n, width = ab.shape[0], ab.shape[1] - 1
    for i in range(n):
        xi = x[i]
        if xi != 0.0:
            top = min(width, n - 1 - i)
            row, below = ab[i, 1 : top + 1], x[i + 1 : i + 1 + top]
            for j in range(top):
                below[j] -= row[j] * xi
    for i in range(n):
        x[i] /= ab[i, 0]


@nb.njit(**EXACT_JIT)
def solve(ab: np.ndarray, x: np.ndarray) -> None:
    """Solve ``A x = b`` in place with the factors from `factor`.

    Parameters
    ----------
    ab : ndarray of shape (n, w + 1)
        Factors from `factor`.
    x : ndarray of shape (n,)
        b on entry, the solution on exit.

    Examples
    --------
    >>> ab = np.array([[4.0, -2.0], [5.0, 0.0]]); factor(ab)
    >>> x = np.array([2.0, 3.0]); solve(ab, x); x
    array([1., 1.])
    """
    _forward(ab, x)
    n, width = ab.shape[0], ab.shape[1] - 1
    for i in range(n - 1, -1, -1):
        s = x[i]
        top = min(width, n - 1 - i)
        row, below = ab[i, 1 : top + 1], x[i + 1 : i + 1 + top]
        for j in range(top):
            s -= row[j] * below[j]
        x[i] = s


@nb.njit(**EXACT_JIT)
def solve_three(ab0: np.ndarray, ab1: np.ndarray, ab2: np.ndarray, x0: np.ndarray, x1: np.ndarray,
                x2: np.ndarray) -> None:  # fmt: skip
    """`solve` of three systems of one size and width at once, each with the same operations.

    The back substitution of one system is a chain of dependent subtractions
    (each row's sum starts with the unknown just found), so its time is the
    chain's latency; three independent chains overlap (1.35x faster than
    three calls of `solve` on 4x8x8 boxes, docs/performance.md).

    Parameters
    ----------
    ab0, ab1, ab2 : ndarray of shape (n, w + 1)
        Factors from `factor` (the same array may be passed more than once).
    x0, x1, x2 : ndarray of shape (n,)
        Right-hand sides on entry, the solutions on exit.

    Examples
    --------
    >>> ab = np.array([[4.0, -2.0], [5.0, 0.0]]); factor(ab)
    >>> x = np.array([[2.0, 3.0], [4.0, 6.0], [0.0, 0.0]])
    >>> solve_three(ab, ab, ab, x[0], x[1], x[2]); x
    array([[1., 1.],
           [2., 2.],
           [0., 0.]])
    """
    _forward(ab0, x0)
    _forward(ab1, x1)
    _forward(ab2, x2)
    n, width = ab0.shape[0], ab0.shape[1] - 1
    for i in range(n - 1, -1, -1):
        s0, s1, s2 = x0[i], x1[i], x2[i]
        top = min(width, n - 1 - i)
        row0, below0 = ab0[i, 1 : top + 1], x0[i + 1 : i + 1 + top]
        row1, below1 = ab1[i, 1 : top + 1], x1[i + 1 : i + 1 + top]
        row2, below2 = ab2[i, 1 : top + 1], x2[i + 1 : i + 1 + top]
        for j in range(top):
            s0 -= row0[j] * below0[j]
            s1 -= row1[j] * below1[j]
            s2 -= row2[j] * below2[j]
        x0[i], x1[i], x2[i] = s0, s1, s2
