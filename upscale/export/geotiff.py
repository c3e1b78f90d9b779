"""Coarse properties as GeoTIFFs: one file per property, one band per coarse layer.

With ``depths=True`` (the coarse outputs of a run) each band carries its
layer's true top and base as band tags of our own, ``top_depth_m`` and
``base_depth_m``: m below the top of the model (coarse layers may be of
unequal thickness). The demo fields are written without them, byte for byte
as before.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

import numpy as np

from ..field import Grid
from ..io.windows import georeference_optional

#: Unit recorded for each non-permeability property.
PROPERTY_UNITS = {"porosity": "fraction"}


def write_property(
    path: str | Path,
    values: np.ndarray,
    grid: Grid,
    name: str,
    unit: str,
    tags: dict[str, str] | None = None,
    dtype: str = "float64",
    nodata: float = float("nan"),
    transform: Any = None,
    depths: bool = False,
) -> None:
    """Write one coarse property to a GeoTIFF.

    Parameters
    ----------
    path : str or Path
        Destination file (``.tif``).
    values : ndarray of shape (L, M, N)
        Property per coarse block; NaN marks inactive blocks and is the nodata value.
    grid : Grid
        Coarse grid: its transform and CRS georeference the file. Edge blocks
        smaller than the others keep the regular pixel size in the file; their
        true sizes are in the run summary.
    name : str
        Property name, used in the band descriptions.
    unit : str
        Unit written as each band's unit type and tag.
    tags : dict, optional
        Extra dataset tags (method, block, tool version...).
    dtype : str
        Stored data type; float64 keeps coarse values exact.
    nodata : float
        Value stored for NaN cells and declared as the file's nodata value.
    transform : affine.Affine, optional
        Georeference of the raster if not the grid's (face rasters sit half a block off).
    depths : bool
        Tag each band with its layer's top and base depth (when the bands are the grid's layers).

    Examples
    --------
    >>> import tempfile, rasterio
    >>> from affine import Affine
    >>> north_up = Affine(1, 0, 0, 0, -1, 0)
    >>> grid = Grid(dz=np.array([2.0, 6.0]), dy=np.ones(1), dx=np.ones(1), transform=north_up)
    >>> path = Path(tempfile.mkdtemp()) / "k.tif"
    >>> write_property(path, np.ones((2, 1, 1)), grid, "kx", "mD", depths=True)
    >>> with rasterio.open(path) as raster:
    ...     [(raster.tags(b)["top_depth_m"], raster.tags(b)["base_depth_m"]) for b in (1, 2)]
    [('0', '2'), ('2', '8')]
    """
    import rasterio

    layers, rows, cols = values.shape
    profile = {
        "driver": "GTiff",
        "dtype": dtype,
        "count": layers,
        "height": rows,
        "width": cols,
        "crs": grid.crs,
        "transform": grid.transform if transform is None else transform,
        "nodata": nodata,
        "compress": "deflate",
        "predictor": 3,
    }
    if rows >= 256 and cols >= 256:
        profile.update(tiled=True, blockxsize=256, blockysize=256)
    with georeference_optional():  # a field given as an array has none
        opened = rasterio.open(path, "w", **profile)
    with opened as dst:
        stored = values if np.isnan(nodata) else np.where(np.isnan(values), nodata, values)
        dst.write(stored.astype(dtype, copy=False))
        dst.update_tags(property=name, unit=unit, **(tags or {}))
        bounds = layer_depths(grid) if depths and layers == grid.dz.size else None
        for band in range(1, layers + 1):
            dst.set_band_description(band, f"{name}, layer {band} of {layers} (top first)")
            dst.set_band_unit(band, unit)
            dst.update_tags(band, units=unit)
            if bounds is not None:
                dst.update_tags(band, top_depth_m=f"{bounds[band - 1]:.17g}",
                                base_depth_m=f"{bounds[band]:.17g}")  # fmt: skip


def layer_depths(grid: Grid) -> np.ndarray:
    """Depth of every layer's top, and of the last one's base: m below the model's top, shape (L + 1,).

    Examples
    --------
    >>> layer_depths(Grid(dz=np.array([2.0, 6.0]), dy=np.ones(1), dx=np.ones(1))).tolist()
    [0.0, 2.0, 8.0]
    """
    return np.concatenate([[0.0], np.cumsum(grid.dz)])
