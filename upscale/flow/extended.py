"""Extended local regions under given boundary pressures, as linear functionals.

An extended region is a box of fine cells: two neighbouring coarse blocks
and a border of surrounding rock, clipped at the domain. Its outer faces
hold given pressures (``fixed``) or are closed; cells connect by the
harmonic face rule of `upscale.flow.transmissibility`, with the same
half-cell transmissibilities ``t`` (0 for an inactive cell). For fixed
outer-face pressures ``b`` the cell pressures solve ``A p = B b``, with
``B[c, f] = t_f`` for the outer face f of cell c, so every linear quantity
of the pressures is a linear functional of ``b``:

* the flux through the face the two blocks share, ``Q = e_Qᵀ p``;
* the volume-averaged pressure of each block over its conducting cells,
  ``p̄ = wᵀ p``.

With A symmetric, ``eᵀ A⁻¹ B b = (Bᵀ y)ᵀ b`` for ``A y = e``: three solves
of the region's factored matrix (one per quantity) give the coefficients of
the three on every outer face, whatever pressures are imposed later. This
is what the local–global method (`upscale.methods.local_global`) needs: the
matrix does not depend on the boundary pressures, so each region is
factored once, and every iteration and every global flow is then a dot
product. Cells with no path to a fixed face (an island) have their level
pinned as in `upscale.flow.local`; they carry no flux and are left out of
the block averages.

Units: t in (unit of k) · m, sizes in m; the flux coefficients are in
(unit of k) · m (flux per unit of pressure), the pressure ones are
dimensionless.
"""

from __future__ import annotations

import numba as nb
import numpy as np

from .banded import EXACT_JIT, factor, solve
from .local import _in_threads, _series, connect, pin


