"""Tests of resampling a secondary raster onto the main grid (`read_field(resample=...)`, ``--resample``).

Every raster is written with rasterio in the test; the resampled values are
read through the package and compared with values computed here with NumPy
from the fine cells (the block mean of a 2x2 refinement, the input itself
on an identical grid). The rules are GDAL's warper, through rasterio's
``WarpedVRT``: nodata source cells are left out of every rule (GDAL
documentation, "gdalwarp": ``-srcnodata``, "masked out").
"""

from __future__ import annotations

import json

import numpy as np
import pytest
import rasterio.warp
from conftest import ORIGIN, north_up

import upscale
from upscale.errors import InputError
from upscale.gallery.problems import uncorrelated_lognormal

SEED = 4_120_877_301
SHAPE = (16, 24)
#: A nodata value of the porosity rasters (not a porosity).
MISSING = -1.0


@pytest.fixture
def k2d() -> np.ndarray:
    """Fine 2D permeabilities (mD), shape (M, N), on 10 m cells."""
    return uncorrelated_lognormal(SHAPE, SEED)


@pytest.fixture
def porosity_fine() -> np.ndarray:
    """Porosity at twice the resolution of `k2d` (5 m cells), shape (2M, 2N), same extent."""
    return np.random.default_rng(SEED).uniform(0.05, 0.35, (2 * SHAPE[0], 2 * SHAPE[1]))


def block_mean(fine: np.ndarray) -> np.ndarray:
    """Mean of every 2x2 block of `fine` (shape (2M, 2N)) -> shape (M, N), NaN left out."""
    m, n = fine.shape[0] // 2, fine.shape[1] // 2
    with np.errstate(invalid="ignore"):
        blocks = fine.reshape(m, 2, n, 2)
        count = np.sum(~np.isnan(blocks), axis=(1, 3))
        return np.where(count > 0, np.nansum(blocks, axis=(1, 3)) / np.maximum(count, 1), np.nan)


def test_average_of_a_twice_finer_porosity_is_the_block_mean(write_tif, k2d, porosity_fine):
    # issue 20's check: the block mean of the 2x2 fine values, exactly (arithmetic; common practice)
    main = write_tif("k.tif", k2d, cell_size=10.0)
    fine = write_tif("phi_5m.tif", porosity_fine, cell_size=5.0)
    field = upscale.read_field(main, porosity=fine, resample="average")
    got = np.asarray(field.porosity)[0]
    assert got.shape == SHAPE
    np.testing.assert_allclose(got, block_mean(porosity_fine), rtol=0, atol=1e-12)


def test_average_reads_window_by_window(write_tif, k2d, porosity_fine):
    # small chunks: each is resampled on its own, and the whole equals one read of the whole
    main = write_tif("k.tif", k2d, cell_size=10.0)
    fine = write_tif("phi_5m.tif", porosity_fine, cell_size=5.0)
    field = upscale.read_field(main, porosity=fine, resample="average", chunk_bytes=8 * 5 * SHAPE[1])
    assert len(field.porosity.chunks[1]) > 1
    np.testing.assert_allclose(np.asarray(field.porosity)[0], block_mean(porosity_fine), rtol=0, atol=1e-12)


def test_nearest_on_an_identical_grid_returns_the_input(write_tif, k2d, porosity_fine):
    # the same grid: nothing is resampled or recorded, and the values come back exactly
    main = write_tif("k.tif", k2d, cell_size=10.0)
    phi = porosity_fine[::2, ::2]
    same = write_tif("phi.tif", phi, cell_size=10.0)
    field = upscale.read_field(main, porosity=same, resample="nearest")
    np.testing.assert_array_equal(np.asarray(field.porosity)[0], phi)
    assert all(s.resampled is None for s in field.sources)


def test_nearest_onto_a_shifted_grid_of_the_same_cells_returns_the_input(write_tif, k2d, porosity_fine):
    # the same 10 m cells, the raster one column wider on the west: nearest picks each cell itself
    main = write_tif("k.tif", k2d, cell_size=10.0)
    phi = porosity_fine[::2, : SHAPE[1] + 1]
    wider = write_tif("phi_wide.tif", phi, transform=north_up(10.0, (ORIGIN[0] - 10.0, ORIGIN[1])))
    field = upscale.read_field(main, porosity=wider, resample="nearest")
    np.testing.assert_array_equal(np.asarray(field.porosity)[0], phi[:, 1:])


def test_nodata_is_left_out_and_stays_inactive(write_tif, k2d, porosity_fine):
    # a 2x2 block wholly nodata stays nodata (inactive in every property); a block with one
    # nodata cell is the mean of its three others: the nodata value is never averaged in
    phi = porosity_fine.copy()
    phi[4:6, 6:8] = MISSING
    phi[0, 0] = MISSING
    main = write_tif("k.tif", k2d, cell_size=10.0)
    fine = write_tif("phi_5m.tif", phi, cell_size=5.0, nodata=MISSING)
    field = upscale.read_field(main, porosity=fine, resample="average")
    got = np.asarray(field.porosity)[0]
    assert np.isnan(got[2, 3]) and np.isnan(np.asarray(field.kx)[0, 2, 3])
    assert np.isnan(got).sum() == 1
    assert got[0, 0] == pytest.approx(porosity_fine[[0, 1, 1], [1, 0, 1]].mean(), abs=1e-12)
    np.testing.assert_allclose(got, block_mean(np.where(phi == MISSING, np.nan, phi)), rtol=0, atol=1e-12)
    nearest = upscale.read_field(main, porosity=fine, resample="nearest")
    assert np.isnan(np.asarray(nearest.porosity)[0, 2, 3])


