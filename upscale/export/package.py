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
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import numpy as np

from ..analysis.geometry import transmissivity_unit
from ..field import Grid
from ..flow import Transmissibilities
from ..geometry import Geometry
from ..optional import lazy
from .slabs import Region, slabs

pa = lazy("pyarrow", "formats")
pacsv = lazy("pyarrow.csv", "formats")
pq = lazy("pyarrow.parquet", "formats")

#: Name and version of the package format (ours).
FORMAT = {"name": "upscale-coarse-grid", "version": "1.0"}
TABLES = ("cells", "connections", "boundary")
#: Every file of the package, in the order written.
PACKAGE_FILES = (*(f"{t}.{x}" for t in TABLES for x in ("csv", "parquet")), "coarse.nc", "coarse.vtr",
                 "manifest.json")  # fmt: skip
#: The VTK file of a coarse model with a geometry, in place of ``coarse.vtr``: a structured grid.
STRUCTURED_VTK = "coarse.vts"
_AXES = "zyx"
ALL: Region = (slice(None), slice(None), slice(None))


def _centres(grid: Grid) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Cell-centre x, y (map units) and z (m above the top, so ≤ 0) of a north-up grid."""
    x0, y0 = (0.0, 0.0) if grid.transform is None else (grid.transform.c, grid.transform.f)
    x = x0 + np.cumsum(grid.dx) - grid.dx / 2
    y = y0 - (np.cumsum(grid.dy) - grid.dy / 2)
    z = -(np.cumsum(grid.dz) - grid.dz / 2)
    return x, y, z


def surfaces(grid: Grid, geometry: Geometry | None) -> np.ndarray:
    """Elevation of every layer's top and of the last layer's base, m (positive up).

    Parameters
    ----------
    grid : Grid
        Cell sizes in m.
    geometry : Geometry or None
        The model's geometry; None for a flat model, whose top is at 0 m.

    Returns
    -------
    ndarray of shape (L + 1, M, N), or (L + 1, 1, 1) for a flat model

    Examples
    --------
    >>> surfaces(Grid(dz=[2.0, 6.0], dy=[1.0], dx=[1.0]), None).ravel().tolist()
    [0.0, -2.0, -8.0]
    """
    if geometry is None:
        return grid.edges()[2][:, None, None]
    return geometry.surfaces()


#: The columns of ``cells.csv`` that place each cell in height: top, base and centre elevation and
#: thickness (the model's own with a geometry; a flat model's top is at 0).
ELEVATION_COLUMNS = ("top_elevation", "base_elevation", "centre_elevation", "thickness")
_INTEGER = {"id", "i", "j", "k", "id1", "id2"}
_TEXT = {"axis", "source", "face", "well", "set_by", "control"}
#: The tables of a run with wells (docs/package.md): each well's coarse connections, and the faces
#: near-well upscaling set.
WELL_TABLES = ("wells", "well_faces")
WELL_FILES = tuple(f"{t}.{x}" for t in WELL_TABLES for x in ("csv", "parquet"))


def _pool() -> pa.MemoryPool:
    """Arrow's system allocator, which gives the memory of the tables back after every slab.

    Arrow's default pool (mimalloc) keeps what they allocated, about 1 kB per coarse cell written.
    """
    return pa.system_memory_pool()


def _schema(names: list[str]) -> pa.Schema:
    """Column types by name: ids and indices int64, ``active`` int8, labels text, the rest float64."""
    def kind(name: str) -> pa.DataType:
        if name in _INTEGER:
            return pa.int64()
        if name == "active":
            return pa.int8()
        return pa.string() if name in _TEXT else pa.float64()

    return pa.schema([(name, kind(name)) for name in names])


def _batch(columns: dict[str, Any], schema: pa.Schema) -> pa.Table:
    """One slab of rows; non-finite floats (inactive cells) become nulls."""
    arrays = []
    for field in schema:
        values = np.asarray(columns[field.name]).ravel()
        mask = ~np.isfinite(values) if values.dtype.kind == "f" else None
        arrays.append(pa.array(values, mask=mask, type=field.type, memory_pool=_pool()))
    return pa.Table.from_arrays(arrays, schema=schema)


class PackageTables:
    """The three tables of the package, produced slab by slab.

    Parameters
    ----------
    coarse_properties : dict of str to ndarray of shape (L, M, N)
        ``kx``, ``ky`` (``kz``), tensor terms (``kxy`` ...) in the unit of k,
        ``porosity`` (fraction) when given, and a map's ``transmissivity``
        (``transmissivity_y``) in the unit of k times the package's length
        unit; NaN for inactive cells.
    trans : Transmissibilities
        The coarse model's transmissibilities, in (unit of k) · m.
    factors : dict
        From `upscale.units.unit_factors`.
    source : str
        The rule of the faces the method upscaled directly (``flow``, ``global``;
        ``harmonic`` when it upscaled none).
    direct : tuple of 3 ndarray of bool, optional
        Per axis (z, y, x), laid out as ``trans.faces``: True for the faces
        set by `source`; the others are ``harmonic``. None: every face is `source`.
    geometry : Geometry, optional
        The coarse model's geometry (`upscale.geometry`): the cells' elevations,
        thicknesses and bulk volumes are its own. None: a flat model, top at 0 m.
    ndim : int
        2 for a map, which has no top and bottom faces; 3 for a model (one
        coarse layer included).

    Notes
    -----
    `batches` yields each table's rows in their final order — cells by id;
    connections by axis (z, y, x), then by their first cell; outer faces by
    axis and side — a few hundred thousand at a time, so a table is never
    held whole (`upscale.export.slabs`).
    """

    def __init__(self, coarse_properties: dict[str, np.ndarray], trans: Transmissibilities, *,
                 factors: dict[str, Any], source: str,
                 direct: tuple[np.ndarray, ...] | None = None,
                 geometry: Geometry | None = None, ndim: int = 3) -> None:  # fmt: skip
        self.properties = coarse_properties
        self.trans = trans
        self.grid = trans.grid
        self.length = factors["length"]
        self.kf = factors["k"]
        self.tf = factors["k"] * factors["length"]  # T = k A / L: one k and one length
        self.source = source
        self.direct = direct
        self.centres = _centres(self.grid)
        self.geometry = geometry
        self.ndim = ndim
        self.surfaces = surfaces(self.grid, geometry)

    def columns(self, table: str) -> list[str]:
        """The column names of `table` (``cells``, ``connections`` or ``boundary``)."""
        if table == "connections":
            return ["id1", "id2", "axis", "transmissibility", "area", "distance", "source"]
        if table == "boundary":
            return ["id", "face", "half_transmissibility", "area"]
        names = ["id", "i", "j", "k", "x", "y", "z", "dx", "dy", "dz", "active"]
        names += [n for n in self.properties if n != "porosity"]
        if "porosity" in self.properties:
            names += ["porosity", "pore_volume"]
        return names + ["bulk_volume", *ELEVATION_COLUMNS]

    def batches(self, table: str) -> Iterator[pa.Table]:
        """The rows of `table`, slab by slab, as pyarrow tables of one schema."""
        schema = _schema(self.columns(table))
        parts = {"cells": self._cells, "connections": self._connections, "boundary": self._boundary}
        for columns in parts[table]():
            yield _batch(columns, schema)

    def _ids(self, region: tuple[slice, ...]) -> tuple[np.ndarray, ...]:
        L, M, N = self.grid.shape
        k, j, i = (a.astype(np.int64) for a in np.ogrid[region])
        return i + N * (j + M * k), k, j, i

    def _cells(self) -> Iterator[dict[str, Any]]:
        grid, length = self.grid, self.length
        x, y, z = self.centres
        for region in slabs(grid.shape):
            ids, k, j, i = self._ids(region)
            shape = ids.shape
            cells: dict[str, Any] = {
                "id": ids, "i": np.broadcast_to(i, shape), "j": np.broadcast_to(j, shape),
                "k": np.broadcast_to(k, shape), "x": np.broadcast_to(x[i], shape),
                "y": np.broadcast_to(y[j], shape), "z": np.broadcast_to(z[k] * length, shape),
                "dx": np.broadcast_to(grid.dx[i] * length, shape),
                "dy": np.broadcast_to(grid.dy[j] * length, shape),
                "dz": np.broadcast_to(grid.dz[k] * length, shape),
                "active": self.trans.active[region].astype(np.int8),
            }  # fmt: skip
            for name, values in self.properties.items():
                if name != "porosity":
                    cells[name] = values[region] * self.kf
            bulk = bulk_volumes(grid, length, region, self.geometry)
            if "porosity" in self.properties:
                cells["porosity"] = self.properties["porosity"][region]
                cells["pore_volume"] = cells["porosity"] * bulk
            cells["bulk_volume"] = bulk
            cells.update(self._elevations(region, shape))
            yield cells

    def _elevations(self, region: Region, shape: tuple[int, ...]) -> dict[str, np.ndarray]:
        """The `ELEVATION_COLUMNS` of the cells of `region`, in the package's length unit."""
        layers, rows, columns = region
        flat = self.surfaces.shape[1:] == (1, 1)
        plane = (slice(None), slice(None)) if flat else (rows, columns)
        top = self.surfaces[(slice(layers.start, layers.stop), *plane)]
        base = self.surfaces[(slice(layers.start + 1, layers.stop + 1), *plane)]
        found = {"top_elevation": top, "base_elevation": base, "centre_elevation": (top + base) / 2,
                 "thickness": top - base}  # fmt: skip
        return {name: np.broadcast_to(values * self.length, shape) for name, values in found.items()}

    def _connections(self) -> Iterator[dict[str, Any]]:
        grid, trans, length = self.grid, self.trans, self.length
        centre_sizes = (grid.dz, grid.dy, grid.dx)
        for a in range(3):
            n = grid.shape[a]
            if n < 2:
                continue
            gap = centre_sizes[a][:-1] / 2 + centre_sizes[a][1:] / 2
            areas = np.broadcast_to(_face_areas(grid, a), grid.shape)
            for region in slabs(grid.shape):
                first = list(region)
                first[a] = slice(first[a].start, min(first[a].stop, n - 1))
                if first[a].start >= first[a].stop:
                    continue
                second = list(first)
                second[a] = slice(first[a].start + 1, first[a].stop + 1)
                first, second = tuple(first), tuple(second)
                T = trans.faces[a][first]
                keep = trans.active[first] & trans.active[second] & (T > 0)
                ids, *index = self._ids(first)
                ids = np.broadcast_to(ids, T.shape)[keep]
                step = (grid.shape[1] * grid.shape[2], grid.shape[2], 1)[a]
                distance = np.broadcast_to(gap[index[a]], T.shape)
                yield {"id1": ids, "id2": ids + step, "axis": np.full(ids.size, _AXES[a]),
                       "transmissibility": T[keep] * self.tf, "area": areas[first][keep] * length**2,
                       "distance": distance[keep] * length,
                       "source": self._sources(a, first, keep)}  # fmt: skip

    def _sources(self, a: int, region: Region, keep: np.ndarray) -> np.ndarray:
        """The ``source`` of the kept faces of `region` along axis `a`."""
        if self.direct is None:
            return np.full(int(keep.sum()), self.source)
        return np.where(self.direct[a][region][keep], self.source, "harmonic")

    def _boundary(self) -> Iterator[dict[str, Any]]:
        grid, trans, length = self.grid, self.trans, self.length
        for a in range(3):
            if self.ndim == 2 and a == 0:
                continue  # a map has no top and bottom faces to flow through
            n = grid.shape[a]
            areas = np.broadcast_to(_face_areas(grid, a), grid.shape)
            plane = list(grid.shape)
            plane[a] = 1
            for side, (values, sign) in enumerate(zip(trans.boundary[a], "-+")):
                for region in slabs(tuple(plane)):
                    face = list(region)  # the values of this side hold one plane along a
                    cell = list(region)
                    cell[a] = slice(0, 1) if side == 0 else slice(n - 1, n)
                    face, cell = tuple(face), tuple(cell)
                    active = trans.active[cell]
                    ids = np.broadcast_to(self._ids(cell)[0], active.shape)[active]
                    yield {"id": ids, "face": np.full(ids.size, _AXES[a] + sign),
                           "half_transmissibility": values[face][active] * self.tf,
                           "area": areas[cell][active] * length**2}  # fmt: skip


