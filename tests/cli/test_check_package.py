"""``upscale check`` from the coarse-grid package, and ``--units`` on the command line.

What is tested
--------------
* ``upscale check DIR`` needs only the package and the fine inputs: with every
  GeoTIFF of the folder deleted (the face transmissibility rasters of
  flow-transmissibility included) it reproduces the run's check; and it does
  read the package — doubling every transmissibility in connections.csv and
  boundary.csv doubles the coarse k_eff (the two-point system is linear in T).
* A deleted or corrupted connections.csv is one line on stderr, exit status 2,
  and the summary left as it was.
* ``--units field`` with a hydraulic conductivity (``--unit m/s``) is refused
  before anything is read: one line, exit 2, no output folder; ``--units si``
  with the same input writes k in m/s and transmissibility in m²/s.
"""

from __future__ import annotations

import csv
import hashlib
import json
import shutil
from pathlib import Path

import numpy as np
import pytest
from conftest import snapshot, write_raster

from upscale.flow import pressure_drop
from upscale.gallery.problems import uncorrelated_lognormal
from upscale.io.package import read_package

SEED = 2_604_117_835
NODATA = -9999.0


@pytest.fixture(scope="module")
def field(tmp_path_factory) -> Path:
    """A 24 x 36 map with an inactive corner, written once."""
    k = uncorrelated_lognormal((24, 36), SEED)
    k[:4, :6] = NODATA
    return write_raster(tmp_path_factory.mktemp("check-package") / "k.tif", k, cell_size=(12.5, 7.5),
                        nodata=NODATA)  # fmt: skip


@pytest.fixture(scope="module")
def run_folder(field, tmp_path_factory) -> Path:
    """A finished flow-transmissibility run (direct faces: the package is all the check has)."""
    from upscale.cli.main import main

    out = tmp_path_factory.mktemp("runs") / "direct"
    args = ["-q", "run", field, "--block", "6x4", "--method", "flow-transmissibility", "--border", "2",
            "--solver", "direct", "--units", "field", "--out", out]  # fmt: skip
    assert main([str(a) for a in args]) == 0
    return out


def _copy(run_folder: Path, tmp_path: Path) -> Path:
    folder = tmp_path / "run"
    shutil.copytree(run_folder, folder)
    return folder


def _summary(folder: Path) -> dict:
    return json.loads((folder / "summary.json").read_text())


def _one_line_error(code: int, stdout: str, stderr: str) -> str:
    assert code == 2, stderr
    assert stdout == ""
    lines = stderr.strip("\n").split("\n")
    assert len(lines) == 1 and lines[0].startswith("upscale: error:"), stderr
    assert "Traceback" not in stderr
    return lines[0]


def test_check_uses_the_package_when_the_geotiffs_are_gone(run_folder, tmp_path, run_cli):
    folder = _copy(run_folder, tmp_path)
    before = _summary(folder)["check"]
    tifs = sorted(p.name for p in folder.glob("*.tif"))
    assert {"kx.tif", "transmissibility_x.tif", "transmissibility_y.tif"} <= set(tifs)
    for name in tifs:
        (folder / name).unlink()
    code, stdout, stderr = run_cli("check", folder, "--solver", "direct")
    assert code == 0, stderr
    assert "flow check" in stdout
    after = _summary(folder)["check"]
    assert set(after) == set(before) == {"x", "y", "corner"}
    for axis in before:
        assert after[axis]["k_fine"] == pytest.approx(before[axis]["k_fine"], rel=1e-10)
        assert after[axis]["k_coarse"] == pytest.approx(before[axis]["k_coarse"], rel=1e-10)


def _scale_column(path: Path, column: str, factor: float) -> None:
    with open(path, newline="", encoding="utf-8") as f:
        header, *rows = list(csv.reader(f))
    c = header.index(column)
    for row in rows:
        row[c] = repr(float(row[c]) * factor)
    with open(path, "w", newline="", encoding="utf-8") as f:
        csv.writer(f, quoting=csv.QUOTE_NONNUMERIC).writerows([header])
        csv.writer(f).writerows(rows)


def test_check_reads_the_transmissibilities_of_the_package(run_folder, tmp_path, run_cli):
    # the coarse system is linear in T: scaling every T scales the flow and k_eff alike
    folder = _copy(run_folder, tmp_path)
    before = _summary(folder)["check"]
    _scale_column(folder / "connections.csv", "transmissibility", 2.0)
    _scale_column(folder / "boundary.csv", "half_transmissibility", 2.0)
    code, _, stderr = run_cli("check", folder, "--solver", "direct")
    assert code == 2 and "changed since the run" in stderr  # the manifest's checksums catch it
    _restamp(folder)  # a deliberate edit records the new checksums
    code, _, stderr = run_cli("check", folder, "--solver", "direct")
    assert code == 0, stderr
    after = _summary(folder)["check"]
    for axis in before:
        assert after[axis]["k_fine"] == pytest.approx(before[axis]["k_fine"], rel=1e-10)
        assert after[axis]["k_coarse"] == pytest.approx(2 * before[axis]["k_coarse"], rel=1e-10)


