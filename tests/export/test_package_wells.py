"""The wells tables of the coarse-grid package, and ``upscale check DIR --wells`` from them.

What is tested
--------------
* A run with wells writes ``wells.csv`` (one row per well and coarse cell:
  the cell's id as cells.csv numbers it, the connection factor in the
  transmissibility unit of connections.csv, what set it, the completed
  interval, the control) and ``well_faces.csv`` (the faces near-well
  upscaling set), both as Parquet too, listed in manifest.json with a unit
  for every column; the factors are the well check's times the package's
  transmissibility factor (SI: the darcy's definition, 9.869233e-13 m² per D;
  field: mD·ft), as for connections.csv.
* ``--well-connection peaceman`` sets every factor by Peaceman's formula and
  no face; its empty well_faces.csv reads back.
* In 3D, a well completed in layers 2-3 of 1, 2, 3, 4 m gets one row per
  coarse layer it crosses, with the part of its interval in each (in ft
  with ``--units field``, 0.3048 m each).
* ``upscale check DIR --wells FILE`` connects the coarse wells as the
  package's tables say: after a face of well_faces.csv is edited (and the
  manifest told), the coarse rates change; unedited, they are the run's to
  1e-10 (the same equations from the same numbers, common practice). A
  wells file with other wells, or a well moved to another block, ends in one
  line naming the mismatch; so does an edited face between cells that are
  not neighbours.
"""

from __future__ import annotations

import csv
import hashlib
import json
from pathlib import Path

import numpy as np
import pytest
from conftest import ORIGIN, write_raster

from upscale.gallery.problems import uncorrelated_lognormal

SEED = 5_204_993_187
X0, Y0 = ORIGIN  # 10 m cells
WELLS = ("name,x,y,control,value,radius\n"
         f"I,{X0 + 45},{Y0 - 45},pressure,2,0.1\n"
         f"P,{X0 + 275},{Y0 - 155},pressure,1,0.1\n"
         f"R,{X0 + 275},{Y0 - 35},rate,-0.5,0.1\n")  # fmt: skip


def _read(path: Path) -> list[dict[str, str]]:
    with open(path, newline="") as f:
        return list(csv.DictReader(f))


@pytest.fixture
def run(run_cli, tmp_path: Path):
    """``run(*options) -> (folder, wells file)``: a 16 x 32 field upscaled 8x8 with the three wells."""
    field = write_raster(tmp_path / "k.tif", uncorrelated_lognormal((16, 32), SEED), cell_size=10.0)
    wells = tmp_path / "wells.csv"
    wells.write_text(WELLS)

    def go(*options: str) -> tuple[Path, Path]:
        out = tmp_path / "out"
        code, _, stderr = run_cli("run", field, "--block", "8x8", "--method", "flow", "--wells", wells,
                                  "--out", out, "--overwrite", *options)  # fmt: skip
        assert code == 0, stderr
        return out, wells

    return go


