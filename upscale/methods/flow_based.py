"""Flow-based upscaling: a local pressure solve in every block, all blocks of a chunk at once.

Each coarse block, widened by a border of ``border`` fine cells of the
surrounding rock on every side (clipped at the edge of the domain), is
solved under a unit mean pressure gradient along each axis with one of
three boundary conditions (`upscale.flow.local`):

* ``sealed`` — fixed pressures on the two faces across the gradient, the
  other faces closed: a diagonal tensor, ``k_aa = -<u_a> / <∂p/∂x_a>``;
* ``linear`` — the linear pressure on every outer face: a full tensor;
* ``periodic`` — periodic pressure fluctuation and flux (Durlofsky 1991):
  a full tensor, symmetric and positive definite without a border.

For ``linear`` and ``periodic`` the tensor follows from the averages over
the block of the flux density and of the pressure gradient under the two
(three) imposed gradients, ``K = -<U> <G>⁻¹`` (Wen, Durlofsky & Edwards
2003, "Use of border regions for improved permeability upscaling"); with a
border the periodic tensor is made symmetric, ``(K + Kᵀ) / 2``, as they do.

Inactive cells are impermeable. A block with no flowing path along an axis
gets 0 along it. Under periodic conditions, an inactive cell on one side of
a periodic pair of faces closes that pair (no flow wraps through it).

Blocks whose box has the same shape — every interior block — are solved in
one compiled call; edge blocks (smaller, or with a clipped border) form a
few more groups.
"""

from __future__ import annotations

from collections.abc import Iterator
from typing import Any

import numpy as np

from ..errors import InputError
from ..field import Field, Grid
from ..flow.local import CONDITIONS, PERIODIC, SEALED, band_order, block_tensors, pair_fluxes
from ..flow.transmissibility import half_cell
from ..grid.blocks import Size, axis_edges, span
from ..parallel import apply_regions

#: Names of the nine tensor terms in the order of the flattened 3 x 3 tensor (z, y, x).
TENSOR = ("kzz", "kzy", "kzx", "kyz", "kyy", "kyx", "kxz", "kxy", "kxx")


def _half_cells(
    arrays: tuple[np.ndarray, ...], dz: np.ndarray, cell: tuple[float, float]
) -> tuple[list[np.ndarray], Grid]:
    kz, ky, kx = arrays
    grid = Grid(dz=dz, dy=np.full(kx.shape[1], cell[0]), dx=np.full(kx.shape[2], cell[1]))
    return [half_cell(k, grid, axis) for axis, k in enumerate((kz, ky, kx))], grid


def _blocks(core: tuple[tuple[int, int], ...], block: tuple[Size, int, int]
            ) -> tuple[np.ndarray, np.ndarray, list[int]]:  # fmt: skip
    """First and end cells (P, 3) of every block of the chunk's own cells, and the block counts."""
    edges = [c0 + axis_edges(b, c1 - c0) for (c0, c1), b in zip(core, block)]
    mesh = np.stack(np.meshgrid(*(e[:-1] for e in edges), indexing="ij"), axis=-1).reshape(-1, 3)
    ends = np.stack(np.meshgrid(*(e[1:] for e in edges), indexing="ij"), axis=-1).reshape(-1, 3)
    return mesh, ends, [e.size - 1 for e in edges]


def _before(starts: np.ndarray, size: Size) -> np.ndarray:
    """First cell of the block before each block that starts at `starts` along an axis; 0 for the first.

    A grouping (`Size` a tuple) is held by one chunk, so chunk cells are the domain's.
    """
    if isinstance(size, tuple):
        edges = axis_edges(size, sum(size))
        return edges[np.maximum(np.searchsorted(edges, starts) - 1, 0)]
    return np.maximum(starts - size, 0)


