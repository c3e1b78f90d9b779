"""The coarse-grid package: cells, connections and outer faces as open tables, with a manifest.

Our own documented format (``docs/package.md``), built on CSV, Parquet and
JSON, from which any program can rebuild the coarse model's two-point
system without this tool:

* ``cells.csv`` — one row per coarse cell (active or not);
* ``connections.csv`` — one row per pair of active cells joined by a face
  with a positive transmissibility;
* ``boundary.csv`` — one row per outer face of an active cell, with its half
  transmissibility (what a fixed pressure on that face connects through);
* ``manifest.json`` — format name and version, the unit of every column,
  georeference, inputs, parameters and the check.

Cell ids run over every cell, column fastest: ``id = i + N (j + M k)`` for
column i, row j, layer k of an N x M x L coarse grid (all zero-based, layer
0 on top, row 0 the first raster row). Connections list the smaller id first.
"""

from __future__ import annotations

import hashlib
from pathlib import Path
from typing import Any

import numpy as np
import pyarrow as pa
import pyarrow.csv as pacsv
import pyarrow.parquet as pq

from ..errors import InputError
from ..field import Grid
from ..flow import Transmissibilities
from ..units import DARCY_M2, UNITS

#: Name and version of the package format (ours).
FORMAT = {"name": "upscale-coarse-grid", "version": "1.0"}
TABLES = ("cells", "connections", "boundary")
#: Every file of the package, in the order written.
PACKAGE_FILES = (*(f"{t}.{x}" for t in TABLES for x in ("csv", "parquet")), "coarse.nc", "coarse.vtr",
                 "manifest.json")  # fmt: skip
#: Output unit systems: ``si`` (m, m², m³) and ``field`` (ft, mD).
UNIT_SYSTEMS = ("si", "field")
FOOT_M = 0.3048  # international foot (exact, 1959 agreement)
_AXES = "zyx"


def unit_factors(unit: str, system: str) -> dict[str, Any]:
    """Factors from internal values (k in `unit`, lengths in m) to the package's units.

    Returns
    -------
    dict
        ``length``, ``k`` (multiply internal values by these) and the unit
        names ``length_unit``, ``k_unit``, ``transmissibility_unit``.

    Examples
    --------
    >>> f = unit_factors("mD", "field")
    >>> f["k"], round(f["length"], 6), f["transmissibility_unit"]
    (1.0, 3.28084, 'mD·ft')
    """
    kind, to_si = UNITS[unit]
    if system == "si":
        if kind == "conductivity":
            # K A / L is a hydraulic conductance in m²/s
            return {"length": 1.0, "k": to_si, "length_unit": "m", "k_unit": "m/s",
                    "transmissibility_unit": "m²/s"}  # fmt: skip
        return {"length": 1.0, "k": to_si, "length_unit": "m", "k_unit": "m²",
                "transmissibility_unit": "m³"}  # fmt: skip
    if kind == "conductivity":
        raise InputError("--units field is for permeability (mD, D, m2) inputs; this one is a "
                         "hydraulic conductivity — use --units si")  # fmt: skip
    return {"length": 1.0 / FOOT_M, "k": to_si / (1e-3 * DARCY_M2), "length_unit": "ft",
            "k_unit": "mD", "transmissibility_unit": "mD·ft"}  # fmt: skip


