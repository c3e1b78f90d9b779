"""``upscale run`` with the flow-based methods, and ``upscale check`` of their folders.

What is tested
--------------
* ``--method flow --bc periodic --border 4`` writes kx, ky and the cross
  terms kxy, kyx equal to the library's, the tensor summary and its terminal
  line, and the check (the command of the issue's "done when").
* ``--method flow-transmissibility`` writes the face transmissibility files
  (inner faces and the half transmissibilities to the outer faces);
  the run's check uses them, and ``upscale check`` reading them back from the
  folder reproduces the run's coarse k_eff exactly (while block values alone
  with the harmonic rule would not).
* A 3D run with renormalization.
* Bad input: a border as large as the grid, a negative border, --bc with an
  average, renormalization on a block that is not a power of two — one line
  on stderr, exit 2, no output folder.
"""

from __future__ import annotations

import json

import numpy as np
import pytest
import rasterio

import upscale
from upscale.check.axis import check_flow
from upscale.export.package import PACKAGE_FILES


def _results(folder):
    """The files of a run folder besides its coarse-grid package (which must be complete)."""
    names = sorted(p.name for p in folder.iterdir())
    assert set(PACKAGE_FILES) <= set(names)
    return [n for n in names if n not in PACKAGE_FILES]


LOGNORMAL = "marrowfen_lognormal.tif"
CHANNELS = "marrowfen_channels.tif"


def _band(path):
    with rasterio.open(path) as src:
        return src.read()


def test_flow_periodic_with_border_writes_tensor_and_check(run_cli, demo_dir, tmp_path):
    out = tmp_path / "tensor"
    code, stdout, err = run_cli("run", demo_dir / LOGNORMAL, "--block", "16x16", "--method", "flow",
                                "--bc", "periodic", "--border", "4", "--out", out)  # fmt: skip
    assert (code, err) == (0, "")
    names = _results(out)
    assert names == ["kx.tif", "kxy.tif", "ky.tif", "kyx.tif", "summary.json"]
    want = upscale.coarsen(upscale.read_field(demo_dir / LOGNORMAL), "16x16", "flow",
                           bc="periodic", border=4)  # fmt: skip
    np.testing.assert_array_equal(_band(out / "kx.tif"), want.coarse.kx)
    np.testing.assert_array_equal(_band(out / "kxy.tif"), want.tensor["kxy"])
    # with a border the periodic tensor is made symmetric
    np.testing.assert_array_equal(_band(out / "kxy.tif"), _band(out / "kyx.tif"))
    summary = json.loads((out / "summary.json").read_text())
    assert summary["method"] == {"name": "flow", "options": {"bc": "periodic", "border": 4}}
    tensor = summary["tensor"]
    floored = int((want.zeros.touched & np.isfinite(want.coarse.kx)).sum())  # left out of the tensor summary
    assert tensor["blocks"] == summary["active"]["coarse_blocks"] - floored
    assert 1.0 <= tensor["anisotropy_median"] <= tensor["anisotropy_max"]
    assert 0.0 < tensor["off_diagonal_p95"] <= tensor["off_diagonal_max"]
    assert summary["transmissibility"] == {"rule": "harmonic half-block", "replaced_faces": 0}
    assert set(summary["check"]) == {"x", "y", "corner"}
    assert "tensor: anisotropy" in stdout and "off-diagonal" in stdout
    assert ("warning: off-diagonal permeability" in stdout) == (tensor["warning"] is not None)


def test_flow_transmissibility_faces_written_used_and_read_back(run_cli, demo_dir, tmp_path):
    out = tmp_path / "faces"
    method = ["--method", "flow-transmissibility", "--border", "2"]
    code, stdout, err = run_cli("run", demo_dir / CHANNELS, "--block", "16x16", *method, "--out", out)
    assert (code, err) == (0, "")
    assert {"transmissibility_x.tif", "transmissibility_y.tif"} <= {p.name for p in out.iterdir()}
    assert "coarse transmissibilities from two-block flow solves" in stdout
    summary = json.loads((out / "summary.json").read_text())
    assert summary["transmissibility"]["rule"] == "two-block flow solves"
    # every face normal to x, the two outer ones included: 17 for 16 blocks
    tx = _band(out / "transmissibility_x.tif")
    assert tx.shape == (1, 16, 17) and np.all(tx >= 0)
    with rasterio.open(out / "transmissibility_x.tif") as faces, rasterio.open(out / "kx.tif") as kx:
        assert faces.transform.c == pytest.approx(kx.transform.c - kx.transform.a / 2)

    result = upscale.coarsen(upscale.read_field(demo_dir / CHANNELS), "16x16",
                             "flow-transmissibility", border=2)  # fmt: skip
    np.testing.assert_array_equal(tx[:, :, 1:-1], result.faces[2])
    np.testing.assert_array_equal(tx[:, :, :1], result.boundary[2][0])
    np.testing.assert_array_equal(tx[:, :, -1:], result.boundary[2][1])
    run_k = {axis: c["k_coarse"] for axis, c in summary["check"].items()}
    harmonic = check_flow(result.fine, result.coarse)
    assert any(abs(harmonic[a].coarse.k_eff - run_k[a]) > 1e-6 * run_k[a] for a in run_k)

    code, stdout, err = run_cli("check", out)
    assert (code, err) == (0, "")
    again = json.loads((out / "summary.json").read_text())["check"]
    for axis, k in run_k.items():
        assert again[axis]["k_coarse"] == pytest.approx(k, rel=1e-12)


@pytest.mark.slow
def test_renormalization_3d(run_cli, demo_dir, tmp_path):
    out = tmp_path / "renorm"
    code, _, err = run_cli("run", demo_dir / "marrowfen_3d.tif", "--dz", "2", "--block", "8x8x4",
                           "--method", "renormalization", "--out", out)  # fmt: skip
    assert (code, err) == (0, "")
    kz = _band(out / "kz.tif")
    assert kz.shape == (4, 12, 12) and np.nanmin(kz) >= 0


@pytest.mark.parametrize(
    "args, message",
    [
        (["--method", "flow", "--border", "256"], "a border of 256 cells is as large as the grid"),
        (["--method", "flow", "--border", "-1"], "--border must be 0 or more"),
        (["--method", "geometric", "--bc", "linear"], "method 'geometric' takes no option bc"),
        (["--method", "renormalization", "--block", "12x12", "--remainder", "crop"],
         "every block size must be a power of two; 12x12 is not"),
    ],
)  # fmt: skip
def test_bad_flow_options_are_one_line_errors(run_cli, demo_dir, tmp_path, args, message):
    out = tmp_path / "never"
    block = [] if "--block" in args else ["--block", "16x16"]
    code, stdout, err = run_cli("run", demo_dir / LOGNORMAL, *block, *args, "--out", out)
    assert code == 2 and stdout == ""
    assert err.startswith("upscale: error: ") and message in err
    assert len(err.strip().splitlines()) == 1 and "Traceback" not in err
    assert not out.exists()
