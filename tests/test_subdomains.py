"""The flow check on sub-domains (`upscale.check.subdomains`), used beyond --check-limit.

What is tested
--------------
* `plan_windows`: at most 3 x 3 windows of whole blocks inside the grid,
  each within the cell limit, first/middle/last along each axis.
* A window covering the whole domain reproduces the global check exactly
  (same system: the run's own transmissibilities, the domain's outer faces),
  for an average, a flow-based tensor method and direct transmissibilities,
  2D and 3D — so the windows are the global check, cut.
* A homogeneous field has no error in any window (common practice).
* Through the command line: a run over the limit says the whole model was
  not solved, records per-window checks and their spread in summary.json,
  and prints them — never a silent skip.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest

from upscale import BlockSpec, Field, coarsen
from upscale.check.axis import check_flow
from upscale.check.subdomains import check_subdomains, plan_windows
from upscale.gallery.problems import uncorrelated_lognormal


@pytest.mark.parametrize("shape, block, limit", [((1, 100, 100), (1, 10, 10), 900),
                                                 ((4, 37, 53), (2, 4, 5), 2000),
                                                 ((1, 16, 16), (1, 8, 8), 10**6)])  # fmt: skip
def test_plan_windows(shape, block, limit):
    windows = plan_windows(shape, block, limit)
    nby, nbx = -(-shape[1] // block[1]), -(-shape[2] // block[2])
    assert 1 <= len(windows) <= 9 and len(set(map(str, windows))) == len(windows)
    for rows, cols in windows:
        assert 0 <= rows.start < rows.stop <= nby and 0 <= cols.start < cols.stop <= nbx
        cells = shape[0] * (rows.stop - rows.start) * block[1] * (cols.stop - cols.start) * block[2]
        assert cells <= limit or (rows.stop - rows.start == 1 and cols.stop - cols.start == 1)
    assert windows[0][0].start == 0 and windows[0][1].start == 0
    assert windows[-1][0].stop == nby and windows[-1][1].stop == nbx


CASES = [("geometric", {}), ("flow", {"bc": "periodic"}), ("flow-transmissibility", {"border": 1})]


@pytest.mark.parametrize("method, options", CASES)
@pytest.mark.parametrize("dims", [2, 3])
def test_whole_domain_window_is_the_global_check(method, options, dims):
    k = uncorrelated_lognormal((3, 24, 32) if dims == 3 else (24, 32), seed=4_410 + dims)
    k[..., 5, 7] = np.nan
    field = Field.from_arrays(k, dz=1.5 if dims == 3 else None, cell_size=(10.0, 8.0))
    block = BlockSpec(8, 6, 3 if dims == 3 else 1)
    result = coarsen(field, block, method, **options)
    trans = result.transmissibilities()
    whole = check_subdomains(result.fine, result.coarse, trans, block, max_cells=math.prod(k.shape))
    assert len(whole["windows"]) == 1
    window = whole["windows"][0]
    assert window["rows"] == [0, 24] and window["columns"] == [0, 32]
    for axis, check in check_flow(result.fine, trans).items():
        assert window["check"][axis]["k_coarse"] == pytest.approx(check.coarse.k_eff, rel=1e-12)
        assert window["check"][axis]["k_fine"] == pytest.approx(check.fine.k_eff, rel=1e-12)


def test_homogeneous_field_has_no_error_in_any_window():
    field = Field.from_arrays(np.full((40, 48), 7.0), cell_size=(5.0, 5.0))
    result = coarsen(field, "4x4", "harmonic")
    found = check_subdomains(result.fine, result.coarse, result.transmissibilities(),
                             result.block, max_cells=300)  # fmt: skip
    assert len(found["windows"]) == 9
    for axis, spread in found["spread"].items():
        assert max(abs(spread["min"]), abs(spread["max"])) < 1e-12, axis


def test_run_over_the_limit_checks_windows(run_cli, demo_dir, tmp_path):
    out = tmp_path / "windows"
    args = ["--block", "8x8", "--method", "geometric", "--check-limit", "20000", "--out", out]
    code, stdout, stderr = run_cli("run", demo_dir / "marrowfen_lognormal.tif", *args)
    assert code == 0, stderr
    assert "the whole fine model was not solved" in stdout and "checked instead on 9 windows" in stdout
    check = json.loads((out / "summary.json").read_text())["check"]
    assert "20000" in check["skipped"] and len(check["windows"]) == 9
    for axis in ("x", "y"):
        errors = [w["check"][axis]["rel_error"] for w in check["windows"]]
        assert check["spread"][axis]["median"] == pytest.approx(float(np.median(errors)), rel=1e-15)
        assert check["spread"][axis]["min"] == min(errors) and check["spread"][axis]["max"] == max(errors)
        assert f"spread along {axis}" in stdout