@pytest.mark.parametrize("units", ["si", "field"])
def test_the_wells_tables_hold_the_well_checks_connections(run, units) -> None:
    out, _ = run("--units", units)
    manifest = json.loads((out / "manifest.json").read_text())
    check = json.loads((out / "summary.json").read_text())["well_check"]
    for name in ("wells.csv", "wells.parquet", "well_faces.csv", "well_faces.parquet"):
        assert name in manifest["files"] and name in manifest["tables"]
    assert manifest["wells"] == {"outer_faces": "closed", "connection": "near-well"}
    unit = manifest["units"]["columns"]
    t = {"si": "m³", "field": "mD·ft"}[units]
    assert unit["wells"]["factor"] == unit["well_faces"]["transmissibility"] == t
    assert set(unit["wells"]) == set(_read(out / "wells.csv")[0])
    tf = manifest["units"]["factors"]["k"] * manifest["units"]["factors"]["length"]
    assert tf == pytest.approx({"si": 9.869233e-16, "field": 1 / 0.3048}[units], rel=1e-12)

    rows = _read(out / "wells.csv")
    cells = {int(c["id"]): c for c in _read(out / "cells.csv")}
    assert [r["well"] for r in rows] == ["I", "P", "R"]
    for row in rows:
        recorded = check["wells"][row["well"]]
        [[k, j, i]] = recorded["coarse"]["cells"]
        cell = cells[int(row["id"])]
        assert (int(cell["k"]), int(cell["j"]), int(cell["i"])) == (k, j, i)
        assert float(row["factor"]) == pytest.approx(recorded["coarse"]["factors"][0] * tf, rel=1e-12)
        assert row["set_by"] == "near-well" and row["control"] == recorded["control"]
        scale = tf if row["control"] == "rate" else 1.0
        assert float(row["value"]) == pytest.approx(recorded["value"] * scale, rel=1e-12)
        assert float(row["z_top"]) == 0.0 and float(row["z_bottom"]) == pytest.approx(-float(cell["dz"]))
    faces = _read(out / "well_faces.csv")
    assert len(faces) == len(check["near_well_faces"]) > 0
    for face, recorded in zip(faces, check["near_well_faces"]):
        assert face["axis"] == recorded["axis"]
        assert float(face["transmissibility"]) == pytest.approx(recorded["transmissibility"] * tf, rel=1e-12)
        step = {"x": 1, "y": 4}[face["axis"]]  # 4 coarse columns
        assert int(face["id2"]) - int(face["id1"]) == step


def test_peaceman_on_request_sets_no_face(run, run_cli) -> None:
    out, wells = run("--well-connection", "peaceman")
    assert {r["set_by"] for r in _read(out / "wells.csv")} == {"peaceman"}
    assert _read(out / "well_faces.csv") == []
    assert json.loads((out / "manifest.json").read_text())["wells"]["connection"] == "peaceman"
    recorded = json.loads((out / "summary.json").read_text())["well_check"]
    assert run_cli("check", out, "--wells", wells, "-q")[0] == 0  # an empty well_faces.csv read back
    again = json.loads((out / "summary.json").read_text())["well_check"]
    assert again["total_rate"]["coarse"] == pytest.approx(recorded["total_rate"]["coarse"], rel=1e-10)


def _tell_manifest(out: Path, name: str) -> None:
    """Write the edited table's rows and SHA-256 into the manifest (docs/package.md)."""
    manifest = json.loads((out / "manifest.json").read_text())
    manifest["tables"][name] = {"rows": len(_read(out / name)),
                                "sha256": hashlib.sha256((out / name).read_bytes()).hexdigest()}  # fmt: skip
    (out / "manifest.json").write_text(json.dumps(manifest))


def test_check_connects_the_wells_as_the_package_says(run, run_cli) -> None:
    out, wells = run()
    recorded = json.loads((out / "summary.json").read_text())["well_check"]
    code, stdout, stderr = run_cli("check", out, "--wells", wells)
    assert code == 0, stderr
    assert "coarse wells connected by the package's wells table" in stdout
    again = json.loads((out / "summary.json").read_text())["well_check"]
    assert again["connection"] == "package"
    for name in ("I", "P", "R"):
        assert again["wells"][name]["coarse"]["rate"] == pytest.approx(
            recorded["wells"][name]["coarse"]["rate"], rel=1e-10)
        assert again["wells"][name]["coarse"]["factors"] == pytest.approx(
            recorded["wells"][name]["coarse"]["factors"], rel=1e-12)

    table = (out / "well_faces.csv").read_text().splitlines()
    first = table[1].split(",")
    first[3] = repr(float(first[3]) * 100)  # one near-well face a hundred times more conductive
    (out / "well_faces.csv").write_text("\n".join([table[0], ",".join(first), *table[2:]]) + "\n")
    _tell_manifest(out, "well_faces.csv")
    code, _, stderr = run_cli("check", out, "--wells", wells, "-q")
    assert code == 0, stderr
    edited = json.loads((out / "summary.json").read_text())["well_check"]
    assert edited["total_rate"]["coarse"] != pytest.approx(recorded["total_rate"]["coarse"], rel=1e-6)


