"""The coarse-grid package of every run: open tables, manifest, NetCDF-CF and VTK.

What is tested
--------------
Small 2D and 3D rasters (non-square cells, nodata blocks, one active block
walled in by inactive ones, uneven layer thicknesses, kz from --kv-kh, a
porosity raster) are run through ``upscale run`` in this process with an
average (geometric), a flow-based method (``flow --bc periodic --border 2``;
the package carries its diagonal) and direct transmissibilities
(``flow-transmissibility --border 2``), in SI and in field units.

* Round trip (the issue's check): the coarse system rebuilt from the package
  alone — with `upscale.io.package.read_package`, and independently with
  the csv module, numpy and scipy only — gives the run's coarse k_eff of
  summary.json per axis to 1e-10, and the same number of isolated cells.
* Pore volume in cells.csv sums to the fine model's (from the rasters
  themselves) in m³ and ft³; with --min-active the lost pore volume of the
  summary makes up the difference.
* Units: a unit for every column of every table; SI transmissibility is the
  internal one (mD·m) times the darcy's definition; field lengths in ft, k in
  mD (also from a darcy input).
* Tables: ids, i/j/k, centres and sizes; connections only between active
  cells, smaller id first, axis from the id difference, distance and area,
  harmonic transmissibilities by the two-point formula; boundary rows on the
  outer faces of active cells only; Parquet equal to CSV.
* NetCDF: CF-1.8 attributes, (layer, row, column) dimensions, coordinate
  variables, the CRS as WKT, values equal to cells.csv.
* VTK, opened by VTK's own reader (``vtkXMLRectilinearGridReader``): extents,
  increasing coordinates, and the ``id`` array leading back to cells.csv's
  values and centres with rows and layers reversed; every array equal to
  the run's GeoTIFF of that property (times the unit factor) and the
  coordinates at the raster's corners; the values raw float64 in the
  appended section, nothing else.
* Slabs: the tables, NetCDF and VTK written a slab at a time (one cell, part
  of a layer, several layers) are the same bytes as in one slab of the whole grid.
"""

from __future__ import annotations

import csv
import json
import re
from pathlib import Path
from types import SimpleNamespace

import netCDF4
import numpy as np
import pyarrow.csv as pacsv
import pyarrow.parquet as pq
import pytest
import rasterio
from conftest import read_raster, read_vtr, write_raster
from rasterio.crs import CRS
from scipy import sparse
from scipy.sparse.csgraph import connected_components
from scipy.sparse.linalg import spsolve

import upscale
from upscale.check.axis import HELD_OUT
from upscale.cli.main import main
from upscale.flow import pressure_drop
from upscale.gallery.problems import uncorrelated_lognormal
from upscale.io.package import read_package
from upscale.methods.registry import METHODS as REGISTRY

SEED = 4_170_332_981
NODATA = -9999.0
TABLES = ("cells", "connections", "boundary")
FOOT = 0.3048  # international foot, exact (1959 agreement)
#: One millidarcy in m² from the darcy's definition: 1 cm³/s of a 1 cP fluid through
#: 1 cm² under 1 atm/cm (1 atm = 101325 Pa) — the Darcy definition, as in units.py.
MILLIDARCY_M2 = 1e-3 * (1e-6 * 1e-3 * 1e-2) / (1e-4 * 101_325.0)

# 2D: 24 rows x 36 columns of 12.5 m x 7.5 m cells in 6x4 blocks -> 6 x 6 coarse cells
MAP_CELL = (12.5, 7.5)
MAP_BLOCK = (6, 4)
WALLED = (4, 3)  # coarse (i, j) whose four neighbours are inactive: an isolated active cell
# 3D: 4 layers of 16 x 24 cells of 10 m x 8 m in 4x4x2 blocks -> 6 x 4 x 2 coarse cells
MODEL_CELL = (10.0, 8.0)
MODEL_DZ = (1.0, 2.0, 1.5, 3.0)
MODEL_CRS = "EPSG:25832"

METHODS = {
    "geometric": [],
    "flow": ["--bc", "periodic", "--border", "2"],
    "flow-transmissibility": ["--border", "2"],
    "global": [],
}
RUNS = [(dim, method, units) for dim in ("2d", "3d") for method in METHODS for units in ("si", "field")]


def _block_mask(shape, bi, bj, block):
    mask = np.zeros(shape, dtype=bool)
    mask[..., bj * block[1] : (bj + 1) * block[1], bi * block[0] : (bi + 1) * block[0]] = True
    return mask


