"""The coarse cell properties as a VTK XML rectilinear grid (``.vtr``) for 3D viewers.

VTK's rectilinear grids need coordinates that increase, x fastest (Kitware,
"VTK File Formats", XML RectilinearGrid). Rows run north to south and layers
top to bottom in our arrays, so both are reversed here: VTK y increases
northward and VTK z is the height above the top of the model in m
(negative downward), whatever the package's units, so x, y and z share one
scale in a viewer. The cell array ``id`` holds each cell's package id, so a value
picked in a viewer leads back to ``cells.csv``.

The arrays are raw float64 in the machine's byte order, which the file
declares, in its appended section, each after its size in bytes (UInt64):
no text to format or parse. Written with pyevtk (MIT, pure Python on NumPy
alone, a 20 kB wheel; maintained, 1.7.0 in 2026) and its lower-level
`VtkFile`: the header declares every array and its offset from the sizes
alone (``addHeader``), and ``appendHeader`` writes the size of an array
whose bytes follow, which we write slab by slab (`upscale.export.slabs`)
as the text writer before did: the writer never holds more than one slab.
Not pyevtk's ``rectilinearToVTK``: it takes every array whole and packs them
value by value with ``struct`` (26 times slower than ``ndarray.tobytes`` on a
slab of 2¹⁸ cells, same bytes). Not meshio (5.3.5, January 2024; a 166 kB
wheel that also needs rich): it writes VTK files only as unstructured grids
(eight points and a connectivity row per cell, not a rectilinear grid) from
whole arrays. Sizes and times before and after: docs/performance.md.

A model with a geometry (`upscale.geometry`) is written instead as a VTK XML
structured grid (``.vts``, same cell arrays): its points stand on the
corners of the cells, x and y as in the rectilinear grid, z the elevation
in m (positive up) of each layer surface at that corner. The surfaces are
known at cell centres; `corner_heights` takes them to the corners linearly
(the mean of the four cells around an inner corner on a regular grid,
extrapolated outwards at the edges), so a planar surface is kept exactly.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

import numpy as np

from ..field import Grid
from ..optional import lazy
from .slabs import Region, Values, slabs

#: Type of every array in the file: float64, so that coarse values keep every bit.
DTYPE = "float64"

evtk = lazy("pyevtk.vtk", "formats")


def _edges(sizes: np.ndarray, start: float, sign: float) -> np.ndarray:
    return start + sign * np.concatenate([[0.0], np.cumsum(sizes)])


def _to_edges(values: np.ndarray, sizes: np.ndarray, axis: int) -> np.ndarray:
    """Values at the cell centres along `axis` taken linearly to the n + 1 cell edges.

    Each inner edge is interpolated between the two centres beside it, each
    outer edge extrapolated from the two centres nearest it; one cell keeps its value.
    """
    v = np.moveaxis(np.asarray(values, dtype=np.float64), axis, 0)
    n = len(sizes)
    if n == 1:
        return np.moveaxis(np.concatenate([v, v]), 0, axis)
    centres = np.cumsum(sizes) - sizes / 2
    edges = np.concatenate([[0.0], np.cumsum(sizes)])
    left = np.clip(np.arange(n + 1) - 1, 0, n - 2)
    share = ((edges - centres[left]) / (centres[left + 1] - centres[left])).reshape(-1, *[1] * (v.ndim - 1))
    return np.moveaxis(v[left] + (v[left + 1] - v[left]) * share, 0, axis)


def corner_heights(surface: np.ndarray, dy: np.ndarray, dx: np.ndarray) -> np.ndarray:
    """A surface known at cell centres, at the cell corners.

    Parameters
    ----------
    surface : ndarray of shape (M, N)
        Elevation at each cell centre, m.
    dy, dx : ndarray of shape (M,) and (N,)
        Row heights and column widths, m.

    Returns
    -------
    ndarray of shape (M + 1, N + 1)
        Bilinear in the centres: exact for a planar surface.

    Examples
    --------
    >>> corner_heights(np.array([[0.0, 1.0], [2.0, 3.0]]), np.ones(2), np.ones(2))
    array([[-1.5, -0.5,  0.5],
           [ 0.5,  1.5,  2.5],
           [ 2.5,  3.5,  4.5]])
    """
    return _to_edges(_to_edges(surface, dx, 1), dy, 0)


def write_vtk(path: Path, grid: Grid, properties: dict[str, Values], factors: dict[str, Any],
              surfaces: np.ndarray | None = None) -> None:  # fmt: skip
    """Write the coarse properties (package units; NaN = inactive) as a ``.vtr`` or ``.vts`` file.

    Parameters
    ----------
    path : Path
        Destination file; its suffix must be ``.vtr``, or ``.vts`` with `surfaces`.
    grid : Grid
        The coarse grid (sizes in m).
    properties : dict of str to Values
        Each property's values over a region, in the package's units.
    factors : dict
        From `upscale.export.package.unit_factors`; unused for the geometry,
        which stays in the CRS's units and metres so that views are not distorted.
    surfaces : ndarray of shape (L + 1, M, N), optional
        Elevations in m of every layer's top and of the last base at the cell
        centres (`upscale.geometry.Geometry.surfaces`): a structured grid whose
        points stand at these heights (module docstring). None: a rectilinear grid.
    """
    L, M, N = grid.shape
    x0, y0 = (0.0, 0.0) if grid.transform is None else (grid.transform.c, grid.transform.f)
    coordinates = {
        "x": _edges(grid.dx, x0, 1.0),
        "y": np.ascontiguousarray(_edges(grid.dy, y0, -1.0)[::-1]),
        "z": np.ascontiguousarray(-_edges(grid.dz, 0.0, 1.0)[::-1]),  # in m, like x and y in a metric CRS
    }
    points = (L + 1) * (M + 1) * (N + 1)

    def ids(region: Region) -> np.ndarray:
        k, j, i = np.ogrid[region]
        return (i + N * (j + M * k)).astype(float)

    cells = {"id": ids, **properties}
    count = L * M * N
    kind = evtk.VtkRectilinearGrid if surfaces is None else evtk.VtkStructuredGrid
    vtk = evtk.VtkFile(str(path.with_suffix("")), kind)  # pyevtk adds the .vtr or .vts
    extent = {"start": (0, 0, 0), "end": (N, M, L)}
    vtk.openGrid(**extent)
    vtk.openPiece(**extent)
    vtk.openData("Cell", scalars="kx")
    for name in cells:
        vtk.addHeader(name, DTYPE, count, 1)
    vtk.closeData("Cell")
    if surfaces is None:
        vtk.openElement("Coordinates")
        for name, values in coordinates.items():
            vtk.addData(name, values)
        vtk.closeElement("Coordinates")
    else:
        vtk.openElement("Points")
        vtk.addHeader("points", DTYPE, points, 3)
        vtk.closeElement("Points")
    vtk.closePiece()
    vtk.closeGrid()
    for values in cells.values():
        vtk.appendHeader(DTYPE, count, 1)
        for layers, rows, columns in slabs(grid.shape):  # the file never holds the whole grid
            # VTK runs z and y upwards: slab (layers, rows) of the flipped grid
            flipped = (slice(L - layers.stop, L - layers.start), slice(M - rows.stop, M - rows.start))
            slab = values((*flipped, columns))[::-1, ::-1, :]
            vtk.xml.stream.write(np.ascontiguousarray(slab, dtype=DTYPE).tobytes())
    if surfaces is None:
        for values in coordinates.values():
            vtk.appendData(values)
    else:
        vtk.appendHeader(DTYPE, points, 3)
        x, y = np.meshgrid(coordinates["x"], coordinates["y"])
        for surface in surfaces[::-1]:  # bottom up, rows south to north, as the cells
            z = corner_heights(surface, grid.dy, grid.dx)[::-1]
            vtk.xml.stream.write(np.ascontiguousarray(np.stack([x, y, z], axis=-1), dtype=DTYPE).tobytes())
    vtk.save()
