"""``--wells`` on ``upscale run`` and ``upscale check``: the well check printed, recorded, solved again.

* A run with a wells file prints the well check and records it as
  ``well_check`` in summary.json; ``upscale check DIR --wells`` solves it
  again from the fine inputs and the coarse-grid package alone (the block
  kx, ky of cells.csv) and finds the run's rates to 1e-10 (the same
  equations from the same numbers, common practice).
* Each bad wells file or well ends the command with one line on stderr,
  ``upscale: error: ...``, exit status 2, no traceback, and nothing written
  (the battery of tests/cli/test_errors.py, for wells).
"""

from __future__ import annotations

import json
from pathlib import Path

import pytest
from conftest import ORIGIN, write_raster

from upscale.gallery.problems import uncorrelated_lognormal

SEED = 6_150_883_271
X0, Y0 = ORIGIN  # the north-west corner of the rasters; 10 m cells
HEADER = "name,x,y,control,value,radius\n"
PAIR = HEADER + f"I,{X0 + 45},{Y0 - 45},pressure,2,0.1\nP,{X0 + 275},{Y0 - 155},pressure,1,0.1\n"


@pytest.fixture
def field(tmp_path: Path) -> Path:
    return write_raster(tmp_path / "k.tif", uncorrelated_lognormal((16, 32), SEED), cell_size=10.0)


def _wells(tmp_path: Path, text: str) -> Path:
    path = tmp_path / "wells.csv"
    path.write_text(text)
    return path


def test_run_and_check_with_wells(run_cli, field: Path, tmp_path: Path) -> None:
    wells, out = _wells(tmp_path, PAIR), tmp_path / "out"
    code, stdout, stderr = run_cli("run", field, "--block", "8x8", "--method", "flow-transmissibility",
                                   "--wells", wells, "--out", out)  # fmt: skip
    assert code == 0, stderr
    assert "well check: the wells of" in stdout and "total rate" in stdout
    recorded = json.loads((out / "summary.json").read_text())["well_check"]
    assert recorded["outer_faces"] == "closed" and set(recorded["wells"]) == {"I", "P"}
    assert recorded["wells"]["I"]["fine"]["cells"] == [[0, 4, 4]] and recorded["wells"]["I"]["coarse"][
        "cells"
    ] == [[0, 0, 0]]
    fine = recorded["wells"]["I"]["fine"]["rate"]
    assert fine > 0 and recorded["wells"]["P"]["fine"]["rate"] == pytest.approx(-fine, rel=1e-9)

    code, stdout, stderr = run_cli("check", out, "--wells", wells)
    assert code == 0, stderr
    assert "well check: the wells of" in stdout
    again = json.loads((out / "summary.json").read_text())["well_check"]
    for name in ("I", "P"):
        for grid in ("fine", "coarse"):
            assert again["wells"][name][grid]["rate"] == pytest.approx(
                recorded["wells"][name][grid]["rate"], rel=1e-10
            )
    code, _, stderr = run_cli("check", out, "--wells", wells, "--outer-pressure", "1.5", "-q")
    assert code == 0, stderr
    assert json.loads((out / "summary.json").read_text())["well_check"]["outer_faces"] == {"pressure": 1.5}


BAD = {
    "unknown column": ("name,x,y,control,value,radius,depth\n", "unknown column 'depth'"),
    "not a number": (HEADER + "I,east,1,rate,1,0.1\n", "line 2: x = 'east' is not a finite number"),
    "outside": (HEADER + f"I,{X0 - 5},{Y0 - 5},pressure,1,0.1\n", "well I: x = 412345 lies outside"),
    "one cell": (PAIR + f"Q,{X0 + 41},{Y0 - 49},pressure,0,0.1\n", "wells I and Q share a fine cell"),
    "rates only": (PAIR.replace("pressure", "rate"), "every well is driven by a rate and the outer faces"),
    "layers": (f"name,x,y,layers,control,value,radius\nI,{X0 + 45},{Y0 - 45},2,pressure,1,0.1\n",
               "layers 2-2 go below"),
    "radius in inches": (HEADER + f"I,{X0 + 45},{Y0 - 45},pressure,1,4.5\n", "radius 4.5 must be"),
}  # fmt: skip


@pytest.mark.parametrize("case", BAD)
def test_a_bad_wells_file_is_one_line(run_cli, field: Path, tmp_path: Path, case: str) -> None:
    text, message = BAD[case]
    out = tmp_path / "out"
    code, stdout, stderr = run_cli("run", field, "--block", "8x8", "--method", "arithmetic",
                                   "--wells", _wells(tmp_path, text), "--out", out)  # fmt: skip
    assert code == 2 and stderr.startswith("upscale: error: ") and message in stderr
    assert stderr.count("\n") == 1 and "Traceback" not in stderr
    assert not out.exists()


def test_wells_need_the_check(run_cli, field: Path, tmp_path: Path) -> None:
    code, _, stderr = run_cli("run", field, "--block", "8x8", "--method", "arithmetic", "--no-check",
                              "--wells", _wells(tmp_path, PAIR), "--out", tmp_path / "out")  # fmt: skip
    assert (
        code == 2
        and stderr == "upscale: error: --wells adds a well check to the flow check; leave out --no-check\n"
    )


def test_a_well_in_a_kept_edge_block(run_cli, tmp_path: Path) -> None:
    # 30 x 44 cells in 8 x 8 blocks, edge blocks kept: 6 rows and 4 columns in the last ones
    field = write_raster(tmp_path / "k.tif", uncorrelated_lognormal((30, 44), SEED + 1), cell_size=10.0)
    rows = f"I,{X0 + 15},{Y0 - 15},pressure,2,0.1\nP,{X0 + 425},{Y0 - 285},rate,-3,0.1\n"
    wells = _wells(tmp_path, HEADER + rows)
    out = tmp_path / "out"
    code, _, stderr = run_cli("run", field, "--block", "8x8", "--remainder", "keep", "--method", "flow",
                              "--wells", wells, "--out", out, "-q")  # fmt: skip
    assert code == 0, stderr
    recorded = json.loads((out / "summary.json").read_text())["well_check"]["wells"]["P"]
    assert recorded["fine"]["cells"] == [[0, 28, 42]] and recorded["coarse"]["cells"] == [[0, 3, 5]]
    # the package places the edge blocks where the run did
    code, _, stderr = run_cli("check", out, "--wells", wells, "-q")
    assert code == 0, stderr
    again = json.loads((out / "summary.json").read_text())["well_check"]["wells"]["P"]
    assert again["coarse"]["cells"] == [[0, 3, 5]]
    assert again["coarse"]["pressure"] == pytest.approx(recorded["coarse"]["pressure"], rel=1e-10)
