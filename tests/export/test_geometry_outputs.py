"""The outputs of a model with a geometry: elevations, true volumes, VTK heights, package round trip.

What is tested
--------------
A 3-layer model whose top and layer bases are tilted planes (different
slopes, so the layers thin linearly), given as ``--surfaces``, is upscaled in
2x2x1 blocks. The mean of a linear function over a block is its value at the
block's centre, and a block's coarse thickness is its bulk volume over its
plan area (the mean fine thickness), so the coarse surfaces are the planes
at the block centres, exactly (common practice):

* ``cells.csv``: top, base, centre elevation and thickness of every coarse
  cell equal the planes at the block centres; bulk volume is the true one.
* NetCDF: ``top_elevation``, ``base_elevation``, ``thickness`` (CF units,
  ``positive = "up"``) equal the same.
* VTK (``coarse.vts``, opened by VTK's own ``vtkXMLStructuredGridReader``):
  every point stands at the cell corners in x and y, and its height is the
  plane at that corner — the interpolation of cell-centre heights to the
  corners reproduces a plane, inner corners and outer ones alike.
* A flat model has the elevation columns too (top at 0 m, bases from the
  layer thicknesses), and its NetCDF and VTK keep their former content.
* A model with pinched-out cells: the package read back alone
  (`upscale.io.package.read_package`) has the run's transmissibilities and
  volume ratio, and gives the run's coarse k_eff per axis to 1e-10; its
  bulk volumes sum to the fine model's true bulk volume, from the rasters,
  as do the fine and coarse bulk volumes of summary.json, which counts the
  pinched-out cells.
* Wells from the package: ``upscale check DIR --wells`` on a run written
  without wells connects the coarse wells by Peaceman's formula on the
  package's kx, ky and its cells' true thicknesses, as the run itself does
  with ``--wells``: the same factors and rates to 1e-10.
* Slabs: ``cells.csv`` and ``coarse.vts`` written a slab at a time are the
  same bytes as in one slab.
"""

from __future__ import annotations

import csv
import json

import netCDF4
import numpy as np
import pytest
from conftest import ORIGIN, write_raster

import upscale
from upscale.cli.main import main
from upscale.flow import pressure_drop
from upscale.gallery.problems import uncorrelated_lognormal
from upscale.io.package import read_package

SEED = 2_604_117_853
CELL = 10.0
LAYERS, ROWS, COLUMNS = 3, 6, 8
#: Each surface c + a u + b v: u, v the position in cells east of the west edge, south of the north edge.
PLANES = ((120.0, 0.8, -0.5), (116.0, 0.7, -0.45), (111.0, 0.75, -0.3), (105.0, 0.6, -0.35))


def _plane(surface: int, u: np.ndarray, v: np.ndarray) -> np.ndarray:
    c, a, b = PLANES[surface]
    return c + a * u + b * v


def _centres(n: int, cells: int) -> np.ndarray:
    """Centres of n blocks of `cells` cells, in cells from the edge."""
    return cells * (np.arange(n) + 0.5)


def _cells(folder) -> dict[str, np.ndarray]:
    with open(folder / "cells.csv", newline="") as f:
        rows = list(csv.DictReader(f))
    return {name: np.array([float(r[name]) if r[name] else np.nan for r in rows]) for name in rows[0]}


@pytest.fixture(scope="module")
def tilted(tmp_path_factory):
    """The tilted model upscaled in 2x2x1 blocks, and its coarse shape."""
    folder = tmp_path_factory.mktemp("tilted")
    v, u = np.mgrid[0:ROWS, 0:COLUMNS] + 0.5
    surfaces = np.stack([_plane(s, u, v) for s in range(LAYERS + 1)])
    k = write_raster(folder / "k.tif", uncorrelated_lognormal((LAYERS, ROWS, COLUMNS), SEED), cell_size=CELL)
    top = write_raster(folder / "surfaces.tif", surfaces, cell_size=CELL)
    out = folder / "out"
    assert main(["-q", "run", str(k), "--surfaces", str(top), "--kv-kh", "0.1", "--block", "2x2x1",
                 "--method", "geometric", "--no-check", "--out", str(out)]) == 0  # fmt: skip
    return out


