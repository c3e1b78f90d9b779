"""Reading a model's geometry from GeoTIFFs (``--top``, ``--thickness``, ``--surfaces``).

Every raster is written with rasterio here; the field read back must carry
the surfaces given, and a run with them must keep the model's pore volume
(common practice: upscaling conserves pore volume). The check of a run
folder reads the geometry's rasters again.
"""

from __future__ import annotations

import json

import numpy as np
import pytest

import upscale
from upscale.errors import InputError

LAYERS, ROWS, COLUMNS = 3, 8, 12


@pytest.fixture
def model(write_tif):
    """Paths of k, surfaces, top and thickness rasters of one model; the middle layer pinches out."""
    rng = np.random.default_rng(5)
    k = np.exp(rng.normal(3.0, 0.8, (LAYERS, ROWS, COLUMNS)))
    porosity = rng.uniform(0.1, 0.3, k.shape)
    x = np.arange(COLUMNS)[None, :] * np.ones((ROWS, 1))
    top = 120.0 - 0.2 * x
    thickness = np.stack([np.full((ROWS, COLUMNS), 2.0), np.clip(0.25 * (x - 4), 0, None),
                          np.full((ROWS, COLUMNS), 3.0)])  # fmt: skip
    surfaces = np.concatenate([top[None], top[None] - np.cumsum(thickness, axis=0)])
    return {
        "k": write_tif("k.tif", k), "porosity": write_tif("phi.tif", porosity),
        "top": write_tif("top.tif", top), "thickness": write_tif("thickness.tif", thickness),
        "surfaces": write_tif("surfaces.tif", surfaces), "values": (k, porosity, top, thickness),
    }  # fmt: skip


def test_surfaces_and_top_with_thickness_read_the_same_geometry(model):
    _, _, top, thickness = model["values"]
    a = upscale.read_field(model["k"], surfaces=model["surfaces"])
    b = upscale.read_field(model["k"], top=model["top"], thickness=model["thickness"])
    for field in (a, b):
        np.testing.assert_allclose(field.geometry.top, top, rtol=1e-15)
        np.testing.assert_allclose(np.asarray(field.geometry.thickness), thickness, atol=1e-13)
        assert field.grid.dz[1] == pytest.approx(thickness[1][thickness[1] > 0].mean(), rel=1e-14)
    assert [s.role for s in b.sources] == ["kx", "top", "thickness"]


def test_a_run_keeps_the_pore_volume_and_its_check_reads_the_geometry_again(model, run_cli, tmp_path):
    k, porosity, _, thickness = model["values"]
    out = tmp_path / "out"
    code, ran, err = run_cli("run", model["k"], "--surfaces", model["surfaces"], "--porosity",
                           model["porosity"], "--kv-kh", "0.1", "--block", "4x4x3", "--method", "flow",
                           "--out", out)  # fmt: skip
    assert code == 0, err
    fine = upscale.read_field(model["k"], surfaces=model["surfaces"], porosity=model["porosity"])
    coarse = upscale.coarsen(fine, "4x4x3", "flow").coarse
    pore = float((porosity * thickness).sum() * 100.0)  # cells of 10 m by 10 m
    assert float(np.nansum(coarse.porosity * coarse.cell_volumes())) == pytest.approx(pore, rel=1e-12)
    summary = json.loads((out / "summary.json").read_text())
    code, text, err = run_cli("check", out)
    assert code == 0, err
    # the check of the folder reads the model and the package again and finds the run's numbers
    rows = [line for line in ran.splitlines() if line.split()[:1] in (["x"], ["y"], ["z"], ["corner"])]
    assert len(rows) == 4 and all(row in text.splitlines() for row in rows)
    assert [i["role"] for i in summary["inputs"]] == ["kx", "porosity", "surfaces"]


def test_a_top_on_another_grid_is_resampled(model, write_tif):
    _, _, top, _ = model["values"]
    coarse_top = top.reshape(ROWS // 2, 2, COLUMNS // 2, 2).mean(axis=(1, 3))
    path = write_tif("top_coarse.tif", coarse_top, cell_size=20.0)
    with pytest.raises(InputError, match="not on the grid of"):
        upscale.read_field(model["k"], top=path, thickness=model["thickness"])
    field = upscale.read_field(model["k"], top=path, thickness=model["thickness"], resample="nearest")
    np.testing.assert_array_equal(field.geometry.top, np.repeat(np.repeat(coarse_top, 2, 0), 2, 1))


@pytest.mark.parametrize("args, message", [
    (("--surfaces", "S", "--dz", "2"),
     "--surfaces gives the whole geometry: leave out --top, --thickness and --dz"),
    (("--top", "10"),
     "give the layer thickness in metres (--dz 2.5, or one value per layer: --dz 2,3,1.5,...), "
     "or its geometry (--thickness, --surfaces)"),
    (("--thickness", "T", "--dz", "2"), "--thickness replaces --dz: give one of them"),
    (("--thickness", "2"), "one --thickness value serves a map"),
    (("--surfaces", "BAD"), "surface 2 lies above surface 1 in 96 cells; surfaces go from the top down"),
    (("--thickness", "NEG"), "12 cell thickness(es) are negative or not a number"),
])  # fmt: skip
def test_bad_geometry_is_one_line(model, write_tif, run_cli, tmp_path, args, message):
    _, _, top, thickness = model["values"]
    negative = thickness.copy()
    negative[1, 0, :] = -1.0  # one row of the middle layer: 12 cells
    named = {"S": model["surfaces"], "T": model["thickness"], "NEG": write_tif("neg.tif", negative),
             "BAD": write_tif("bad.tif", np.stack([top, top + 1.0, top - 5.0, top - 6.0]))}
    code, out, err = run_cli("run", model["k"], *(named.get(a, a) for a in args), "--block", "4x4",
                             "--method", "arithmetic", "--out", tmp_path / "o")  # fmt: skip
    assert code != 0
    assert message in err
    assert len(err.strip().splitlines()) == 1