@pytest.fixture(scope="module")
def inputs(tmp_path_factory) -> SimpleNamespace:
    """The 2D map and the 3D model, each with porosity, written once for the module."""
    folder = tmp_path_factory.mktemp("package-inputs")
    k2 = uncorrelated_lognormal((24, 36), SEED)
    k2[_block_mask(k2.shape, 0, 0, MAP_BLOCK)] = NODATA  # a whole inactive corner block
    i, j = WALLED
    for bi, bj in ((i - 1, j), (i + 1, j), (i, j - 1), (i, j + 1)):
        k2[_block_mask(k2.shape, bi, bj, MAP_BLOCK)] = NODATA
    k2[13, 8] = NODATA  # one inactive fine cell inside an active block
    por2 = np.clip(0.2 + 0.02 * np.log(np.abs(k2)), 0.05, 0.35)
    k3 = uncorrelated_lognormal((4, 16, 24), SEED + 1)
    k3[:, :4, :4] = NODATA  # a column of inactive blocks
    k3[1, 9, 13] = NODATA
    por3 = np.clip(0.15 + 0.02 * np.log(np.abs(k3)), 0.05, 0.3)
    paths = {}
    for name, values, kwargs in (
        ("k2", k2, {"cell_size": MAP_CELL, "nodata": NODATA}),
        ("p2", por2, {"cell_size": MAP_CELL}),
        ("k3", k3, {"cell_size": MODEL_CELL, "nodata": NODATA, "crs": MODEL_CRS}),
        ("p3", por3, {"cell_size": MODEL_CELL, "crs": MODEL_CRS}),
    ):
        paths[name] = write_raster(folder / f"{name}.tif", values, **kwargs)
    return SimpleNamespace(
        **paths,
        args={
            "2d": [paths["k2"], "--porosity", paths["p2"], "--block", "6x4"],
            "3d": [paths["k3"], "--porosity", paths["p3"], "--dz", ",".join(map(str, MODEL_DZ)),
                   "--kv-kh", "0.1", "--block", "4x4x2"],
        },
    )  # fmt: skip


@pytest.fixture(scope="module")
def package(inputs, tmp_path_factory):
    """``package(dim, method, units, *extra) -> folder`` of an ``upscale run``, run once per key."""
    folders: dict[tuple, Path] = {}

    def get(dim: str, method: str, units: str = "si", *extra: str) -> Path:
        key = (dim, method, units, extra)
        if key not in folders:
            out = tmp_path_factory.mktemp("package") / f"{dim}-{method}-{units}"
            # zeros kept, so the walled-in block stays active and isolated whatever the method
            # (the border of the flow methods makes it a dead end: k = 0, which --zero-k auto
            # would make inactive; the rule is tested in tests/test_zeros.py)
            args = ["-q", "run", *inputs.args[dim], "--method", method, *METHODS[method],
                    "--units", units, "--solver", "direct", "--zero-k", "keep", *extra,
                    "--out", out]  # fmt: skip
            assert main([str(a) for a in args]) == 0
            folders[key] = out
        return folders[key]

    return get


def _manifest(folder: Path) -> dict:
    return json.loads((folder / "manifest.json").read_text())


def _summary(folder: Path) -> dict:
    return json.loads((folder / "summary.json").read_text())


def _read_csv(path: Path) -> dict[str, list[str]]:
    """A package table read with the csv module only: column name -> raw strings."""
    with open(path, newline="", encoding="utf-8") as f:
        header, *rows = list(csv.reader(f))
    return {name: [row[c] for row in rows] for c, name in enumerate(header)}


def _floats(column: list[str]) -> np.ndarray:
    """Numbers of a CSV column; an empty field (null) is NaN."""
    return np.array([float(v) if v != "" else np.nan for v in column])


def _ints(column: list[str]) -> np.ndarray:
    return np.array([int(v) for v in column], dtype=np.int64)


def _shape(manifest: dict) -> tuple[int, int, int]:
    s = manifest["shape"]
    return s["layers"], s["rows"], s["columns"]


# ---------------------------------------------------------------------------------------------
# 1. Round trip


def _independent_k_eff(folder: Path, axis: str) -> tuple[float, int, float]:
    """k_eff along `axis` (unit of the run's input) from the three CSVs, numpy and scipy only.

    The two-point system of the package (common practice in reservoir simulation: one
    unknown pressure per cell, a flux T (p_a - p_b) per connection, T_half (p_face - p)
    per outer face): p = 1 on the ``axis-`` faces, p = 0 on the ``axis+`` faces, every
    other outer face closed. Cells in a connected region that touches neither fixed face
    (inactive cells, walled-in cells) carry no flow and are left out.

    Returns
    -------
    k_eff, isolated active cells, mass balance
    """
    manifest = _manifest(folder)
    cells, pairs, outer = (_read_csv(folder / f"{t}.csv") for t in TABLES)
    ids = _ints(cells["id"])
    n = ids.size
    assert np.array_equal(ids, np.arange(n))
    i, j, k = _ints(cells["i"]), _ints(cells["j"]), _ints(cells["k"])
    dx, dy, dz = _floats(cells["dx"]), _floats(cells["dy"]), _floats(cells["dz"])
    extent = {
        "x": dx[(j == 0) & (k == 0)].sum(),  # one row of cells
        "y": dy[(i == 0) & (k == 0)].sum(),
        "z": dz[(i == 0) & (j == 0)].sum(),
    }
    length = extent.pop(axis)
    cross_section = np.prod(list(extent.values()))

    first, second = _ints(pairs["id1"]), _ints(pairs["id2"])
    T = _floats(pairs["transmissibility"])
    face, where, half = np.array(outer["face"]), _ints(outer["id"]), _floats(outer["half_transmissibility"])
    t_in = np.bincount(where[face == f"{axis}-"], half[face == f"{axis}-"], minlength=n)
    t_out = np.bincount(where[face == f"{axis}+"], half[face == f"{axis}+"], minlength=n)

    graph = sparse.coo_matrix((np.ones(T.size), (first, second)), shape=(n, n))
    _, label = connected_components(graph, directed=False)
    anchored = np.isin(label, label[(t_in > 0) | (t_out > 0)])
    active = _ints(cells["active"]).astype(bool)
    assert not np.any(anchored & ~active)

    rows = np.concatenate([first, second, first, second, np.arange(n)])
    cols = np.concatenate([second, first, first, second, np.arange(n)])
    values = np.concatenate([-T, -T, T, T, t_in + t_out])
    A = sparse.coo_matrix((values, (rows, cols)), shape=(n, n)).tocsr()
    keep = np.flatnonzero(anchored)
    p = spsolve(A[keep][:, keep].tocsc(), t_in[keep])
    inflow = float(np.sum(t_in[keep] * (1.0 - p)))
    outflow = float(np.sum(t_out[keep] * p))
    k_package = outflow * length / cross_section  # Darcy's law: Q = k A Δp / (μ L), Δp = μ = 1
    k_input = k_package / float(manifest["units"]["factors"]["k"])
    balance = abs(inflow - outflow) / max(abs(inflow), abs(outflow))
    return k_input, int(active.sum() - anchored.sum()), balance


