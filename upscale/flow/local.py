"""Local flow problems: many small boxes of cells solved at once, in compiled code.

Each problem is a box of fine cells (a coarse block, or two, with a border
of surrounding rock) with its own boundary conditions. The pressure is
written ``p = -x_a + p'`` for an imposed unit mean gradient along axis `a`
(x_a in m from the box's first face along a), and the box's outer faces are

* ``SEALED``: p fixed on the two faces across a (0 and -L_a), the others closed;
* ``LINEAR``: p = -x_a fixed on every outer face;
* ``PERIODIC``: p' and the flux periodic across every pair of opposite faces
  (Durlofsky 1991, "Numerical calculation of equivalent grid block
  permeability tensors for heterogeneous porous media").

Cells connect by the harmonic face rule of `upscale.flow.transmissibility`,
written with the same half-cell transmissibilities ``t`` (0 for an inactive
cell). Every box is assembled into a banded matrix, factored once (once
per axis under sealed conditions, whose matrix changes with the axis) and
solved for the imposed gradients together (`upscale.flow.banded`), then refined
against the residual written in face fluxes, which removes the error of
eps x contrast the factors leave across strong contrasts; problems run in
parallel threads. A group of cells with no fixed pressure (an island, or
any group under periodic conditions) has its pressure pinned at one cell,
which fixes the level without changing any flux. Faces that cannot carry
flow (dead ends, no path between the fixed faces, no path winding around a
periodic box: `upscale.flow.paths`) get a flux of exactly 0, not rounding.

What comes back is not the pressure field but what upscaling needs from
it, computed over a sub-box (the block itself, without its border):

* `block_tensors`: the volume averages of the flux density and of the
  pressure gradient, ``<u_b>`` and ``<∂p/∂x_b>``, for each imposed gradient.
  ``<u_b>`` is the integral of the flux through the block's planes normal
  to b (trapezoid rule over the planes at cell faces) over the block volume;
  ``<∂p/∂x_b>`` is the difference of the area-averaged pressures on the
  block's two faces normal to b over its length (Gauss' theorem). The face
  pressure of a fine face is the flux-continuous value
  ``(t_i p_i + t_j p_j) / (t_i + t_j)``; faces touching only inactive
  cells or pressure-less islands are left out of the average.
* `pair_fluxes`: for two neighbouring blocks under a sealed pressure drop
  across both, the flux through their shared face and the volume-averaged
  pressure of each block (for transmissibilities upscaled directly).

Units: t in (unit of k) · m, sizes in m, pressures in m (a unit gradient),
so flux densities come out in the unit of k.
"""

from __future__ import annotations

from collections.abc import Callable
from concurrent.futures import ThreadPoolExecutor

import numba as nb
import numpy as np

from .banded import EXACT_JIT, factor, solve, solve_three
from .paths import all_whole, every_face, live_faces, next_cell

SEALED, LINEAR, PERIODIC = 0, 1, 2
#: Boundary condition name -> code used by the compiled kernels.
CONDITIONS = {"sealed": SEALED, "linear": LINEAR, "periodic": PERIODIC}
# The same codes as typed int64 values for calls inside the kernels: numba compiles a separate
# copy of a function for each literal constant passed to it (a side of 0 or 1, SEALED), which
# made the first use of the local solves compile four copies of _face and two of five others.
_SEALED = np.int64(SEALED)
_SIDES = (np.int64(0), np.int64(1))


@nb.njit(inline="always", **EXACT_JIT)
def _series(ti, tj):
    s = ti + tj
    return ti * tj / s if s > 0.0 else 0.0


@nb.njit(**EXACT_JIT)
def _root(parent, i):
    while parent[i] != i:
        parent[i] = parent[parent[i]]
        i = parent[i]
    return i


@nb.njit(inline="always", **EXACT_JIT)
def _fixed(bc, fixed_axis, b):
    return bc == LINEAR or (bc == SEALED and b == fixed_axis)


