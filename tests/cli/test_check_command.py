"""The flow check as the command line runs it: in every ``upscale run`` and in ``upscale check``.

The numbers themselves are checked against references in ``tests/flow``;
here: the check is recorded in summary.json and printed, can be skipped
(``--no-check``) or exceeded (``--check-limit``) with a message, and
``upscale check DIR`` solves it again from the run's files alone with the
same result — refusing when an input changed since the run.
"""

from __future__ import annotations

import json
import shutil
from pathlib import Path

import numpy as np
import pytest

from upscale import Field, coarsen
from upscale.check.axis import check_flow


def _summary(folder: Path) -> dict:
    return json.loads((folder / "summary.json").read_text())


def test_run_records_and_prints_the_check_per_axis(demo_dir, tmp_path, run_cli):
    out = tmp_path / "out"
    status, stdout, _ = run_cli(
        "run", str(demo_dir / "marrowfen_lognormal.tif"), "--block", "8x8", "--method", "geometric",
        "--out", str(out),
    )  # fmt: skip
    assert status == 0
    check = _summary(out)["check"]
    assert set(check) == {"x", "y", "corner"}
    for c in check.values():
        assert c["rel_error"] == pytest.approx((c["k_coarse"] - c["k_fine"]) / c["k_fine"], rel=1e-12)
        assert c["fine"]["mass_balance"] < 1e-8 and c["coarse"]["mass_balance"] < 1e-8
        assert c["fine"]["connected"] and c["coarse"]["connected"]
        assert c["fine"]["unknowns"] == 60851  # the active cells of the demo map
        assert f"{100 * c['rel_error']:+.2f} %" in stdout
    assert "flow check" in stdout


def test_check_matches_the_library(demo_dir, tmp_path, run_cli):
    from upscale import read_field

    out = tmp_path / "out"
    run_cli("run", str(demo_dir / "marrowfen_channels.tif"), "--block", "16x16", "--method",
            "arithmetic", "--out", str(out), "--solver", "direct")  # fmt: skip
    result = coarsen(read_field(demo_dir / "marrowfen_channels.tif"), "16x16", "arithmetic")
    library = check_flow(result.fine, result.coarse, solver="direct")
    for axis, c in _summary(out)["check"].items():
        assert c["k_fine"] == pytest.approx(library[axis].fine.k_eff, rel=1e-12)
        assert c["k_coarse"] == pytest.approx(library[axis].coarse.k_eff, rel=1e-12)


def test_3d_run_checks_the_vertical_axis_too(demo_dir, tmp_path, run_cli):
    out = tmp_path / "out"
    status, _, _ = run_cli(
        "run", str(demo_dir / "marrowfen_layered.tif"), "--dz", "1", "--block", "8x8x5",
        "--method", "harmonic", "--out", str(out),
    )  # fmt: skip
    assert status == 0
    check = _summary(out)["check"]
    assert set(check) == {"x", "y", "z", "corner"}
    # blocks of 5 whole layers in a layer cake: harmonic across layers is close to exact along z
    # (the lateral variability of each layer is mild), and too low along the layers
    assert abs(check["z"]["rel_error"]) < 0.05
    assert check["x"]["rel_error"] < -0.5


def test_no_check_records_that_no_check_ran(demo_dir, tmp_path, run_cli):
    out = tmp_path / "out"
    status, stdout, _ = run_cli(
        "run", str(demo_dir / "marrowfen_lognormal.tif"), "--block", "8x8", "--method", "harmonic",
        "--out", str(out), "--no-check",
    )  # fmt: skip
    assert status == 0
    assert _summary(out)["check"] is None
    assert "not run (--no-check)" in stdout


def test_a_grid_beyond_the_check_limit_is_checked_on_windows_with_a_reason(demo_dir, tmp_path, run_cli):
    out = tmp_path / "out"
    status, stdout, _ = run_cli(
        "run", str(demo_dir / "marrowfen_lognormal.tif"), "--block", "8x8", "--method", "harmonic",
        "--out", str(out), "--check-limit", "1000",
    )  # fmt: skip
    assert status == 0
    check = _summary(out)["check"]
    assert "65536 cells" in check["skipped"] and "1000" in check["skipped"]
    assert "the whole fine model was not solved" in stdout
    assert "checked instead on" in stdout and len(check["windows"]) == 9


def test_check_command_reproduces_the_run(demo_dir, tmp_path, run_cli):
    out = tmp_path / "out"
    run_cli("run", str(demo_dir / "marrowfen_3d.tif"), "--dz", "2", "--block", "8x8x4", "--remainder",
            "keep", "--method", "geometric", "--out", str(out))  # fmt: skip
    before = _summary(out)["check"]
    # 1e-11, not tighter: across the demo's mudstone (contrast near 1e4) the multigrid stalls near a
    # scaled residual of 2e-12 (measured), the floating-point floor of that contrast
    status, stdout, _ = run_cli("check", str(out), "--tolerance", "1e-11")
    assert status == 0
    after = _summary(out)["check"]
    for axis in ("x", "y", "z"):
        # both solves meet their residual tolerance, so k_eff agrees to well within 1e-8
        assert after[axis]["k_fine"] == pytest.approx(before[axis]["k_fine"], rel=1e-8)
        assert after[axis]["k_coarse"] == pytest.approx(before[axis]["k_coarse"], rel=1e-8)
        assert after[axis]["fine"]["residual"] <= 1e-11
    assert "flow check" in stdout


def test_check_command_refuses_a_changed_input(demo_dir, tmp_path, run_cli, write_tif):
    field = tmp_path / "field.tif"
    shutil.copy(demo_dir / "marrowfen_channels.tif", field)
    out = tmp_path / "out"
    run_cli("run", str(field), "--block", "16x16", "--method", "geometric", "--out", str(out))
    write_tif("field.tif", np.full((256, 256), 5.0), cell_size=5.0)
    status, _, stderr = run_cli("check", str(out))
    assert status == 2
    assert "changed since the run" in stderr and stderr.count("\n") == 1


def test_check_command_refuses_a_folder_without_a_run(tmp_path, run_cli):
    status, _, stderr = run_cli("check", str(tmp_path))
    assert status == 2
    assert "no summary.json" in stderr


def test_homogeneous_field_checks_exactly(tmp_path, run_cli, write_tif):
    path = write_tif("flat.tif", np.full((40, 56), 250.0), cell_size=10.0)
    out = tmp_path / "out"
    status, _, _ = run_cli("run", str(path), "--block", "8x8", "--method", "arithmetic", "--out", str(out))
    assert status == 0
    for c in _summary(out)["check"].values():
        assert c["k_fine"] == pytest.approx(250.0, rel=1e-12)  # common practice: uniform k is its own k_eff
        assert abs(c["rel_error"]) < 1e-12


def test_check_on_a_field_built_in_memory():
    k = np.tile([[10.0], [1000.0]], (8, 16))
    result = coarsen(Field.from_arrays(k), "4x4", "arithmetic")
    checks = check_flow(result.fine, result.coarse)
    assert abs(checks["x"].rel_error) < 1e-12  # along layers the arithmetic mean is exact (Bear 1972)
