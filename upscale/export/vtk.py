"""The coarse cell properties as a VTK XML rectilinear grid (``.vtr``) for 3D viewers.

VTK's rectilinear grids need coordinates that increase, x fastest (Kitware,
"VTK File Formats", XML RectilinearGrid). Rows run north to south and layers
top to bottom in our arrays, so both are reversed here: VTK y increases
northward and VTK z is the height above the top of the model in m
(negative downward), whatever the package's units, so x, y and z share one
scale in a viewer. The cell array ``id`` holds each cell's package id, so a value
picked in a viewer leads back to ``cells.csv``.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

import numpy as np

from ..field import Grid


def _edges(sizes: np.ndarray, start: float, sign: float) -> np.ndarray:
    return start + sign * np.concatenate([[0.0], np.cumsum(sizes)])


def _ascii(values: np.ndarray) -> str:
    # shortest round-trip decimal of every value; NaN (inactive) as "nan", which VTK's
    # number parser reads (strtod syntax)
    return " ".join(map(repr, np.asarray(values, dtype=float).ravel().tolist()))


def write_vtk(path: Path, grid: Grid, properties: dict[str, np.ndarray], factors: dict[str, Any]) -> None:
    """Write the coarse properties (package units; NaN = inactive) as a ``.vtr`` file.

    Parameters
    ----------
    path : Path
        Destination file.
    grid : Grid
        The coarse grid (sizes in m).
    properties : dict of str to ndarray of shape (L, M, N)
        Values in the package's units.
    factors : dict
        From `upscale.export.package.unit_factors`; unused for the geometry,
        which stays in the CRS's units and metres so that views are not distorted.
    """
    L, M, N = grid.shape
    x0, y0 = (0.0, 0.0) if grid.transform is None else (grid.transform.c, grid.transform.f)
    x = _edges(grid.dx, x0, 1.0)
    y = _edges(grid.dy, y0, -1.0)[::-1]
    z = (-_edges(grid.dz, 0.0, 1.0))[::-1]  # in m, like x and y in a metric CRS
    arrays = {"id": np.arange(L * M * N, dtype=float).reshape(L, M, N), **properties}
    extent = f"0 {N} 0 {M} 0 {L}"
    with open(path, "w", encoding="ascii") as f:
        f.write('<?xml version="1.0"?>\n<VTKFile type="RectilinearGrid" version="1.0" '
                f'byte_order="LittleEndian">\n<RectilinearGrid WholeExtent="{extent}">\n'
                f'<Piece Extent="{extent}">\n<CellData Scalars="kx">\n')  # fmt: skip
        for name, values in arrays.items():
            f.write(f'<DataArray type="Float64" Name="{name}" format="ascii">')
            flipped = values[::-1, ::-1, :]
            for layer in flipped:  # one layer at a time: the text never holds the whole grid
                f.write(_ascii(layer) + " ")
            f.write("</DataArray>\n")
        f.write("</CellData>\n<Coordinates>\n")
        for name, coords in (("x", x), ("y", y), ("z", z)):
            f.write(f'<DataArray type="Float64" Name="{name}" format="ascii">{_ascii(coords)}</DataArray>\n')
        f.write("</Coordinates>\n</Piece>\n</RectilinearGrid>\n</VTKFile>\n")