def test_cells_table_elevations_are_the_surfaces_at_the_block_centres(tilted):
    cells = _cells(tilted)
    u, v = _centres(COLUMNS // 2, 2)[cells["i"].astype(int)], _centres(ROWS // 2, 2)[cells["j"].astype(int)]
    k = cells["k"].astype(int)
    top = np.choose(k, [_plane(s, u, v) for s in range(LAYERS)])
    base = np.choose(k, [_plane(s + 1, u, v) for s in range(LAYERS)])
    np.testing.assert_allclose(cells["top_elevation"], top, rtol=0, atol=1e-10)
    np.testing.assert_allclose(cells["base_elevation"], base, rtol=0, atol=1e-10)
    np.testing.assert_allclose(cells["centre_elevation"], (top + base) / 2, rtol=0, atol=1e-10)
    np.testing.assert_allclose(cells["thickness"], top - base, rtol=0, atol=1e-10)
    np.testing.assert_allclose(cells["bulk_volume"], (top - base) * (2 * CELL) ** 2, rtol=1e-12)
    units = json.loads((tilted / "manifest.json").read_text())["units"]["columns"]["cells"]
    assert units["top_elevation"] == "m elevation, positive up" and units["thickness"] == "m"


def test_netcdf_heights_are_the_surfaces_at_the_block_centres(tilted):
    v, u = np.meshgrid(_centres(ROWS // 2, 2), _centres(COLUMNS // 2, 2), indexing="ij")
    with netCDF4.Dataset(tilted / "coarse.nc") as nc:
        for name, first in (("top_elevation", 0), ("base_elevation", 1)):
            var = nc[name]
            assert (var.units, var.positive, var.dimensions) == ("m", "up", ("layer", "row", "column"))
            expected = np.stack([_plane(s + first, u, v) for s in range(LAYERS)])
            np.testing.assert_allclose(var[:].filled(np.nan), expected, rtol=0, atol=1e-10)
        np.testing.assert_allclose(nc["thickness"][:].filled(np.nan),
                                   nc["top_elevation"][:] - nc["base_elevation"][:], rtol=0, atol=1e-12)
        assert nc["thickness"].long_name == "cell thickness"


def test_vtk_points_stand_on_the_cell_corners_at_the_surfaces_heights(tilted):
    from vtkmodules.util.numpy_support import vtk_to_numpy
    from vtkmodules.vtkIOXML import vtkXMLStructuredGridReader

    assert not (tilted / "coarse.vtr").exists()
    reader = vtkXMLStructuredGridReader()
    reader.SetFileName(str(tilted / "coarse.vts"))
    reader.Update()
    assert reader.GetErrorCode() == 0
    grid = reader.GetOutput()
    L, M, N = LAYERS, ROWS // 2, COLUMNS // 2
    assert grid.GetExtent() == (0, N, 0, M, 0, L)
    points = vtk_to_numpy(grid.GetPoints().GetData()).reshape(L + 1, M + 1, N + 1, 3)
    # VTK runs y northward and z upward: point (k, j, i) is surface L - k at corner row M - j
    corner_v = 2.0 * (M - np.arange(M + 1))
    corner_u = 2.0 * np.arange(N + 1)
    v, u = np.meshgrid(corner_v, corner_u, indexing="ij")
    for k in range(L + 1):
        np.testing.assert_allclose(points[k, ..., 0], ORIGIN[0] + CELL * u, rtol=0, atol=1e-6)
        np.testing.assert_allclose(points[k, ..., 1], ORIGIN[1] - CELL * v, rtol=0, atol=1e-6)
        np.testing.assert_allclose(points[k, ..., 2], _plane(L - k, u, v), rtol=0, atol=1e-9)
    data = grid.GetCellData()
    assert {data.GetArrayName(i) for i in range(data.GetNumberOfArrays())} >= {"id", "kx", "bulk_volume"}


def test_corner_heights_of_a_plane_on_unequal_cells_are_the_plane():
    from upscale.export.vtk import corner_heights

    # the last column and row smaller, as with --remainder keep: still linear, so still exact
    dx, dy = np.array([4.0, 4.0, 4.0, 1.5]), np.array([3.0, 3.0, 2.0])
    xc, yc = np.cumsum(dx) - dx / 2, np.cumsum(dy) - dy / 2
    plane = lambda y, x: 7.0 + 0.25 * x - 0.5 * y  # noqa: E731
    corners = corner_heights(plane(*np.meshgrid(yc, xc, indexing="ij")), dy, dx)
    ye, xe = np.concatenate([[0.0], np.cumsum(dy)]), np.concatenate([[0.0], np.cumsum(dx)])
    np.testing.assert_allclose(corners, plane(*np.meshgrid(ye, xe, indexing="ij")), rtol=0, atol=1e-12)


def test_a_flat_model_has_elevations_from_its_layer_thicknesses(tmp_path):
    k = write_raster(tmp_path / "k.tif", uncorrelated_lognormal((4, 4, 4), SEED + 1), cell_size=CELL)
    out = tmp_path / "out"
    assert main(["-q", "run", str(k), "--dz", "1,2,3,4", "--block", "2x2x2", "--method", "arithmetic",
                 "--no-check", "--out", str(out)]) == 0  # fmt: skip
    cells = _cells(out)
    first = cells["k"] == 0
    assert set(cells["top_elevation"][first]) == {0.0} and set(cells["base_elevation"][first]) == {-3.0}
    assert set(cells["top_elevation"][~first]) == {-3.0} and set(cells["base_elevation"][~first]) == {-10.0}
    np.testing.assert_array_equal(cells["centre_elevation"], cells["z"])  # heights above a top at 0 m
    np.testing.assert_array_equal(cells["thickness"], cells["dz"])
    assert (out / "coarse.vtr").exists() and not (out / "coarse.vts").exists()
    with netCDF4.Dataset(out / "coarse.nc") as nc:
        assert "top_elevation" not in nc.variables
    assert "geometry" not in json.loads((out / "manifest.json").read_text())


@pytest.fixture(scope="module")
def pinched(tmp_path_factory):
    """A 3-layer model, its middle layer pinched out in part, upscaled with a flow method."""
    folder = tmp_path_factory.mktemp("pinched")
    v, u = np.mgrid[0:8, 0:8] + 0.5
    thickness = np.stack([np.full((8, 8), 2.0), np.where(u < 3, 0.0, 1.0 + 0.2 * u), 1.5 + 0.1 * v])
    paths = {"k": write_raster(folder / "k.tif", uncorrelated_lognormal((3, 8, 8), SEED + 2), cell_size=CELL),
             "top": write_raster(folder / "top.tif", 50.0 + 0.3 * u - 0.2 * v, cell_size=CELL),
             "thickness": write_raster(folder / "thickness.tif", thickness, cell_size=CELL)}  # fmt: skip
    out = folder / "out"
    assert main(["-q", "run", str(paths["k"]), "--top", str(paths["top"]), "--thickness",
                 str(paths["thickness"]), "--kv-kh", "0.1", "--block", "4x4x1", "--method", "flow",
                 "--out", str(out)]) == 0  # fmt: skip
    return out, paths, thickness


def test_package_of_a_model_with_a_geometry_reads_back_to_the_runs_k_eff(pinched):
    out, paths, _ = pinched
    fine = upscale.read_field(paths["k"], top=paths["top"], thickness=paths["thickness"], kv_kh=0.1)
    result = upscale.coarsen(fine, "4x4x1", "flow")
    run = result.transmissibilities()
    assert run.volume_ratio != 1.0  # the pinched cells make the flat grid thicker than the true one
    manifest, trans = read_package(out)
    check = json.loads((out / "summary.json").read_text())["check"]
    for axis in ("x", "y", "z"):
        assert pressure_drop(trans, axis, solver="direct").k_eff == pytest.approx(check[axis]["k_coarse"],
                                                                                  rel=1e-10)  # fmt: skip
    for a in range(3):
        np.testing.assert_allclose(trans.faces[a], run.faces[a], rtol=1e-14, atol=0)
    assert manifest["geometry"]["volume_ratio"] == trans.volume_ratio == run.volume_ratio


def test_bulk_volumes_are_the_true_ones(pinched):
    out, _, thickness = pinched
    true = float(thickness.sum()) * CELL**2
    cells = _cells(out)
    assert cells["bulk_volume"].sum() == pytest.approx(true, rel=1e-12)
    with netCDF4.Dataset(out / "coarse.nc") as nc:
        assert float(nc["bulk_volume"][:].sum()) == pytest.approx(true, rel=1e-12)
    record = json.loads((out / "summary.json").read_text())["geometry"]
    assert record["pinched_out_cells"] == 3 * 8  # layer 2 west of u = 3
    assert record["fine_bulk_volume_m3"] == pytest.approx(true, rel=1e-12)
    assert record["coarse_bulk_volume_m3"] == pytest.approx(true, rel=1e-12)


@pytest.mark.parametrize("cells", [1, 20, 130])
def test_elevations_and_points_do_not_depend_on_the_slab_size(pinched, tmp_path, monkeypatch, cells):
    _, paths, _ = pinched
    fine = upscale.read_field(paths["k"], top=paths["top"], thickness=paths["thickness"], kv_kh=0.1)
    result = upscale.coarsen(fine, "4x4x1", "arithmetic")
    whole, cut = tmp_path / "whole", tmp_path / "cut"
    upscale.write_result(result, whole, formats="package")
    monkeypatch.setattr("upscale.export.slabs.SLAB_CELLS", cells)
    upscale.write_result(result, cut, formats="package")
    for name in ("cells.csv", "coarse.vts"):
        assert (whole / name).read_bytes() == (cut / name).read_bytes(), name


def test_wells_checked_from_the_package_see_the_cells_true_thickness(pinched, tmp_path):
    _, paths, _ = pinched
    wells = tmp_path / "wells.csv"
    west, north = ORIGIN
    wells.write_text("name,x,y,control,value,radius\n"
                     f"INJ,{west + 5},{north - 5},pressure,200,0.1\n"
                     f"PRD,{west + 75},{north - 75},pressure,100,0.1\n")  # fmt: skip
    common = [str(paths["k"]), "--top", str(paths["top"]), "--thickness", str(paths["thickness"]), "--kv-kh",
              "0.1", "--block", "4x4x1", "--method", "flow"]  # fmt: skip
    ran, later = tmp_path / "ran", tmp_path / "later"
    assert main(["-q", "run", *common, "--wells", str(wells), "--well-connection", "peaceman",
                 "--out", str(ran)]) == 0  # fmt: skip
    assert main(["-q", "run", *common, "--out", str(later)]) == 0
    assert main(["-q", "check", str(later), "--wells", str(wells), "--well-connection", "peaceman"]) == 0
    found = [json.loads((f / "summary.json").read_text())["well_check"]["wells"] for f in (ran, later)]
    for name in ("INJ", "PRD"):
        run, checked = (record[name]["coarse"] for record in found)
        assert checked["cells"] == run["cells"]
        np.testing.assert_allclose(checked["factors"], run["factors"], rtol=1e-10)
        assert checked["rate"] == pytest.approx(run["rate"], rel=1e-10)