def bulk_volumes(grid: Grid, length: float = 1.0, region: Region = ALL,
                 geometry: Geometry | None = None) -> np.ndarray:  # fmt: skip
    """Bulk volume of every cell of `region` (default the grid), in (length unit)³ (`length` per m).

    With a `geometry`, the true volumes: each cell's own thickness times its plan area.
    """
    layers, rows, columns = region
    thickness = (grid.dz[layers] * length)[:, None, None] if geometry is None else (
        np.asarray(geometry.thickness[region], dtype=np.float64) * length)
    return thickness * (grid.dy[rows] * length)[None, :, None] * (grid.dx[columns] * length)[None, None, :]


def geometry_record(trans: Transmissibilities) -> dict[str, Any]:
    """The manifest's ``geometry`` of a coarse model with a geometry (docs/package.md).

    Its connections hold the true transmissibilities on the flat grid of
    ``dz``; ``volume_ratio`` (true over flat bulk volume) turns that grid's
    k_eff into the true one (`upscale.flow.Transmissibilities`).
    """
    return {"volume_ratio": trans.volume_ratio, "columns": list(ELEVATION_COLUMNS)}


def _face_areas(grid: Grid, a: int) -> np.ndarray:
    """Area in m² of each cell's face normal to array axis `a`, broadcastable to the grid."""
    sizes = [grid.dz[:, None, None], grid.dy[None, :, None], grid.dx[None, None, :]]
    sizes.pop(a)
    return sizes[0] * sizes[1]


