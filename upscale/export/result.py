"""Write a run's result: one GeoTIFF per coarse property and ``summary.json``."""

from __future__ import annotations

import json
import os
from collections.abc import Collection
from pathlib import Path
from typing import Any

import numpy as np
from affine import Affine

from ..analysis.geometry import transmissivities, transmissivity_unit
from ..analysis.records import GridLikeRecord, jsonable
from ..analysis.summary import RunSummary, build_summary
from ..caution import CAUTION
from ..errors import InputError
from ..flow import Transmissibilities
from ..methods.coarsen import Upscaled
from ..methods.registry import find_method, method_record
from ..units import unit_factors
from .comparison import write_figures
from .geotiff import PROPERTY_UNITS, write_property
from .netcdf import crs_unit, write_netcdf
from .package import (
    FORMAT,
    STRUCTURED_VTK,
    PackageTables,
    bulk_volumes,
    column_units,
    geometry_record,
    well_columns,
    write_tables,
    write_well_tables,
)
from .slabs import Values
from .staging import MARKER, staged_folder
from .vtk import write_vtk

#: What `write_result` can write besides ``summary.json``: the coarse GeoTIFFs (one per
#: property, and the face transmissibilities of direct methods), and the coarse-grid package.
FORMATS = ("geotiff", "package")
#: File of the coarse face transmissibilities along each axis (direct upscaling only).
FACE_FILES = {axis: f"transmissibility_{axis}.tif" for axis in "xyz"}


def face_raster(trans: Transmissibilities, axis: int) -> np.ndarray:
    """Every face normal to `axis`, outer ones included: face i is the first face of block i.

    Inner faces hold their T; the two outer faces hold the half transmissibility
    of the block next to them. Shape: the coarse grid's with `axis` one longer.
    """
    first, last = trans.boundary[axis]
    return np.concatenate([first, trans.faces[axis], last], axis=axis)


_LONG_NAMES = {"kx": "permeability along x", "ky": "permeability along y",
               "kz": "permeability along z", "porosity": "porosity"}  # fmt: skip


def _scaled(values: np.ndarray, factor: float) -> Values:
    """`values` times `factor`, computed one region at a time when written."""
    return lambda region: values[region] * factor


