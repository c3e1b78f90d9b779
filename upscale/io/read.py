"""Read permeability and porosity from rasters or ``.npy`` arrays into a `Field`.

A one-band raster is a 2D map; several bands are a 3D model, band 1 the top
layer. Cell sizes come from the raster's geotransform (m). Nodata, NaN, and
cells outside a raster's own validity mask are inactive. Nothing is read
whole: the field holds dask arrays that read window by window.
"""

from __future__ import annotations

import hashlib
import logging
import math
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
from affine import Affine

from ..errors import InputError
from ..field import Field, Grid, Source, share_inactive
from ..geometry import Geometry
from ..units import check_unit
from .geometry import geometry_from
from .windows import (
    RESAMPLING_RULES,
    RasterWindows,
    Warp,
    choose_chunks,
    clean_values,
    open_raster,
    value_dtype,
)

log = logging.getLogger(__name__)

#: How stored values relate to permeability.
VALUE_SCALES = ("linear", "log10", "ln")


def sha256(path: str | Path) -> str:
    """SHA-256 of a file's bytes, read in a stream."""
    with open(path, "rb") as f:
        return hashlib.file_digest(f, "sha256").hexdigest()


@dataclass(frozen=True, eq=False)
class _Layout:
    """One opened input: its geometry and a lazy ``(bands, rows, columns)`` array."""

    path: str
    shape: tuple[int, int, int]
    transform: Any
    crs: Any
    lazy: Any


def _open(path: str, scale: str, nodata: float | None, chunks: Any, warp: Warp | None = None) -> _Layout:
    """`path` as a lazy array, resampled onto the grid of `warp` when given."""
    import dask.array as da

    p = Path(path)
    if not p.exists():
        raise InputError(f"{path}: no such file")
    if p.is_dir():
        raise InputError(f"{path}: is a folder, not a raster")
    if p.suffix.lower() == ".npy":
        try:
            stored = np.load(p, mmap_mode="r", allow_pickle=False)
        except (ValueError, OSError) as exc:
            raise InputError(f"{path}: not a readable .npy array ({exc})") from None
        if stored.ndim not in (2, 3) or not np.issubdtype(stored.dtype, np.number):
            raise InputError(f"{path}: expected a 2D or 3D numeric array, got {stored.ndim}D {stored.dtype}")
        if np.iscomplexobj(stored):
            raise InputError(f"{path}: complex values cannot be permeabilities")
        stored = stored if stored.ndim == 3 else stored[None]
        raw = da.from_array(stored, chunks=chunks(stored.shape, value_dtype(stored.dtype, scale)))
        lazy = raw.map_blocks(
            clean_values, nodata, scale, dtype=value_dtype(stored.dtype, scale)
        )
        return _Layout(path, stored.shape, None, None, lazy)

    from rasterio.enums import MaskFlags

    with open_raster(str(p)) as src:
        shape = (src.count, src.height, src.width)
        dtype = np.dtype(src.dtypes[0])
        transform, crs = src.transform, src.crs
        file_nodata = src.nodata
        use_mask = MaskFlags.per_dataset in src.mask_flag_enums[0]
        georeferenced = not (transform.is_identity and crs is None)
        uncompressed_tiff = src.driver == "GTiff" and src.compression is None
    need = math.prod(shape) * dtype.itemsize
    if uncompressed_tiff and need > p.stat().st_size:
        # a damaged header declaring a huge grid; GDAL would read the missing cells as nodata
        raise InputError(
            f"{path}: cannot be read as a raster (truncated or damaged: its header declares "
            f"{shape[2]} x {shape[1]} cells in {shape[0]} band(s) of {dtype}, {need} bytes, but the "
            f"file holds {p.stat().st_size})"
        )
    if np.issubdtype(dtype, np.complexfloating):
        raise InputError(f"{path}: complex values cannot be permeabilities")
    if not np.issubdtype(dtype, np.floating):
        log.warning("%s: %s values converted to float64 (exactly for up to 2^53)", path, dtype)
    if warp is not None:
        shape, transform, crs = (shape[0], warp.rows, warp.columns), Affine(*warp.transform), warp.crs
    windows = RasterWindows(
        str(p), shape, dtype, file_nodata if nodata is None else nodata, scale, use_mask, warp
    )
    lazy = da.from_array(
        windows,
        chunks=chunks(shape, windows.dtype),
        asarray=True,
        fancy=False,
        meta=np.empty((0, 0, 0), windows.dtype),
    )
    return _Layout(path, shape, transform if georeferenced else None, crs, lazy)