@pytest.mark.parametrize(("dim", "method", "units"), RUNS)
def test_package_alone_reproduces_the_runs_coarse_k_eff(package, dim, method, units):
    folder = package(dim, method, units)
    check = _summary(folder)["check"]
    axes = ("x", "y", "z") if dim == "3d" else ("x", "y")
    assert set(check) == {*axes, *HELD_OUT}  # the held-out corner flow: tests/flow/test_corner.py
    manifest, trans = read_package(folder)
    assert manifest["check"] == check
    for axis in axes:
        c = check[axis]
        rebuilt = pressure_drop(trans, axis, solver="direct")
        assert rebuilt.k_eff == pytest.approx(c["k_coarse"], rel=1e-10)
        assert rebuilt.isolated == c["coarse"]["isolated_cells"]
        k_eff, isolated, balance = _independent_k_eff(folder, axis)
        assert k_eff == pytest.approx(c["k_coarse"], rel=1e-10)
        assert isolated == c["coarse"]["isolated_cells"]
        assert balance < 1e-10
    if dim == "2d":
        assert check["x"]["coarse"]["isolated_cells"] >= 1  # the walled-in cell


def test_a_model_upscaled_to_one_coarse_layer_keeps_its_top_and_bottom_faces(inputs, tmp_path):
    # one coarse layer is still a model: its package has z- and z+ outer faces, and the coarse
    # system read back passes the run's vertical flow (before, they were left out as for a map)
    out = tmp_path / "one-layer"
    assert main(["-q", "run", str(inputs.k3), "--dz", ",".join(map(str, MODEL_DZ)), "--kv-kh", "0.1",
                 "--block", "4x4x4", "--method", "arithmetic", "--out", str(out)]) == 0  # fmt: skip
    assert {"z-", "z+"} <= set(_read_csv(out / "boundary.csv")["face"])
    _, trans = read_package(out)
    check = _summary(out)["check"]
    for axis in ("x", "y", "z"):
        assert pressure_drop(trans, axis, solver="direct").k_eff == pytest.approx(check[axis]["k_coarse"],
                                                                                  rel=1e-10)  # fmt: skip


# ---------------------------------------------------------------------------------------------
# 2. Pore volume


def _fine_pore_volume_m3(inputs, dim: str) -> float:
    """Σ porosity × cell volume over the active fine cells, from the rasters themselves."""
    k_path, p_path = (inputs.k2, inputs.p2) if dim == "2d" else (inputs.k3, inputs.p3)
    (dx, dy), dz = (MAP_CELL, (1.0,)) if dim == "2d" else (MODEL_CELL, MODEL_DZ)
    with rasterio.open(k_path) as src:
        k = src.read().astype(np.float64)
    with rasterio.open(p_path) as src:
        porosity = src.read().astype(np.float64)
    volume = dx * dy * np.asarray(dz)[:, None, None]
    return float(np.sum(np.where(k != NODATA, porosity * volume, 0.0)))


@pytest.mark.parametrize("units", ["si", "field"])
@pytest.mark.parametrize("dim", ["2d", "3d"])
def test_pore_volume_is_conserved(package, inputs, dim, units):
    # conservation of pore volume across upscaling: common practice
    folder = package(dim, "geometric", units)
    cells = _read_csv(folder / "cells.csv")
    pore = _floats(cells["pore_volume"])
    active = _ints(cells["active"]).astype(bool)
    assert np.all(np.isnan(pore[~active])) and np.all(np.isfinite(pore[active]))
    volume_unit = 1.0 if units == "si" else FOOT**3  # 1 ft³ = 0.3048³ m³
    assert _manifest(folder)["units"]["columns"]["cells"]["pore_volume"] == ("m³" if units == "si" else "ft³")
    fine = _fine_pore_volume_m3(inputs, dim)
    assert pore[active].sum() * volume_unit == pytest.approx(fine, rel=1e-12)
    porosity, bulk = _floats(cells["porosity"]), _floats(cells["bulk_volume"])
    np.testing.assert_allclose(pore[active], (porosity * bulk)[active], rtol=1e-14)


