"""The plain-Python examples of docs/package.md rebuild the coarse model and match the run.

What is tested
--------------
* The first program in docs/package.md (numpy, scipy and the csv module
  only) run on a run's folder prints the same coarse k_eff along x as the
  run's own check, to 1e-10 relative — so the documentation of the format is
  enough to use it, and the example stays correct as the format evolves.
* The second program, on a run with wells (a pressure injector, a pressure
  producer and a rate producer, near-well upscaling), prints every well's
  coarse rate and bottom-hole pressure as the run's well check found them, to
  1e-10 relative (the same equations from the same numbers, common
  practice) — from the package's tables alone.
"""

from __future__ import annotations

import contextlib
import io
import json
import re
from pathlib import Path

import pytest

from upscale.cli.main import main

DOC = Path(__file__).resolve().parents[2] / "docs" / "package.md"
X0, Y0 = 31000.0, 87000.0  # the north-west corner of the demo fields (`upscale.demo.scenario`)


def _examples() -> list[str]:
    blocks = re.findall(r"```python\n(.*?)```", DOC.read_text(), flags=re.S)
    assert len(blocks) == 2
    return blocks


def _printed(program: str) -> list[list[str]]:
    printed = io.StringIO()
    with contextlib.redirect_stdout(printed):
        exec(compile(program, str(DOC), "exec"), {})  # the program as documented
    return [line.split() for line in printed.getvalue().splitlines()]


@pytest.mark.parametrize("units", ["si", "field"])
def test_documented_program_gives_the_run_k_coarse(demo_dir, tmp_path, monkeypatch, units):
    monkeypatch.chdir(tmp_path)
    args = ["-q", "run", str(demo_dir / "marrowfen_lognormal.tif"), "--porosity",
            str(demo_dir / "marrowfen_porosity.tif"), "--block", "8x8", "--method", "geometric",
            "--units", units, "--out", "lognormal-8x8"]  # fmt: skip
    assert main(args) == 0
    [[value, unit]] = _printed(_examples()[0])
    summary = json.loads((tmp_path / "lognormal-8x8" / "summary.json").read_text())
    assert unit == "mD"
    assert float(value) == pytest.approx(summary["check"]["x"]["k_coarse"], rel=1e-10)


@pytest.mark.parametrize("units", ["si", "field"])
def test_documented_program_gives_the_run_well_rates(demo_dir, tmp_path, monkeypatch, units):
    monkeypatch.chdir(tmp_path)
    wells = tmp_path / "wells.csv"
    wells.write_text("name,x,y,control,value,radius\n"
                     f"I,{X0 + 405},{Y0 - 405},pressure,200,0.1\n"
                     f"P,{X0 + 2155},{Y0 - 2155},pressure,100,0.1\n"
                     f"R,{X0 + 2155},{Y0 - 605},rate,-3000,0.1\n")  # fmt: skip
    args = ["-q", "run", str(demo_dir / "marrowfen_lognormal.tif"), "--block", "8x8", "--method",
            "flow-transmissibility", "--wells", str(wells), "--units", units,
            "--out", "wells-8x8"]  # fmt: skip
    assert main(args) == 0
    manifest = json.loads((tmp_path / "wells-8x8" / "manifest.json").read_text())
    tf = manifest["units"]["factors"]["k"] * manifest["units"]["factors"]["length"]
    recorded = json.loads((tmp_path / "wells-8x8" / "summary.json").read_text())["well_check"]
    assert recorded["connection"] == "near-well" and recorded["near_well_faces"]
    found = {name: (float(rate), float(pressure)) for name, rate, pressure in _printed(_examples()[1])}
    assert list(found) == ["I", "P", "R"]
    for name, (rate, pressure) in found.items():
        coarse = recorded["wells"][name]["coarse"]
        assert rate / tf == pytest.approx(coarse["rate"], rel=1e-10)
        assert pressure == pytest.approx(coarse["pressure"], rel=1e-10)
