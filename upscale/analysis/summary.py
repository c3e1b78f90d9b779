"""The run summary: inputs, parameters, grids, statistics — everything to trace a result."""

from __future__ import annotations

import math
import os
import platform
from importlib import metadata
from pathlib import Path
from typing import Any

import numpy as np

from ..caution import CAUTION
from ..field import Grid
from ..methods.coarsen import Upscaled
from ..methods.registry import METHODS
from ..stats import scan_values
from .anisotropy import tensor_summary

_DEPENDENCIES = ("numpy", "scipy", "dask", "rasterio", "numba", "pyamg", "scikit-image", "matplotlib",
                 "pyarrow", "netCDF4", "pyproj")


def versions() -> dict[str, str]:
    """Versions of the tool, Python and the libraries that shape the numbers and the files."""
    found = {"upscale": _version("upscale"), "python": platform.python_version()}
    found.update({name: _version(name) for name in _DEPENDENCIES})
    return found


def working_folder(command: list[str] | None) -> str | None:
    """The absolute folder a recorded `command` runs in (its relative paths start there); None without one.

    Recorded beside ``command`` in ``summary.json``, ``compare.json`` and
    ``ensemble.json``, and shown as ``cd FOLDER && COMMAND`` in the report.
    The tool never changes its working folder, so it is the one the command
    was started in.
    """
    return os.getcwd() if command else None


def _version(name: str) -> str:
    try:
        return metadata.version(name)
    except metadata.PackageNotFoundError:
        return "not installed"


def grid_summary(grid: Grid) -> dict[str, Any]:
    """A grid as JSON-ready data: shape, cell sizes in m, CRS and transform."""
    layers, rows, cols = grid.shape
    out: dict[str, Any] = {
        "shape": {"layers": layers, "rows": rows, "columns": cols},
        "dx_m": _sizes(grid.dx),
        "dy_m": _sizes(grid.dy),
        "dz_m": grid.dz.tolist(),
        "crs": grid.crs.to_string() if grid.crs is not None else None,
        "transform": list(grid.transform)[:6] if grid.transform is not None else None,
    }
    return out


def _sizes(sizes: np.ndarray) -> dict[str, float] | float:
    # a regular axis is one number; otherwise the full size and the edge block's size
    if np.all(sizes == sizes[0]):
        return float(sizes[0])
    return {"regular": float(sizes[0]), "last": float(sizes[-1])}


def jsonable(value: Any) -> Any:
    """Plain JSON data: NaN and infinities become null, NumPy scalars Python numbers."""
    if isinstance(value, dict):
        return {str(k): jsonable(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [jsonable(v) for v in value]
    if isinstance(value, (np.floating, float)):
        return float(value) if math.isfinite(value) else None
    if isinstance(value, np.integer):
        return int(value)
    return value


def build_summary(
    result: Upscaled,
    *,
    files: list[str],
    command: list[str] | None = None,
    timings: dict[str, float] | None = None,
    check: dict[str, Any] | None = None,
    read: dict[str, Any] | None = None,
) -> dict[str, Any]:
    """Describe a run as JSON-ready data.

    Parameters
    ----------
    result : Upscaled
        The run's result.
    files : list of str
        Names of the files written beside the summary.
    command : list of str, optional
        The command line that produced the run.
    timings : dict, optional
        Seconds spent per step.
    check : dict, optional
        The fine-versus-coarse flow check: per axis ``AxisCheck.summary()``, or
        ``{"skipped": reason}``.
    read : dict, optional
        The options the fine field was read with (unit, scale, nodata, dz,
        cell size, kv/kh), so the run can be checked again later.

    Returns
    -------
    dict
    """
    fine, coarse, spec = result.fine, result.coarse, result.block
    active_blocks = int(np.isfinite(coarse.kx).sum())
    summary = {
        "tool": "upscale",
        "versions": versions(),
        "command": command,
        "working_folder": working_folder(command),
        "inputs": [
            {"role": s.role, "path": s.path, "resolved": str(Path(s.path).resolve()), "sha256": s.sha256}
            for s in fine.sources
        ],
        "read": read,
        "unit": fine.unit,
        "method": {"name": result.method, "options": result.options},
        "block": spec.summary(),
        "dimensions": fine.ndim,
        "fine": grid_summary(fine.grid),
        "coarse": grid_summary(coarse.grid),
        "active": {
            "fine_cells": result.fine_stats["kx"].active,
            "coarse_blocks": active_blocks,
            "coarse_blocks_inactive": int(coarse.kx.size - active_blocks),
            "dropped_cells": result.dropped_cells,
            "lost_pore_volume_m3": result.lost_pore_volume,
            "zero_k": result.zeros.summary(),
        },
        "statistics": {
            "fine": {name: scan.summary() for name, scan in result.fine_stats.items()},
            "coarse": {
                name: scan_values(values).summary() for name, values in coarse.properties().items()
            },
        },
        "check": check,
        "files": files,
        "timings_s": timings or {},
        "caution": CAUTION,
    }
    if METHODS[result.method].local:
        summary["tensor"] = tensor_summary(coarse, result.tensor, result.zeros)
        summary["transmissibility"] = {
            "rule": "two-block flow solves" if result.faces is not None else "harmonic half-block",
            "replaced_faces": result.replaced_faces,
        }
    if fine.porosity is not None:
        pore = np.nansum(coarse.porosity * coarse.grid.cell_volumes())
        summary["active"]["coarse_pore_volume_m3"] = float(pore)
    return jsonable(summary)
