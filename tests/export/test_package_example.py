"""The plain-Python example of docs/package.md rebuilds the coarse model and matches the run.

What is tested
--------------
* The program in docs/package.md (numpy, scipy and the csv module only) run
  on a run's folder prints the same coarse k_eff along x as the run's own
  check, to 1e-10 relative — so the documentation of the format is enough to
  use it, and the example stays correct as the format evolves.
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


def _example() -> str:
    blocks = re.findall(r"```python\n(.*?)```", DOC.read_text(), flags=re.S)
    assert len(blocks) == 1
    return blocks[0]


@pytest.mark.parametrize("units", ["si", "field"])
def test_documented_program_gives_the_run_k_coarse(demo_dir, tmp_path, monkeypatch, units):
    monkeypatch.chdir(tmp_path)
    args = ["-q", "run", str(demo_dir / "marrowfen_lognormal.tif"), "--porosity",
            str(demo_dir / "marrowfen_porosity.tif"), "--block", "8x8", "--method", "geometric",
            "--units", units, "--out", "lognormal-8x8"]  # fmt: skip
    assert main(args) == 0
    printed = io.StringIO()
    with contextlib.redirect_stdout(printed):
        exec(compile(_example(), str(DOC), "exec"), {})  # the program as documented
    value, unit = printed.getvalue().split()
    summary = json.loads((tmp_path / "lognormal-8x8" / "summary.json").read_text())
    assert unit == "mD"
    assert float(value) == pytest.approx(summary["check"]["x"]["k_coarse"], rel=1e-10)
