"""Read a finished run back: its summary, its fine field and its coarse grid.

`upscale check DIR` uses this to solve the flow check again from what a run
left behind. The fine inputs are read from the paths the summary records and
must still have the same SHA-256; the coarse properties come from the run's
GeoTIFFs on the coarse grid rebuilt from the recorded block partition, so
edge blocks keep their true sizes.
"""

from __future__ import annotations

import json
from dataclasses import replace
from pathlib import Path

import numpy as np

from ..errors import InputError
from ..field import Field
from ..flow import Transmissibilities, transmissibilities
from ..grid import BlockSpec
from .read import read_field, sha256
from .windows import open_raster

SUMMARY = "summary.json"


def read_run(folder: str | Path) -> tuple[dict, Field, Field | Transmissibilities]:
    """Load an output folder of ``upscale run``.

    Parameters
    ----------
    folder : str or Path
        The folder given as ``--out`` to the run.

    Returns
    -------
    summary : dict
        The run's ``summary.json``.
    fine : Field
        The fine field as the run used it (cropped to whole blocks if it cropped).
    coarse : Field or Transmissibilities
        The coarse permeabilities read from the run's GeoTIFFs; for a run
        that upscaled its face transmissibilities directly, the coarse
        transmissibilities with those faces.

    Raises
    ------
    InputError
        If the folder holds no complete run, or an input changed since the run.
    """
    folder = Path(folder)
    path = folder / SUMMARY
    if not path.is_file():
        raise InputError(f"{folder}: no {SUMMARY} here, so no complete upscale run to check")
    try:
        summary = json.loads(path.read_text())
        inputs = {item["role"]: item for item in summary["inputs"]}
        read = summary["read"] or {}
        block = summary["block"]
    except (ValueError, KeyError, TypeError) as exc:
        raise InputError(f"{path}: not a summary written by upscale run ({exc})") from None
    for role, item in inputs.items():
        source = Path(item["resolved"])
        if not source.is_file():
            raise InputError(f"{source}: the run's {role} input is gone; it is needed to check again")
        if item["sha256"] and sha256(source) != item["sha256"]:
            raise InputError(f"{source}: the run's {role} input changed since the run (SHA-256 differs)")
    paths = {role: inputs[role]["resolved"] if role in inputs else None for role in ("ky", "kz")}
    fine = read_field(inputs["kx"]["resolved"], checksum=False, **paths, **read)
    spec = BlockSpec(block["x"], block["y"], block["z"], block["remainder"], block["min_active"])
    fine = fine.leading(spec.used_shape(fine.shape))
    grid = spec.coarse_grid(fine.grid)
    coarse = {}
    for name in ("kx", "ky", "kz")[: fine.ndim]:
        with open_raster(str(folder / f"{name}.tif")) as src:
            coarse[name] = src.read().astype(np.float64)
        if coarse[name].shape != grid.shape:
            raise InputError(f"{folder / (name + '.tif')}: shape {coarse[name].shape} does not match the run")
    coarse_field = Field(
        kx=coarse["kx"], ky=coarse["ky"], kz=coarse.get("kz"), porosity=None, grid=grid, unit=fine.unit
    )
    if "transmissibility_x.tif" not in summary.get("files", []):
        return summary, fine, coarse_field
    harmonic = transmissibilities(coarse_field)
    faces, boundary = list(harmonic.faces), list(harmonic.boundary)
    for axis in (0, 1, 2)[3 - fine.ndim :]:
        name = "transmissibility_" + "zyx"[axis] + ".tif"
        with open_raster(str(folder / name)) as src:
            every = src.read().astype(np.float64)
        n = every.shape[axis] - 1
        if n != grid.shape[axis]:
            raise InputError(f"{folder / name}: {n + 1} faces along its axis do not match the run")
        faces[axis] = np.take(every, np.arange(1, n), axis=axis)
        boundary[axis] = (np.take(every, [0], axis=axis), np.take(every, [n], axis=axis))
    return summary, fine, replace(harmonic, faces=tuple(faces), boundary=tuple(boundary))