def test_pore_volume_of_blocks_made_inactive_is_reported_lost(package, inputs):
    # block (1, 3) of the map has 23 of 24 fine cells active: below --min-active 0.97
    folder = package("2d", "geometric", "si", "--min-active", "0.97")
    cells = _read_csv(folder / "cells.csv")
    active = _ints(cells["active"]).astype(bool)
    assert not active[1 + 6 * 3]
    kept = np.nansum(_floats(cells["pore_volume"]))
    lost = _summary(folder)["active"]["lost_pore_volume_m3"]
    assert lost > 0
    assert kept + lost == pytest.approx(_fine_pore_volume_m3(inputs, "2d"), rel=1e-12)


# ---------------------------------------------------------------------------------------------
# 3. Units


def _library_run(inputs, dim: str, folder: Path, units: str, unit: str = "mD"):
    """Read, coarsen with direct transmissibilities and write a package with the library."""
    if dim == "2d":
        fine = upscale.read_field(inputs.k2, porosity=inputs.p2, unit=unit)
        block = "6x4"
    else:
        fine = upscale.read_field(inputs.k3, porosity=inputs.p3, dz=list(MODEL_DZ), kv_kh=0.1, unit=unit)
        block = "4x4x2"
    result = upscale.coarsen(fine, block, "flow-transmissibility", border=2)
    upscale.write_result(result, folder, units=units)
    return result


def _tables(folder: Path) -> dict[str, dict[str, list[str]]]:
    return {t: _read_csv(folder / f"{t}.csv") for t in TABLES}


@pytest.mark.parametrize("dim", ["2d", "3d"])
def test_si_transmissibility_is_the_internal_one_times_the_darcy(inputs, tmp_path, dim):
    result = _library_run(inputs, dim, tmp_path / "si", "si")
    trans = result.transmissibilities()  # mD·m (sizes in m, k in mD)
    manifest = _manifest(tmp_path / "si")
    factors = manifest["units"]["factors"]
    # the darcy: 9.869233e-13 m² (its definition); 1 mD = 9.869233e-16 m²
    assert factors["k"] == pytest.approx(MILLIDARCY_M2, rel=1e-15)
    assert factors["k"] == pytest.approx(9.869233e-16, rel=1e-6)
    assert factors["length"] == 1.0
    columns = manifest["units"]["columns"]
    assert columns["connections"]["transmissibility"] == "m³"
    assert columns["boundary"]["half_transmissibility"] == "m³"
    assert columns["cells"]["kx"] == "m²" and columns["cells"]["dx"] == "m"
    assert columns["connections"]["area"] == "m²"

    tables = _tables(tmp_path / "si")
    pairs, outer = tables["connections"], tables["boundary"]
    shape = trans.shape
    for a, axis in enumerate("zyx"):
        along = np.array(pairs["axis"]) == axis
        first = _ints(pairs["id1"])[along]
        internal = trans.faces[a][np.unravel_index(first, shape)]
        np.testing.assert_allclose(_floats(pairs["transmissibility"])[along],
                                   internal * MILLIDARCY_M2, rtol=1e-14)  # fmt: skip
        for side, sign in enumerate("-+"):
            here = np.array(outer["face"]) == axis + sign
            where = list(np.unravel_index(_ints(outer["id"])[here], shape))
            where[a] = np.zeros_like(where[a])
            internal = trans.boundary[a][side][tuple(where)]
            np.testing.assert_allclose(_floats(outer["half_transmissibility"])[here],
                                       internal * MILLIDARCY_M2, rtol=1e-14)  # fmt: skip
    kx = _floats(tables["cells"]["kx"])
    np.testing.assert_allclose(kx, result.coarse.kx.ravel() * MILLIDARCY_M2, rtol=1e-14)


@pytest.mark.parametrize("unit", ["mD", "D"])
def test_field_units_are_feet_and_millidarcy(inputs, tmp_path, unit):
    result = _library_run(inputs, "3d", tmp_path / "field", "field", unit=unit)
    trans = result.transmissibilities()  # (unit of k)·m
    to_md = 1.0 if unit == "mD" else 1000.0  # 1 D = 1000 mD (definition of the prefix)
    manifest = _manifest(tmp_path / "field")
    assert manifest["units"]["system"] == "field" and manifest["units"]["input_unit"] == unit
    columns = manifest["units"]["columns"]
    assert columns["cells"]["dx"] == "ft" and columns["cells"]["kx"] == "mD"
    assert columns["connections"]["transmissibility"] == "mD·ft"
    assert columns["cells"]["bulk_volume"] == "ft³"
    cells = _read_csv(tmp_path / "field" / "cells.csv")
    pairs = _read_csv(tmp_path / "field" / "connections.csv")
    i, j, k = _ints(cells["i"]), _ints(cells["j"]), _ints(cells["k"])
    grid = result.coarse.grid  # sizes in m
    np.testing.assert_allclose(_floats(cells["dx"]), grid.dx[i] / FOOT, rtol=1e-15)
    np.testing.assert_allclose(_floats(cells["dy"]), grid.dy[j] / FOOT, rtol=1e-15)
    np.testing.assert_allclose(_floats(cells["dz"]), grid.dz[k] / FOOT, rtol=1e-15)
    np.testing.assert_allclose(_floats(cells["bulk_volume"]),
                               grid.dx[i] * grid.dy[j] * grid.dz[k] / FOOT**3, rtol=1e-14)  # fmt: skip
    np.testing.assert_allclose(_floats(cells["kz"]), result.coarse.kz.ravel() * to_md, rtol=1e-15)
    # T = k A / L: one k and one length, so mD·m -> mD·ft divides by 0.3048
    along = np.array(pairs["axis"]) == "x"
    internal = trans.faces[2][np.unravel_index(_ints(pairs["id1"])[along], trans.shape)]
    np.testing.assert_allclose(_floats(pairs["transmissibility"])[along], internal * to_md / FOOT,
                               rtol=1e-14)  # fmt: skip
    np.testing.assert_allclose(_floats(pairs["area"])[along],
                               (grid.dy[j] * grid.dz[k])[_ints(pairs["id1"])[along]] / FOOT**2,
                               rtol=1e-14)  # fmt: skip


