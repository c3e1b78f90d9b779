"""A method per axis on the command line: ``upscale run``, ``upscale check`` and ``upscale compare``.

What is tested
--------------
* ``upscale run --method xy=arithmetic,z=harmonic`` on a GeoTIFF of layers
  of uniform permeability and unequal thickness: the header names the
  method per axis, summary.json and manifest.json record it axis by axis,
  the flow check is exact on x, y and z (Bear 1972), and ``upscale check``
  solves it again from the folder with the same result.
* Its refusals are one ``upscale: error:`` line each.
* ``upscale compare`` prints and records the best method per axis with a
  command line, and names it on its page; that command runs and records the check errors the
  comparison reported for it.
"""

from __future__ import annotations

import json
import shlex

import numpy as np
import pytest
from conftest import write_raster

from upscale.gallery.problems import random_layers

SEED = 604_917_382


@pytest.fixture
def layered(tmp_path):
    """Six layers of uniform k and unequal thickness on 16 x 16 cells of 10 m, and their thicknesses."""
    layers = random_layers(6, seed=SEED, thickness=(0.5, 4.0))
    path = write_raster(tmp_path / "layers.tif", layers.stack(16, 16))
    return path, layers


def _json(path):
    return json.loads(path.read_text())


def test_run_records_the_method_per_axis_and_is_exact_on_layers(layered, tmp_path, run_cli):
    path, layers = layered
    dz = ",".join(repr(float(t)) for t in layers.thickness)
    out = tmp_path / "out"
    status, stdout, err = run_cli("run", path, "--dz", dz, "--block", "8x8x3", "--method",
                                "z=harmonic,xy=arithmetic", "--out", out)  # fmt: skip
    assert status == 0, err
    assert "method       xy=arithmetic,z=harmonic\n" in stdout
    recorded = {"name": "xy=arithmetic,z=harmonic", "options": {},
                "per_axis": {"x": "arithmetic", "y": "arithmetic", "z": "harmonic"}}  # fmt: skip
    summary = _json(out / "summary.json")
    assert summary["method"] == recorded
    assert _json(out / "manifest.json")["method"] == recorded
    # layers in parallel along x and y, in series along z: the thickness-weighted arithmetic
    # and harmonic means are exact (Bear 1972, "Dynamics of Fluids in Porous Media", §5.10)
    for axis in "xyz":
        assert abs(summary["check"][axis]["rel_error"]) < 1e-9, axis
    assert summary["check"]["z"]["k_fine"] == pytest.approx(layers.across, rel=1e-9)

    status, _, _ = run_cli("check", out)
    assert status == 0
    again = _json(out / "summary.json")["check"]
    for flow, check in summary["check"].items():
        assert again[flow]["k_coarse"] == pytest.approx(check["k_coarse"], rel=1e-12)
        assert again[flow]["k_fine"] == pytest.approx(check["k_fine"], rel=1e-9)


@pytest.mark.parametrize(
    "method, options, message",
    [
        ("xy=arithmetic,z=flow-transmissibility", (),
         "method 'flow-transmissibility' cannot serve some axes"),
        ("xy=arithmetic,z=flow", ("--bc", "linear"), "--bc linear gives a full tensor"),
        ("xy=arithmetic", (), "names no method for axis z"),
        ("xy=arithmetic,xz=harmonic", (), "axis x is given twice"),
        ("xy=arithmetic,z=harmonic", ("--exponent", "0.5"), "takes no option exponent"),
    ],
)
def test_refusals_are_one_line(layered, tmp_path, run_cli, method, options, message):
    path, _ = layered
    status, _, err = run_cli("run", path, "--dz", "1", "--block", "8x8x3", "--method", method, *options,
                             "--out", tmp_path / "out")  # fmt: skip
    assert status == 2
    assert err.startswith("upscale: error: ") and message in err and err.count("\n") == 1
    assert not (tmp_path / "out").exists()


def test_compare_suggests_a_method_per_axis_whose_run_reproduces_its_errors(demo_dir, tmp_path, run_cli,
                                                                         monkeypatch):  # fmt: skip
    monkeypatch.chdir(tmp_path)
    status, stdout, _ = run_cli("compare", demo_dir / "marrowfen_layered.tif", "--dz", "1", "--block",
                                "8x8x5", "--methods", "arithmetic,harmonic,flow-transmissibility",
                                "--out", "cmp")  # fmt: skip
    assert status == 0
    suggested = _json(tmp_path / "cmp" / "compare.json")["per_axis"]
    # the common recipe of the trade on a layered model (common practice)
    assert suggested["method"] == "xy=arithmetic,z=harmonic" and suggested["rank"] is None
    x_error = 100 * suggested["check"]["x"]["rel_error"]
    assert f"best per axis: xy=arithmetic,z=harmonic (error x {x_error:+.2f} %" in stdout
    assert f"\n  {suggested['command']}\n" in stdout
    page = (tmp_path / "cmp" / "report.html").read_text()
    assert "Best method per axis: <strong>xy=arithmetic,z=harmonic</strong>" in page
    words = shlex.split(suggested["command"])
    assert words[:2] == ["upscale", "run"] and "--methods" not in words
    status, _, _ = run_cli(*words[1:])
    assert status == 0
    check = _json(tmp_path / "cmp-per-axis" / "summary.json")["check"]
    assert set(check) == set(suggested["check"])
    for flow, found in suggested["check"].items():
        np.testing.assert_allclose(check[flow]["rel_error"], found["rel_error"], rtol=1e-9, atol=1e-12)