def column_units(tables: PackageTables, factors: dict[str, Any], crs_unit: str, *,
                 wells: bool = False) -> dict:  # fmt: skip
    """The unit of every column of every table (with `wells`, of the wells tables too), for the manifest."""
    length, k, t = factors["length_unit"], factors["k_unit"], factors["transmissibility_unit"]
    known = {
        "id": "1", "i": "1", "j": "1", "k": "1", "id1": "1", "id2": "1", "active": "1 (0 or 1)",
        "x": crs_unit, "y": crs_unit, "z": f"{length} above the top of the model",
        "dx": length, "dy": length, "dz": length, "porosity": "1 (fraction)",
        "pore_volume": f"{length}³", "bulk_volume": f"{length}³", "axis": "x, y or z",
        "transmissibility": t, "half_transmissibility": t, "area": f"{length}²",
        "distance": length, "source": "harmonic, flow, global or local-global",
        "face": "x-, x+, y-, y+, z- or z+",
        "well": "name", "factor": t, "set_by": "near-well or peaceman", "control": "pressure or rate",
        **{f"{place}_elevation": f"{length} elevation, positive up" for place in ("top", "base", "centre")},
        "thickness": length,
        "z_top": f"{length} above the top of the model", "z_bottom": f"{length} above the top of the model",
        "value": f"unit of pressure (control pressure) or {t}·(unit of pressure) (control rate: q·μ)",
    }  # fmt: skip
    if "transmissivity" in tables.properties:  # a conductivity map with a thickness
        known["transmissivity"] = known["transmissivity_y"] = transmissivity_unit(k)
    columns = {name: tables.columns(name) for name in TABLES}
    if wells:
        columns.update(zip(WELL_TABLES, (WELL_COLUMNS, FACE_COLUMNS)))
    return {name: {c: known.get(c, k) for c in names} for name, names in columns.items()}


