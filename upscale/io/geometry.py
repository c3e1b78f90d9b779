"""Reading a model's geometry: a top surface and cell thicknesses, or every layer's surfaces.

See `upscale.geometry` for what the geometry means to flow. The rasters are
companions of the permeability raster: on its grid, or resampled onto it
with `resample` like any other companion (`upscale.io.read.read_field`).
"""

from __future__ import annotations

from collections.abc import Callable
from pathlib import Path
from typing import Any

import numpy as np

from ..errors import InputError
from ..geometry import Geometry

#: Roles of the geometry's rasters among a field's sources (and its read options).
GEOMETRY_ROLES = ("top", "thickness", "surfaces")

#: ``companion(role, path, scale, bands) -> lazy array`` of `upscale.io.read.read_field`.
Companion = Callable[[str, Any, str, int], Any]


def _is_value(given: Any) -> bool:
    return isinstance(given, (int, float)) and not isinstance(given, bool)


def _top(top: float | str | Path | None, rows: int, columns: int, companion: Companion) -> np.ndarray:
    if top is None:
        return np.zeros((rows, columns))
    if _is_value(top):
        return np.full((rows, columns), float(top))
    return np.asarray(companion("top", top, "linear", 1), dtype=np.float64)[0]


def geometry_from(top: float | str | Path | None, thickness: float | str | Path | None,
                  surfaces: str | Path | None, dz: Any, shape: tuple[int, int, int],
                  companion: Companion) -> Geometry | None:  # fmt: skip
    """The geometry the options describe, or None for a flat model.

    Parameters
    ----------
    top, thickness, surfaces
        As `upscale.io.read.read_field`.
    dz : float, sequence or None
        The layer thickness given, if any.
    shape : (int, int, int)
        Layers, rows, columns of the permeability raster.
    companion : callable
        Reads a companion raster onto the main grid.

    Returns
    -------
    Geometry or None
        Thickness as a lazy dask array.

    Raises
    ------
    InputError
        For options that contradict each other or do not fit the model.
    """
    import dask.array as da

    layers, rows, columns = shape
    if surfaces is not None:
        if top is not None or thickness is not None or dz is not None:
            raise InputError("`surfaces` gives the whole geometry: leave out `top`, `thickness` and `dz`")
        stacked = np.asarray(companion("surfaces", surfaces, "linear", layers + 1), dtype=np.float64)
        geometry = Geometry.from_surfaces(stacked)
        return Geometry(top=geometry.top, thickness=da.asarray(geometry.thickness))
    if thickness is None:
        if top is None:
            return None
        layer_dz = np.broadcast_to(np.asarray(1.0 if dz is None else dz, float), (layers,))
        cells = da.broadcast_to(da.asarray(layer_dz)[:, None, None], shape)
        return Geometry(top=_top(top, rows, columns, companion), thickness=cells)
    if dz is not None:
        raise InputError("`thickness` replaces `dz`: give one of them")
    surface = _top(top, rows, columns, companion)
    if _is_value(thickness):
        if layers > 1:
            raise InputError(
                "one `thickness` value serves a map; a model's layers take `dz`, or a thickness raster "
                "with one band per layer"
            )
        cells = da.full(shape, float(thickness))
    else:
        cells = companion("thickness", thickness, "linear", layers)
    return Geometry(top=surface, thickness=cells, top_given=top is not None)
