"""Round trip through the pipeline: GeoTIFF in, coarse GeoTIFFs and summary.json out.

`upscale.read_field` -> `upscale.coarsen` -> `upscale.write_result` on real
rasters, and the outputs read back with rasterio: georeference (transform,
CRS, pixel size), layout (one band per coarse layer), nodata, units and
exact float64 values; then every part of the run summary.
"""

from __future__ import annotations

import hashlib
import json
import math
import warnings
from importlib import metadata

import numpy as np
import pytest
import rasterio
from affine import Affine
from conftest import north_up, write_raster

import upscale
from upscale.analysis.summary import RunSummary
from upscale.errors import OutputExistsError
from upscale.export.package import PACKAGE_FILES
from upscale.gallery.problems import uncorrelated_lognormal
from upscale.grid import BlockSpec


def _results(folder):
    """The files of a run folder besides its coarse-grid package (which must be complete)."""
    names = sorted(p.name for p in folder.iterdir())
    assert set(PACKAGE_FILES) <= set(names)
    return [n for n in names if n not in PACKAGE_FILES]


SEED = 5_518_020_477
DX, DY = 12.5, 7.5
SHAPE = (32, 48)


def _strict_json(text: str):
    def refuse(constant: str):
        raise AssertionError(f"summary.json holds {constant}, which is not JSON")

    return json.loads(text, parse_constant=refuse)


@pytest.fixture
def map_inputs(tmp_path):
    """A 2D map with an inactive corner block (nodata) and its porosity, non-square cells."""
    k = uncorrelated_lognormal(SHAPE, SEED)
    k[:4, :8] = -9999.0  # exactly coarse block (0, 0, 0) of 8x4 blocks
    k[10, 20] = np.nan
    por = np.clip(0.2 + 0.02 * np.log(np.where(k > 0, k, 1.0)), 0.05, 0.35)
    kx = write_raster(tmp_path / "kx.tif", k, cell_size=(DX, DY), nodata=-9999.0)
    porosity = write_raster(tmp_path / "porosity.tif", por, cell_size=(DX, DY))
    return kx, porosity


@pytest.fixture
def model_inputs(tmp_path):
    """A 4-layer 3D model with its own ky and kz rasters."""
    k = uncorrelated_lognormal((4, *SHAPE), SEED + 1)
    paths = {}
    for name, factor in (("kx", 1.0), ("ky", 0.7), ("kz", 0.05)):
        paths[name] = write_raster(tmp_path / f"{name}_in.tif", k * factor, cell_size=10.0)
    return paths


def test_map_round_trip_keeps_georeference_units_and_values(tmp_path, map_inputs):
    kx_path, por_path = map_inputs
    fine = upscale.read_field(kx_path, porosity=por_path)
    result = upscale.coarsen(fine, "8x4", method="geometric")
    out = tmp_path / "out"
    summary = upscale.write_result(result, out)

    assert _results(out) == [
        "kx.tif", "ky.tif", "porosity.tif", "summary.json"
    ]  # fmt: skip
    with rasterio.open(kx_path) as src:
        fine_transform, fine_crs = src.transform, src.crs
    for name in ("kx", "ky", "porosity"):
        with rasterio.open(out / f"{name}.tif") as dst:
            assert dst.transform == fine_transform @ Affine.scale(8, 4)
            assert dst.crs == fine_crs
            assert dst.res == (8 * DX, 4 * DY)
            assert (dst.count, dst.height, dst.width) == (1, 8, 6)
            assert dst.dtypes == ("float64",)
            assert math.isnan(dst.nodata)
            unit = "fraction" if name == "porosity" else "mD"
            assert dst.units == (unit,)
            assert dst.tags(1)["units"] == unit
            tags = dst.tags()
            assert (tags["property"], tags["unit"], tags["method"], tags["block"]) == (
                name, unit, "geometric", "8x4"
            )  # fmt: skip
            assert dst.descriptions == (f"{name}, layer 1 of 1 (top first)",)
            stored = dst.read()
            valid = dst.read_masks() > 0
        expected = getattr(result.coarse, name)
        assert stored.dtype == np.float64
        np.testing.assert_array_equal(stored, expected)  # bit for bit, NaN where inactive
        assert np.isnan(stored[0, 0, 0]) and not valid[0, 0, 0]
        assert np.isnan(stored).sum() == 1  # only the all-nodata block is inactive
    assert [f for f in summary.files if f not in PACKAGE_FILES] == ["kx.tif", "ky.tif", "porosity.tif"]


