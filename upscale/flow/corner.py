"""The corner-to-corner flow: a held-out flow for the check, along no axis.

Pressure 1 is fixed on the outer faces of one corner region of the domain,
pressure 0 on those of the opposite corner region, and every other outer
face is closed. Seen from above (x to the right, y down, row 0 first)::

    p = 1 on the face x = 0 of the first rows    p = 0 on the face x = Lx of the last rows
    and on the face y = 0 of the first columns   and on the face y = Ly of the last columns

In 3D the regions take every layer, and the top and bottom faces stay
closed. The flow crosses the whole domain along its diagonal, so it tests
the coarse model both along and across the axes at once — a flow no
upscaling method is fitted to.

The regions are whole coarse blocks, so that the fine and the coarse model
see physically the same boundary condition: with ``n`` blocks along an axis,
each corner region spans ``ceil(n / 8)`` blocks (`FRACTION`), the first ones
at the inlet and the last ones (the edge block included, whatever its size)
at the outlet. `corners_of` turns this rule into cell counts of the fine and
of the coarse grid, matching the block edges in metres. The fixed pressure
sits on the outer faces themselves, as in `upscale.flow.steady`, and the
flow rate Q is the outflow, in (unit of k) · m per unit of pressure drop
over viscosity.

The corner flow's effective permeability is Q over the rate ``Q_1`` that the
same grid passes under the same pressures with k = 1 everywhere (inactive
cells included): the uniform permeability that passes Q. For the flow
along an axis ``Q_1 = A / L`` exactly on any Cartesian grid, so this is the
same k_eff as `upscale.flow.steady`'s. Here ``Q_1`` is solved on each grid,
and the ratio matters: the two-point scheme on blocks passes 4 to 14 % less
than on the fine cells under the same corner pressures even when k is
uniform (measured: 8 to 16 blocks across; the fixed pressure ends abruptly
at the region's edge), an error of the coarse grid that no upscaling method
can remove. Dividing each model's rate by its own grid's ``Q_1`` leaves
that error out, so a uniform field upscales exactly, as along the axes.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, fields

import numpy as np

from ..errors import InputError
from ..field import Field, Grid
from .steady import SteadyFlow, fixed_pressures
from .transmissibility import Transmissibilities, transmissibilities

#: Share of the blocks along y (at the x faces) and along x (at the y faces) in a corner region, rounded up.
FRACTION = 1 / 8


@dataclass(frozen=True)
class Corners:
    """The two corner regions, in cells of one grid.

    Attributes
    ----------
    rows : (int, int)
        Rows whose face x = 0 is at p = 1 (the first ones) and rows whose face
        x = Lx is at p = 0 (the last ones).
    columns : (int, int)
        Columns whose face y = 0 is at p = 1 (the first ones) and columns whose
        face y = Ly is at p = 0 (the last ones).
    """

    rows: tuple[int, int]
    columns: tuple[int, int]

    def summary(self) -> dict[str, list[int]]:
        """The regions as plain data: ``rows`` and ``columns``, each [inlet, outlet]."""
        return {"rows": list(self.rows), "columns": list(self.columns)}


@dataclass(frozen=True, eq=False)
class CornerFlow(SteadyFlow):
    """The result of one corner-to-corner solve (the fields of `SteadyFlow`, and these).

    Attributes
    ----------
    corners : Corners
        The regions at p = 1 and p = 0.
    k_eff : float
        ``rate / Q_1``: the uniform permeability that passes the same rate on
        this grid (module docstring), unit of the input k.
    """

    corners: Corners
    k_eff: float

    @property
    def rate(self) -> float:
        """The flow rate Q (the outflow), (unit of k) · m per unit of pressure drop over viscosity."""
        return self.outflow


def corners_of(fine: Grid, coarse: Grid) -> tuple[Corners, Corners]:
    """The corner regions of the rule in the module docstring, on the fine and on the coarse grid.

    Parameters
    ----------
    fine, coarse : Grid
        The two grids of one partition (each block edge is a fine cell edge).

    Returns
    -------
    (Corners, Corners)
        In fine cells and in coarse blocks.

    Raises
    ------
    InputError
        If a region's edge in the coarse grid is no cell edge of the fine grid.

    Examples
    --------
    >>> from upscale.field import Grid
    >>> fine = Grid(dz=[1.0], dy=[1.0] * 20, dx=[1.0] * 64)
    >>> coarse = Grid(dz=[1.0], dy=[8.0, 8.0, 4.0], dx=[8.0] * 8)   # 8x8 blocks, a short last row
    >>> corners_of(fine, coarse)
    (Corners(rows=(8, 4), columns=(8, 8)), Corners(rows=(1, 1), columns=(1, 1)))
    """
    found = [], []
    for axis in (1, 2):
        blocks = coarse.sizes(axis)
        r = math.ceil(FRACTION * blocks.size)
        found[1].append((r, r))
        block_edges = np.concatenate([[0.0], np.cumsum(blocks)])
        extents = block_edges[r], block_edges[-1] - block_edges[blocks.size - r]
        found[0].append(tuple(_cells(fine.sizes(axis), extent, axis) for extent in extents))
    return tuple(Corners(*cells) for cells in found)  # type: ignore[return-value]


def _cells(sizes: np.ndarray, extent: float, axis: int) -> int:
    """How many fine cells from one end of an axis span `extent` m exactly."""
    edges = np.concatenate([[0.0], np.cumsum(sizes)])
    match = np.flatnonzero(np.isclose(edges, extent, rtol=0.0, atol=1e-9 * edges[-1]))
    if not match.size:
        raise InputError(
            f"the corner region of the check spans {extent:g} m along {'zyx'[axis]}, which is no "
            "edge of the fine cells; the coarse grid must come from blocks of the fine one"
        )
    return int(match[0])


def corner_flow(
    trans: Transmissibilities, corners: Corners, *, solver: str = "auto", tolerance: float = 1e-10
) -> CornerFlow:
    """Solve the corner-to-corner flow (module docstring) on one grid.

    Parameters
    ----------
    trans : Transmissibilities
        The grid's transmissibilities.
    corners : Corners
        The regions, in cells of this grid (from `corners_of`).
    solver, tolerance
        As in `upscale.flow.steady.pressure_drop`.

    Returns
    -------
    CornerFlow

    Examples
    --------
    >>> import numpy as np
    >>> from upscale.field import Field
    >>> from upscale.flow.transmissibility import transmissibilities
    >>> t = transmissibilities(Field.from_arrays(np.ones((4, 4))))
    >>> flow = corner_flow(t, Corners(rows=(1, 1), columns=(1, 1)))
    >>> round(flow.mass_balance, 12), flow.rate > 0
    (0.0, True)
    """
    solved = fixed_pressures(trans, *corner_faces(trans, corners), solver=solver, tolerance=tolerance)
    unit = unit_rate(trans.grid, corners, solver=solver, tolerance=tolerance)
    return CornerFlow(**{f.name: getattr(solved, f.name) for f in fields(SteadyFlow)}, corners=corners,
                      k_eff=solved.outflow / unit)  # fmt: skip


def unit_rate(grid: Grid, corners: Corners, *, solver: str = "auto", tolerance: float = 1e-10) -> float:
    """``Q_1``: the corner flow's rate on `grid` with k = 1 in every cell (m per unit of k).

    With k uniform and the regions through every layer, the pressure is the
    same in every layer and no flow crosses them, so ``Q_1`` is solved on one
    layer as thick as all of them: exact, and a 2D solve.
    """
    flat = Grid(dz=np.array([grid.dz.sum()]), dy=grid.dy, dx=grid.dx)
    ones = np.ones(flat.shape)
    trans = transmissibilities(Field(ones, ones, None, None, flat))
    return fixed_pressures(trans, *corner_faces(trans, corners), solver=solver, tolerance=tolerance).outflow


def corner_faces(trans: Transmissibilities, corners: Corners) -> tuple[tuple[np.ndarray, np.ndarray], ...]:
    """The inlet and the outlet faces of `corners`: (cells, half-cell t) each, for `fixed_pressures`."""
    index = np.arange(int(np.prod(trans.shape))).reshape(trans.shape)
    (x_first, x_last), (y_first, y_last) = trans.boundary[2], trans.boundary[1]
    (rows_in, rows_out), (cols_in, cols_out) = corners.rows, corners.columns
    m, n = trans.shape[1:]
    # the faces x = 0 of the first rows and y = 0 of the first columns; mirrored at the outlet
    inlet = _faces(index[:, :rows_in, :1], x_first[:, :rows_in],
                   index[:, :1, :cols_in], y_first[:, :, :cols_in])  # fmt: skip
    outlet = _faces(index[:, m - rows_out:, -1:], x_last[:, m - rows_out:],
                    index[:, -1:, n - cols_out:], y_last[:, :, n - cols_out:])  # fmt: skip
    return inlet, outlet


def _faces(*pairs: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Cells and their half-cell t, flattened and joined, from (cells, t) pairs of equal shape."""
    cells, t = pairs[0::2], pairs[1::2]
    return np.concatenate([c.ravel() for c in cells]), np.concatenate([v.ravel() for v in t])
