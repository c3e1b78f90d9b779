"""Tests of ``upscale run`` on the demo fields.

Runs go through `upscale.cli.main.main` in this process (output captured by
capsys) and once through the installed console script in a subprocess. The
files written are read back with rasterio and compared with the library
pipeline on the same input.
"""

from __future__ import annotations

import json
import subprocess

import numpy as np
import pytest
import rasterio
from affine import Affine
from conftest import UPSCALE_EXE, partial_leftovers

import upscale
from upscale.export.package import PACKAGE_FILES


def _results(folder):
    """The files of a run folder besides its coarse-grid package (which must be complete)."""
    names = sorted(p.name for p in folder.iterdir())
    assert set(PACKAGE_FILES) <= set(names)
    return [n for n in names if n not in PACKAGE_FILES]


LOGNORMAL = "marrowfen_lognormal.tif"


def _read(path):
    with rasterio.open(path) as src:
        return src.read(), src.transform, src.crs


def test_run_2d_map_writes_kx_ky_and_summary(run_cli, demo_dir, tmp_path):
    out = tmp_path / "coarse"
    code, stdout, err = run_cli(
        "run", demo_dir / LOGNORMAL, "--block", "8x8", "--method", "geometric", "--out", out
    )
    assert (code, err) == (0, "")
    assert _results(out) == ["kx.tif", "ky.tif", "summary.json"]
    assert "fine grid    256 x 256 cells (x, y)" in stdout
    assert "coarse grid  32 x 32 blocks of 8x8 cells" in stdout
    assert f"wrote kx.tif, ky.tif, the coarse-grid package (manifest.json), summary.json to {out}" in stdout

    expected = upscale.coarsen(upscale.read_field(demo_dir / LOGNORMAL), "8x8", "geometric")
    kx, transform, crs = _read(out / "kx.tif")
    np.testing.assert_array_equal(kx, expected.coarse.kx)
    with rasterio.open(demo_dir / LOGNORMAL) as src:
        assert transform == src.transform @ Affine.scale(8, 8)
        assert crs == src.crs
    summary = json.loads((out / "summary.json").read_text())
    assert summary["method"] == {"name": "geometric", "options": {}}
    assert summary["command"] == [
        "upscale", "run", str(demo_dir / LOGNORMAL), "--block", "8x8", "--method", "geometric",
        "--out", str(out),
    ]  # fmt: skip
    active = int(np.isfinite(kx).sum())
    assert f"{active} active" in stdout
    assert summary["active"]["coarse_blocks"] == active
    assert 0 < active < 32 * 32  # the north-east corner lies outside the model


def test_run_with_porosity_writes_porosity(run_cli, demo_dir, tmp_path):
    out = tmp_path / "coarse"
    code, stdout, err = run_cli(
        "run", demo_dir / LOGNORMAL, "--porosity", demo_dir / "marrowfen_porosity.tif",
        "--block", "16x8", "--method", "harmonic", "--out", out,
    )  # fmt: skip
    assert (code, err) == (0, "")
    assert _results(out) == [
        "kx.tif", "ky.tif", "porosity.tif", "summary.json"
    ]  # fmt: skip
    porosity, _, _ = _read(out / "porosity.tif")
    assert porosity.shape == (1, 32, 16)
    active = porosity[np.isfinite(porosity)]
    assert active.size > 0 and active.min() >= 0.0 and active.max() <= 0.32
    with rasterio.open(out / "porosity.tif") as src:
        assert src.units == ("fraction",)
    summary = json.loads((out / "summary.json").read_text())
    assert [i["role"] for i in summary["inputs"]] == ["kx", "porosity"]
    assert "porosity" in stdout


@pytest.mark.slow
def test_run_3d_model_writes_kz_with_one_band_per_coarse_layer(run_cli, demo_dir, tmp_path):
    out = tmp_path / "coarse"
    code, stdout, err = run_cli(
        "run", demo_dir / "marrowfen_3d.tif", "--dz", "2", "--block", "8x8x2",
        "--method", "arithmetic", "--kv-kh", "0.1", "--out", out,
    )  # fmt: skip
    assert (code, err) == (0, "")
    assert _results(out) == ["kx.tif", "ky.tif", "kz.tif", "summary.json"]
    kx, _, _ = _read(out / "kx.tif")
    kz, _, _ = _read(out / "kz.tif")
    assert kx.shape == kz.shape == (8, 12, 12)
    # the arithmetic mean is linear: kz = 0.1 kx block by block, up to the float32 rounding
    # of the demo raster's 0.1 k (half an ulp: 2**-24 relative)
    np.testing.assert_allclose(kz, 0.1 * kx, rtol=2.0**-23)
    np.testing.assert_array_equal(np.isnan(kz), np.isnan(kx))
    summary = json.loads((out / "summary.json").read_text())
    assert summary["dimensions"] == 3
    assert summary["block"]["z"] == 2
    assert summary["fine"]["dz_m"] == [2.0] * 16
    assert summary["coarse"]["dz_m"] == [4.0] * 8
    assert "(x, y, z)" in stdout


def test_power_method_requires_an_exponent(run_cli, demo_dir, tmp_path):
    out = tmp_path / "coarse"
    code, stdout, err = run_cli(
        "run", demo_dir / LOGNORMAL, "--block", "8x8", "--method", "power", "--out", out
    )
    assert code == 2
    assert err == "upscale: error: method 'power' needs --exponent\n"
    assert not out.exists()
    code, stdout, err = run_cli(
        "run", demo_dir / LOGNORMAL, "--block", "8x8", "--method", "power", "--exponent", "0.5",
        "--out", out,
    )  # fmt: skip
    assert (code, err) == (0, "")
    assert "power (exponent=0.5)" in stdout
    summary = json.loads((out / "summary.json").read_text())
    assert summary["method"] == {"name": "power", "options": {"exponent": 0.5}}