@nb.njit(inline="always", **EXACT_JIT)
def _combine(pi, ti, fi, pj, tj, fj):
    """Flux-continuous pressure of a face; (value, defined)."""
    wi = ti if (ti > 0.0 and not fi) else 0.0
    wj = tj if (tj > 0.0 and not fj) else 0.0
    if wi + wj > 0.0:
        return (wi * pi + wj * pj) / (wi + wj), True
    return 0.0, False


@nb.njit(**EXACT_JIT)
def _assemble(t, shape, order, bc, axes, fixed_axis, ab, floating, pinned):
    """Matrix of one box into `ab`; pins the level of groups without fixed pressure.

    Flags the pinned cells in `pinned` (lexicographic order). Sets
    `floating` for cells whose pressure level means nothing (no fixed
    pressure and, under periodic conditions, no periodic connection).
    """
    n = t.shape[1]
    stride = (shape[1] * shape[2], shape[2], 1)
    ab[:] = 0.0
    parent = np.arange(n)
    grounded = np.zeros(n, np.bool_)
    wrapped = np.zeros(n, np.bool_)
    for c in range(n):
        i = order[c]
        for a in range(3):
            if not axes[a]:
                continue
            pos = (c // stride[a]) % shape[a]
            ta = t[a, c]
            if _fixed(bc, fixed_axis, a):
                if pos == 0:
                    ab[i, 0] += ta
                if pos == shape[a] - 1:
                    ab[i, 0] += ta
                if ta > 0.0 and (pos == 0 or pos == shape[a] - 1):
                    grounded[c] = True
            if pos + 1 < shape[a]:
                m = c + stride[a]
            elif bc == PERIODIC:
                m = c - pos * stride[a]
                if ta > 0.0 and t[a, m] > 0.0:
                    wrapped[c] = True
                if m == c:
                    continue
            else:
                continue
            T = _series(ta, t[a, m])
            if T > 0.0:
                connect(ab, parent, order, c, m, T)
    pin(parent, grounded, wrapped, order, ab, floating, pinned)


@nb.njit(inline="always", **EXACT_JIT)
def connect(ab, parent, order, c, m, T):
    """Add the face of cells `c` and `m` (lexicographic) with T > 0 to the band `ab`; join their groups."""
    i, j = order[c], order[m]
    ab[i, 0] += T
    ab[j, 0] += T
    if i < j:
        ab[i, j - i] -= T
    else:
        ab[j, i - j] -= T
    ri, rj = _root(parent, c), _root(parent, m)
    if ri != rj:
        parent[max(ri, rj)] = min(ri, rj)


@nb.njit(inline="always", **EXACT_JIT)
def pin(parent, grounded, wrapped, order, ab, floating, pinned):
    """Pin the level of every group of cells with no fixed pressure; flags them in `pinned`.

    A group's first cell gets the identity row and column in `ab`; `floating`
    flags the cells of groups with neither a fixed pressure (`grounded`) nor a
    periodic connection (`wrapped`), whose pressure level means nothing.
    """
    n = parent.size
    for c in range(n):
        r = _root(parent, c)
        grounded[r] |= grounded[c]
        wrapped[r] |= wrapped[c]
    width = ab.shape[1] - 1
    pinned[:] = False
    for c in range(n):
        r = _root(parent, c)
        floating[c] = not grounded[r] and not wrapped[r]
        if r == c and not grounded[r]:
            pinned[c] = True
            i = order[c]
            ab[i, 1:] = 0.0
            for j in range(1, min(width, i) + 1):
                ab[i - j, j] = 0.0
            ab[i, 0] = 1.0


@nb.njit(inline="always", **EXACT_JIT)
def _geometry(h, shape):
    """Cell-centre coordinates (3, max) and box lengths (3,) in m."""
    centre = np.zeros_like(h)
    length = np.zeros(3)
    for a in range(3):
        x = 0.0
        for k in range(shape[a]):
            centre[a, k] = x + 0.5 * h[a, k]
            x += h[a, k]
        length[a] = x
    return centre, length


@nb.njit(inline="always", **EXACT_JIT)
def _boundary_pressure(pos_a, b, side, a, centre, length):
    """Pressure -x_a on the outer face `side` (0 first, 1 last) normal to b."""
    if b == a:
        return 0.0 if side == 0 else -length[a]
    return -centre[a, pos_a]


@nb.njit(**EXACT_JIT)
def _load(t, shape, order, pinned, bc, axes, a, centre, length, x):
    """Right-hand side (matrix order) of the box for a unit gradient along `a`, into `x`."""
    n = t.shape[1]
    stride = (shape[1] * shape[2], shape[2], 1)
    x[:] = 0.0
    for c in range(n):
        i = order[c]
        pos_a = (c // stride[a]) % shape[a]
        for b in range(3):
            if not axes[b]:
                continue
            pos = (c // stride[b]) % shape[b]
            if _fixed(bc, a, b):
                if pos == 0:
                    x[i] += t[b, c] * _boundary_pressure(pos_a, b, 0, a, centre, length)
                if pos == shape[b] - 1:
                    x[i] += t[b, c] * _boundary_pressure(pos_a, b, 1, a, centre, length)
            if bc == PERIODIC and b == a and pos == shape[a] - 1 and shape[a] > 1:
                m = c - pos * stride[a]
                flux = _series(t[a, c], t[a, m]) * length[a]
                x[i] -= flux
                x[order[m]] += flux
    for c in range(n):
        if pinned[c]:
            x[order[c]] = 0.0


@nb.njit(**EXACT_JIT)
def _refined(x, t, shape, order, ab, pinned, bc, axes, a, centre, length):
    """Pressures in lexicographic order from the solution `x` (matrix order), refined (`_refine`)."""
    n = t.shape[1]
    p = np.empty(n)
    for c in range(n):
        p[c] = x[order[c]]
    _refine(t, p, shape, order, ab, pinned, bc, axes, a, centre, length)
    return p


@nb.njit(**EXACT_JIT)
def _pressure(t, shape, order, ab, pinned, bc, axes, a, centre, length):
    """Solve the factored box for a unit gradient along `a`; pressures in lexicographic order."""
    x = np.empty(t.shape[1])
    _load(t, shape, order, pinned, bc, axes, a, centre, length, x)
    solve(ab, x)
    return _refined(x, t, shape, order, ab, pinned, bc, axes, a, centre, length)


#: Refinement steps of a local solve at most. Each gains about -log10(eps x contrast) digits.
REFINEMENTS = 10
#: A solve is refined while some cell's net inflow exceeds this fraction of the flux through
#: its faces: about 450 eps, which 16x16 lognormal blocks of sigma_ln 1 mostly meet without
#: refinement, and which leaves layered blocks at a contrast of 1e14 within 3e-15.
BALANCED = 1e-13


@nb.njit(**EXACT_JIT)
def _residual(t, p, shape, order, pinned, bc, axes, a, centre, length, r, through):
    """Net inflow of every cell (matrix order) into `r`, summed from face fluxes ``T (p_i - p_j)``.

    `through` receives the sum of the magnitudes of each cell's face fluxes;
    returns the largest ratio of a cell's net inflow to that sum.
    """
    n = t.shape[1]
    stride = (shape[1] * shape[2], shape[2], 1)
    r[:] = 0.0
    through[:] = 0.0
    for c in range(n):
        i = order[c]
        pos_a = (c // stride[a]) % shape[a]
        for b in range(3):
            if not axes[b] or t[b, c] <= 0.0:
                continue
            pos, m = next_cell(c, b, shape, bc == PERIODIC)
            last = shape[b] - 1
            if _fixed(bc, a, b):
                for side in range(2):
                    if pos == (0, last)[side]:
                        inflow = t[b, c] * (_boundary_pressure(pos_a, b, side, a, centre, length) - p[c])
                        r[i] += inflow
                        through[i] += abs(inflow)
            if m < 0 or m == c:
                continue
            drop = length[a] if pos == last and b == a else 0.0  # to the first cell's image
            flux = _series(t[b, c], t[b, m]) * (p[c] - p[m] + drop)
            r[i] -= flux
            r[order[m]] += flux
            through[i] += abs(flux)
            through[order[m]] += abs(flux)
    worst = 0.0
    for c in range(n):
        i = order[c]
        if pinned[c]:
            r[i] = 0.0
        elif through[i] > 0.0:
            worst = max(worst, abs(r[i]) / through[i])
    return worst


@nb.njit(**EXACT_JIT)
def _refine(t, p, shape, order, ab, pinned, bc, axes, a, centre, length):
    """Iterative refinement of `p` in place, against the residual written in face fluxes.

    Written as ``A p``, the residual of a cell in a permeable layer sums terms
    of T |p| that cancel to within eps x contrast of what crosses a tight
    layer, and the banded factors leave an error of that size in the
    pressures. Written as a sum of face fluxes ``T (p_j - p_i)``, whose
    differences of close pressures are exact (Sterbenz), the residual is
    accurate, and a few solves with the same factors remove that error
    (Higham 2002, *Accuracy and Stability of Numerical Algorithms*, ch. 12).
    Stops once every cell is balanced to `BALANCED`, when the correction
    stops shrinking (contrasts near 1 / eps), or after `REFINEMENTS` steps.
    """
    n = t.shape[1]
    r = np.zeros(n)
    through = np.zeros(n)
    last_change = np.inf
    for _ in range(REFINEMENTS):
        worst = _residual(t, p, shape, order, pinned, bc, axes, a, centre, length, r, through)
        if worst <= BALANCED:
            break
        solve(ab, r)
        change = 0.0
        for c in range(n):
            change = max(change, abs(r[order[c]]))
        if change >= last_change:  # no longer converging (contrasts near 1 / eps): keep p
            break
        size = 0.0
        for c in range(n):
            p[c] += r[order[c]]
            size = max(size, abs(p[c]))
        if change <= 4.0 * np.finfo(np.float64).eps * size:
            break
        last_change = change


@nb.njit(**EXACT_JIT)
def _face(t, p, floating, shape, c, at, b, side, bc, a, centre, length, inner, outer):
    """Flux (towards +b) and pressure of the face of cell `c` on `side` (0 = -b, 1 = +b).

    `at` is the cell's position (z, y, x) in the box, given rather than
    divided out of `c` (integer divisions cost more than the face). Returns
    (flux, pressure, pressure defined); the flux is 0 on a face that cannot
    carry flow (`inner`, `outer`: `upscale.flow.paths`).
    """
    s = (shape[1] * shape[2], shape[2], 1)[b]
    pos = at[b]
    last = shape[b] - 1
    shift = length[a] if a == b else 0.0
    if side == 0 and pos > 0 or side == 1 and pos < last:
        m = c - s if side == 0 else c + s
        pm = p[m]
    elif _fixed(bc, a, b):
        pb = _boundary_pressure(at[a], b, side, a, centre, length)
        if not outer[side, b, c]:
            return 0.0, pb, True
        flux = t[b, c] * (pb - p[c]) if side == 0 else t[b, c] * (p[c] - pb)
        return flux, pb, True
    elif bc == PERIODIC:
        # the periodic image of the cell at the other end, shifted by the imposed drop
        m = c + last * s if side == 0 else c - last * s
        pm = p[m] + shift if side == 0 else p[m] - shift
    else:
        value, defined = _combine(0.0, 0.0, True, p[c], t[b, c], floating[c])
        return 0.0, value, defined
    value, defined = _combine(pm, t[b, m], floating[m], p[c], t[b, c], floating[c])
    if not inner[b, m if side == 0 else c]:
        return 0.0, value, defined
    T = _series(t[b, m], t[b, c])
    flux = T * (pm - p[c]) if side == 0 else T * (p[c] - pm)
    return flux, value, defined


@nb.njit(inline="always", **EXACT_JIT)
def _inner_flux(t, p, b, m, c, inner):
    """`_face`'s flux from cell `m` to its next cell `c` along b, inside the box, bit for bit."""
    return _series(t[b, m], t[b, c]) * (p[m] - p[c]) if inner[b, m] else 0.0


@nb.njit(inline="always", **EXACT_JIT)
def _inner_pressure(t, p, floating, b, m, c):
    """`_face`'s pressure of the face between cell `m` and its next cell `c` along b: (value, defined)."""
    return _combine(p[m], t[b, m], floating[m], p[c], t[b, c], floating[c])


#: A net flux below this fraction of the sum of the magnitudes it adds up is rounding: flows
#: that cross a plane and come back (a pocket fed and drained across the same plane) cancel
#: there only to within the balance of their solve (`BALANCED`, summed over the plane's
#: cells); at 1e-12 some such blocks were still taken for flowing under one unit of k and
#: not under another.
NET_ROUNDING = 1e-10


@nb.njit(inline="always", **EXACT_JIT)
def _net(total, magnitude):
    """`total`, or 0 when it lies within the rounding of the sum of magnitudes that made it."""
    return 0.0 if abs(total) <= NET_ROUNDING * magnitude else total


@nb.njit(**EXACT_JIT)
def _block_averages(t, h, p, floating, shape, lo, hi, bc, axes, a, centre, length, inner, outer,
                    U, G):  # fmt: skip
    """``<u_b>`` into ``U[a, b]`` and ``<∂p/∂x_b>`` into ``G[a, b]`` over the sub-box [lo, hi)."""
    near, far = _SIDES
    volume = 1.0
    for b in range(3):
        volume *= h[b, lo[b] : hi[b]].sum()
    for b in range(3):
        if not axes[b]:
            continue
        s = (shape[1] * shape[2], shape[2], 1)[b]
        integral = magnitude = 0.0
        p_lo = a_lo = p_hi = a_hi = 0.0
        for iz in range(lo[0], hi[0]):
            for iy in range(lo[1], hi[1]):
                for ix in range(lo[2], hi[2]):
                    c = (iz * shape[1] + iy) * shape[2] + ix
                    at = (iz, iy, ix)
                    pos = at[b]
                    # inside the box the short way (same values), pressures only where averaged
                    if pos > 0:
                        flux = _inner_flux(t, p, b, c - s, c, inner)
                        if pos == lo[b]:
                            value, defined = _inner_pressure(t, p, floating, b, c - s, c)
                    else:
                        flux, value, defined = _face(
                            t, p, floating, shape, c, at, b, near, bc, a, centre, length, inner, outer
                        )
                    before = h[b, pos - 1] if pos > lo[b] else 0.0
                    weight = 0.5 * (before + h[b, pos])
                    integral += weight * flux
                    magnitude += weight * abs(flux)
                    if pos == lo[b] and defined:
                        area = h[0, iz] * h[1, iy] * h[2, ix] / h[b, pos]
                        p_lo += area * value
                        a_lo += area
                    if pos == hi[b] - 1:
                        if pos < shape[b] - 1:
                            flux = _inner_flux(t, p, b, c, c + s, inner)
                            value, defined = _inner_pressure(t, p, floating, b, c, c + s)
                        else:
                            flux, value, defined = _face(
                                t, p, floating, shape, c, at, b, far, bc, a, centre, length, inner, outer
                            )
                        integral += 0.5 * h[b, pos] * flux
                        magnitude += 0.5 * h[b, pos] * abs(flux)
                        if defined:
                            area = h[0, iz] * h[1, iy] * h[2, ix] / h[b, pos]
                            p_hi += area * value
                            a_hi += area
        U[a, b] = _net(integral, magnitude) / volume
        if a_lo > 0.0 and a_hi > 0.0:
            G[a, b] = (p_hi / a_hi - p_lo / a_lo) / h[b, lo[b] : hi[b]].sum()


@nb.njit(inline="always", **EXACT_JIT)
def _fixed_axes(bc, axes, a):
    fixed = np.zeros(3, np.bool_)
    for b in range(3):
        fixed[b] = axes[b] and _fixed(bc, a, b)
    return fixed


@nb.njit(inline="always", **EXACT_JIT)
def _live(t, shape, bc, axes, a):
    """Faces of the box that can carry flow under the gradient along `a` (`upscale.flow.paths`)."""
    return live_faces(t, shape, _fixed_axes(bc, axes, a), bc == PERIODIC, axes, a)


@nb.njit(inline="always", **EXACT_JIT)
def _every(t, shape, bc, axes, a):
    """`_live` of a whole box (`upscale.flow.paths.all_whole`): every face it has."""
    return every_face(shape, _fixed_axes(bc, axes, a), bc == PERIODIC, axes)


@nb.njit(inline="always", **EXACT_JIT)
def _one_box(t, h, shape, lo, hi, order, width, bc, axes, U, G, faces):
    n = t.shape[1]
    ab = np.empty((3, n, width + 1))
    floating = np.empty((3, n), np.bool_)
    pinned = np.empty((3, n), np.bool_)
    x = np.zeros((3, n))
    centre, length = _geometry(h, shape)
    # the axis whose factors serve each axis: its own under sealed conditions (the
    # matrix changes with the axis), else the first flow axis's
    source = np.full(3, -1)
    first = -1
    for a in range(3):
        if not axes[a]:
            continue
        if bc == SEALED or first < 0:
            _assemble(t, shape, order, bc, axes, a, ab[a], floating[a], pinned[a])
            factor(ab[a])
            first = a if first < 0 else first
            source[a] = a
        else:
            source[a] = first
        f = source[a]
        _load(t, shape, order, pinned[f], bc, axes, a, centre, length, x[a])
    for a in range(3):
        if not axes[a]:
            source[a] = first  # a map's z: solves zeros alongside, unused
    solve_three(ab[source[0]], ab[source[1]], ab[source[2]], x[0], x[1], x[2])
    for a in range(3):
        if not axes[a]:
            continue
        f = source[a]
        p = _refined(x[a], t, shape, order, ab[f], pinned[f], bc, axes, a, centre, length)
        inner, outer = faces(t, shape, bc, axes, a)
        _block_averages(t, h, p, floating[f], shape, lo, hi, bc, axes, a, centre, length, inner, outer,
                        U, G)  # fmt: skip


@nb.njit(**EXACT_JIT)
def _tensors(t, h, shape, lo, hi, order, width, bc, axes, U, G, whole):
    """`block_tensors` of the boxes `t` into `U` and `G`, one box after the other.

    `whole` is None when every box is whole (`upscale.flow.paths.all_whole`),
    True otherwise; numba compiles only the branch its type selects.
    """
    if whole is None:
        for q in range(t.shape[0]):
            _one_box(t[q], h[q], shape, lo[q], hi[q], order, width, bc, axes, U[q], G[q], _every)
    else:
        for q in range(t.shape[0]):
            _one_box(t[q], h[q], shape, lo[q], hi[q], order, width, bc, axes, U[q], G[q], _live)


def _in_threads(count: int, run: Callable[[slice], None]) -> None:
    """Call ``run`` on consecutive parts of ``range(count)``, one per thread (numba's thread count).

    The compiled loops release the GIL, so the parts run in parallel; each
    box is solved alone, so how the boxes are split changes no result.
    Plain threads rather than numba's ``parallel=True``: its parallel loops,
    launched from several threads at once (dask's, an ensemble's), need the
    OpenMP or TBB threading layer, and only the process-wide
    ``numba.config.THREADING_LAYER`` selects one (numba documentation, "The
    Threading Layers"), which this package set for every importer; and they
    cost about 4 s of compiling each on first use (docs/performance.md).
    """
    parts = min(nb.get_num_threads(), count)
    bounds = [count * i // parts for i in range(parts + 1)] if parts > 1 else [0, count]
    pieces = [slice(b0, b1) for b0, b1 in zip(bounds[:-1], bounds[1:])]
    if len(pieces) == 1:
        run(pieces[0])
        return
    with ThreadPoolExecutor(len(pieces)) as pool:
        for done in [pool.submit(run, piece) for piece in pieces]:
            done.result()


def block_tensors(t: np.ndarray, h: np.ndarray, shape: np.ndarray, lo: np.ndarray, hi: np.ndarray,
                  order: np.ndarray, width: int, bc: int, axes: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Average flux densities and pressure gradients of many boxes of one shape.

    Parameters
    ----------
    t : ndarray of shape (P, 3, n)
        Half-cell transmissibilities of each box along z, y, x, cells in
        lexicographic (layer, row, column) order; 0 for inactive cells.
    h : ndarray of shape (P, 3, S)
        Cell sizes in m along z, y, x (the first ``shape[a]`` entries of axis a).
    shape : ndarray of int, shape (3,)
        Cells of every box along z, y, x (``n`` in all).
    lo, hi : ndarray of int, shape (P, 3)
        The block inside each box, ``[lo, hi)`` along each axis.
    order : ndarray of int, shape (n,)
        Position of each cell in the banded matrix (see `band_order`).
    width : int
        Half-bandwidth of the matrix under `order`.
    bc : int
        ``SEALED``, ``LINEAR`` or ``PERIODIC``.
    axes : ndarray of bool, shape (3,)
        Flow axes (z is left out of a map).

    Returns
    -------
    U, G : ndarray of shape (P, 3, 3)
        ``U[q, a, b]`` = ``<u_b>`` (unit of k) and ``G[q, a, b]`` = ``<∂p/∂x_b>``
        (dimensionless) of block q under a unit gradient imposed along a; NaN
        for axes that are not flow axes or gradients with no defined face pressure.
    """
    P = t.shape[0]
    U = np.full((P, 3, 3), np.nan)
    G = np.full((P, 3, 3), np.nan)
    whole = None if all_whole(t, shape, axes) else True
    _in_threads(P, lambda s: _tensors(t[s], h[s], shape, lo[s], hi[s], order, width, bc, axes, U[s], G[s],
                                      whole))  # fmt: skip
    return U, G


@nb.njit(inline="always", **EXACT_JIT)
def _one_pair(tq, hq, shape, lo, m, hi, a, order, width, axes, ab, floating, out, faces):
    bc, (near, far) = _SEALED, _SIDES
    centre, length = _geometry(hq, shape)
    pinned = np.empty(tq.shape[1], np.bool_)
    _assemble(tq, shape, order, bc, axes, a, ab, floating, pinned)
    factor(ab)
    p = _pressure(tq, shape, order, ab, pinned, bc, axes, a, centre, length)
    inner, outer = faces(tq, shape, bc, axes, a)
    flux = magnitude = 0.0
    sums = np.zeros(4)
    for iz in range(lo[0], hi[0]):
        for iy in range(lo[1], hi[1]):
            for ix in range(lo[2], hi[2]):
                c = (iz * shape[1] + iy) * shape[2] + ix
                at = (iz, iy, ix)
                pos = at[a]
                f = 0.0
                if pos == m:
                    f = _face(tq, p, floating, shape, c, at, a, near, bc, a, centre, length, inner, outer)[0]
                elif m == shape[a] and pos == m - 1:  # the box's last face: the domain's
                    f = _face(tq, p, floating, shape, c, at, a, far, bc, a, centre, length, inner, outer)[0]
                flux += f
                magnitude += abs(f)
                conducting = tq[0, c] + tq[1, c] + tq[2, c] > 0.0
                if conducting and not floating[c]:
                    v = hq[0, iz] * hq[1, iy] * hq[2, ix]
                    side = 0 if pos < m else 2
                    sums[side] += v * p[c]
                    sums[side + 1] += v
    out[0] = _net(flux, magnitude)
    # without a first (second) block the face is the domain's own, at its fixed pressure
    out[1] = sums[0] / sums[1] if sums[1] > 0.0 else (0.0 if m == 0 else np.nan)
    out[2] = sums[2] / sums[3] if sums[3] > 0.0 else (-length[a] if m == shape[a] else np.nan)


@nb.njit(**EXACT_JIT)
def _pairs(t, h, shape, lo, mid, hi, a, order, width, axes, out, whole):
    """`pair_fluxes` of the boxes `t` into `out`, one box after the other (`whole` as in `_tensors`)."""
    n = t.shape[2]
    ab = np.empty((n, width + 1))
    floating = np.empty(n, np.bool_)
    if whole is None:
        for q in range(t.shape[0]):
            _one_pair(t[q], h[q], shape, lo[q], mid[q], hi[q], a, order, width, axes, ab, floating, out[q],
                      _every)  # fmt: skip
    else:
        for q in range(t.shape[0]):
            _one_pair(t[q], h[q], shape, lo[q], mid[q], hi[q], a, order, width, axes, ab, floating, out[q],
                      _live)  # fmt: skip


def pair_fluxes(t: np.ndarray, h: np.ndarray, shape: np.ndarray, lo: np.ndarray, mid: np.ndarray,
                hi: np.ndarray, a: int, order: np.ndarray, width: int, axes: np.ndarray) -> np.ndarray:
    """Flux through the shared face of two blocks, and their mean pressures.

    Each box holds two neighbouring blocks along axis `a` (``[lo, mid)`` and
    ``[mid, hi)`` along a; ``[lo, hi)`` along the others) and a border; it is
    solved with sealed sides under a unit gradient along a. One of the two
    may be empty (``mid == 0`` or ``mid`` = the box's length along a): the
    face is then the box's first or last face, on the domain's edge, and its
    fixed pressure (0 or -L) stands for the missing block's — which gives a
    block's half transmissibility to the domain's outer face.

    Parameters
    ----------
    t, h, shape, order, width, axes
        As in `block_tensors`.
    lo, hi : ndarray of int, shape (P, 3)
        The two blocks inside each box.
    mid : ndarray of int, shape (P,)
        First cell of the second block along `a`.
    a : int
        Axis across the shared face.

    Returns
    -------
    ndarray of shape (P, 3)
        Flux through the face (unit of k · m², per unit pressure in m), then
        the volume-averaged pressure (m) of the first and of the second block
        over its active cells (NaN when none has a defined pressure).
    """
    out = np.empty((t.shape[0], 3))
    whole = None if all_whole(t, shape, axes) else True
    _in_threads(len(out), lambda s: _pairs(t[s], h[s], shape, lo[s], mid[s], hi[s], a, order, width, axes,
                                           out[s], whole))  # fmt: skip
    return out


def band_order(shape: tuple[int, int, int], periodic: bool) -> tuple[np.ndarray, int]:
    """Numbering of a box's cells that keeps its matrix narrow, and the half-bandwidth.

    The longest axis is numbered slowest, so the band is one slice of the
    two shorter axes. Under periodic conditions the slices along it are
    interleaved from both ends (0, n-1, 1, n-2, ...), so the periodic
    connection of the first and the last slice stays inside the band too.

    Parameters
    ----------
    shape : (int, int, int)
        Cells along z, y, x.
    periodic : bool
        Whether opposite faces are connected.

    Returns
    -------
    order : ndarray of int, shape (n,)
        Matrix position of each cell, cells in lexicographic order.
    width : int
        Largest distance between the positions of two connected cells.

    Examples
    --------
    >>> order, width = band_order((1, 2, 3), periodic=False)
    >>> order.reshape(2, 3).tolist(), width
    ([[0, 2, 4], [1, 3, 5]], 2)
    """
    slow = int(np.argmax(shape))
    axes = [slow] + [a for a in range(3) if a != slow]
    slices = np.arange(shape[slow])
    if periodic:
        n = shape[slow]
        visit = np.stack([slices, slices[::-1]], axis=1).ravel()[:n]  # 0, n-1, 1, n-2, ...
        slices = np.empty(n, int)
        slices[visit] = np.arange(n)
    grid = np.indices(shape)
    other = grid[axes[1]] * shape[axes[2]] + grid[axes[2]]
    order = slices[grid[slow]] * (shape[axes[1]] * shape[axes[2]]) + other
    width = 0
    for a in range(3):
        if shape[a] > 1:
            first = np.take(order, np.arange(shape[a] - 1), axis=a)
            second = np.take(order, np.arange(1, shape[a]), axis=a)
            width = max(width, int(np.abs(first - second).max()))
            if periodic:
                ends = np.take(order, [0], axis=a) - np.take(order, [shape[a] - 1], axis=a)
                width = max(width, int(np.abs(ends).max()))
    return order.ravel(), max(width, 0)
