"""Coarse blocks snapped to a template raster (``--grid-like``): its cells are the blocks.

A template is a raster whose origin and cell size define the coarse grid
(its values are not read). Each of its cells must hold a whole number of
fine cells along x and y, its cell edges must fall on fine cell edges, and it
must share the field's CRS (or both have none). The fine field is then cut to
the template cells that lie wholly on it (`Snap`), so the coarse grid's
transform is the template's, moved to the first template cell covered.
Layers are not part of a template: they come from the block's z part.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

from ..errors import InputError
from ..field import Grid

#: Largest relative difference of a template cell from a whole number of fine cells.
SIZE_TOLERANCE = 1e-9
#: Largest distance of a template cell edge from a fine cell edge, in fine cells.
EDGE_TOLERANCE = 1e-6


@dataclass(frozen=True)
class Template:
    """The grid of a template raster.

    Attributes
    ----------
    path : str
        The file, as given.
    sha256 : str
        SHA-256 of its bytes.
    transform : affine.Affine
        Its geotransform (map units of its CRS).
    crs : rasterio.crs.CRS or None
    rows, columns : int
        Its cells along y and x.
    """

    path: str
    sha256: str
    transform: Any
    crs: Any
    rows: int
    columns: int


@dataclass(frozen=True)
class Snap:
    """Where the template's cells lie on the fine grid.

    Attributes
    ----------
    rows, columns : (int, int)
        The fine rows and columns under whole template cells (zero-based, end excluded).
    template_rows, template_columns : (int, int)
        The template cells they make (zero-based, end excluded): coarse block
        (0, 0) is template cell ``(template_rows[0], template_columns[0])``.
    nx, ny : int
        Fine cells per template cell along x (columns) and y (rows).
    """

    rows: tuple[int, int]
    columns: tuple[int, int]
    template_rows: tuple[int, int]
    template_columns: tuple[int, int]
    nx: int
    ny: int


def snap_to(grid: Grid, template: Template) -> Snap:
    """The template's cells on `grid`: cells per block, and the fine window they cover.

    Parameters
    ----------
    grid : Grid
        The fine grid; its transform in the map units of its CRS.
    template : Template
        The template raster's grid.

    Returns
    -------
    Snap

    Raises
    ------
    InputError
        A template rotated, sheared or flipped against the field, in another
        CRS, whose cells are not a whole number of fine cells or whose cell
        edges fall between fine cell edges, or with no whole cell on the field.

    Examples
    --------
    >>> import numpy as np
    >>> from affine import Affine
    >>> fine = Grid(dz=np.ones(1), dy=np.full(30, 10.0), dx=np.full(40, 10.0),
    ...             transform=Affine(10, 0, 500_000, 0, -10, 4_200_000))
    >>> snap_to(fine, Template("t.tif", "", Affine(30, 0, 499_980, 0, -20, 4_199_970), None, 10, 16))
    Snap(rows=(3, 23), columns=(1, 40), template_rows=(0, 10), template_columns=(1, 14), nx=3, ny=2)
    """
    fine, t = grid.transform, template.transform
    name = template.path
    if t.b != 0 or t.d != 0 or t.a * fine.a <= 0 or t.e * fine.e <= 0:
        raise InputError(
            f"{name}: the template's cells are not north-up rectangles like the field's (geotransform "
            f"{tuple(t)[:6]}); resample it onto a north-up grid first"
        )
    if template.crs != grid.crs:
        raise InputError(
            f"{name}: the template's CRS ({_crs(template.crs)}) differs from the field's "
            f"({_crs(grid.crs)}); reproject the template onto the field's CRS"
        )
    nx, ny = _cells_per_block(t.a / fine.a), _cells_per_block(t.e / fine.e)
    if nx is None or ny is None:
        raise InputError(
            f"{name}: the template's cells ({abs(t.a):g} x {abs(t.e):g}) are not a whole number of the "
            f"field's cells ({abs(fine.a):g} x {abs(fine.e):g}) along x and y"
        )
    column, row = _edge(t.c - fine.c, fine.a), _edge(t.f - fine.f, fine.e)
    if column is None or row is None:
        raise InputError(
            f"{name}: the template's cell edges fall between the field's cell edges (its origin is "
            f"{(t.c - fine.c) / fine.a:.6g} columns, {(t.f - fine.f) / fine.e:.6g} rows from the field's); "
            "snap its origin to a corner of the field's cells"
        )
    _, rows, columns = grid.shape
    first_c, last_c = _covered(column, nx, columns, template.columns)
    first_r, last_r = _covered(row, ny, rows, template.rows)
    if first_c >= last_c or first_r >= last_r:
        raise InputError(
            f"{name}: no cell of the template lies wholly on the field (the template starts {column} "
            f"columns and {row} rows from the field's origin, with cells of {nx} x {ny} fine cells; the "
            f"field has {columns} x {rows})"
        )
    return Snap((row + first_r * ny, row + last_r * ny), (column + first_c * nx, column + last_c * nx),
                (first_r, last_r), (first_c, last_c), nx, ny)  # fmt: skip


def _crs(crs: Any) -> str:
    return "none" if crs is None else crs.to_string()


def _cells_per_block(ratio: float) -> int | None:
    """`ratio` as a whole number >= 1 of fine cells, or None."""
    whole = round(ratio)
    return whole if whole >= 1 and math.isclose(ratio, whole, rel_tol=SIZE_TOLERANCE) else None


def _edge(distance: float, size: float) -> int | None:
    """The fine cells a template edge lies from the field's (`distance`: map units); None between cells."""
    cells = distance / size
    whole = round(cells)
    return whole if abs(cells - whole) <= EDGE_TOLERANCE else None


def _covered(start: int, size: int, fine: int, template: int) -> tuple[int, int]:
    """The template cells (first, end excluded) wholly on `fine` cells, the first starting at cell `start`."""
    first = max(0, -(start // size))  # the first cell that starts on the field
    return first, min(template, (fine - start) // size)