def test_exponent_for_a_method_without_options_is_refused(run_cli, demo_dir, tmp_path):
    code, _, err = run_cli(
        "run", demo_dir / LOGNORMAL, "--block", "8x8", "--method", "geometric", "--exponent", "2",
        "--out", tmp_path / "coarse",
    )  # fmt: skip
    assert code == 2
    assert err == "upscale: error: method 'geometric' takes no option exponent\n"


def test_overwrite_replaces_a_3d_result_with_a_2d_one(run_cli, demo_dir, tmp_path):
    out = tmp_path / "coarse"
    code, _, _ = run_cli(
        "run", demo_dir / "marrowfen_layered.tif", "--dz", "1", "--block", "8x8x5",
        "--method", "harmonic", "--out", out,
    )  # fmt: skip
    assert code == 0 and (out / "kz.tif").exists()
    (out / "my-notes.txt").write_text("mine")
    code, _, err = run_cli(
        "run", demo_dir / LOGNORMAL, "--block", "8x8", "--method", "arithmetic",
        "--out", out, "--overwrite",
    )  # fmt: skip
    assert (code, err) == (0, "")
    assert _results(out) == [
        "kx.tif", "ky.tif", "my-notes.txt", "summary.json"
    ]  # fmt: skip
    kx, _, _ = _read(out / "kx.tif")
    assert kx.shape == (1, 32, 32)
    assert partial_leftovers(tmp_path) == []


def test_quiet_run_prints_nothing(run_cli, demo_dir, tmp_path):
    code, stdout, err = run_cli(
        "--quiet", "run", demo_dir / "marrowfen_channels.tif", "--block", "16x16",
        "--method", "tubes", "--remainder", "crop", "--out", tmp_path / "c",
    )  # fmt: skip
    assert (code, stdout, err) == (0, "", "")
    assert (tmp_path / "c" / "kx.tif").exists()


def test_verbose_run_tells_every_step_and_quiet_silences_them(run_cli, demo_dir, tmp_path):
    # stderr is not a terminal here: progress lines need -v, and --quiet wins over -v
    args = ["run", demo_dir / LOGNORMAL, "--block", "8x8", "--method", "geometric"]
    code, _, err = run_cli("-v", *args, "--out", tmp_path / "v")
    assert code == 0, err
    lines = err.splitlines()
    assert all(line.startswith("upscale: ") for line in lines), lines
    for step in ("reading", "upscaling", "checking the flow", "writing"):
        started = [i for i, line in enumerate(lines) if line.startswith(f"upscale: {step}")]
        assert len(started) == 2 and lines[started[1]].endswith(" s"), (step, lines)  # start, end
    assert run_cli(*args, "--out", tmp_path / "plain")[2] == ""
    assert run_cli("-q", "-v", *args, "--out", tmp_path / "q")[1:] == ("", "")


@pytest.mark.slow
def test_chunk_option_does_not_change_the_result(run_cli, demo_dir, tmp_path):
    results = []
    for chunk in ("64MB", "20kB"):
        out = tmp_path / chunk
        code, _, err = run_cli(
            "run", demo_dir / "marrowfen_3d.tif", "--dz", "2", "--block", "8x8x4",
            "--method", "slabs", "--chunk", chunk, "--out", out,
        )  # fmt: skip
        assert (code, err) == (0, "")
        results.append({n: _read(out / f"{n}.tif")[0] for n in ("kx", "ky", "kz")})
    for name in ("kx", "ky", "kz"):
        np.testing.assert_array_equal(results[0][name], results[1][name])


@pytest.mark.parametrize("command", [[], ["run"], ["info"], ["demo"]])
def test_help_of_every_command(run_cli, command):
    code, stdout, err = run_cli(*command, "--help")
    assert (code, err) == (0, "")
    assert stdout.startswith(f"Usage: upscale {' '.join(command)}".rstrip())
    if command == ["run"]:
        for method in upscale.METHODS:
            assert method in stdout


def test_version(run_cli):
    code, stdout, err = run_cli("--version")
    assert (code, err) == (0, "")
    assert stdout == f"upscale, version {upscale.__version__}\n"


def test_console_script_runs_in_a_subprocess(demo_dir, tmp_path):
    out = tmp_path / "coarse"
    done = subprocess.run(
        [str(UPSCALE_EXE), "run", str(demo_dir / LOGNORMAL), "--block", "8x8",
         "--method", "geometric", "--out", str(out)],
        capture_output=True, text=True, timeout=120, cwd=tmp_path,
    )  # fmt: skip
    assert done.returncode == 0, done.stderr
    assert done.stderr == ""
    assert "wrote kx.tif, ky.tif, the coarse-grid package (manifest.json), summary.json" in done.stdout
    assert _results(out) == ["kx.tif", "ky.tif", "summary.json"]
    expected = upscale.coarsen(upscale.read_field(demo_dir / LOGNORMAL), "8x8", "geometric")
    np.testing.assert_array_equal(_read(out / "ky.tif")[0], expected.coarse.ky)
    version = subprocess.run(
        [str(UPSCALE_EXE), "--version"], capture_output=True, text=True, timeout=60
    )
    assert (version.returncode, version.stdout) == (0, f"upscale, version {upscale.__version__}\n")