def write_tables(stage: Path, tables: PackageTables) -> dict[str, dict[str, Any]]:
    """Write each table as CSV and as Parquet under `stage`, slab by slab.

    Returns
    -------
    dict
        Per file name: ``rows`` and ``sha256``, for the manifest (a reader
        checks them, so a truncated or changed table is caught).
    """
    files = {}
    for name in TABLES:
        files.update(_write_table(stage, name, tables.columns(name), tables.batches(name)))
    return files


def _write_table(stage: Path, name: str, columns: list[str], batches: Iterator[pa.Table]
                 ) -> dict[str, dict[str, Any]]:  # fmt: skip
    """One table as ``NAME.csv`` and ``NAME.parquet``; per file its ``rows`` and ``sha256``."""
    schema = _schema(columns)
    csv, parquet = stage / f"{name}.csv", stage / f"{name}.parquet"
    rows = 0
    with pacsv.CSVWriter(csv, schema, memory_pool=_pool()) as text, \
            pq.ParquetWriter(parquet, schema, memory_pool=_pool()) as columnar:  # fmt: skip
        for batch in batches:
            text.write_table(batch)
            columnar.write_table(batch)
            rows += batch.num_rows
    return {path.name: {"rows": rows, "sha256": _sha256(path)} for path in (csv, parquet)}