def test_cells_outside_the_rasters_own_mask_are_left_out(write_tif, k2d, porosity_fine):
    # an internal validity mask instead of a nodata value: masked cells (holding 0.9 here) are
    # left out of the average like nodata, and a block wholly masked is inactive
    phi, mask = porosity_fine.copy(), np.full(porosity_fine.shape, 255, np.uint8)
    phi[0:2, 0:2] = phi[4, 4] = 0.9
    mask[0:2, 0:2] = mask[4, 4] = 0
    main = write_tif("k.tif", k2d, cell_size=10.0)
    fine = write_tif("phi_masked.tif", phi, cell_size=5.0, mask=mask)
    got = np.asarray(upscale.read_field(main, porosity=fine, resample="average").porosity)[0]
    expected = block_mean(np.where(mask == 0, np.nan, phi))
    assert np.isnan(got[0, 0]) and np.isnan(got).sum() == 1
    np.testing.assert_allclose(got, expected, rtol=0, atol=1e-12)


def test_a_raster_in_another_crs_is_reprojected(write_tif, k2d):
    # a uniform porosity in the neighbouring UTM zone covering the main grid with a margin: it is
    # reprojected (GDAL's warper), so every cell has that value; beyond its extent cells are nodata
    main = write_tif("k.tif", k2d, cell_size=10.0)
    bounds = (ORIGIN[0], ORIGIN[1] - 10.0 * SHAPE[0], ORIGIN[0] + 10.0 * SHAPE[1], ORIGIN[1])
    west, south, east, north = rasterio.warp.transform_bounds("EPSG:32633", "EPSG:32634", *bounds)
    columns, rows = int((east - west) // 7) + 4, int((north - south) // 7) + 4
    other = write_tif("phi_zone34.tif", np.full((rows, columns), 0.25), crs="EPSG:32634",
                      transform=north_up(7.0, (west - 14.0, north + 14.0)))  # fmt: skip
    for rule in ("nearest", "average", "bilinear"):
        field = upscale.read_field(main, porosity=other, resample=rule)
        np.testing.assert_allclose(np.asarray(field.porosity), 0.25, rtol=0, atol=1e-12)
    part = write_tif("phi_east.tif", np.full((rows, columns // 2), 0.25), crs="EPSG:32634",
                     transform=north_up(7.0, (west - 14.0, north + 14.0)))  # fmt: skip
    half = np.asarray(upscale.read_field(main, porosity=part, resample="nearest").porosity)[0]
    assert np.isnan(half).any() and (half[~np.isnan(half)] == 0.25).all()


def test_another_number_of_bands_is_refused_even_with_resample(write_tif, k2d):
    k3 = np.stack([k2d, k2d])
    main = write_tif("k3.tif", k3, cell_size=10.0)
    kz = write_tif("kz.tif", np.stack([k2d] * 3), cell_size=5.0)
    with pytest.raises(InputError, match=r"resampling changes rows and columns, not the number of bands"):
        upscale.read_field(main, kz=kz, dz=1.0, resample="average")


def test_summary_records_the_resampled_raster(tmp_path, write_tif, run_cli, k2d, porosity_fine):
    main = write_tif("k.tif", k2d, cell_size=10.0)
    fine = write_tif("phi_5m.tif", porosity_fine, cell_size=5.0)
    out = tmp_path / "out"
    code, _, err = run_cli("-q", "run", main, "--porosity", fine, "--resample", "average", "--block",
                           "4x4", "--method", "arithmetic", "--no-check", "--out", out)  # fmt: skip
    assert code == 0, err
    summary = json.loads((out / "summary.json").read_text())
    inputs = {i["role"]: i for i in summary["inputs"]}
    assert "resampled" not in inputs["kx"]
    assert inputs["porosity"]["resampled"] == {
        "rule": "average",
        "from": {"crs": "EPSG:32633", "transform": list(north_up(5.0))[:6],
                 "shape": {"layers": 1, "rows": 2 * SHAPE[0], "columns": 2 * SHAPE[1]}},
    }  # fmt: skip
    assert summary["read"]["resample"] == "average"


def test_without_the_option_the_refusal_names_the_option(tmp_path, write_tif, run_cli, k2d, porosity_fine):
    main = write_tif("k.tif", k2d, cell_size=10.0)
    fine = write_tif("phi_5m.tif", porosity_fine, cell_size=5.0)
    code, _, err = run_cli("run", main, "--porosity", fine, "--block", "4x4", "--method", "arithmetic",
                           "--out", tmp_path / "out")  # fmt: skip
    assert code != 0
    assert err.count("\n") == 1 and err.startswith("upscale: error: --porosity ")
    assert "not on the grid of" in err
    assert err.rstrip().endswith("resample it onto that grid with --resample average (or nearest, bilinear)")


def test_check_reads_a_resampled_ky_again(tmp_path, write_tif, run_cli, k2d):
    # `upscale check` reads the run's inputs again with its recorded `read`, `resample` included:
    # its flow check on the fine grid is the run's, number for number
    main = write_tif("k.tif", k2d, cell_size=10.0)
    ky_fine = write_tif("ky_5m.tif", np.kron(k2d, np.ones((2, 2))) * 0.5, cell_size=5.0)
    out = tmp_path / "out"
    code, _, err = run_cli("-q", "run", main, "--ky", ky_fine, "--resample", "average", "--block", "4x4",
                           "--method", "arithmetic", "--out", out)  # fmt: skip
    assert code == 0, err
    ran = json.loads((out / "summary.json").read_text())["check"]
    code, _, err = run_cli("-q", "check", out)
    assert code == 0, err
    checked = json.loads((out / "summary.json").read_text())["check"]
    assert checked["y"]["fine"]["k_eff"] == ran["y"]["fine"]["k_eff"]
