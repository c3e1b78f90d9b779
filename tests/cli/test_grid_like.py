"""``--grid-like FILE``: the cells of a template raster are the coarse blocks (run, compare, check).

Real GeoTIFFs written by rasterio: a fine map of 40 x 30 cells of 10 m and a
template of 30 m x 20 m cells whose origin lies 2 fine columns west and 3 fine
rows south of the field's, so its first column of cells hangs over the field's
west edge and its first whole cell starts at fine column 1, row 3.
"""

from __future__ import annotations

import json

import numpy as np
import pytest
import rasterio
from affine import Affine
from conftest import ORIGIN, north_up

SEED = 739_221_805
#: The template: 3 x 2 fine cells per cell, 2 columns west and 3 rows south of the field's origin.
TEMPLATE = Affine(30.0, 0.0, ORIGIN[0] - 20.0, 0.0, -20.0, ORIGIN[1] - 30.0)
#: Fine rows and columns under its whole cells, and those cells (zero-based, end excluded).
ROWS, COLUMNS, CELL_ROWS, CELL_COLUMNS = (3, 23), (1, 40), (0, 10), (1, 14)


@pytest.fixture
def fine(write_tif):
    """A lognormal 2D map of 40 x 30 cells of 10 m, and its values (rows, columns)."""
    values = np.exp(np.random.default_rng(SEED).normal(3.0, 1.0, (30, 40)))
    return write_tif("fine.tif", values, cell_size=10.0), values


def _template(write_tif, transform=TEMPLATE, crs="EPSG:32633", name="template.tif"):
    """A template of 16 x 10 cells (its values are not read: all zero bytes)."""
    return write_tif(name, np.zeros((10, 16), np.uint8), transform=transform, crs=crs)


def _summary(folder):
    return json.loads((folder / "summary.json").read_text())


def test_coarse_grid_is_the_template_over_the_cells_it_covers(run_cli, fine, write_tif, tmp_path):
    path, values = fine
    template = _template(write_tif)
    out = tmp_path / "snapped"
    code, stdout, err = run_cli("run", path, "--grid-like", template, "--method", "arithmetic", "--no-check",
                                "--out", out)  # fmt: skip
    assert (code, err) == (0, "")
    with rasterio.open(out / "kx.tif") as src:
        kx, transform = src.read(1), src.transform
    # the template's transform moved to its first whole cell on the field (column 1, row 0)
    assert transform == TEMPLATE @ Affine.translation(CELL_COLUMNS[0], CELL_ROWS[0])
    assert kx.shape == (CELL_ROWS[1] - CELL_ROWS[0], CELL_COLUMNS[1] - CELL_COLUMNS[0])
    # the arithmetic block value is the mean of the fine cells under the template cell (common practice)
    assert kx[0, 0] == pytest.approx(values[3:5, 1:4].mean(), rel=1e-13)
    under = values[slice(*ROWS), slice(*COLUMNS)].reshape(10, 2, 13, 3)
    np.testing.assert_allclose(kx, under.mean(axis=(1, 3)), rtol=1e-13)
    summary = _summary(out)
    assert summary["grid_like"] == {
        "path": str(template), "resolved": str(template.resolve()), "sha256": summary["grid_like"]["sha256"],
        "rows": list(ROWS), "columns": list(COLUMNS), "template_rows": list(CELL_ROWS),
        "template_columns": list(CELL_COLUMNS)}  # fmt: skip
    assert len(summary["grid_like"]["sha256"]) == 64
    assert (summary["block"]["x"], summary["block"]["y"]) == (3, 2)
    assert "grid like    " in stdout
    assert "from column 1, row 0, on the fine cells from column 1, row 3" in stdout


def test_3d_layers_come_from_block(run_cli, write_tif, tmp_path):
    values = np.exp(np.random.default_rng(SEED + 1).normal(3.0, 1.0, (4, 30, 40)))
    path = write_tif("model.tif", values, cell_size=10.0)
    template = _template(write_tif)
    out = tmp_path / "layers"
    code, _, err = run_cli("run", path, "--dz", "2", "--grid-like", template, "--block", "2",
                           "--method", "arithmetic", "--no-check", "--out", out)  # fmt: skip
    assert (code, err) == (0, "")
    with rasterio.open(out / "kx.tif") as src:
        kx, transform = src.read(), src.transform
    assert transform == TEMPLATE @ Affine.translation(1, 0)
    assert kx.shape == (2, 10, 13)
    # equal layer thicknesses: the mean of the 2 x 2 x 3 fine cells under the first cell (common practice)
    assert kx[0, 0, 0] == pytest.approx(values[0:2, 3:5, 1:4].mean(), rel=1e-13)
    assert kx[1, -1, -1] == pytest.approx(values[2:4, 21:23, 37:40].mean(), rel=1e-13)
    assert _summary(out)["block"]["z"] == 2


def test_automatic_layers_are_chosen_on_the_cut_field(run_cli, write_tif, tmp_path):
    # a grouping of the layers opens the field again with chunks of every layer: it must be cut alike
    rng = np.random.default_rng(SEED + 2)
    values = np.exp(rng.normal(3.0, 1.0, (5, 30, 40)) + np.array([0.0, 0.1, 2.0, 2.1, 2.2])[:, None, None])
    path = write_tif("model.tif", values, cell_size=10.0)
    out = tmp_path / "auto"
    code, _, err = run_cli("run", path, "--dz", "1,2,1,2,1", "--grid-like", _template(write_tif), "--block",
                           "auto:2", "--method", "arithmetic", "--no-check", "--out", out)  # fmt: skip
    assert (code, err) == (0, "")
    groups = _summary(out)["block"]["z"]
    assert groups == [2, 3]  # the two low layers apart from the three high ones
    with rasterio.open(out / "kx.tif") as src:
        kx, transform = src.read(), src.transform
    assert transform == TEMPLATE @ Affine.translation(1, 0)
    # thickness-weighted mean of the fine cells under the first template cell (common practice)
    dz = np.array([1.0, 2.0, 1.0, 2.0, 1.0])[:, None, None]
    under = values[:, 3:5, 1:4]
    for coarse, layers in ((0, slice(0, 2)), (1, slice(2, 5))):
        expected = (under[layers] * dz[layers]).sum() / (dz[layers].sum() * 6)
        assert kx[coarse, 0, 0] == pytest.approx(expected, rel=1e-13)