def well_columns(check: dict[str, Any], fine: Grid, coarse: Grid, factors: dict[str, Any]
                 ) -> dict[str, dict[str, np.ndarray]]:  # fmt: skip
    """The rows of the wells tables, from the well check's record (`upscale.check.wells.WellCheck.summary`).

    Parameters
    ----------
    check : dict
        The ``well_check`` object of the summary (with its coarse ``factors``,
        ``set_by`` and ``near_well_faces``).
    fine, coarse : Grid
        The grids the wells were solved on (layers are counted on the fine one).
    factors : dict
        From `upscale.units.unit_factors`.

    Returns
    -------
    dict
        ``wells`` and ``well_faces``: column name to values, in the package's units.
    """
    tf, length = factors["k"] * factors["length"], factors["length"]
    L, M, N = coarse.shape
    tops = np.concatenate([[0.0], np.cumsum(fine.dz)])
    edges = np.concatenate([[0.0], np.cumsum(coarse.dz)])
    rows: dict[str, list[Any]] = {c: [] for c in WELL_COLUMNS}
    for name, well in check["wells"].items():
        first, last = (1, fine.dz.size) if well["layers"] == "all" else well["layers"]
        for (k, j, i), factor, set_by in zip(well["coarse"]["cells"], well["coarse"]["factors"],
                                             well["coarse"]["set_by"]):  # fmt: skip
            top, bottom = max(tops[first - 1], edges[k]), min(tops[last], edges[k + 1])
            scale = 1.0 if well["control"] == "pressure" else tf
            depth = (0.0 - top * length, 0.0 - bottom * length)  # heights above the top, 0.0 not -0.0
            values = (name, i + N * (j + M * k), factor * tf, set_by, *depth, well["control"],
                      well["value"] * scale)  # fmt: skip
            for column, value in zip(WELL_COLUMNS, values):
                rows[column].append(value)
    faces: dict[str, list[Any]] = {c: [] for c in FACE_COLUMNS}
    for face in check["near_well_faces"]:
        k, j, i = face["cell"]
        first = i + N * (j + M * k)
        step = {"x": 1, "y": N, "z": N * M}[face["axis"]]
        for column, value in zip(FACE_COLUMNS, (first, first + step, face["axis"],
                                                face["transmissibility"] * tf)):  # fmt: skip
            faces[column].append(value)
    return {"wells": {c: _typed(c, v) for c, v in rows.items()},
            "well_faces": {c: _typed(c, v) for c, v in faces.items()}}  # fmt: skip


def _typed(name: str, values: list[Any]) -> np.ndarray:
    """A column's values as the array its type in `_schema` needs (an empty column too)."""
    return np.asarray(values, dtype=np.int64 if name in _INTEGER else str if name in _TEXT else np.float64)


#: The columns of ``wells.csv`` and ``well_faces.csv``.
WELL_COLUMNS = ["well", "id", "factor", "set_by", "z_top", "z_bottom", "control", "value"]
FACE_COLUMNS = ["id1", "id2", "axis", "transmissibility"]


def write_well_tables(stage: Path, columns: dict[str, dict[str, np.ndarray]]) -> dict[str, dict[str, Any]]:
    """Write ``wells`` and ``well_faces`` (CSV and Parquet) from `well_columns`; per file rows and SHA-256."""
    files = {}
    for name, names in zip(WELL_TABLES, (WELL_COLUMNS, FACE_COLUMNS)):
        schema = _schema(names)
        files.update(_write_table(stage, name, names, iter([_batch(columns[name], schema)])))
    return files


def _sha256(path: Path) -> str:
    digest = hashlib.sha256()
    with open(path, "rb") as f:
        for block in iter(lambda: f.read(1 << 20), b""):
            digest.update(block)
    return digest.hexdigest()