def write_package(stage: Path, result: Upscaled, units: str, *, check: dict[str, Any] | None,
                  command: list[str] | None, wells: dict[str, Any] | None = None) -> list[str]:  # fmt: skip
    """Write the coarse-grid package (tables, NetCDF, VTK, manifest) into `stage`.

    A solved well check (`wells`, the summary's ``well_check``) adds the wells
    tables (``wells``, ``well_faces``) and the manifest's ``wells``.
    """
    coarse = result.coarse
    factors = unit_factors(coarse.unit, units)
    trans = result.transmissibilities()
    properties = {**coarse.properties(), **result.tensor}
    source = find_method(result.method).faces or "harmonic"
    aquifer = {name: values * factors["length"] for name, values in (transmissivities(coarse) or {}).items()}
    tables = PackageTables({**properties, **aquifer}, trans, factors=factors, source=source,
                           direct=result.direct_faces, geometry=coarse.geometry,
                           ndim=coarse.ndim)  # fmt: skip
    table_files = write_tables(stage, tables)
    solved = wells is not None and "wells" in wells
    if solved:
        columns = well_columns(wells, result.fine.grid, coarse.grid, factors)
        table_files.update(write_well_tables(stage, columns))
    length = factors["length"]
    gridded: dict[str, tuple[Values, str, str]] = {}
    for name, values in {**properties, **aquifer}.items():
        if name == "porosity":
            gridded[name] = (_scaled(values, 1.0), "1", "porosity")
        elif name in aquifer:
            gridded[name] = (_scaled(values, factors["k"]), transmissivity_unit(factors["k_unit"]),
                             "transmissivity" + (" along y" if name.endswith("_y") else ""))
        else:
            long_name = _LONG_NAMES.get(name, f"permeability tensor term {name}")
            gridded[name] = (_scaled(values, factors["k"]), factors["k_unit"], long_name)
    grid, shape = coarse.grid, coarse.geometry
    volume = factors["length_unit"] + "3"
    gridded["bulk_volume"] = (lambda region: bulk_volumes(grid, length, region, shape), volume, "bulk volume")
    if coarse.porosity is not None:
        porosity = coarse.porosity
        gridded["pore_volume"] = (lambda region: porosity[region] * bulk_volumes(grid, length, region, shape),
                                  volume, "pore volume")  # fmt: skip
    attributes = {"title": f"upscale coarse grid ({result.method})", "source": "upscale",
                  "history": " ".join(command or []), "comment": CAUTION}  # fmt: skip
    heights = None if shape is None else shape.surfaces()
    write_netcdf(stage / "coarse.nc", grid, gridded, factors, attributes, heights)
    viewer = "coarse.vtr" if shape is None else STRUCTURED_VTK
    write_vtk(stage / viewer, grid, {n: v[0] for n, v in gridded.items()}, factors, heights)
    files = [*table_files, "coarse.nc", viewer]
    manifest = {
        "format": FORMAT,
        "units": {"system": units, "input_unit": coarse.unit, "factors": factors,
                  "columns": column_units(tables, factors, crs_unit(grid), wells=solved)},  # fmt: skip
        "shape": {"layers": grid.shape[0], "rows": grid.shape[1], "columns": grid.shape[2]},
        "id": "i + columns * (j + rows * k); zero-based; layer 0 on top, row 0 the first raster row",
        "crs": grid.crs.to_wkt() if grid.crs is not None else None,
        "transform": list(grid.transform)[:6] if grid.transform is not None else None,
        "inputs": [{"role": s.role, "path": s.path, "sha256": s.sha256} for s in result.fine.sources],
        "method": method_record(result.method, result.options),
        "block": result.block.summary(),
        "transmissibility_source": source,
        "check": check,
        **({"geometry": geometry_record(trans)} if shape is not None else {}),
        **({"wells": {key: wells[key] for key in ("outer_faces", "connection")}} if solved else {}),
        "files": files,
        "tables": table_files,
        "caution": CAUTION,
    }  # fmt: skip
    (stage / "manifest.json").write_text(json.dumps(jsonable(manifest), indent=2, allow_nan=False) + "\n")
    return files + ["manifest.json"]


def update_summary(folder: str | Path, changes: dict[str, Any]) -> dict[str, Any]:
    """Replace top-level keys of an output folder's ``summary.json``, atomically.

    The new summary is written beside the old one and renamed over it, so a
    reader sees either the old file or the new one.
    """
    path = Path(folder) / MARKER
    summary = json.loads(path.read_text())
    summary.update(jsonable(changes))
    staged = path.with_name(f".{MARKER}.partial")
    staged.write_text(json.dumps(summary, indent=2, allow_nan=False) + "\n")
    os.replace(staged, path)
    return summary


def _write_geotiffs(stage: Path, result: Upscaled, tags: dict[str, str]) -> list[str]:
    """One GeoTIFF per coarse property, and per axis of the faces a direct method upscaled."""
    coarse, files = result.coarse, []
    for name, values in {**coarse.properties(), **result.tensor}.items():
        unit = PROPERTY_UNITS.get(name, coarse.unit)
        write_property(stage / f"{name}.tif", values, coarse.grid, name, unit, tags, depths=True)
        files.append(f"{name}.tif")
    for name, values in (transmissivities(coarse) or {}).items():
        unit = transmissivity_unit(coarse.unit)
        write_property(stage / f"{name}.tif", values, coarse.grid, name, unit, tags, depths=True)
        files.append(f"{name}.tif")
    direct = result.transmissibilities() if result.faces is not None else None
    for axis in "xyz"[: coarse.ndim] if direct is not None else ():
        a = "zyx".index(axis)
        half = Affine.translation(-0.5, 0) if axis == "x" else Affine.translation(0, -0.5)
        shifted = coarse.grid.transform @ half if coarse.grid.transform and axis != "z" else None
        write_property(stage / FACE_FILES[axis], face_raster(direct, a), coarse.grid,
                       f"transmissibility_{axis}", f"{coarse.unit}·m", tags,
                       transform=shifted, depths=True)  # fmt: skip
        files.append(FACE_FILES[axis])
    return files