@pytest.mark.parametrize(("dim", "method", "units"), RUNS)
def test_manifest_names_a_unit_for_every_column(package, dim, method, units):
    folder = package(dim, method, units)
    manifest = _manifest(folder)
    columns = manifest["units"]["columns"]
    assert set(columns) == set(TABLES)
    for table in TABLES:
        header = list(_read_csv(folder / f"{table}.csv"))
        assert list(columns[table]) == header
        assert all(isinstance(u, str) and u for u in columns[table].values())
    k_unit = "m²" if units == "si" else "mD"
    cells = columns["cells"]
    permeability = [c for c in cells if c.startswith("k") and c != "k"]
    assert {"kx", "ky"} <= set(permeability)
    if method == "flow":  # the periodic tensor's off-diagonal terms
        assert {"kxy", "kyx"} <= set(permeability)
    assert all(cells[c] == k_unit for c in permeability)
    assert manifest["format"] == {"name": "upscale-coarse-grid", "version": "1.0"}
    source = REGISTRY[method].faces or "harmonic"
    assert manifest["transmissibility_source"] == source
    assert sorted(manifest["files"]) == sorted(
        [f"{t}.{x}" for t in TABLES for x in ("csv", "parquet")] + ["coarse.nc", "coarse.vtr"]
    )


# ---------------------------------------------------------------------------------------------
# 4. Tables