def test_coarse_geometric_mean_of_one_block_is_computed_from_the_fine_cells(tmp_path, map_inputs):
    kx_path, _ = map_inputs
    result = upscale.coarsen(upscale.read_field(kx_path), "8x4", method="geometric")
    upscale.write_result(result, tmp_path / "out")
    with rasterio.open(kx_path) as src:
        fine = src.read(1)
    with rasterio.open(tmp_path / "out" / "kx.tif") as dst:
        coarse = dst.read(1)
    # volume-weighted geometric mean, the w -> 0 power average (Journel, Deutsch & Desbarats
    # 1986, "Power averaging for block effective permeability"); equal cell volumes here
    block = fine[8:12, 16:24]  # coarse row 2, column 2, holding the NaN cell (10, 20)
    active = block[~np.isnan(block)]
    assert active.size == 31
    assert coarse[2, 2] == pytest.approx(np.exp(np.log(active).mean()), rel=1e-12)


def test_model_round_trip_writes_one_band_per_coarse_layer(tmp_path, model_inputs):
    fine = upscale.read_field(
        model_inputs["kx"], ky=model_inputs["ky"], kz=model_inputs["kz"], dz=[1.0, 2.0, 3.0, 4.0]
    )
    result = upscale.coarsen(fine, "8x8x2", method="harmonic")
    out = tmp_path / "out"
    upscale.write_result(result, out)
    assert _results(out) == ["kx.tif", "ky.tif", "kz.tif", "summary.json"]
    for name in ("kx", "ky", "kz"):
        with rasterio.open(out / f"{name}.tif") as dst:
            assert (dst.count, dst.height, dst.width) == (2, 4, 6)
            assert dst.transform == north_up(10.0) @ Affine.scale(8, 8)
            assert dst.res == (80.0, 80.0)
            assert dst.units == ("mD", "mD")
            assert [dst.tags(b)["units"] for b in (1, 2)] == ["mD", "mD"]
            assert dst.descriptions[1] == f"{name}, layer 2 of 2 (top first)"
            stored = dst.read()
        np.testing.assert_array_equal(stored, getattr(result.coarse, name))
        assert not np.isnan(stored).any()
    # band 1 is the top coarse layer: fine layers 0 and 1, volume-weighted by dz = 1 and 2;
    # harmonic mean = power average with w = -1 (Journel, Deutsch & Desbarats 1986, op. cit.)
    with rasterio.open(model_inputs["kz"]) as src:
        kz_fine = src.read()
    with rasterio.open(out / "kz.tif") as dst:
        kz_top = dst.read(1)
    cells = kz_fine[0:2, 0:8, 0:8]
    weights = np.array([1.0, 2.0])[:, None, None] * np.ones_like(cells)
    assert kz_top[0, 0] == pytest.approx(weights.sum() / (weights / cells).sum(), rel=1e-12)


def test_coarse_values_do_not_depend_on_chunking(tmp_path, model_inputs):
    results = []
    for chunk_bytes in (None, 8, 5_000):
        fine = upscale.read_field(
            model_inputs["kx"], dz=2.0, kv_kh=0.1, chunk_bytes=chunk_bytes, block=(2, 8, 8)
        )
        results.append(upscale.coarsen(fine, "8x8x2", method="power", exponent=0.4).coarse)
    for other in results[1:]:
        for name in ("kx", "ky", "kz"):
            np.testing.assert_array_equal(getattr(other, name), getattr(results[0], name))


def test_edge_blocks_keep_the_regular_pixel_size_in_the_file(tmp_path, map_inputs):
    kx_path, _ = map_inputs
    spec = BlockSpec(10, 5, remainder="keep")
    result = upscale.coarsen(upscale.read_field(kx_path), spec, method="arithmetic")
    summary = upscale.write_result(result, tmp_path / "out")
    with rasterio.open(tmp_path / "out" / "kx.tif") as dst:
        assert (dst.height, dst.width) == (7, 5)
        assert dst.res == (10 * DX, 5 * DY)
        np.testing.assert_array_equal(dst.read(), result.coarse.kx)
    assert summary.coarse.dx_m == {"regular": 10 * DX, "last": 8 * DX}
    assert summary.coarse.dy_m == {"regular": 5 * DY, "last": 2 * DY}