def test_check_solves_the_snapped_run_again(run_cli, fine, write_tif, tmp_path):
    path, _ = fine
    out = tmp_path / "checked"
    code, _, err = run_cli("run", path, "--grid-like", _template(write_tif), "--method", "geometric",
                           "--solver", "direct", "--out", out)  # fmt: skip
    assert (code, err) == (0, "")
    recorded = _summary(out)["check"]
    code, _, err = run_cli("check", out, "--solver", "direct")
    assert (code, err) == (0, "")
    again = _summary(out)["check"]
    assert set(again) == {"x", "y", "corner"}
    for axis in again:
        assert again[axis]["k_fine"] == pytest.approx(recorded[axis]["k_fine"], rel=1e-9)
        assert again[axis]["k_coarse"] == pytest.approx(recorded[axis]["k_coarse"], rel=1e-9)
        assert again[axis]["fine"]["unknowns"] == 20 * 39  # the fine cells under the template only


def test_compare_records_the_template(run_cli, fine, write_tif, tmp_path):
    path, _ = fine
    template = _template(write_tif)
    out = tmp_path / "compared"
    code, _, err = run_cli("compare", path, "--grid-like", template, "--methods", "arithmetic,harmonic",
                           "--out", out)  # fmt: skip
    assert (code, err) == (0, "")
    record = json.loads((out / "compare.json").read_text())
    assert (record["grid_like"]["rows"], record["grid_like"]["columns"]) == (list(ROWS), list(COLUMNS))
    assert record["fine"]["shape"] == {"layers": 1, "rows": 20, "columns": 39}
    assert (record["block"]["x"], record["block"]["y"]) == (3, 2)


def test_an_ensemble_snaps_every_realization(run_cli, fine, write_tif, tmp_path):
    _, values = fine
    paths = [write_tif(f"r{i}.tif", values * factor, cell_size=10.0) for i, factor in enumerate((1.0, 3.0))]
    out = tmp_path / "ensemble"
    code, _, err = run_cli("run", *paths, "--grid-like", _template(write_tif), "--method", "arithmetic",
                           "--no-check", "--out", out)  # fmt: skip
    assert (code, err) == (0, "")
    for name, factor in (("r0", 1.0), ("r1", 3.0)):
        assert _summary(out / name)["grid_like"]["columns"] == list(COLUMNS)
        with rasterio.open(out / name / "kx.tif") as src:
            assert src.read(1)[0, 0] == pytest.approx(factor * values[3:5, 1:4].mean(), rel=1e-13)
    with rasterio.open(out / "maps" / "kx_p50_nonexceed.tif") as src:
        assert src.transform == TEMPLATE @ Affine.translation(1, 0)


ROTATED = Affine(30.0, 5.0, TEMPLATE.c, 0.0, -20.0, TEMPLATE.f)


@pytest.mark.parametrize("transform,crs,extra,message", [
    (Affine(25.0, 0.0, TEMPLATE.c, 0.0, -20.0, TEMPLATE.f), "EPSG:32633", (),
     "the template's cells (25 x 20) are not a whole number of the field's cells (10 x 10)"),
    (TEMPLATE @ Affine.translation(0.5 / 3, 0.0), "EPSG:32633", (),
     "the template's cell edges fall between the field's cell edges (its origin is -1.5 columns"),
    (ROTATED, "EPSG:32633", (), "the template's cells are not north-up rectangles like the field's"),
    (TEMPLATE, "EPSG:32632", (), "the template's CRS (EPSG:32632) differs from the field's (EPSG:32633)"),
    (north_up((30.0, 20.0), (ORIGIN[0] + 600.0, ORIGIN[1])), "EPSG:32633", (),
     "no cell of the template lies wholly on the field"),
    (TEMPLATE, "EPSG:32633", ("--block", "8x8"),
     "--grid-like takes the blocks' x and y from the template's cells; give --block the layers alone"),
    (TEMPLATE, "EPSG:32633", ("--chunk", "400blocks"), "a number of blocks needs the block size"),
], ids=["ratio", "origin", "rotated", "crs", "no-overlap", "block-xy", "chunk-blocks"])  # fmt: skip
def test_refusals_are_one_line(run_cli, fine, write_tif, tmp_path, transform, crs, extra, message):
    path, _ = fine
    template = _template(write_tif, transform, crs)
    out = tmp_path / "refused"
    code, stdout, err = run_cli("run", path, "--grid-like", template, *extra, "--method", "arithmetic",
                                "--out", out)  # fmt: skip
    assert code == 2
    assert err.startswith("upscale: error: ") and err.count("\n") == 1
    assert message in err
    assert not out.exists()


def test_neither_block_nor_template_is_refused(run_cli, fine, tmp_path):
    code, _, err = run_cli("run", fine[0], "--method", "arithmetic", "--out", tmp_path / "none")
    assert code == 2
    assert err == ("upscale: error: give the blocks: --block NXxNY[xNZ] (fine cells per block, e.g. 8x8), "
                   "or --grid-like FILE (a raster whose cells are the blocks)\n")  # fmt: skip