def _centres(grid: Grid) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Cell-centre x, y (map units) and z (m above the top, so ≤ 0) of a north-up grid."""
    x0, y0 = (0.0, 0.0) if grid.transform is None else (grid.transform.c, grid.transform.f)
    x = x0 + np.cumsum(grid.dx) - grid.dx / 2
    y = y0 - (np.cumsum(grid.dy) - grid.dy / 2)
    z = -(np.cumsum(grid.dz) - grid.dz / 2)
    return x, y, z


def _column(values: np.ndarray) -> pa.Array:
    values = np.asarray(values)
    if values.dtype.kind == "f":
        return pa.array(values, mask=~np.isfinite(values))
    return pa.array(values)


def package_tables(
    coarse_properties: dict[str, np.ndarray],
    trans: Transmissibilities,
    *,
    factors: dict[str, Any],
    source: str,
) -> dict[str, pa.Table]:
    """The three tables of the package.

    Parameters
    ----------
    coarse_properties : dict of str to ndarray of shape (L, M, N)
        ``kx``, ``ky`` (``kz``), tensor terms (``kxy`` ...) in the unit of k, and
        ``porosity`` (fraction) when given; NaN for inactive cells.
    trans : Transmissibilities
        The coarse model's transmissibilities, in (unit of k) · m.
    factors : dict
        From `unit_factors`.
    source : str
        How the inner transmissibilities were made (``harmonic`` or ``flow``).

    Returns
    -------
    dict of str to pyarrow.Table
    """
    grid = trans.grid
    L, M, N = grid.shape
    length, kf = factors["length"], factors["k"]
    tf = kf * length  # T = k A / L: one k and one length
    k, j, i = (a.ravel() for a in np.indices((L, M, N)))
    ids = np.arange(L * M * N)
    x, y, z = _centres(grid)
    dx, dy, dz = grid.dx[i], grid.dy[j], grid.dz[k]
    active = trans.active.ravel()
    cells: dict[str, Any] = {
        "id": ids, "i": i, "j": j, "k": k, "x": x[i], "y": y[j], "z": z[k] * length,
        "dx": dx * length, "dy": dy * length, "dz": dz * length, "active": active.astype(np.int8),
    }  # fmt: skip
    for name, values in coarse_properties.items():
        if name != "porosity":
            cells[name] = values.ravel() * kf
    bulk = bulk_volumes(grid, length).ravel()
    if "porosity" in coarse_properties:
        porosity = coarse_properties["porosity"].ravel()
        cells["porosity"] = porosity
        cells["pore_volume"] = porosity * bulk
    cells["bulk_volume"] = bulk

    index = ids.reshape(L, M, N)
    centre_sizes = (grid.dz, grid.dy, grid.dx)
    pairs: dict[str, list] = {n: [] for n in ("id1", "id2", "axis", "transmissibility", "area",
                                               "distance")}  # fmt: skip
    outer: dict[str, list] = {n: [] for n in ("id", "face", "half_transmissibility", "area")}
    for a in range(3):
        n = grid.shape[a]
        areas = _face_areas(grid, a)
        T = trans.faces[a]
        if n > 1:
            first = np.take(index, np.arange(n - 1), axis=a)
            second = np.take(index, np.arange(1, n), axis=a)
            before = np.take(trans.active, np.arange(n - 1), axis=a)
            keep = before & np.take(trans.active, np.arange(1, n), axis=a) & (T > 0)
            half = centre_sizes[a] / 2
            gap = (half[:-1] + half[1:])
            shape = [1, 1, 1]
            shape[a] = n - 1
            distance = np.broadcast_to(gap.reshape(shape), T.shape)
            pairs["id1"].append(first[keep])
            pairs["id2"].append(second[keep])
            pairs["axis"].append(np.full(int(keep.sum()), _AXES[a]))
            pairs["transmissibility"].append(T[keep] * tf)
            pairs["area"].append(np.broadcast_to(areas, T.shape)[keep] * length**2)
            pairs["distance"].append(distance[keep] * length)
        if L == 1 and a == 0:
            continue  # a map has no top and bottom faces to flow through
        for side, (values, sign) in enumerate(zip(trans.boundary[a], "-+")):
            at = [0] if side == 0 else [n - 1]
            cell_active = np.take(trans.active, at, axis=a)
            outer["id"].append(np.take(index, at, axis=a)[cell_active])
            outer["face"].append(np.full(int(cell_active.sum()), _AXES[a] + sign))
            outer["half_transmissibility"].append(values[cell_active] * tf)
            outer["area"].append(np.broadcast_to(areas, values.shape)[cell_active] * length**2)
    connections = {name: np.concatenate(parts) if parts else np.array([], dtype=np.int64)
                   for name, parts in pairs.items()}  # fmt: skip
    connections["source"] = np.full(connections["id1"].size, source)
    boundary = {name: np.concatenate(parts) if parts else np.array([]) for name, parts in outer.items()}
    return {
        "cells": pa.table({name: _column(values) for name, values in cells.items()}),
        "connections": pa.table({name: _column(values) for name, values in connections.items()}),
        "boundary": pa.table({name: _column(values) for name, values in boundary.items()}),
    }


def bulk_volumes(grid: Grid, length: float = 1.0) -> np.ndarray:
    """Bulk volume of every cell, shape (L, M, N), in (length unit)³ (`length` per m)."""
    return (grid.dz * length)[:, None, None] * (grid.dy * length)[None, :, None] * (
        grid.dx * length)[None, None, :]


def _face_areas(grid: Grid, a: int) -> np.ndarray:
    """Area in m² of each cell's face normal to array axis `a`, broadcastable to the grid."""
    sizes = [grid.dz[:, None, None], grid.dy[None, :, None], grid.dx[None, None, :]]
    sizes.pop(a)
    return sizes[0] * sizes[1]


def column_units(tables: dict[str, pa.Table], factors: dict[str, Any], crs_unit: str) -> dict:
    """The unit of every column of every table, for the manifest."""
    length, k, t = factors["length_unit"], factors["k_unit"], factors["transmissibility_unit"]
    known = {
        "id": "1", "i": "1", "j": "1", "k": "1", "id1": "1", "id2": "1", "active": "1 (0 or 1)",
        "x": crs_unit, "y": crs_unit, "z": f"{length} above the top of the model",
        "dx": length, "dy": length, "dz": length, "porosity": "1 (fraction)",
        "pore_volume": f"{length}³", "bulk_volume": f"{length}³", "axis": "x, y or z",
        "transmissibility": t, "half_transmissibility": t, "area": f"{length}²",
        "distance": length, "source": "harmonic or flow", "face": "x-, x+, y-, y+, z- or z+",
    }  # fmt: skip
    return {name: {c: known.get(c, k) for c in table.column_names} for name, table in tables.items()}


def write_tables(stage: Path, tables: dict[str, pa.Table]) -> dict[str, dict[str, Any]]:
    """Write each table as CSV and as Parquet under `stage`.

    Returns
    -------
    dict
        Per file name: ``rows`` and ``sha256``, for the manifest (a reader
        checks them, so a truncated or changed table is caught).
    """
    files = {}
    for name, table in tables.items():
        for suffix, write in (("csv", pacsv.write_csv), ("parquet", pq.write_table)):
            path = stage / f"{name}.{suffix}"
            write(table, path)
            files[path.name] = {"rows": table.num_rows, "sha256": _sha256(path)}
    return files


def _sha256(path: Path) -> str:
    digest = hashlib.sha256()
    with open(path, "rb") as f:
        for block in iter(lambda: f.read(1 << 20), b""):
            digest.update(block)
    return digest.hexdigest()