def _coarse_sizes_m(dim: str) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Coarse dz, dy, dx in m, from the inputs and the block."""
    if dim == "2d":
        return np.array([1.0]), np.full(6, MAP_CELL[1] * MAP_BLOCK[1]), np.full(6, MAP_CELL[0] * MAP_BLOCK[0])
    dz = np.array([MODEL_DZ[0] + MODEL_DZ[1], MODEL_DZ[2] + MODEL_DZ[3]])
    return dz, np.full(4, MODEL_CELL[1] * 4), np.full(6, MODEL_CELL[0] * 4)


@pytest.mark.parametrize("method", list(METHODS))
@pytest.mark.parametrize("dim", ["2d", "3d"])
def test_tables_are_consistent(package, inputs, dim, method):
    folder = package(dim, method, "si")
    manifest = _manifest(folder)
    L, M, N = _shape(manifest)
    assert (L, M, N) == ((1, 6, 6) if dim == "2d" else (2, 4, 6))
    cells, pairs, outer = (_read_csv(folder / f"{t}.csv") for t in TABLES)

    # cells: every cell once, id = i + N (j + M k)
    ids = _ints(cells["id"])
    n = L * M * N
    assert np.array_equal(ids, np.arange(n))
    i, j, k = _ints(cells["i"]), _ints(cells["j"]), _ints(cells["k"])
    assert np.array_equal(i + N * (j + M * k), ids)
    dz, dy, dx = _coarse_sizes_m(dim)
    np.testing.assert_allclose(_floats(cells["dx"]), dx[i], rtol=1e-15)
    np.testing.assert_allclose(_floats(cells["dy"]), dy[j], rtol=1e-15)
    np.testing.assert_allclose(_floats(cells["dz"]), dz[k], rtol=1e-15)
    with rasterio.open(inputs.k2 if dim == "2d" else inputs.k3) as src:
        x0, y0 = src.transform.c, src.transform.f
    np.testing.assert_allclose(_floats(cells["x"]), x0 + (i + 0.5) * dx[i], rtol=1e-15)
    np.testing.assert_allclose(_floats(cells["y"]), y0 - (j + 0.5) * dy[j], rtol=1e-15)
    np.testing.assert_allclose(_floats(cells["z"]), -(np.cumsum(dz) - dz / 2)[k], rtol=1e-15)
    np.testing.assert_allclose(_floats(cells["bulk_volume"]), dx[i] * dy[j] * dz[k], rtol=1e-15)
    active = _ints(cells["active"]).astype(bool)
    summary = _summary(folder)["active"]
    assert (active.sum(), (~active).sum()) == (summary["coarse_blocks"], summary["coarse_blocks_inactive"])
    kx = _floats(cells["kx"])
    assert np.all(np.isnan(kx[~active])) and np.all(np.isfinite(kx[active]))
    if dim == "2d":
        walled = WALLED[0] + N * WALLED[1]
        assert active[walled] and not active[[walled - 1, walled + 1, walled - N, walled + N]].any()

    # connections: active pairs, smaller id first, axis from the id difference
    first, second = _ints(pairs["id1"]), _ints(pairs["id2"])
    axis = np.array(pairs["axis"])
    axes = "xyz" if dim == "3d" else "xy"
    stride = {"x": 1, "y": N, "z": N * M}
    stride = {a: stride[a] for a in axes}
    assert set(axis) == set(axes)
    assert np.all(first < second)
    assert np.array_equal(second - first, np.array([stride[a] for a in axis], dtype=np.int64))
    assert np.all(active[first] & active[second])
    assert len(set(zip(first, second))) == first.size
    assert np.all(_floats(pairs["transmissibility"]) > 0)
    if dim == "2d":
        assert walled not in set(first) | set(second)
    # neighbours along the axis: same other indices, next index along
    index = {"x": i, "y": j, "z": k}
    for a in stride:
        on = axis == a
        assert np.array_equal(index[a][second[on]], index[a][first[on]] + 1)
        for b in set(stride) - {a}:
            assert np.array_equal(index[b][second[on]], index[b][first[on]])
    size = {"x": dx[i], "y": dy[j], "z": dz[k]}  # per cell
    area = {"x": dy[j] * dz[k], "y": dx[i] * dz[k], "z": dx[i] * dy[j]}
    expected_distance = np.array([(size[a][p] + size[a][q]) / 2 for a, p, q in zip(axis, first, second)])
    np.testing.assert_allclose(_floats(pairs["distance"]), expected_distance, rtol=1e-15)
    expected_area = np.array([area[a][p] for a, p in zip(axis, first)])
    np.testing.assert_allclose(_floats(pairs["area"]), expected_area, rtol=1e-15)
    source = REGISTRY[method].faces or "harmonic"
    assert source in set(pairs["source"]) <= {source, "harmonic"}  # harmonic: a direct value undefined

    # boundary: the outer faces of active cells only
    where, face = _ints(outer["id"]), np.array(outer["face"])
    assert set(face) == ({"x-", "x+", "y-", "y+", "z-", "z+"} if dim == "3d" else {"x-", "x+", "y-", "y+"})
    last = {"x": N - 1, "y": M - 1, "z": L - 1}
    expected = {(int(c), f"{a}{s}") for a in axes for s in "-+"
                for c in ids[active & (index[a] == (0 if s == "-" else last[a]))]}  # fmt: skip
    got = list(zip(where.tolist(), face.tolist()))
    assert len(got) == len(set(got)) and set(got) == expected
    np.testing.assert_allclose(_floats(outer["area"]), np.array([area[f[0]][c] for c, f in got]), rtol=1e-15)
    assert np.all(_floats(outer["half_transmissibility"]) >= 0)

    if source == "harmonic":
        # two-point flux (docs/discretisation.md; common practice): t = k A / (Δ/2) per
        # half cell, T = 1 / (1/t1 + 1/t2); a face with k = 0 on one side is left out
        k_axis = {a: _floats(cells[f"k{a}"]) for a in stride}
        half = {a: k_axis[a] * area[a] / (size[a] / 2) for a in stride}
        pairs_expected = {}
        for a in stride:
            for p in ids[active & (index[a] < last[a])]:
                q = p + stride[a]
                if active[q] and half[a][p] > 0 and half[a][q] > 0:
                    pairs_expected[(int(p), int(q))] = 1.0 / (1.0 / half[a][p] + 1.0 / half[a][q])
        assert set(zip(first.tolist(), second.tolist())) == set(pairs_expected)
        np.testing.assert_allclose(_floats(pairs["transmissibility"]),
                                   [pairs_expected[pq_] for pq_ in zip(first.tolist(), second.tolist())],
                                   rtol=1e-13)  # fmt: skip
        np.testing.assert_allclose(_floats(outer["half_transmissibility"]),
                                   [half[f[0]][c] for c, f in got], rtol=1e-13)  # fmt: skip


@pytest.mark.parametrize(
    ("dim", "method", "units"), [("2d", "flow", "si"), ("3d", "flow-transmissibility", "field")]
)
def test_parquet_tables_equal_the_csv_tables(package, dim, method, units):
    folder = package(dim, method, units)
    for table in TABLES:
        from_csv = pacsv.read_csv(folder / f"{table}.csv")
        from_parquet = pq.read_table(folder / f"{table}.parquet")
        assert from_csv.column_names == from_parquet.column_names
        assert from_csv.num_rows == from_parquet.num_rows > 0
        for name in from_csv.column_names:
            # nulls stay nulls, floats round-trip exactly through the CSV text
            assert from_csv.column(name).to_pylist() == from_parquet.column(name).to_pylist(), name


# ---------------------------------------------------------------------------------------------
# 5. NetCDF

#: UDUNITS spelling of the manifest's units (the ones the NetCDF file writes)
_UDUNITS = {"m²": "m2", "m³": "m3", "ft³": "ft3", "mD": "millidarcy", "1 (fraction)": "1"}
_COORDINATES = ("id", "i", "j", "k", "x", "y", "z", "dx", "dy", "dz", "active")
#: A flat model's elevations in cells.csv are its NetCDF ``z`` and ``z_bounds`` (heights above a top at 0 m).
_FLAT_ELEVATIONS = ("top_elevation", "base_elevation", "centre_elevation", "thickness")


@pytest.mark.parametrize(("dim", "method", "units"), [("2d", "flow", "field"), ("3d", "geometric", "si"),
                                                      ("3d", "flow-transmissibility", "field")])  # fmt: skip
def test_netcdf_follows_cf_and_holds_the_cells_values(package, inputs, dim, method, units):
    folder = package(dim, method, units)
    manifest = _manifest(folder)
    L, M, N = _shape(manifest)
    cells = _read_csv(folder / "cells.csv")
    column_units = manifest["units"]["columns"]["cells"]
    with rasterio.open(inputs.k2 if dim == "2d" else inputs.k3) as src:
        crs = src.crs
    # Eaton et al., NetCDF CF Metadata Conventions 1.8: §2.6.1 Conventions, §4 coordinate
    # types (projection_x/y_coordinate), §5.6 grid mappings (crs_wkt)
    with netCDF4.Dataset(folder / "coarse.nc") as nc:
        assert nc.getncattr("Conventions") == "CF-1.8"
        thickness = _floats(cells["dz"]).reshape(L, M, N)[:, 0, 0]
        bounded = {"nv": 2} if np.ptp(thickness) > 0 else {}  # CF §7.1 bounds: layers of unequal thickness
        assert {name: len(d) for name, d in nc.dimensions.items()} == {"layer": L, "row": M, "column": N,
                                                                       **bounded}  # fmt: skip
        x, y, z = nc["x"], nc["y"], nc["z"]
        assert (x.dimensions, y.dimensions, z.dimensions) == (("column",), ("row",), ("layer",))
        assert x.standard_name == "projection_x_coordinate" and y.standard_name == "projection_y_coordinate"
        assert x.units == y.units == "m"
        assert z.units == ("m" if units == "si" else "ft") and z.positive == "up"
        values = {name: _floats(cells[name]).reshape(L, M, N) for name in cells
                  if name not in (*_COORDINATES, *_FLAT_ELEVATIONS)}  # fmt: skip
        np.testing.assert_array_equal(x[:], values_x := _floats(cells["x"]).reshape(L, M, N)[0, 0, :])
        assert np.all(np.diff(values_x) > 0)
        np.testing.assert_array_equal(y[:], _floats(cells["y"]).reshape(L, M, N)[0, :, 0])
        np.testing.assert_allclose(z[:], _floats(cells["z"]).reshape(L, M, N)[:, 0, 0], rtol=1e-15)
        assert CRS.from_wkt(nc["crs"].crs_wkt) == crs
        assert CRS.from_wkt(nc["crs"].crs_wkt) == CRS.from_wkt(manifest["crs"])
        assert set(values) <= set(nc.variables)
        for name, expected in values.items():
            var = nc[name]
            assert var.dimensions == ("layer", "row", "column"), name
            assert var.units == _UDUNITS[column_units[name]], name
            assert var.grid_mapping == "crs"
            got = np.ma.filled(var[:].astype(np.float64), np.nan)
            # NaN where inactive; pore volume is multiplied in another order (one rounding)
            np.testing.assert_allclose(got, expected, rtol=1e-15, atol=0, err_msg=name)
        assert np.isnan(np.ma.filled(nc["kx"][:], np.nan)).sum() == (_ints(cells["active"]) == 0).sum()


def test_netcdf_grid_mapping_variable_names_its_mapping(package):
    # CF 1.8 §5.6 / conformance document: "The grid mapping variables must have the
    # grid_mapping_name attribute" (for EPSG:32633, UTM: transverse_mercator)
    folder = package("2d", "geometric", "si")
    with netCDF4.Dataset(folder / "coarse.nc") as nc:
        assert nc["crs"].getncattr("grid_mapping_name") == "transverse_mercator"


# ---------------------------------------------------------------------------------------------
# 6. VTK


def _vtk(folder: Path) -> tuple[tuple[int, ...], dict[str, np.ndarray], dict[str, np.ndarray]]:
    return read_vtr(folder / "coarse.vtr")  # VTK's own reader


def _in_array_order(values: np.ndarray, shape: tuple[int, int, int]) -> np.ndarray:
    """A VTK cell array (x fastest, y northward, z upward) as an (L, M, N) array: rows, layers reversed."""
    return values.reshape(shape)[::-1, ::-1, :]


@pytest.mark.parametrize(("dim", "units"), [("2d", "si"), ("3d", "si"), ("3d", "field")])
def test_vtk_ids_lead_back_to_the_cells(package, dim, units):
    # Kitware, "VTK File Formats", XML RectilinearGrid: increasing coordinates, x fastest
    folder = package(dim, "geometric", units)
    L, M, N = _shape(_manifest(folder))
    extent, data, coords = _vtk(folder)
    assert extent == (0, N, 0, M, 0, L)
    for name, count in (("x", N), ("y", M), ("z", L)):
        assert coords[name].size == count + 1
        assert np.all(np.diff(coords[name]) > 0), name
    cells = _read_csv(folder / "cells.csv")
    assert set(data) == {"id"} | {c for c in cells if c not in (*_COORDINATES, *_FLAT_ELEVATIONS)}
    n = L * M * N
    assert all(a.size == n for a in data.values())
    ids = data["id"].astype(np.int64)
    assert np.array_equal(ids, data["id"]) and np.array_equal(np.sort(ids), np.arange(n))
    # VTK cell (I, J, K), K from the bottom and J from the south: rows and layers reversed
    c = np.arange(n)
    ci, cj, ck = c % N, (c // N) % M, c // (N * M)
    assert np.array_equal(ids, ci + N * ((M - 1 - cj) + M * (L - 1 - ck)))
    for name in data.keys() - {"id"}:
        np.testing.assert_allclose(data[name], _floats(cells[name])[ids], rtol=1e-15, atol=0, err_msg=name)
    centre = {a: (coords[a][:-1] + coords[a][1:]) / 2 for a in "xyz"}
    np.testing.assert_allclose(centre["x"][ci], _floats(cells["x"])[ids], rtol=1e-15)
    np.testing.assert_allclose(centre["y"][cj], _floats(cells["y"])[ids], rtol=1e-15)
    # the geometry stays in metres whatever the package's units, so a viewer is not distorted
    length = _manifest(folder)["units"]["factors"]["length"]
    np.testing.assert_allclose(centre["z"][ck] * length, _floats(cells["z"])[ids], rtol=1e-14)
    top = coords["z"][-1]
    assert top == 0.0


@pytest.mark.parametrize(("dim", "method", "units"), [("2d", "flow", "si"), ("3d", "geometric", "field"),
                                                      ("3d", "flow-transmissibility", "si")])  # fmt: skip
def test_vtk_arrays_are_the_geotiffs_values_and_georeference(package, dim, method, units):
    # every property the run wrote as a GeoTIFF, read back by VTK: the same float64 values times the
    # package's unit factor (NaN where the GeoTIFF has no data), and the raster's corners
    folder = package(dim, method, units)
    manifest = _manifest(folder)
    shape = _shape(manifest)
    _, data, coords = _vtk(folder)
    rasters = {p.stem: p for p in folder.glob("*.tif") if not p.stem.startswith("transmissibility_")}
    assert set(rasters) == data.keys() - {"id", "bulk_volume", "pore_volume"}
    factors = manifest["units"]["factors"]
    for name, path in rasters.items():
        factor = 1.0 if name == "porosity" else factors["k"]
        np.testing.assert_array_equal(_in_array_order(data[name], shape), read_raster(path) * factor, name)
    with rasterio.open(rasters["kx"]) as src:
        west, south, east, north = src.bounds
    assert (coords["x"][0], coords["x"][-1], coords["y"][0], coords["y"][-1]) == (west, east, south, north)


def test_vtk_values_are_raw_binary_in_the_appended_section(package):
    # Kitware, "VTK File Formats", XML: format="appended" arrays at their offset after the "_" of
    # <AppendedData encoding="raw">, each a header_type size in bytes followed by the values
    folder = package("3d", "geometric", "si")
    L, M, N = _shape(_manifest(folder))
    head, marker, tail = (folder / "coarse.vtr").read_bytes().partition(b'<AppendedData encoding="raw">')
    assert marker and b'header_type="UInt64"' in head
    arrays = re.findall(rb"<DataArray [^>]*>", head)
    assert arrays and all(b'format="appended"' in a and b'type="Float64"' in a for a in arrays)
    _, data, coords = _vtk(folder)
    sizes = [L * M * N] * len(data) + [N + 1, M + 1, L + 1]
    offsets = [int(re.search(rb'offset="(\d+)"', a).group(1)) for a in arrays]
    assert offsets == np.cumsum([0] + [8 + 8 * n for n in sizes[:-1]]).tolist()
    raw = tail.split(b"_", 1)[1].rsplit(b"</AppendedData>", 1)[0].rstrip(b"\n")
    assert len(raw) == sum(8 + 8 * n for n in sizes)  # nothing but sizes and values: no text


# ---------------------------------------------------------------------------------------------
# 7. Written slab by slab


@pytest.mark.parametrize("dim", ["2d", "3d"])
@pytest.mark.parametrize("cells", [1, 7, 40])
def test_tables_netcdf_and_vtk_do_not_depend_on_the_slab_size(inputs, tmp_path, monkeypatch, dim, cells):
    # slabs of one cell (one row: the smallest slab), part of a layer and several layers against
    # the whole grid in one slab: the same bytes of text and the same values
    whole, cut = tmp_path / "whole", tmp_path / "cut"
    result = _library_run(inputs, dim, whole, "si")
    monkeypatch.setattr("upscale.export.slabs.SLAB_CELLS", cells)
    upscale.write_result(result, cut, units="si")
    for name in ("cells.csv", "connections.csv", "boundary.csv", "coarse.vtr"):
        assert (whole / name).read_bytes() == (cut / name).read_bytes(), name
    for table in TABLES:
        assert pq.read_table(whole / f"{table}.parquet").equals(pq.read_table(cut / f"{table}.parquet"))
    with netCDF4.Dataset(whole / "coarse.nc") as a, netCDF4.Dataset(cut / "coarse.nc") as b:
        assert a.variables.keys() == b.variables.keys()
        for name in a.variables:
            np.testing.assert_array_equal(a[name][:], b[name][:], err_msg=name)
    rows = {name: entry["rows"] for name, entry in _manifest(cut)["tables"].items()}
    assert rows == {name: entry["rows"] for name, entry in _manifest(whole)["tables"].items()}
    assert read_package(cut)  # its checksums hold