@pytest.mark.parametrize("change, message", [
    (lambda text: text.replace("R,", "S,"), "the package's wells table holds the wells I, P, R and the "
                                            "wells file I, P, S"),
    (lambda text: text.replace(f"{X0 + 45},{Y0 - 45}", f"{X0 + 125},{Y0 - 45}"),
     "well I: the wells file puts it in coarse cell(s) 1 and the package's wells table in 0"),
])  # fmt: skip
def test_check_refuses_other_wells_than_the_packages(run, run_cli, change, message) -> None:
    out, wells = run()
    wells.write_text(change(WELLS))
    code, stdout, stderr = run_cli("check", out, "--wells", wells)
    assert code == 2 and stdout == ""
    assert stderr.startswith("upscale: error: ") and message in stderr and len(stderr.splitlines()) == 1


def test_check_refuses_a_face_between_cells_that_are_not_neighbours(run, run_cli) -> None:
    out, wells = run()
    table = (out / "well_faces.csv").read_text().splitlines()
    first = table[1].split(",")
    first[1] = str(int(first[1]) + 2)  # id2 two cells past id1
    (out / "well_faces.csv").write_text("\n".join([table[0], ",".join(first), *table[2:]]) + "\n")
    _tell_manifest(out, "well_faces.csv")
    code, stdout, stderr = run_cli("check", out, "--wells", wells)
    assert code == 2 and stdout == "" and len(stderr.splitlines()) == 1
    assert "well_faces.csv: a face joins cells that are not neighbours along its axis" in stderr


def test_package_written_without_wells_connects_them_by_the_option(run_cli, tmp_path: Path) -> None:
    field = write_raster(tmp_path / "k.tif", uncorrelated_lognormal((16, 32), SEED), cell_size=10.0)
    wells, out = tmp_path / "wells.csv", tmp_path / "out"
    wells.write_text(WELLS)
    assert run_cli("run", field, "--block", "8x8", "--method", "flow", "--out", out, "-q")[0] == 0
    assert not (out / "wells.csv").exists()
    found = {}
    for how in ("near-well", "peaceman"):
        code, _, stderr = run_cli("check", out, "--wells", wells, "--well-connection", how, "-q")
        assert code == 0, stderr
        found[how] = json.loads((out / "summary.json").read_text())["well_check"]
        assert found[how]["connection"] == how
    assert all(np.array(found["near-well"]["wells"][w]["coarse"]["set_by"]) == "near-well" for w in "IPR")
    totals = [found[how]["total_rate"]["coarse"] for how in ("near-well", "peaceman")]
    assert totals[0] != pytest.approx(totals[1])


def test_the_completed_interval_of_a_3d_well(run_cli, tmp_path: Path) -> None:
    rng = np.random.default_rng(SEED)
    field = write_raster(tmp_path / "k3.tif", np.exp(rng.normal(4.0, 0.5, size=(4, 16, 16))), cell_size=10.0)
    wells = tmp_path / "wells.csv"
    wells.write_text("name,x,y,layers,control,value,radius\n"
                     f"I,{X0 + 45},{Y0 - 45},2-3,pressure,2,0.1\n"
                     f"P,{X0 + 115},{Y0 - 115},,pressure,1,0.1\n")  # fmt: skip
    out = tmp_path / "out"
    code, _, stderr = run_cli("run", field, "--dz", "1,2,3,4", "--kv-kh", "0.1", "--block", "8x8x2",
                              "--method", "geometric", "--wells", wells, "--units", "field", "--out", out,
                              "-q")  # fmt: skip
    assert code == 0, stderr
    rows = [r for r in _read(out / "wells.csv") if r["well"] == "I"]
    # layers 2-3 lie 1 to 6 m below the top: 1-3 m in coarse layer 0 (0-3 m), 3-6 m in layer 1 (3-10 m)
    feet = [float(r[name]) for r in rows for name in ("z_top", "z_bottom")]
    assert feet == pytest.approx([-1 / 0.3048, -3 / 0.3048, -3 / 0.3048, -6 / 0.3048], rel=1e-12)
    assert [int(r["id"]) for r in rows] == [0, 4]  # column 0, row 0, layers 0 and 1 of 2 x 2 x 2 blocks
