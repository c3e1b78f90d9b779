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
from typing import Any, BinaryIO

import numpy as np

from ..field import Grid
from ..optional import lazy
from .slabs import Region, Values, slabs

pa = lazy("pyarrow", "formats")
pacsv = lazy("pyarrow.csv", "formats")


def _edges(sizes: np.ndarray, start: float, sign: float) -> np.ndarray:
    return start + sign * np.concatenate([[0.0], np.cumsum(sizes)])


def _ascii(f: BinaryIO, values: np.ndarray) -> None:
    # shortest round-trip decimal of every value, one per line (Arrow's formatter, several
    # times faster than Python's repr); NaN (inactive) as "nan", which VTK's number parser
    # reads (strtod syntax)
    column = pa.table({"v": np.asarray(values, dtype=float).ravel()})
    pacsv.write_csv(column, f, pacsv.WriteOptions(include_header=False))


def write_vtk(path: Path, grid: Grid, properties: dict[str, Values], factors: dict[str, Any]) -> None:
    """Write the coarse properties (package units; NaN = inactive) as a ``.vtr`` file.

    Parameters
    ----------
    path : Path
        Destination file.
    grid : Grid
        The coarse grid (sizes in m).
    properties : dict of str to Values
        Each property's values over a region, in the package's units.
    factors : dict
        From `upscale.export.package.unit_factors`; unused for the geometry,
        which stays in the CRS's units and metres so that views are not distorted.
    """
    L, M, N = grid.shape
    x0, y0 = (0.0, 0.0) if grid.transform is None else (grid.transform.c, grid.transform.f)
    x = _edges(grid.dx, x0, 1.0)
    y = _edges(grid.dy, y0, -1.0)[::-1]
    z = (-_edges(grid.dz, 0.0, 1.0))[::-1]  # in m, like x and y in a metric CRS

    def ids(region: Region) -> np.ndarray:
        k, j, i = np.ogrid[region]
        return (i + N * (j + M * k)).astype(float)

    extent = f"0 {N} 0 {M} 0 {L}"
    with open(path, "wb") as f:
        def tag(text: str) -> None:
            f.write(text.encode("ascii"))

        tag('<?xml version="1.0"?>\n<VTKFile type="RectilinearGrid" version="1.0" '
            f'byte_order="LittleEndian">\n<RectilinearGrid WholeExtent="{extent}">\n'
            f'<Piece Extent="{extent}">\n<CellData Scalars="kx">\n')  # fmt: skip
        for name, values in {"id": ids, **properties}.items():
            tag(f'<DataArray type="Float64" Name="{name}" format="ascii">\n')
            for layers, rows, columns in slabs(grid.shape):  # the text never holds the whole grid
                # VTK runs z and y upwards: slab (layers, rows) of the flipped grid
                flipped = (slice(L - layers.stop, L - layers.start), slice(M - rows.stop, M - rows.start))
                _ascii(f, values((*flipped, columns))[::-1, ::-1, :])
            tag("</DataArray>\n")
        tag("</CellData>\n<Coordinates>\n")
        for name, coords in (("x", x), ("y", y), ("z", z)):
            tag(f'<DataArray type="Float64" Name="{name}" format="ascii">\n')
            _ascii(f, coords)
            tag("</DataArray>\n")
        tag("</Coordinates>\n</Piece>\n</RectilinearGrid>\n</VTKFile>\n")
