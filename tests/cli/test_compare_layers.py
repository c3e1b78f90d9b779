"""``upscale compare`` and ``upscale plan`` with coarse layers of unequal thickness (issue 19, item 4).

What is tested
--------------
A model of uniform 100 mD layers, 1 m each, with one continuous 0.01 mD
shale (layer 6 of 12), upscaled by the geometric mean in 4x4 blocks:

* uniform grouping ``4x4x4`` (coarse layers 1-4, 5-8, 9-12): the shale is
  averaged with three 100 mD layers into one coarse layer of
  (100³ · 0.01)^(1/4) = 10 mD. Layers in series across them and in
  parallel along them (Bear 1972, "Dynamics of fluids in porous media",
  §5.10: k_z = H / Σ hᵢ/kᵢ, k_x = Σ hᵢkᵢ / H) give the fine k_z =
  12 / (11/100 + 1/0.01), the coarse k_z = 12 / (4/100 + 4/10 + 4/100) = 25
  mD, so a z check error of 25 · 100.11 / 12 − 1 = +20 756 %, and along x
  (4·100 + 4·10 + 4·100) / (11·100 + 0.01) − 1 = −23.6 %.
* automatic grouping ``4x4xauto:3``: the only grouping into 3 that loses
  none of the between-layer variance is 5,1,6 — the shale alone — so every
  coarse layer is homogeneous, every mean is exact and the check errors
  are zero (to the solver's tolerance).

Compare records the grouping chosen, its loss and the boundaries' reasons
in compare.json and names the block ``4x4xauto:3 (= 4x4x5,1,6)`` in the
report; plan sets the two side by side at 64 fine cells per block and
names the automatic grouping the coarsest within the error accepted. Bad
input is one ``upscale: error:`` line.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest
from conftest import write_raster

SHALE = 5  # zero-based: layer 6 of 12
#: Bear 1972: fine k_z (layers in series) and k_x (in parallel), mD.
FINE_KZ = 12 / (11 / 100 + 1 / 0.01)
FINE_KX = (11 * 100 + 0.01) / 12
#: The uniform grouping's coarse layers by the geometric mean: 100, (100³ · 0.01)^(1/4) = 10, 100 mD.
UNIFORM_KZ = 12 / (4 / 100 + 4 / 10 + 4 / 100)
UNIFORM_KX = (4 * 100 + 4 * 10 + 4 * 100) / 12


@pytest.fixture
def cake(tmp_path: Path) -> Path:
    k = np.full((12, 8, 8), 100.0)
    k[SHALE] = 0.01
    return write_raster(tmp_path / "cake.tif", k, cell_size=10.0)


def _compared(run_cli, field: Path, block: str, out: Path) -> tuple[str, dict]:
    code, stdout, stderr = run_cli("compare", field, "--dz", "1", "--block", block, "--methods", "geometric",
                                   "--out", out)  # fmt: skip
    assert code == 0, stderr
    return stdout, json.loads((out / "compare.json").read_text())


def _errors(record: dict) -> dict[str, float]:
    return {axis: r["rel_error"] for axis, r in record["methods"][0]["check"].items()}


def test_compare_keeps_the_shale_with_automatic_layers_not_with_uniform_ones(run_cli, cake, tmp_path):
    _, uniform = _compared(run_cli, cake, "4x4x4", tmp_path / "uniform")
    stdout, automatic = _compared(run_cli, cake, "4x4xauto:3", tmp_path / "automatic")
    assert _errors(uniform)["z"] == pytest.approx(UNIFORM_KZ / FINE_KZ - 1, rel=1e-6)  # +20 756 %
    assert _errors(uniform)["x"] == pytest.approx(UNIFORM_KX / FINE_KX - 1, rel=1e-6)  # -23.6 %
    assert _errors(automatic)["z"] == pytest.approx(0.0, abs=1e-8)
    assert _errors(automatic)["x"] == pytest.approx(0.0, abs=1e-8)
    assert automatic["block"]["z"] == [5, 1, 6] and automatic["block"]["layers"] == "auto:3"
    layers = automatic["layers"]
    assert (layers["request"], layers["sizes"], layers["loss"]) == ("auto:3", [5, 1, 6], pytest.approx(0.0))
    assert [(b["after_layer"], b["reason"]) for b in layers["boundaries"]] == [(5, "barrier"), (6, "barrier")]
    assert "layers" not in uniform  # only automatic layers are recorded as chosen
    assert "layers: auto:3 chose 5,1,6 fine layers per coarse layer" in stdout
    assert "after layer 5: barrier: top of layer 6" in stdout
    page = (tmp_path / "automatic" / "report.html").read_text()
    assert "Blocks: 4x4xauto:3 (= 4x4x5,1,6) fine cells (x first)" in page
    assert "Layers: auto:3 chose 5,1,6 fine layers per coarse layer" in page


def test_plan_sets_uniform_and_automatic_layers_side_by_side(run_cli, cake, tmp_path):
    out = tmp_path / "plan"
    code, stdout, stderr = run_cli("plan", cake, "--dz", "1", "--blocks", "4x4x4,4x4xauto:3", "--methods",
                                   "geometric", "--out", out)  # fmt: skip
    assert code == 0, stderr
    plan = json.loads((out / "plan.json").read_text())
    uniform, automatic = plan["blocks"]
    assert (uniform["name"], uniform["z"], uniform["cells"]) == ("4x4x4", 4, 64)
    assert "layers" not in uniform
    assert automatic["name"] == "4x4xauto:3 (= 4x4x5,1,6)"
    assert (automatic["z"], automatic["cells"]) == ([5, 1, 6], 64)
    assert automatic["coarse_shape"] == {"layers": 3, "rows": 2, "columns": 2}
    assert automatic["layers"]["sizes"] == [5, 1, 6]
    (method,) = plan["methods"]
    errors = [b["largest_error"] for b in method["blocks"]]
    assert errors[0] == pytest.approx(UNIFORM_KZ / FINE_KZ - 1, rel=1e-6)  # the largest: z
    assert errors[1] == pytest.approx(0.0, abs=1e-8)
    assert method["coarsest"] == "4x4xauto:3 (= 4x4x5,1,6)" and method["finer_all_meet"]
    assert "layers: auto:3 chose 5,1,6" in stdout
    assert "Layers: auto:3 chose 5,1,6" in (out / "report.html").read_text()


def test_plan_and_compare_refuse_bad_groupings_in_one_line(run_cli, cake, tmp_path):
    flat = write_raster(tmp_path / "map.tif", np.full((8, 8), 100.0))
    code, _, stderr = run_cli("plan", flat, "--blocks", "4x4,4x4xauto:2", "--methods", "geometric", "--out",
                              tmp_path / "p1")  # fmt: skip
    assert code != 0 and stderr == ("upscale: error: block 4x4xauto:2 has a grouping of the layers but the "
                                    "field is a 2D map; use NXxNY\n")  # fmt: skip
    code, _, stderr = run_cli("plan", cake, "--dz", "1", "--blocks", "4x4x4,4x4xauto:13", "--methods",
                              "geometric", "--out", tmp_path / "p2")  # fmt: skip
    assert code != 0 and stderr == ("upscale: error: block 4x4xauto:13: 13 coarse layers asked for but the "
                                    "model has 12 fine layers\n")  # fmt: skip
    code, _, stderr = run_cli("plan", cake, "--dz", "1", "--blocks", "4x4x4,4x4x1,3,2,6", "--methods",
                              "geometric", "--out", tmp_path / "p3")  # fmt: skip
    assert code != 0 and stderr == ("upscale: error: the blocks must grow from the finest to the coarsest "
                                    "(in fine cells per block), but 4x4x1,3,2,6 (48 cells) follows 4x4x4 (64 "
                                    "cells); list them finest first, e.g. 4x4,8x8,16x16\n")  # fmt: skip
    twin = write_raster(tmp_path / "twin.tif", np.full((12, 8, 8), 50.0))
    code, _, stderr = run_cli("compare", cake, twin, "--dz", "1", "--block", "4x4xauto:3", "--methods",
                              "geometric", "--out", tmp_path / "c1")  # fmt: skip
    assert code != 0 and stderr.count("\n") == 1
    assert stderr.startswith("upscale: error: block 4x4xauto:3: automatic layers are chosen from one field; "
                             "for an ensemble give the grouping")  # fmt: skip