def write_result(
    result: Upscaled,
    folder: str | Path,
    *,
    overwrite: bool = False,
    command: list[str] | None = None,
    timings: dict[str, float] | None = None,
    check: dict[str, Any] | None = None,
    read: dict[str, Any] | None = None,
    wells: dict[str, Any] | None = None,
    layers: dict[str, Any] | None = None,
    grid_like: GridLikeRecord | None = None,
    images: list[tuple[str, bytes, bytes]] | None = None,
    page: str | None = None,
    units: str = "si",
    formats: str | Collection[str] = FORMATS,
) -> RunSummary:
    """Write coarse GeoTIFFs and the summary into `folder`, all or nothing.

    Parameters
    ----------
    result : Upscaled
        What `upscale.coarsen` returned.
    folder : str or Path
        Output folder; created if missing.
    overwrite : bool
        Replace the results in a folder that already holds files.
    command : list of str, optional
        Command line recorded in the summary.
    timings : dict, optional
        Seconds per step recorded in the summary.
    check, read : dict, optional
        The flow check and the read options, recorded in the summary (see
        `upscale.analysis.summary.build_summary`).
    wells : dict, optional
        The well-driven check, recorded as ``well_check`` in the summary.
    layers : dict, optional
        How the automatic layers were chosen (`upscale.analysis.layers.LayerChoice.summary`),
        recorded as ``layers`` in the summary.
    grid_like : GridLikeRecord, optional
        The template raster whose cells are the blocks, recorded as ``grid_like`` in the summary.
    images : list of (str, bytes, bytes), optional
        Figures to write as ``figures/NAME.png`` and ``.svg``.
    page : str, optional
        An HTML report to write as ``report.html``.
    units : {'si', 'field'}
        Units of the coarse-grid package (see `upscale.export.package`).
    formats : str or collection of {'geotiff', 'package'}
        What to write besides ``summary.json`` (always written, last):
        ``geotiff``, one GeoTIFF per coarse property (``kx.tif``...) and the
        face transmissibilities of direct methods; ``package``, the coarse-grid
        package (CSV and Parquet tables, ``coarse.nc``, ``coarse.vtr`` — or
        ``coarse.vts`` for a model with a geometry — ``manifest.json``), which
        `upscale check` reads. By default both, as
        the command line writes them.

    Returns
    -------
    RunSummary
        The summary written as ``summary.json``.

    Raises
    ------
    InputError
        If `formats` names something else.

    Examples
    --------
    >>> import os, tempfile, numpy as np, upscale
    >>> result = upscale.coarsen(np.full((4, 4), 50.0), "2x2")
    >>> with tempfile.TemporaryDirectory() as folder:
    ...     _ = write_result(result, folder, overwrite=True, formats="package")
    ...     written = os.listdir(folder)
    >>> "coarse.nc" in written, "manifest.json" in written, "kx.tif" in written
    (True, True, False)
    """
    formats = {formats} if isinstance(formats, str) else set(formats)
    unknown = sorted(formats - set(FORMATS))
    if unknown:
        raise InputError(f"`formats` may hold geotiff and package, got {', '.join(map(repr, unknown))}")
    tags = {"method": result.method, "block": str(result.block), "tool": "upscale"}
    with staged_folder(folder, overwrite) as stage:
        files = _write_geotiffs(stage, result, tags) if "geotiff" in formats else []
        if "package" in formats:
            files += write_package(stage, result, units, check=check, command=command, wells=wells)
        if images:
            files += write_figures(stage, images)
        if page is not None:
            (stage / "report.html").write_text(page, encoding="utf-8")
            files.append("report.html")
        summary = build_summary(
            result, files=files, command=command, timings=timings, check=check, read=read, wells=wells,
            layers=layers, grid_like=grid_like,
        )
        (stage / MARKER).write_text(json.dumps(summary.to_dict(), indent=2, allow_nan=False) + "\n")
    return summary