def _cell_size(first: _Layout, cell_size: Sequence[float] | None) -> tuple[float, float]:
    t = first.transform
    if t is not None and (t.b != 0 or t.d != 0):
        raise InputError(
            f"{first.path}: the raster is rotated or sheared (geotransform {tuple(t)[:6]}); "
            "resample it onto a north-up grid first"
        )
    if cell_size is not None:
        dx, dy = (float(v) for v in cell_size)
        if t is not None and first.crs is not None and first.crs.is_projected:
            factor = first.crs.linear_units_factor[1]
            own = (abs(t.a) * factor, abs(t.e) * factor)
            if not (math.isclose(dx, own[0], rel_tol=1e-9) and math.isclose(dy, own[1], rel_tol=1e-9)):
                raise InputError(
                    f"{first.path}: the raster's own cell size is {own[0]:g} x {own[1]:g} m; "
                    f"the cell size given ({dx:g} x {dy:g}) disagrees — leave it out"
                )
        return dx, dy
    if t is None:
        raise InputError(
            f"{first.path}: no georeference, so the cell size is unknown; give it in metres "
            "(`cell_size=DX[xDY]`)"
        )
    if first.crs is not None and first.crs.is_geographic:
        raise InputError(
            f"{first.path}: the raster is in a geographic CRS ({first.crs.to_string()}), its cells "
            "are in degrees; reproject it to a projected CRS or give the cell size in metres "
            "(`cell_size=DX[xDY]`)"
        )
    if first.crs is None:
        log.info("%s: no CRS; cell sizes from the geotransform are taken as metres", first.path)
    elif first.crs.linear_units_factor[1] != 1.0:
        factor = first.crs.linear_units_factor[1]
        return abs(t.a) * factor, abs(t.e) * factor
    return abs(t.a), abs(t.e)


def _layer_thickness(layers: int, dz: float | Sequence[float] | None, path: str) -> np.ndarray:
    if dz is None:
        if layers > 1:
            raise InputError(
                f"{path}: {layers} bands make a 3D model; give the layer thickness in metres "
                "(`dz=2.5`, or one value per layer: `dz=2,3,1.5,...`), or its geometry (`thickness`, "
                "`surfaces`)"
            )
        return np.ones(1)
    values = np.atleast_1d(np.asarray(dz, dtype=float))
    if values.size == 1:
        values = np.full(layers, values[0])
    if values.size != layers:
        raise InputError(f"`dz` has {values.size} values but {path} has {layers} layers")
    return values