def test_summary_records_inputs_parameters_grids_and_statistics(tmp_path, map_inputs):
    kx_path, por_path = map_inputs
    fine = upscale.read_field(kx_path, porosity=por_path)
    spec = BlockSpec(8, 4, remainder="crop", min_active=0.25)
    result = upscale.coarsen(fine, spec, method="power", exponent=0.5)
    out = tmp_path / "out"
    command = ["upscale", "run", "x"]
    returned = upscale.write_result(result, out, command=command, timings={"a": 1.5})
    text = (out / "summary.json").read_text()
    summary = _strict_json(text)
    assert summary == returned.to_dict() and RunSummary.from_dict(summary) == returned

    assert summary["tool"] == "upscale"
    assert summary["versions"]["upscale"] == upscale.__version__ == metadata.version("upscale")
    assert summary["versions"]["rasterio"] == rasterio.__version__
    assert summary["command"] == ["upscale", "run", "x"]
    assert summary["timings_s"] == {"a": 1.5}
    assert summary["inputs"] == [
        {"role": role, "path": str(path), "resolved": str(path.resolve()),
         "sha256": hashlib.sha256(path.read_bytes()).hexdigest()}
        for role, path in (("kx", kx_path), ("porosity", por_path))
    ]
    assert summary["unit"] == "mD"
    assert summary["method"] == {"name": "power", "options": {"exponent": 0.5}}
    assert summary["block"] == {"x": 8, "y": 4, "z": 1, "remainder": "crop", "min_active": 0.25,
                                  "zero_k": "auto"}
    assert summary["dimensions"] == 2
    assert summary["fine"]["shape"] == {"layers": 1, "rows": 32, "columns": 48}
    assert summary["coarse"]["shape"] == {"layers": 1, "rows": 8, "columns": 6}
    assert summary["fine"]["dx_m"] == DX and summary["fine"]["dy_m"] == DY
    assert summary["coarse"]["dx_m"] == 8 * DX and summary["coarse"]["dy_m"] == 4 * DY
    assert summary["fine"]["crs"] == summary["coarse"]["crs"] == "EPSG:32633"
    assert summary["fine"]["transform"] == list(north_up((DX, DY)))[:6]
    assert summary["coarse"]["transform"] == list(north_up((DX, DY)) @ Affine.scale(8, 4))[:6]
    assert [f for f in summary["files"] if f not in PACKAGE_FILES] == ["kx.tif", "ky.tif", "porosity.tif"]
    assert summary["caution"] == upscale.CAUTION

    with rasterio.open(kx_path) as src:
        raw = src.read(1)
    fine_kx = np.where(raw == -9999.0, np.nan, raw)
    active = fine_kx[~np.isnan(fine_kx)]
    stats = summary["statistics"]
    assert set(stats["fine"]) == set(stats["coarse"]) == {"kx", "ky", "porosity"}
    assert stats["fine"]["kx"]["cells"] == 32 * 48
    assert stats["fine"]["kx"]["active"] == active.size == summary["active"]["fine_cells"]
    assert stats["fine"]["kx"]["min"] == active.min()
    assert stats["fine"]["kx"]["max"] == active.max()
    assert stats["fine"]["kx"]["mean"] == pytest.approx(active.mean(), rel=1e-12)
    assert stats["fine"]["kx"]["geometric_mean"] == pytest.approx(
        np.exp(np.log(active).mean()), rel=1e-12
    )
    assert stats["fine"]["kx"]["log10_std"] == pytest.approx(np.log10(active).std(), rel=1e-9)
    coarse_kx = result.coarse.kx[~np.isnan(result.coarse.kx)]
    assert stats["coarse"]["kx"]["active"] == coarse_kx.size == summary["active"]["coarse_blocks"]
    assert stats["coarse"]["kx"]["mean"] == pytest.approx(coarse_kx.mean(), rel=1e-12)
    assert stats["coarse"]["kx"]["max"] == coarse_kx.max()
    # the corner block is wholly nodata: inactive, whatever min_active says
    assert summary["active"]["coarse_blocks_inactive"] == 1
    assert summary["active"]["dropped_cells"] == 0
    assert "coarse_pore_volume_m3" in summary["active"]


def test_summary_is_valid_json_when_a_statistic_is_undefined(tmp_path):
    # porosity 0 everywhere: its geometric mean and log std are undefined (NaN in Python)
    k = uncorrelated_lognormal((1, 16, 16), SEED + 2)
    kx = write_raster(tmp_path / "k.tif", k, cell_size=10.0)
    por = write_raster(tmp_path / "p.tif", np.zeros((16, 16)), cell_size=10.0)
    result = upscale.coarsen(upscale.read_field(kx, porosity=por), "8x8", "arithmetic")
    upscale.write_result(result, tmp_path / "out")
    text = (tmp_path / "out" / "summary.json").read_text()
    summary = _strict_json(text)
    assert "NaN" not in text and "Infinity" not in text
    assert summary["statistics"]["coarse"]["porosity"]["max"] == 0.0
    assert summary["statistics"]["fine"]["porosity"]["geometric_mean"] is None


def test_write_result_refuses_a_folder_with_results(tmp_path, map_inputs):
    kx_path, _ = map_inputs
    result = upscale.coarsen(upscale.read_field(kx_path), "8x8", "arithmetic")
    out = tmp_path / "out"
    upscale.write_result(result, out)
    before = (out / "kx.tif").read_bytes()
    with pytest.raises(OutputExistsError, match="already holds files"):
        upscale.write_result(result, out)
    assert (out / "kx.tif").read_bytes() == before
    upscale.write_result(result, out, overwrite=True)
    assert _results(out) == ["kx.tif", "ky.tif", "summary.json"]


def test_coarsening_a_georeferenced_field_emits_no_warning(map_inputs):
    # the coarse transform composes affine transforms: `*` for that is deprecated in affine 3
    kx_path, _ = map_inputs
    fine = upscale.read_field(kx_path)
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        upscale.coarsen(fine, "8x4", method="geometric")
