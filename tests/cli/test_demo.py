"""Tests of ``upscale demo`` and the demo fields it writes.

The demo fields come from fixed seeds: a second generation must be
identical, array for array, to the first (the session's `demo_dir`), and
equal to the arrays `upscale.demo.scenario.fields` builds in memory.
"""

from __future__ import annotations

import json

import numpy as np
import rasterio
from conftest import DEMO_NAMES, partial_leftovers, snapshot

from upscale.demo.scenario import LISTING, NODATA, fields
from upscale.geometry import Geometry, steepest_dip


def _raster(path):
    with rasterio.open(path) as src:
        return src.read(), src.transform, src.crs, src.nodata, src.dtypes


def test_demo_writes_the_fields_the_ensemble_and_a_listing(run_cli, tmp_path):
    out = tmp_path / "demo"
    code, stdout, err = run_cli("demo", "--out", out)
    assert (code, err) == (0, "")
    assert stdout == (f"wrote {len(DEMO_NAMES)} demo fields to {out}: {', '.join(DEMO_NAMES)}; "
                      "wells: marrowfen_wells.csv\n")  # fmt: skip
    written = sorted(p.relative_to(out).as_posix() for p in out.rglob("*") if p.is_file())
    assert written == sorted([*DEMO_NAMES, "marrowfen_wells.csv", LISTING])
    listing = json.loads((out / LISTING).read_text())
    assert listing["files"] == list(DEMO_NAMES)
    assert list(listing["wells"]) == ["marrowfen_wells.csv"]
    for name in DEMO_NAMES:
        values, transform, crs, nodata, dtypes = _raster(out / name)
        entry = listing["fields"][name]
        assert list(values.shape) == entry["shape"]
        assert transform.a == -transform.e == entry["cell_size_m"]
        assert crs is not None and crs.is_projected
        assert nodata == NODATA and set(dtypes) == {"float32"}
    assert partial_leftovers(tmp_path) == []


def test_demo_refuses_to_overwrite_without_the_flag(run_cli, tmp_path):
    out = tmp_path / "demo"
    assert run_cli("--quiet", "demo", "--out", out)[0] == 0
    (out / LISTING).write_text('{"files": []}\n')  # mark the folder so a rewrite shows
    before = snapshot(out)
    code, stdout, err = run_cli("demo", "--out", out)
    assert code == 2
    assert stdout == ""
    assert err.startswith(f"upscale: error: {out} already holds files")
    assert err.count("\n") == 1 and "--overwrite" in err
    assert snapshot(out) == before
    code, _, err = run_cli("--quiet", "demo", "--out", out, "--overwrite")
    assert (code, err) == (0, "")
    assert json.loads((out / LISTING).read_text())["files"] == list(DEMO_NAMES)


def test_demo_fields_are_deterministic(run_cli, demo_dir, tmp_path):
    out = tmp_path / "again"
    assert run_cli("--quiet", "demo", "--out", out)[0] == 0
    for name in DEMO_NAMES:
        first, second = _raster(demo_dir / name), _raster(out / name)
        np.testing.assert_array_equal(second[0], first[0])
        assert second[1:] == first[1:]
    assert (out / LISTING).read_text() == (demo_dir / LISTING).read_text()


def test_demo_files_hold_the_generated_arrays(demo_dir):
    for name, spec in fields().items():
        values, *_ = _raster(demo_dir / name)
        np.testing.assert_array_equal(values, spec["values"].astype(np.float32))


def test_demo_fields_have_inactive_outlines_and_plausible_values(demo_dir):
    lognormal, *_ = _raster(demo_dir / "marrowfen_lognormal.tif")
    porosity, *_ = _raster(demo_dir / "marrowfen_porosity.tif")
    outside = lognormal == NODATA
    assert 0 < outside.sum() < outside.size
    np.testing.assert_array_equal(porosity == NODATA, outside)  # same outline
    assert outside[0, 0, -1] and not outside[0, -1, 0]  # the north-east corner is cut off
    inside = porosity[~outside]
    assert inside.min() >= 0.04 - 1e-7 and inside.max() <= 0.32 + 1e-7
    layered, *_ = _raster(demo_dir / "marrowfen_layered.tif")
    assert layered.shape == (20, 64, 64)
    # every fifth layer is a 0.01 mD barrier (with mild lateral variability)
    assert np.all(np.median(layered[4::5], axis=(1, 2)) < 0.1)
    assert np.all(np.median(layered[0::5], axis=(1, 2)) > 10)


def test_dome_model_has_a_gentle_top_and_a_layer_that_pinches_out(demo_dir):
    k, transform, *_ = _raster(demo_dir / "marrowfen_dome.tif")
    surfaces, same, *_ = _raster(demo_dir / "marrowfen_dome_surfaces.tif")
    assert same == transform and surfaces.shape == (k.shape[0] + 1, *k.shape[1:])
    geometry = Geometry.from_surfaces(surfaces.astype(np.float64))  # surfaces go from the top down
    assert 0 < steepest_dip(geometry.surfaces(), transform.a, -transform.e) < 3.0
    thickness = geometry.thickness
    wedge = thickness[4]
    assert 0.3 < np.mean(wedge == 0) < 0.5  # pinched out over part of the area, in the east
    assert np.all(wedge[:, 0] > 2.5) and np.all(wedge[:, -1] == 0)
    assert np.all(np.diff(wedge, axis=1) <= 0)  # a wedge: it only thins eastward
    assert np.all(np.delete(thickness, 4, axis=0) > 2.0)
    assert np.median(k[4]) < 0.1 < 10 < np.median(k[np.arange(8) != 4])  # a shale wedge in sands


def test_dome_porosity_lies_on_a_coarser_grid_that_covers_the_model(demo_dir):
    k, fine, *_ = _raster(demo_dir / "marrowfen_dome.tif")
    porosity, other, *_ = _raster(demo_dir / "marrowfen_dome_porosity.tif")
    assert other.a == 2 * fine.a and (other.c, other.f) != (fine.c, fine.f)
    rows, cols = k.shape[1:]
    assert other.c <= fine.c and other.c + other.a * porosity.shape[2] >= fine.c + fine.a * cols
    assert other.f >= fine.f and other.f + other.e * porosity.shape[1] <= fine.f + fine.e * rows
    assert porosity.shape[0] == k.shape[0] and 0 < porosity.min() and porosity.max() < 0.3


def test_aquifer_maps_are_a_sand_and_gravel_conductivity_and_a_thickness(demo_dir):
    conductivity, transform, *_ = _raster(demo_dir / "marrowfen_aquifer_conductivity.tif")
    thickness, same, *_ = _raster(demo_dir / "marrowfen_aquifer_thickness.tif")
    assert same == transform and thickness.shape == conductivity.shape == (1, 80, 80)
    # from memory (Freeze & Cherry 1979, Groundwater, table 2.2): clean sand 1e-6 to 1e-2 m/s,
    # gravel 1e-3 to 1 m/s, i.e. 0.0864 to 86 400 m/day
    assert 0.0864 < conductivity.min() and conductivity.max() < 86_400
    assert 20 < np.exp(np.mean(np.log(conductivity))) < 60  # geometric mean about 35 m/day
    assert 5.0 < thickness.min() and thickness.max() < 25.0