def read_field(
    path: str | Path,
    *,
    unit: str = "mD",
    scale: str = "linear",
    nodata: float | None = None,
    ky: str | Path | None = None,
    kz: str | Path | None = None,
    kv_kh: float | None = None,
    porosity: str | Path | None = None,
    resample: str | None = None,
    dz: float | Sequence[float] | None = None,
    cell_size: Sequence[float] | None = None,
    chunk_bytes: int | None = None,
    block: tuple[int, int, int] = (1, 1, 1),
    checksum: bool = True,
    top: float | str | Path | None = None,
    thickness: float | str | Path | None = None,
    surfaces: str | Path | None = None,
) -> Field:
    """Open a permeability raster (and optional companions) as a lazy `Field`.

    Parameters
    ----------
    path : str or Path
        Permeability along x (and along y and z unless given separately): any
        raster rasterio opens (GeoTIFF first), or a ``.npy`` array of shape
        (M, N) or (L, M, N).
    unit : str
        Unit of the stored permeabilities: ``mD`` (default), ``D``, ``m2``, or a
        hydraulic conductivity ``m/s`` or ``m/day``.
    scale : {'linear', 'log10', 'ln'}
        Whether the file stores k itself or its logarithm.
    nodata : float, optional
        Value marking inactive cells; overrides the raster's own nodata value.
    ky, kz : str or Path, optional
        Rasters of permeability along y and z on the same grid. ``ky`` defaults to
        the x permeability; ``kz`` (3D only) to it too unless `kv_kh` is given.
    kv_kh : float, optional
        kz as a fraction of kx (3D only), e.g. 0.1.
    porosity : str or Path, optional
        Porosity raster (fraction) on the same grid.
    resample : {'nearest', 'average', 'bilinear'}, optional
        Resample a `ky`, `kz` or `porosity` raster on another grid (other
        origin, cell size, extent or CRS; the same number of bands) onto the
        grid of `path` with this rule, window by window as it is read
        (`upscale.io.windows.Warp`: nodata is left out, never averaged in).
        Without it such a raster is refused.
    dz : float or sequence of float, optional
        Layer thickness in m, one value or one per layer; required for several bands.
    cell_size : (float, float), optional
        Column width and row height in m; required for ``.npy`` input and
        rasters without a projected CRS.
    chunk_bytes : int, optional
        Target size of one chunk in bytes.
    block : (int, int, int)
        Chunks are made of whole blocks of this many ``(layers, rows, columns)``.
    checksum : bool
        Record the SHA-256 of every input file (one extra sequential read).
    top : float, str or Path, optional
        Elevation of the model's top in m (positive up): one value or a
        one-band raster; with `thickness` (default 0 m).
    thickness : float, str or Path, optional
        Thickness of every cell in m (0 = pinched out): a raster with one band
        per layer, or for a map also one value (the aquifer's thickness).
        Replaces `dz`; see `upscale.geometry`.
    surfaces : str or Path, optional
        A raster of one band more than layers: the elevation (m, positive up)
        of every layer's top and of the last layer's base. Replaces `dz`,
        `top` and `thickness`.

    Returns
    -------
    Field
        Dask-backed field; NaN marks inactive cells.

    Raises
    ------
    InputError
        With one line naming the file and the problem.
    """
    check_unit(unit)
    if scale not in VALUE_SCALES:
        raise InputError(f"scale must be one of {', '.join(VALUE_SCALES)}, got {scale!r}")
    if resample is not None and resample not in RESAMPLING_RULES:
        raise InputError(f"`resample` must be one of {', '.join(RESAMPLING_RULES)}, got {resample!r}")

    def chunks(shape: tuple, dtype: np.dtype) -> tuple:
        return choose_chunks(shape, max(dtype.itemsize, 8), chunk_bytes, block)

    main = _open(str(path), scale, nodata, chunks)
    dx, dy = _cell_size(main, cell_size)
    layers = main.shape[0]
    three_d = layers > 1
    layer_dz = _layer_thickness(layers, 1.0 if thickness is not None or surfaces is not None else dz,
                                str(path))

    extras = {"ky": ky, "kz": kz, "porosity": porosity}
    if not three_d:
        for name in ("kz",):
            if extras[name] is not None:
                raise InputError(f"`{name}` was given but {path} is a one-band 2D map")
        if kv_kh is not None:
            raise InputError(f"`kv_kh` was given but {path} is a one-band 2D map")
    if kz is not None and kv_kh is not None:
        raise InputError("give either `kz` or `kv_kh`, not both")
    if kv_kh is not None and not (kv_kh > 0 and math.isfinite(kv_kh)):
        raise InputError(f"`kv_kh` must be > 0 and finite (kz = kv_kh x kx), got {kv_kh}")

    arrays = {"kx": main.lazy}
    sources = [Source("kx", str(path), sha256(path) if checksum else "")]
    def companion(name: str, extra: str | Path, stored: str, bands: int) -> Any:
        """`extra` read onto the grid of `main` (resampled when allowed), lazily."""
        other = _open(str(extra), stored, nodata, chunks)
        resampled = _resampling(main, other, name, resample, bands)
        if resampled is not None:
            other = _open(str(extra), stored, nodata, chunks, _warp(main, resample))
        sources.append(Source(name, str(extra), sha256(extra) if checksum else "", resampled))
        return other.lazy

    for name, extra in extras.items():
        if extra is not None:
            stored = "linear" if name == "porosity" else scale
            arrays[name] = companion(name, extra, stored, layers).rechunk(main.lazy.chunks)
    arrays.setdefault("ky", arrays["kx"])
    if three_d:
        arrays.setdefault("kz", arrays["kx"] * kv_kh if kv_kh is not None else arrays["kx"])
    arrays = share_inactive(arrays)

    shape = geometry_from(top, thickness, surfaces, dz, main.shape, companion)
    if shape is not None:
        shape = Geometry(shape.top, shape.thickness.rechunk(main.lazy.chunks), shape.top_given)
        shape.check_values()
        layer_dz = shape.layer_thickness()
    grid = Grid(
        dz=layer_dz,
        dy=np.full(main.shape[1], dy),
        dx=np.full(main.shape[2], dx),
        transform=main.transform if main.transform is not None else Affine.scale(dx, -dy),
        crs=main.crs,
    )
    return Field(
        kx=arrays["kx"],
        ky=arrays["ky"],
        kz=arrays.get("kz"),
        porosity=arrays.get("porosity"),
        grid=grid,
        unit=unit,
        sources=tuple(sources),
        geometry=shape,
    )


