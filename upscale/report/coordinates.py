"""Where cells sit in a figure: their true edges in map coordinates or depth, axes written in full.

Maps and sections are drawn cell by cell on their edges (``pcolormesh``),
computed from the grid's cell sizes and transform: a thin layer is drawn
thin, a smaller edge block of ``--remainder keep`` smaller. Map units per
metre come from the transform and the first cell, which is always whole.
Coordinates are written in full on both axes — no offset such as "1e6" and
no scientific notation — so an easting and a northing read alike.
"""

from __future__ import annotations

import numpy as np
from matplotlib.axes import Axes
from matplotlib.ticker import MaxNLocator

from ..field import Grid


def plan_edges(grid: Grid) -> tuple[np.ndarray, np.ndarray]:
    """Column edges west to east and row edges north to south, in map units.

    Parameters
    ----------
    grid : Grid
        North-up; without a transform the edges are metres from the
        north-west corner (y ≤ 0).

    Returns
    -------
    (ndarray of shape (N + 1,), ndarray of shape (M + 1,))

    Examples
    --------
    >>> from affine import Affine
    >>> x, y = plan_edges(Grid(dz=[1.0], dy=[10.0, 4.0], dx=[20.0, 20.0, 5.0],
    ...                        transform=Affine(20.0, 0, 1000.0, 0, -10.0, 6_500_000.0)))
    >>> x.tolist(), y.tolist()
    ([1000.0, 1020.0, 1040.0, 1045.0], [6500000.0, 6499990.0, 6499986.0])
    """
    x = np.concatenate([[0.0], np.cumsum(grid.dx)])
    y = np.concatenate([[0.0], np.cumsum(grid.dy)])
    t = grid.transform
    if t is None:
        return x, -y
    return t.c + x * (t.a / grid.dx[0]), t.f + y * (t.e / grid.dy[0])


def depth_edges(grid: Grid) -> np.ndarray:
    """Layer edges in metres below the top, top first: 0 and the cumulative thicknesses, shape (L + 1,).

    Examples
    --------
    >>> depth_edges(Grid(dz=[1.0, 2.0, 0.5], dy=[1.0], dx=[1.0])).tolist()
    [0.0, 1.0, 3.0, 3.5]
    """
    return np.concatenate([[0.0], np.cumsum(grid.dz)])


def face_edges(grid: Grid, axis: int) -> tuple[np.ndarray, np.ndarray]:
    """Plan edges of the inner faces normal to array `axis`, each drawn from one cell centre to the next.

    Parameters
    ----------
    grid : Grid
    axis : int
        Array axis of the faces: 2 (normal to x) or 1 (normal to y); 0 gives
        the plan edges of the cells.

    Returns
    -------
    (ndarray, ndarray)
        x and y edges in map units, one fewer cell along `axis`.
    """
    x, y = plan_edges(grid)
    if axis == 2:
        x = (x[:-1] + x[1:]) / 2
    elif axis == 1:
        y = (y[:-1] + y[1:]) / 2
    return x, y


def crs_unit(grid: Grid) -> str:
    """Short name of the map unit: ``m`` without a CRS."""
    units = getattr(grid.crs, "linear_units", None) or "m"
    return {"metre": "m", "meter": "m"}.get(units, units)


def label_map(ax: Axes, grid: Grid, section: bool) -> None:
    """Axis labels with units, and tick labels written in full (no offset, no exponent)."""
    unit = crs_unit(grid)
    ax.set_xlabel(f"x ({unit})")
    ax.set_ylabel("depth below top (m)" if section else f"y ({unit})")
    ax.ticklabel_format(axis="both", style="plain", useOffset=False)
    ax.xaxis.set_major_locator(MaxNLocator(3))
    ax.yaxis.set_major_locator(MaxNLocator(4))