def _gather(t: list[np.ndarray], grid: Grid, origin: np.ndarray, shape: tuple) -> tuple:
    """Half-cell t (P, 3, n) and sizes (P, 3, S) of boxes of one shape at `origin` (P, 3)."""
    idx = [origin[:, a, None] + np.arange(shape[a]) for a in range(3)]
    cells = (idx[0][:, :, None, None], idx[1][:, None, :, None], idx[2][:, None, None, :])
    boxes = np.stack([ta[cells].reshape(len(origin), -1) for ta in t], axis=1)
    h = np.zeros((len(origin), 3, max(shape)))
    for a in range(3):
        h[:, a, : shape[a]] = grid.sizes(a)[idx[a]]
    return boxes, h


#: Off-diagonal terms below this fraction of ``sqrt(k_aa k_bb)`` are rounding, and set to 0.
ROUNDING = 1e-11

#: Fine cells gathered into one compiled call (bounds the copies of the boxes: 24 bytes a cell).
BATCH_CELLS = 2**20


def _groups(origin: np.ndarray, stop: np.ndarray) -> Iterator[tuple[tuple[int, ...], np.ndarray]]:
    """Indices of the boxes of each distinct shape, in batches of about `BATCH_CELLS` cells."""
    shapes = stop - origin
    unique, inverse = np.unique(shapes, axis=0, return_inverse=True)
    for g, shape in enumerate(unique):
        members = np.flatnonzero(inverse.ravel() == g)
        step = max(1, BATCH_CELLS // int(np.prod(shape)))
        for i in range(0, members.size, step):
            yield tuple(int(s) for s in shape), members[i : i + step]


def _fit_flowing_axes(full: np.ndarray, u: np.ndarray, g: np.ndarray, blocks: np.ndarray,
                      still: np.ndarray) -> np.ndarray:  # fmt: skip
    """Tensors of `blocks` with still axes, fitted on their flowing axes F alone, into `full`.

    With the rows and columns of the still axes 0, Darcy's law of the block
    reads ``u_F = -K_FF g_F`` for every imposed gradient (the columns); K_FF is
    its least-squares solution. Solving for the full tensor instead divides by
    a mean-gradient matrix that is close to singular when an axis does not
    conduct, and the still axis's rounding decides the flowing terms.

    Returns the blocks fitted (those whose ``g_F g_Fᵀ`` is not singular).
    """
    fitted = np.zeros(len(full), bool)
    for pattern in np.unique(still[blocks], axis=0):
        members = np.flatnonzero(blocks & (still == pattern).all(axis=1))
        flowing = np.flatnonzero(~pattern)
        g_f = g[members][:, flowing]
        normal = g_f @ np.swapaxes(g_f, 1, 2)  # g_F g_Fᵀ, symmetric
        size = np.abs(normal).max(axis=(1, 2), initial=0.0) ** flowing.size  # 1 with no flowing axis
        ok = np.abs(np.linalg.det(normal)) > 1e-12 * size
        members = members[ok]
        u_f, g_f, normal = u[members][:, flowing], g_f[ok], normal[ok]
        full[members] = 0.0
        if flowing.size:
            K_f = -np.linalg.solve(normal, g_f @ np.swapaxes(u_f, 1, 2)).swapaxes(1, 2)
            full[members[:, None, None], flowing[None, :, None], flowing[None, None, :]] = K_f
        fitted[members] = True
    return fitted


def _tensor(U: np.ndarray, G: np.ndarray, bc: int, axes: np.ndarray, border: int) -> np.ndarray:
    """Permeability tensors (P, 3, 3) from the averages of `upscale.flow.local.block_tensors`."""
    K = np.zeros(U.shape)
    flow = np.flatnonzero(axes)
    diag_u, diag_g = U[:, flow, flow], G[:, flow, flow]
    with np.errstate(divide="ignore", invalid="ignore"):
        diagonal = np.where(diag_u == 0, 0.0, -diag_u / diag_g)
    diagonal = np.where(np.isfinite(diagonal) & (diagonal > 0), diagonal, 0.0)
    if bc == SEALED:
        K[:, flow, flow] = diagonal
        return K
    # U[q, a, b] is <u_b> under the gradient along a: as matrices, u = U.T, g = G.T
    u = np.swapaxes(U[:, flow][:, :, flow], 1, 2)
    g = np.swapaxes(G[:, flow][:, :, flow], 1, 2)
    finite = np.isfinite(g).all(axis=(1, 2))
    # an axis along which nothing flows (no live face, `upscale.flow.paths`: U_aa is exactly
    # 0) gets an empty row and column, as a positive semidefinite tensor with k_aa = 0 must
    still = diag_u == 0
    good = finite & ~still.any(axis=1)
    good[good] = np.abs(np.linalg.det(g[good])) > 1e-12 * np.abs(g[good]).max(axis=(1, 2)) ** len(flow)
    full = np.zeros_like(u)
    full[good] = -np.linalg.solve(np.swapaxes(g[good], 1, 2), np.swapaxes(u[good], 1, 2)).swapaxes(1, 2)
    good |= _fit_flowing_axes(full, u, g, finite & still.any(axis=1), still)
    if bc == PERIODIC and border:
        full = 0.5 * (full + np.swapaxes(full, 1, 2))
    full[still] = 0.0
    full.swapaxes(1, 2)[still] = 0.0
    # off-diagonal rounding (|k_ab| <= sqrt(k_aa k_bb) for a positive semidefinite tensor)
    scale = np.sqrt(np.abs(full[:, range(len(flow)), range(len(flow))]))
    full[np.abs(full) <= ROUNDING * scale[:, :, None] * scale[:, None, :]] = 0.0
    # a block whose mean gradient is undefined, or whose tensor is not positive
    # semidefinite (possible with a border), keeps its diagonal terms only. An axis
    # with no flowing path has an empty row and column; a block whose only paths run
    # one way (a diagonal channel under periodic conditions) has a singular tensor,
    # whose smallest eigenvalue is rounding of either sign
    largest = np.abs(full).max(axis=(1, 2))
    empty = ~(full != 0).any(axis=2) & ~(full != 0).any(axis=1)
    flowing = 0.5 * (full + np.swapaxes(full, 1, 2))
    flowing += (empty * largest[:, None])[:, :, None] * np.eye(len(flow))
    good &= (largest == 0) | (np.linalg.eigvalsh(flowing)[:, 0] >= -ROUNDING * largest)
    bad = np.flatnonzero(~good)
    full[bad] = 0.0
    full[bad[:, None], np.arange(len(flow)), np.arange(len(flow))] = diagonal[bad]
    K[:, flow[:, None], flow[None, :]] = full
    return K


def block_tensor_chunk(
    kz: np.ndarray,
    ky: np.ndarray,
    kx: np.ndarray,
    *,
    dz: np.ndarray,
    core: tuple[tuple[int, int], ...],
    block: tuple[Size, int, int],
    cell: tuple[float, float],
    bc: str,
    border: int,
    axes: tuple[bool, bool, bool],
) -> np.ndarray:
    """Flow-based permeability tensor of every block of a chunk.

    Parameters
    ----------
    kz, ky, kx : ndarray of shape (L, M, N)
        Permeability along each axis (any unit; NaN = inactive) of the chunk
        and the cells around it that the borders reach.
    dz : ndarray of shape (L,)
        Layer thicknesses in m.
    core : ((int, int), (int, int), (int, int))
        The chunk's own cells along z, y, x; its blocks start at the first.
    block : (Size, int, int)
        Cells per block (layers, rows, columns); layers may be a grouping
        (`upscale.grid.blocks.Size`), held by one chunk.
    cell : (float, float)
        Row height dy and column width dx in m.
    bc : {'sealed', 'linear', 'periodic'}
        Boundary conditions of the local problems.
    border : int
        Fine cells added on every side of each block.
    axes : (bool, bool, bool)
        Flow axes z, y, x.

    Returns
    -------
    ndarray of shape (9, l, m, n)
        The tensor terms in the order of `TENSOR`, in the unit of k.
    """
    t, grid = _half_cells((kz, ky, kx), dz, cell)
    mesh, ends, counts = _blocks(core, block)
    origin = np.maximum(mesh - border, 0)
    stop = np.minimum(ends + border, kx.shape)
    code, mask = CONDITIONS[bc], np.array(axes)
    K = np.zeros((len(mesh), 3, 3))
    for shape, members in _groups(origin, stop):
        order, width = band_order(shape, code == PERIODIC)
        boxes, h = _gather(t, grid, origin[members], shape)
        lo, hi = mesh[members] - origin[members], ends[members] - origin[members]
        U, G = block_tensors(boxes, h, np.array(shape), lo, hi, order, width, code, mask)
        K[members] = _tensor(U, G, code, mask, border)
    return K.reshape(*counts, 9).transpose(3, 0, 1, 2)


def face_transmissibility_chunk(
    kz: np.ndarray,
    ky: np.ndarray,
    kx: np.ndarray,
    *,
    dz: np.ndarray,
    core: tuple[tuple[int, int], ...],
    block: tuple[Size, int, int],
    cell: tuple[float, float],
    border: int,
    axes: tuple[bool, bool, bool],
) -> np.ndarray:
    """Coarse transmissibility across the first face of every block, from two-block solves.

    For every block and axis a with a block before it along a, the box made
    of the two blocks and a border is solved with sealed sides under a unit
    gradient along a; the transmissibility of their shared face is the fine
    flux through it over the drop between the volume-averaged pressures of
    the two blocks, ``T = Q / (p̄_1 - p̄_2)``.

    Parameters
    ----------
    kz, ky, kx, dz, core, block, cell, border, axes
        As in `block_tensor_chunk`; the chunk must also hold the block before
        its first along each axis (a depth of a block plus the border).

    The first and the last block along a also get their half transmissibility
    to the domain's outer face, ``T = Q / (p_face - p̄)`` from a solve of the
    block alone (plus the border) with the face's fixed pressure, so that a
    coarse model of blocks in series passes exactly the flow of the fine one.

    Returns
    -------
    ndarray of shape (6, l, m, n)
        In (unit of k) · m: ``[a]`` the T of the face before each block along
        axis a (z, y, x) — for the first block, its half transmissibility to
        the domain's first face; ``[3 + a]`` the half transmissibility of the
        last block to the domain's last face. NaN elsewhere and where the
        pressure drop is not defined.
    """
    t, grid = _half_cells((kz, ky, kx), dz, cell)
    mesh, ends, counts = _blocks(core, block)
    out = np.full((6, len(mesh)), np.nan)
    for a in np.flatnonzero(axes):
        before = mesh.copy()
        before[:, a] = _before(before[:, a], block[a])  # the first block pairs with the face
        mid = mesh[:, a].copy()
        out[a] = _pairs(t, grid, before, mid, ends, border, a, axes, kx.shape)
        last = np.flatnonzero(ends[:, a] == kx.shape[a])
        ends_last = ends[last, a].copy()
        out[3 + a, last] = _pairs(t, grid, mesh[last], ends_last, ends[last], border, a, axes,
                                  kx.shape)  # fmt: skip
    return out.reshape(6, *counts)


def _pairs(t: list[np.ndarray], grid: Grid, first: np.ndarray, mid: np.ndarray, last: np.ndarray,
           border: int, a: int, axes: tuple[bool, bool, bool], extent: tuple) -> np.ndarray:  # fmt: skip
    """``T = Q / (p̄_1 - p̄_2)`` of the boxes ``[first, last)`` split at `mid` along `a`."""
    origin = np.maximum(first - border, 0)
    stop = np.minimum(last + border, extent)
    T = np.full(len(first), np.nan)
    for shape, members in _groups(origin, stop):
        order, width = band_order(shape, False)
        boxes, h = _gather(t, grid, origin[members], shape)
        lo, hi = first[members] - origin[members], last[members] - origin[members]
        values = pair_fluxes(boxes, h, np.array(shape), lo, mid[members] - origin[members, a],
                             hi, a, order, width, np.array(axes))  # fmt: skip
        flux, drop = values[:, 0], values[:, 1] - values[:, 2]
        with np.errstate(divide="ignore", invalid="ignore"):
            found = np.where(flux == 0, 0.0, flux / drop)
        found[~np.isfinite(found) | (found < 0)] = np.nan
        T[members] = found
    return T


def refuse_grouping(cells: tuple[Size, int, int], method: str, why: str) -> None:
    """Raise `InputError` if `cells` groups the layers unevenly, which `method` cannot take (`why`)."""
    if isinstance(cells[0], tuple):
        raise InputError(f"method {method} cannot take coarse layers of unequal thickness ({why}); "
                         "use a uniform NZ, or another method such as flow or flow-transmissibility")


def options_for(field_grid: Grid, ndim: int) -> dict[str, Any]:
    """Options every chunk function needs from the fine grid."""
    return {
        "cell": (float(field_grid.dy[0]), float(field_grid.dx[0])),
        "axes": (ndim == 3, True, True),
    }


def _check_border(field: Field, border: int) -> None:
    if isinstance(border, bool) or not isinstance(border, (int, np.integer)):
        raise InputError(f"`border` must be a whole number of fine cells, not {border!r}")
    if border < 0:
        raise InputError(f"`border` must be 0 or more fine cells, not {border}")
    largest = max(field.shape[a] for a in range(3) if field.ndim == 3 or a > 0)
    if border >= largest:
        raise InputError(
            f"a border of {border} cells is as large as the grid ({'x'.join(map(str, field.shape[::-1]))}"
            " cells, x first); use a border smaller than the grid"
        )


def _inputs(field: Field) -> tuple[list[Any], dict[str, Any]]:
    arrays = [field.kz if field.kz is not None else field.kx, field.ky, field.kx]
    return arrays, options_for(field.grid, field.ndim)


def flow_properties(field: Field, cells: tuple[Size, int, int], bc: str = "sealed",
                    border: int = 0) -> dict[str, Any]:  # fmt: skip
    """Flow-based tensor of every block of a field, lazily for dask arrays.

    Parameters
    ----------
    field : Field
        The fine field, cropped to the blocks it is upscaled to.
    cells : (Size, int, int)
        Cells per block (layers, rows, columns); layers may be a grouping
        (`upscale.grid.blocks.Size`).
    bc : {'sealed', 'linear', 'periodic'}
        Boundary conditions of the local problems.
    border : int
        Fine cells of surrounding rock added on every side of each block.

    Returns
    -------
    dict
        ``{"tensor": array of shape (9, L', M', N')}`` in the order of `TENSOR`.
    """
    if bc not in CONDITIONS:
        raise InputError(f"unknown boundary condition {bc!r}; choose one of {', '.join(CONDITIONS)}")
    _check_border(field, border)
    arrays, opts = _inputs(field)
    depth = (border if field.ndim == 3 else 0, border, border)
    tensor = apply_regions(block_tensor_chunk, arrays, field.grid.dz, cells, depth, 9,
                           bc=bc, border=border, **opts)  # fmt: skip
    return {"tensor": tensor}


def direct_properties(field: Field, cells: tuple[Size, int, int], bc: str = "sealed",
                      border: int = 0) -> dict[str, Any]:  # fmt: skip
    """Flow-based block tensors plus coarse face transmissibilities upscaled directly.

    Parameters
    ----------
    field, cells, bc, border
        As in `flow_properties`; `bc` applies to the block tensors, the
        two-block solves of the faces always have sealed sides.

    Returns
    -------
    dict
        ``"tensor"`` as in `flow_properties`, and ``"faces"``: an array of
        shape (6, L', M', N'): T along z, y, x of the face before each block
        and the last blocks' half transmissibilities to the domain's last
        faces (see `face_transmissibility_chunk`).
    """
    properties = flow_properties(field, cells, bc, border)
    arrays, opts = _inputs(field)
    depth = tuple(span(b) + border if (a > 0 or field.ndim == 3) else 0 for a, b in enumerate(cells))
    properties["faces"] = apply_regions(face_transmissibility_chunk, arrays, field.grid.dz, cells,
                                        depth, 6, border=border, **opts)  # fmt: skip
    return properties