def _grid_difference(main: _Layout, other: _Layout, bands: int) -> str | None:
    """How the grid of `other` (of `bands` bands) differs from that of `main`; None when the same."""
    if other.shape != (bands, *main.shape[1:]):
        return f"shape {other.shape} differs from {(bands, *main.shape[1:])} (bands, rows, columns)"
    if (main.transform is None) != (other.transform is None) or (
        main.transform is not None and not main.transform.almost_equals(other.transform)
    ):
        return "its geotransform differs"
    if main.crs != other.crs:
        return f"its CRS ({other.crs}) differs from {main.crs}"
    return None


def _resampling(main: _Layout, other: _Layout, name: str, rule: str | None,
                bands: int) -> dict[str, Any] | None:  # fmt: skip
    """What resampling `other` onto the grid of `main` takes (the summary's record); None when on it.

    Raises
    ------
    InputError
        When `other` is on another grid and `rule` is None, or it cannot be
        resampled: another number of bands, or a raster without a transform
        and a CRS.
    """
    problem = _grid_difference(main, other, bands)
    if problem is None:
        return None
    where = f"`{name}` {other.path}: not on the grid of {main.path}: {problem}"
    if rule is None:
        raise InputError(f"{where}; resample it onto that grid with `resample=average` "
                         "(or nearest, bilinear)")  # fmt: skip
    if other.shape[0] != bands:
        raise InputError(f"{where}; resampling changes rows and columns, not the number of bands")
    for layout in (main, other):
        if layout.transform is None or layout.crs is None:
            raise InputError(f"{where}; {layout.path} has no georeference (geotransform and CRS), so it "
                             "cannot be resampled")  # fmt: skip
    shape = dict(zip(("layers", "rows", "columns"), other.shape))
    return {"rule": rule, "from": {"crs": other.crs.to_string(), "transform": list(other.transform)[:6],
                                   "shape": shape}}  # fmt: skip


def _warp(main: _Layout, rule: str) -> Warp:
    """The grid of `main` as a target of resampling by `rule`."""
    return Warp(main.crs.to_wkt(), tuple(main.transform)[:6], main.shape[1], main.shape[2], rule)
