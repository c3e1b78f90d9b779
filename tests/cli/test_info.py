"""Tests of ``upscale info``: the description of a field, as text and as JSON.

Numbers in the ``--json`` output are checked against NumPy on the values
rasterio reads from the same GeoTIFF. Rasters without a nodata tag that hold
-9999, 1e30 and the other values of `upscale.stats.SENTINELS` (as float64
and float32), zeros and negative values are flagged with counts and first
cells, and a ``--nodata`` is suggested; a clean field shows no flag. For a
3D model the grouping of ``--layers`` (default auto:90%) is printed and in
the JSON; ``--plot`` writes the layer profile as a PNG or an SVG of the
figure's size, and refuses another ending, an existing file without
``--overwrite`` and a 2D map, each in one line, writing nothing.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
from conftest import read_raster

from upscale.gallery.problems import uncorrelated_lognormal

SEED = 6_042_917_385
SHAPE = (32, 48)


@pytest.fixture
def map_path(write_tif):
    """A 2D map with nodata and NaN cells, cells of 12.5 m by 7.5 m."""
    k = uncorrelated_lognormal(SHAPE, SEED)
    k[:3, :10] = -9999.0
    k[20, 5] = np.nan
    return write_tif("map.tif", k, cell_size=(12.5, 7.5), nodata=-9999.0)


def _info_json(run_cli, *args):
    code, stdout, err = run_cli("info", *args, "--json")
    assert (code, err) == (0, "")

    def refuse(constant):
        raise AssertionError(f"info --json printed {constant}")

    return json.loads(stdout, parse_constant=refuse)


def test_text_description(run_cli, map_path):
    code, stdout, err = run_cli("info", map_path)
    assert (code, err) == (0, "")
    lines = stdout.splitlines()
    assert lines[0] == f"field        {map_path}"
    assert "grid         48 x 32 cells (2D map)" in lines
    assert "cell size    dx 12.5 m, dy 7.5 m" in lines
    assert "CRS          EPSG:32633" in lines
    assert "unit         mD" in lines
    active = 32 * 48 - 31
    assert f"active       {active} of 1536 cells ({100 * active / 1536:.1f} %)" in lines
    assert any(line.startswith("log10 k      mean ") for line in lines)
    assert any(line.split()[:2] == ["kx", str(active)] for line in lines)


def test_json_numbers_match_numpy(run_cli, map_path):
    description = _info_json(run_cli, map_path)
    k = read_raster(map_path)
    active = k[~np.isnan(k)]
    assert description["path"] == str(map_path)
    assert description["dimensions"] == 2
    assert description["shape"] == {"layers": 1, "rows": 32, "columns": 48}
    assert description["cell_size_m"] == {"dx": 12.5, "dy": 7.5, "dz": [1.0]}
    assert description["crs"] == "EPSG:32633"
    assert description["unit"] == "mD"
    assert description["active_cells"] == active.size == 1536 - 31
    assert description["active_fraction"] == pytest.approx(active.size / 1536, rel=1e-15)
    stats = description["statistics"]["kx"]
    assert stats["cells"] == 1536 and stats["active"] == active.size
    assert stats["min"] == active.min() and stats["max"] == active.max()
    assert stats["mean"] == pytest.approx(active.mean(), rel=1e-12)
    assert stats["geometric_mean"] == pytest.approx(np.exp(np.log(active).mean()), rel=1e-12)
    assert stats["log10_std"] == pytest.approx(np.log10(active).std(), rel=1e-9)
    log10 = description["log10_k"]
    assert log10["min"] == pytest.approx(np.log10(active.min()), rel=1e-12)
    assert log10["max"] == pytest.approx(np.log10(active.max()), rel=1e-12)
    assert log10["mean"] == pytest.approx(np.log10(active).mean(), rel=1e-12)
    assert description["problems"] == {"negative": 0, "zero": 0, "infinite": 0}
    assert description["statistics"]["ky"] == stats


def test_json_of_a_3d_demo_model_matches_numpy(run_cli, demo_dir):
    path = demo_dir / "marrowfen_3d.tif"
    description = _info_json(run_cli, path, "--dz", "2", "--kv-kh", "0.5")
    k = read_raster(path)
    assert k.shape == (16, 96, 96)
    active = k[~np.isnan(k)]
    assert description["dimensions"] == 3
    assert description["shape"] == {"layers": 16, "rows": 96, "columns": 96}
    assert description["cell_size_m"] == {"dx": 20.0, "dy": 20.0, "dz": [2.0] * 16}
    assert description["active_cells"] == active.size
    assert 0 < active.size < k.size
    kx, kz = description["statistics"]["kx"], description["statistics"]["kz"]
    assert kx["mean"] == pytest.approx(active.mean(), rel=1e-12)
    assert kz["mean"] == pytest.approx(0.5 * active.mean(), rel=1e-7)  # float32 raster
    assert description["crs"].startswith("PROJCS") or "+proj=tmerc" in description["crs"]


def test_per_layer_dz_and_unit_are_shown(run_cli, write_tif):
    path = write_tif("model.tif", uncorrelated_lognormal((4, *SHAPE), SEED + 1))
    code, stdout, err = run_cli("info", path, "--dz", "1,2,3,4", "--unit", "D")
    assert (code, err) == (0, "")
    assert "grid         48 x 32 x 4 cells (3D model)" in stdout
    assert "cell size    dx 10 m, dy 10 m, dz 1-4 m" in stdout
    assert "unit         D" in stdout
    assert _info_json(run_cli, path, "--dz", "1,2,3,4")["cell_size_m"]["dz"] == [1, 2, 3, 4]


def test_porosity_is_described_too(run_cli, map_path, write_tif):
    por = write_tif("por.tif", np.full(SHAPE, 0.125), cell_size=(12.5, 7.5))
    description = _info_json(run_cli, map_path, "--porosity", por)
    assert description["statistics"]["porosity"]["max"] == 0.125
    assert description["statistics"]["porosity"]["active"] == description["active_cells"]


def test_all_inactive_field_is_described_without_invalid_json(run_cli, write_tif):
    path = write_tif("empty.tif", np.full(SHAPE, -9999.0), nodata=-9999.0)
    description = _info_json(run_cli, path)
    assert description["active_cells"] == 0
    assert description["statistics"]["kx"]["mean"] is None
    assert description["log10_k"]["mean"] is None


def test_problem_values_are_counted_in_json(run_cli, write_tif):
    k = uncorrelated_lognormal(SHAPE, SEED + 2)
    k[1, 2] = k[3, 4] = 0.0
    k[5, 6] = -3.0
    description = _info_json(run_cli, write_tif("bad.tif", k))
    assert description["problems"] == {"negative": 1, "zero": 2, "infinite": 0}
    assert description["log10_k"]["min"] is None
    positive = k[k > 0]
    assert description["log10_k"]["max"] == pytest.approx(math.log10(positive.max()), rel=1e-12)


def _problem_field(write_tif, bad):
    k = uncorrelated_lognormal(SHAPE, SEED + 3)
    k[7, 8] = bad
    return write_tif("bad.tif", k)


def test_text_description_of_a_field_with_a_negative_value(run_cli, write_tif):
    code, stdout, err = run_cli("info", _problem_field(write_tif, -3.0))
    assert (code, err) == (0, "")
    assert "problems     1 negative value(s) in kx" in stdout


def test_text_description_of_a_field_with_a_zero_value(run_cli, write_tif):
    code, stdout, err = run_cli("info", _problem_field(write_tif, 0.0))
    assert (code, err) == (0, "")
    assert "problems     1 zero value(s) in kx" in stdout


@pytest.mark.filterwarnings("ignore::rasterio.errors.NotGeoreferencedWarning")
def test_raster_without_georeference_with_cell_size(run_cli, write_tif):
    path = write_tif("plain.tif", uncorrelated_lognormal(SHAPE, SEED + 4), georeferenced=False)
    code, stdout, _ = run_cli("info", path, "--cell-size", "5x4")
    assert code == 0
    assert "cell size    dx 5 m, dy 4 m" in stdout
    assert "CRS          none" in stdout


def test_raster_without_georeference_gives_a_clean_stderr(run_cli, write_tif):
    path = write_tif("plain.tif", uncorrelated_lognormal(SHAPE, SEED + 4), georeferenced=False)
    code, stdout, err = run_cli("info", path, "--cell-size", "5")
    assert (code, err) == (0, "")
    assert "CRS          none" in stdout


# --- values that may mark cells without data, in rasters without a nodata tag --------------------


def _firsts(mask):
    return [{"band": int(b) + 1, "row": int(r), "column": int(c)} for b, r, c in np.argwhere(mask)[:3]]


def _cells(firsts):
    return ", ".join(f"(band {f['band']}, row {f['row']}, column {f['column']})" for f in firsts)


@pytest.fixture(params=[np.float64, np.float32])
def marked(request, write_tif):
    """A map without a nodata tag: 60 cells of -9999, 7 of 1e30, 2 zeros, 1 other negative value."""
    k = uncorrelated_lognormal(SHAPE, SEED + 6)
    k[2:5, 10:30] = -9999.0
    k[31, 40:47] = 1e30
    k[6, 3] = k[9, 1] = 0.0
    k[12, 20] = -2.5
    path = write_tif("marked.tif", k.astype(request.param))
    return path, read_raster(path)  # of shape (1, M, N): what the file holds, as float64


def test_sentinels_zeros_and_negatives_are_flagged_in_json(run_cli, marked):
    path, k = marked
    description = _info_json(run_cli, path)
    assert description["suspect_values"] == [
        {"property": "kx", "kind": "sentinel", "value": -9999.0, "count": 60, "first": _firsts(k == -9999.0)},
        {"property": "kx", "kind": "sentinel", "value": 1e30, "count": 7, "first": _firsts(k > 1e29)},
        {"property": "kx", "kind": "negative", "value": None, "count": 1, "first": _firsts(k == -2.5)},
        {"property": "kx", "kind": "zero", "value": None, "count": 2, "first": _firsts(k == 0.0)},
    ]  # fmt: skip
    assert description["suggested_nodata"] == -9999.0
    assert description["problems"] == {"negative": 61, "zero": 2, "infinite": 0}
    assert description["active_cells"] == k.size  # no nodata tag: every cell holds a value


def test_sentinels_are_flagged_next_to_the_active_count_with_one_line_of_advice(run_cli, marked):
    path, k = marked
    code, stdout, err = run_cli("info", path)
    assert (code, err) == (0, "")
    lines = stdout.splitlines()
    at = lines.index(f"active       {k.size} of {k.size} cells (100.0 %)")
    assert lines[at + 1:at + 6] == [
        "problems     60 cell(s) of kx hold -9999, a common nodata marker; first at "
        + _cells(_firsts(k == -9999.0)),
        "             7 cell(s) of kx hold 1e+30, a common nodata marker; first at "
        + _cells(_firsts(k > 1e29)),
        "             1 negative value(s) in kx, first at " + _cells(_firsts(k == -2.5)),
        "             2 zero value(s) in kx, first at " + _cells(_firsts(k == 0.0)),
        "hint         if -9999 marks cells without data, give --nodata -9999",
    ]  # fmt: skip


def test_the_suggested_nodata_makes_the_sentinel_cells_inactive(run_cli, marked):
    path, k = marked
    description = _info_json(run_cli, path, "--nodata", "-9999")
    assert description["active_cells"] == k.size - 60
    assert [s["value"] for s in description["suspect_values"]] == [1e30, None, None]
    again = _info_json(run_cli, path, "--nodata", str(description["suggested_nodata"]))  # 1e+30
    assert again["active_cells"] == k.size - 7
    assert again["suggested_nodata"] == -9999.0


@pytest.mark.parametrize("value", [-999.0, -99999.0, 9999.0, -1e30, 3.4e38, -3.4e38,
                                   float(np.finfo(np.float32).max)])  # fmt: skip
def test_every_sentinel_of_the_list_is_flagged_in_a_float32_raster(run_cli, write_tif, value):
    k = uncorrelated_lognormal(SHAPE, SEED + 7).astype(np.float32)
    k[20:22, 30:35] = value
    description = _info_json(run_cli, write_tif("one.tif", k))
    (found,) = description["suspect_values"]
    assert (found["kind"], found["value"], found["count"]) == ("sentinel", value, 10)
    assert found["first"] == [{"band": 1, "row": 20, "column": c} for c in (30, 31, 32)]
    assert description["suggested_nodata"] == value


def test_a_clean_field_shows_no_flag(run_cli, write_tif):
    k = uncorrelated_lognormal(SHAPE, SEED + 8)
    k[0, :4] = [9998.0, 9999.5, 12_000.0, 2.5e30]  # large, but no sentinel
    path = write_tif("clean.tif", k)
    code, stdout, err = run_cli("info", path)
    assert (code, err) == (0, "")
    assert not any(line.startswith(("problems", "hint")) for line in stdout.splitlines())
    description = _info_json(run_cli, path)
    assert description["suspect_values"] == [] and description["suggested_nodata"] is None


def test_layer_profile_of_the_layer_cake(run_cli, demo_dir):
    # the demo's story: a 0.01 mD shale every fifth layer (kz = 0.1 kx); the profile's geometric means
    # are checked against NumPy on the raster, the barriers against that story
    path = demo_dir / "marrowfen_layered.tif"
    code, stdout, err = run_cli("info", path, "--dz", "1", "--kv-kh", "0.1")
    assert (code, err) == (0, "")
    assert "barriers     layers 5, 10, 15, 20: kz 100 times or more below the typical layer" in stdout
    layers = _info_json(run_cli, path, "--dz", "1", "--kv-kh", "0.1")["layers"]
    k = read_raster(path).astype(np.float64)
    assert [row["layer"] for row in layers["layers"]] == list(range(1, 21))
    for row, values in zip(layers["layers"], k):
        assert row["ln_kx_mean"] == pytest.approx(np.log(values).mean(), rel=1e-12)
        assert row["ln_kz_mean"] == pytest.approx(np.log(0.1 * values).mean(), rel=1e-6)  # float32 kv/kh
        assert row["active_fraction"] == 1.0 and row["thickness_m"] == 1.0
    assert layers["barriers"] == [{"first": f, "last": f} for f in (5, 10, 15, 20)]


def test_a_map_has_no_layer_profile(run_cli, map_path):
    assert "layers" not in _info_json(run_cli, map_path)


# --- the grouping and the figure of the layer profile ---------------------------------------------


def test_the_grouping_is_printed_and_in_json(run_cli, demo_dir):
    path = demo_dir / "marrowfen_layered.tif"
    code, stdout, err = run_cli("info", path, "--dz", "1", "--layers", "auto:8")
    assert (code, err) == (0, "")
    lines = stdout.splitlines()
    head = next(i for i, line in enumerate(lines) if line.startswith("grouping     "))
    # the shales at layers 5, 10, 15, 20 (demo scenario) kept as coarse layers of their own
    assert lines[head].startswith("grouping     auto:8 chose 4,1,4,1,4,1,4,1 fine layers per coarse layer "
                                  "(top down), losing ")  # fmt: skip
    assert [line.split(":")[0].strip() for line in lines[head + 1: head + 8]] == [
        f"after layer {n}" for n in (4, 5, 9, 10, 14, 15, 19)]
    grouping = _info_json(run_cli, path, "--dz", "1", "--layers", "auto:8")["layers"]["grouping"]
    assert grouping["request"] == "auto:8" and grouping["sizes"] == [4, 1, 4, 1, 4, 1, 4, 1]
    assert [b["reason"] for b in grouping["boundaries"]] == ["barrier"] * 7
    default = _info_json(run_cli, path, "--dz", "1")["layers"]["grouping"]
    assert default["request"] == "auto:90%" and default["loss"] <= 0.1


def _png_size(data: bytes) -> tuple[int, int]:
    """Width and height of a PNG from its IHDR chunk (PNG specification, W3C 2003: bytes 16-24)."""
    assert data[:8] == b"\x89PNG\r\n\x1a\n" and data[12:16] == b"IHDR"
    return int.from_bytes(data[16:20], "big"), int.from_bytes(data[20:24], "big")


def test_plot_writes_a_png_or_an_svg_of_the_figure(run_cli, demo_dir, tmp_path):
    from upscale.report.layout import DPI

    path = demo_dir / "marrowfen_layered.tif"
    png, svg = tmp_path / "profile.png", tmp_path / "profile.svg"
    code, stdout, err = run_cli("info", path, "--dz", "1", "--plot", png)
    assert (code, err) == (0, "") and stdout.splitlines()[-1] == f"figure       {png}"
    assert _png_size(png.read_bytes()) == (round(6.2 * DPI), round(7.4 * DPI))  # the figure's 6.2 x 7.4 in
    code, stdout, err = run_cli("info", path, "--dz", "1", "--kv-kh", "0.1", "--plot", svg, "--json")
    assert (code, err) == (0, "") and json.loads(stdout)["dimensions"] == 3  # stdout stays JSON
    text = svg.read_text()
    assert text.startswith("<?xml") and 'width="446.4pt" height="532.8pt"' in text  # 6.2 x 7.4 in at 72 pt
    assert not list(tmp_path.glob(".*"))  # no staged file left behind


@pytest.mark.parametrize(("args", "message"), [
    (["--plot", "{tmp}/profile.pdf"],
     "{tmp}/profile.pdf: a figure file is written as PNG or SVG by the ending of its name; give a name "
     "ending in .png or .svg"),
    (["--plot", "{tmp}/old.png"],
     "{tmp}/old.png already exists; choose another file name or pass --overwrite"),
    (["--layers", "3"], "--layers '3': give auto:N (N coarse layers) or auto:P% (the fewest coarse layers "
                        "that keep P % of the between-layer variance)"),
    (["--layers", "auto:21"], "21 coarse layers asked for but the model has 20 fine layers"),
])  # fmt: skip
def test_bad_plot_and_layers_give_one_line(run_cli, demo_dir, tmp_path, args, message):
    old = tmp_path / "old.png"
    old.write_bytes(b"mine")
    args = [a.format(tmp=tmp_path) for a in args]
    code, stdout, err = run_cli("info", demo_dir / "marrowfen_layered.tif", "--dz", "1", *args)
    assert (code, stdout, err) == (2, "", f"upscale: error: {message.format(tmp=tmp_path)}\n")
    assert old.read_bytes() == b"mine" and sorted(p.name for p in tmp_path.iterdir()) == ["old.png"]


def test_overwrite_replaces_the_figure(run_cli, demo_dir, tmp_path):
    old = tmp_path / "old.png"
    old.write_bytes(b"mine")
    path = demo_dir / "marrowfen_layered.tif"
    code, _, err = run_cli("info", path, "--dz", "1", "--plot", old, "--overwrite")
    assert (code, err) == (0, "") and _png_size(old.read_bytes())[0] > 0


@pytest.mark.parametrize("option", [["--plot", "profile.png"], ["--layers", "auto:2"]])
def test_a_map_has_no_layers_to_draw_or_group(run_cli, map_path, tmp_path, option):
    args = [str(tmp_path / a) if a.endswith(".png") else a for a in option]
    code, stdout, err = run_cli("info", map_path, *args)
    verb = "--plot draws" if option[0] == "--plot" else "--layers groups"
    assert (code, stdout) == (2, "")
    assert err == (f"upscale: error: {verb} the layers of a 3D model, and {map_path} is a 2D map (give --dz "
                   "for a raster whose bands are layers)\n")  # fmt: skip
    assert list(tmp_path.glob("*.png")) == []


@pytest.mark.parametrize("slope, caution", [(0.05, False), (0.2, True)])
def test_the_geometry_is_described_with_a_caution_on_steep_dips(run_cli, write_tif, slope, caution):
    # layers of 2 m under a top sloping `slope` m per m along x: every cell centre rises `slope` m
    # per m, a dip of atan(slope): 2.9° needs no caution, 11.3° is past the 5.7° where neglecting
    # the dip makes a lateral transmissibility 1 % too large (1 / cos²θ, common practice)
    k = write_tif("k.tif", np.full((3, 4, 6), 50.0))
    x = np.arange(6)[None, :] * 10.0 * np.ones((4, 1))
    surfaces = np.stack([100.0 - slope * x - 2.0 * layer for layer in range(4)])
    surfaces[3, :, :2] = surfaces[2, :, :2]  # the base layer pinches out in two columns
    path = write_tif("surfaces.tif", surfaces)
    code, out, err = run_cli("info", k, "--surfaces", path, "--json")
    assert code == 0, err
    geometry = json.loads(out)["geometry"]
    assert geometry["pinched_cells"] == 8
    assert geometry["thickness_m"] == {"min": 0.0, "max": 2.0}
    # pairs with a pinched cell pass no lateral flow and are left out
    assert geometry["steepest_dip_deg"] == pytest.approx(math.degrees(math.atan(slope)), rel=1e-12)
    code, out, err = run_cli("info", k, "--surfaces", path)
    assert "8 cells pinched out (11.1 %)" in out
    assert ("caution: the layers dip by up to" in out) is caution