def _rewrite_second_row(path: Path, column: str, value: str) -> None:
    lines = path.read_text(encoding="utf-8").splitlines()
    header = [h.strip('"') for h in lines[0].split(",")]
    cells = lines[1].split(",")
    cells[header.index(column)] = value
    lines[1] = ",".join(cells)
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")


def _truncate(path: Path, *, inside_row: bool) -> None:
    """Cut the table about half way: three characters into a row (``29,``), or between rows."""
    text = path.read_text(encoding="utf-8")
    start = text.rindex("\n", 0, len(text) // 2) + 1
    path.write_text(text[: start + 3] if inside_row else text[:start], encoding="utf-8")


def _drop_column(path: Path, column: str) -> None:
    with open(path, newline="", encoding="utf-8") as f:
        header, *rows = list(csv.reader(f))
    c = header.index(column)
    with open(path, "w", newline="", encoding="utf-8") as f:
        csv.writer(f).writerows([r[:c] + r[c + 1 :] for r in [header, *rows]])


CORRUPTIONS = {
    "deleted": lambda p: p.unlink(),
    "empty": lambda p: p.write_bytes(b""),
    "binary": lambda p: p.write_bytes(bytes(range(256)) * 4),
    "truncated in a row": lambda p: _truncate(p, inside_row=True),
    "no transmissibility column": lambda p: _drop_column(p, "transmissibility"),
    "id out of range": lambda p: _rewrite_second_row(p, "id1", "99999"),
    "negative id": lambda p: _rewrite_second_row(p, "id1", "-7"),
}


def _restamp(folder: Path) -> None:
    """Record the tables' new row counts and SHA-256 in the manifest, as after a deliberate edit."""
    manifest = json.loads((folder / "manifest.json").read_text())
    for name in manifest["tables"]:
        path = folder / name
        with open(path, newline="", encoding="utf-8") as f:
            rows = max(0, len(list(csv.reader(f))) - 1) if name.endswith(".csv") else None
        entry = manifest["tables"][name]
        entry["sha256"] = hashlib.sha256(path.read_bytes()).hexdigest()
        if rows is not None:
            entry["rows"] = rows
    (folder / "manifest.json").write_text(json.dumps(manifest, indent=2))


@pytest.mark.parametrize(
    "corruption",
    [
        *CORRUPTIONS,
        "truncated between rows",  # half the connections gone: the row count and SHA-256 differ
        "text transmissibility",  # the values themselves are checked (manifest restamped)
        "missing transmissibility",
        "negative transmissibility",
    ],
)
def test_check_refuses_a_broken_connections_table(run_folder, tmp_path, run_cli, corruption):
    folder = _copy(run_folder, tmp_path)
    path = folder / "connections.csv"
    value = {"text transmissibility": "abc", "missing transmissibility": "",
             "negative transmissibility": "-1.5"}.get(corruption)  # fmt: skip
    if corruption == "truncated between rows":
        _truncate(path, inside_row=False)
    elif value is None:
        CORRUPTIONS[corruption](path)
    else:
        _rewrite_second_row(path, "transmissibility", value)
        _restamp(folder)  # past the checksum: the value checks must catch it
    summary = snapshot(folder / "summary.json")
    line = _one_line_error(*run_cli("check", folder, "--solver", "direct"))
    assert "connections.csv" in line or "package tables" in line
    assert snapshot(folder / "summary.json") == summary


def test_field_units_refuse_a_conductivity(field, tmp_path, run_cli):
    out = tmp_path / "out"
    code, stdout, stderr = run_cli("run", field, "--unit", "m/s", "--units", "field", "--block", "6x4",
                                   "--method", "geometric", "--out", out)  # fmt: skip
    line = _one_line_error(code, stdout, stderr)
    assert "--units field" in line and "conductivity" in line and "--units si" in line
    assert not out.exists()
    assert sorted(p.name for p in tmp_path.iterdir()) == []


def test_si_units_of_a_conductivity_run(field, tmp_path, run_cli):
    out = tmp_path / "out"
    code, _, stderr = run_cli("run", field, "--unit", "m/s", "--units", "si", "--block", "6x4",
                              "--method", "geometric", "--solver", "direct", "--out", out)  # fmt: skip
    assert code == 0, stderr
    manifest, trans = read_package(out)
    factors = manifest["units"]["factors"]
    assert (factors["k"], factors["length"]) == (1.0, 1.0)
    columns = manifest["units"]["columns"]
    assert columns["cells"]["kx"] == "m/s"
    assert columns["connections"]["transmissibility"] == "m²/s"  # K A / L: a conductance
    check = _summary(out)["check"]
    for axis in ("x", "y"):  # the axis flows (the corner flow: tests/flow/test_corner.py)
        c = check[axis]
        assert pressure_drop(trans, axis, solver="direct").k_eff == pytest.approx(c["k_coarse"], rel=1e-10)
        assert np.isfinite(c["k_coarse"]) and c["k_coarse"] > 0