def outer_faces(shape: tuple[int, int, int], axes: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """The outer faces of a box: the cell behind each, its axis and its side.

    Parameters
    ----------
    shape : (int, int, int)
        Cells along z, y, x.
    axes : ndarray of bool, shape (3,)
        Flow axes (z is left out of a map).

    Returns
    -------
    cell, axis, side : ndarray of int, shape (F,)
        Lexicographic index of the cell, axis normal to the face (0 = z, 1 = y,
        2 = x) and side (0 = first face along it, 1 = last), ordered by axis,
        side, then cell.

    Examples
    --------
    >>> cell, axis, side = outer_faces((1, 2, 3), np.array([False, True, True]))
    >>> cell.tolist(), axis.tolist(), side.tolist()
    ([0, 1, 2, 3, 4, 5, 0, 3, 2, 5], [1, 1, 1, 1, 1, 1, 2, 2, 2, 2], [0, 0, 0, 1, 1, 1, 0, 0, 1, 1])
    """
    index = np.arange(int(np.prod(shape))).reshape(shape)
    cells, normal, sides = [], [], []
    for a in np.flatnonzero(axes):
        for side, pos in enumerate((0, shape[a] - 1)):
            on = np.take(index, pos, axis=a).ravel()
            cells.append(on)
            normal.append(np.full(on.size, a))
            sides.append(np.full(on.size, side))
    return np.concatenate(cells), np.concatenate(normal), np.concatenate(sides)


@nb.njit(**EXACT_JIT)
def _assemble(t, shape, order, fixed, axes, ab, floating):
    """Matrix of one region into `ab`, fixed pressure on the outer sides flagged in `fixed` (2, 3).

    Pins the level of every group of cells with no fixed face and flags
    those cells in `floating` (`upscale.flow.local.pin`).
    """
    n = t.shape[1]
    stride = (shape[1] * shape[2], shape[2], 1)
    ab[:] = 0.0
    parent = np.arange(n)
    grounded = np.zeros(n, np.bool_)
    for c in range(n):
        for a in range(3):
            if not axes[a]:
                continue
            pos = (c // stride[a]) % shape[a]
            for side in range(2):
                if pos == (0, shape[a] - 1)[side] and fixed[side, a]:
                    ab[order[c], 0] += t[a, c]
                    grounded[c] |= t[a, c] > 0.0
            if pos + 1 < shape[a]:
                T = _series(t[a, c], t[a, c + stride[a]])
                if T > 0.0:
                    connect(ab, parent, order, c, c + stride[a], T)
    pin(parent, grounded, np.zeros(n, np.bool_), order, ab, floating, np.empty(n, np.bool_))


@nb.njit(**EXACT_JIT)
def _functionals(t, h, shape, lo, mid, hi, a, fixed, order, axes, face_cell, face_axis, face_side, ab,
                 floating, out):  # fmt: skip
    """Coefficients (3, F) of the shared-face flux and the two block pressures of one region."""
    n = t.shape[1]
    stride = (shape[1] * shape[2], shape[2], 1)
    _assemble(t, shape, order, fixed, axes, ab, floating)
    factor(ab)
    rhs = np.zeros((3, n))
    volume = np.zeros(2)
    for iz in range(lo[0], hi[0]):
        for iy in range(lo[1], hi[1]):
            for ix in range(lo[2], hi[2]):
                c = (iz * shape[1] + iy) * shape[2] + ix
                pos = (iz, iy, ix)[a]
                if floating[c]:
                    continue
                if pos == mid - 1:
                    m = c + stride[a]
                    T = _series(t[a, c], t[a, m])
                    rhs[0, order[c]] += T
                    rhs[0, order[m]] -= T
                if t[0, c] + t[1, c] + t[2, c] > 0.0:
                    side = 0 if pos < mid else 1
                    v = h[0, iz] * h[1, iy] * h[2, ix]
                    rhs[1 + side, order[c]] = v
                    volume[side] += v
    for k in range(3):
        if k > 0 and volume[k - 1] == 0.0:
            out[k, :] = np.nan
            continue
        y = rhs[k]
        if k > 0:
            y /= volume[k - 1]
        solve(ab, y)
        for f in range(face_cell.size):
            b, side, c = face_axis[f], face_side[f], face_cell[f]
            out[k, f] = t[b, c] * y[order[c]] if fixed[side, b] else 0.0


@nb.njit(**EXACT_JIT)
def _regions(t, h, shape, lo, mid, hi, a, fixed, order, width, axes, face_cell, face_axis, face_side, out):
    n = t.shape[2]
    ab = np.empty((n, width + 1))
    floating = np.empty(n, np.bool_)
    for q in range(t.shape[0]):
        _functionals(t[q], h[q], shape, lo[q], mid[q], hi[q], a, fixed[q], order, axes, face_cell,
                     face_axis, face_side, ab, floating, out[q])  # fmt: skip


def region_functionals(t: np.ndarray, h: np.ndarray, shape: np.ndarray, lo: np.ndarray, mid: np.ndarray,
                       hi: np.ndarray, a: int, fixed: np.ndarray, order: np.ndarray, width: int,
                       axes: np.ndarray) -> np.ndarray:  # fmt: skip
    """Shared-face flux and block pressures of many regions of one shape, per unit outer-face pressure.

    Parameters
    ----------
    t : ndarray of shape (P, 3, n)
        Half-cell transmissibilities along z, y, x ((unit of k) · m) of each
        region's cells in lexicographic order; 0 for inactive cells.
    h : ndarray of shape (P, 3, S)
        Cell sizes in m along z, y, x (the first ``shape[a]`` entries of axis a).
    shape : ndarray of int, shape (3,)
        Cells of every region along z, y, x (``n`` in all).
    lo, hi : ndarray of int, shape (P, 3)
        The two blocks inside each region, ``[lo, hi)`` along each axis.
    mid : ndarray of int, shape (P,)
        First cell of the second block along `a`.
    a : int
        Axis across the shared face.
    fixed : ndarray of bool, shape (P, 2, 3)
        Whether the first (``[:, 0]``) and last (``[:, 1]``) outer side of each
        region along z, y, x holds a given pressure (else it is closed).
    order, width : ndarray of int, int
        Matrix numbering of the cells and half-bandwidth (`upscale.flow.local.band_order`).
    axes : ndarray of bool, shape (3,)
        Flow axes (z is left out of a map).

    Returns
    -------
    ndarray of shape (P, 3, F)
        Over the outer faces of `outer_faces` (0 on closed ones): the
        coefficients of the flux through the shared face towards +a
        ((unit of k) · m per unit pressure), then of the volume-averaged
        pressure of the first and of the second block (NaN for a block with
        no conducting cell).

    Examples
    --------
    Two cells in series along x, fixed pressures on their outer x faces only:

    >>> from upscale.flow.local import band_order
    >>> axes = np.array([False, False, True])
    >>> fixed = np.array([[[False, False, True], [False, False, True]]])
    >>> order, width = band_order((1, 1, 2), False)
    >>> t = np.array([[[0.0, 0.0], [0.0, 0.0], [2.0, 2.0]]])
    >>> out = region_functionals(t, np.ones((1, 3, 2)), np.array([1, 1, 2]), np.array([[0, 0, 0]]),
    ...                          np.array([1]), np.array([[1, 1, 2]]), 2, fixed, order, width, axes)
    >>> out[0].round(12).tolist()   # Q = (b0 - b1) / (1/2 + 1 + 1/2), p1 = (2 b0 + b1) / 3, ...
    [[0.5, -0.5], [0.75, 0.25], [0.25, 0.75]]
    """
    face_cell, face_axis, face_side = outer_faces(tuple(int(s) for s in shape), axes)
    out = np.empty((t.shape[0], 3, face_cell.size))
    faces = (face_cell, face_axis, face_side)
    _in_threads(len(out), lambda s: _regions(t[s], h[s], shape, lo[s], mid[s], hi[s], a, fixed[s], order,
                                             width, axes, *faces, out[s]))  # fmt: skip
    return out
