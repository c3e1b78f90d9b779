"""Blocks upscaled to k = 0: the zero-k rule of the block partition (`upscale.methods.zeros`).

What is tested
--------------
The field: 12 x 12 cells of 10 m in 4 x 4 blocks with porosity 0.2. Block
(0, 0) holds only a diagonal of active cells — no two share a face, so no
flow crosses it along x or y — and block (0, 1) only one row of active cells,
which crosses it along x but not along y; the rest is a lognormal field with
no nodata. Under the two-point scheme flow passes only through shared faces
(common practice), so the sealed flow method and the tubes bound give k = 0
there: along both axes in block (0, 0), along y in block (0, 1).

* ``keep`` leaves those zeros (the raw result every other rule starts from).
* ``auto`` (the default) makes block (0, 0) inactive and raises block (0, 1)'s
  ky to a thousandth of the smallest positive coarse ky; every other value is bit for bit
  the one ``keep`` gives; the pore volume taken out equals the porosity times
  the volume of block (0, 0)'s active cells, summed here from the fine field.
* ``inactive`` makes both inactive; ``floor`` and ``floor:VALUE`` raise every zero.
* The relative floor scales with the unit of k (k x 1000 -> floor x 1000).
* ``upscale run`` writes no active block with k = 0 into ``cells.csv`` by
  default, prints what the rule did, records it in ``summary.json`` and says
  it in ``report.html``; with
  ``--zero-k keep`` the zeros are written. A bad rule is one line on stderr.
"""

from __future__ import annotations

import csv
import json

import numpy as np
import pytest

from upscale import Field, coarsen
from upscale.grid import BlockSpec
from upscale.methods.zeros import apply_zero_rule

CELL = 10.0  # m
PHI = 0.2


def _fringe() -> np.ndarray:
    k = np.random.default_rng(580_913).lognormal(3.0, 0.8, (12, 12))
    k[0:4, 0:4] = np.nan
    k[np.arange(4), np.arange(4)] = 50.0  # a diagonal: no shared face
    k[0:4, 4:8] = np.nan
    k[1, 4:8] = 80.0  # one row: crosses along x, not along y
    return k


def _coarsen(k: np.ndarray, rule: str, method: str = "flow"):
    porosity = np.where(np.isnan(k), np.nan, PHI)
    field = Field.from_arrays(k, porosity=porosity, cell_size=(CELL, CELL))
    return coarsen(field, BlockSpec(4, 4, zero_k=rule), method)


@pytest.mark.parametrize("method", ["flow", "tubes"])
def test_keep_leaves_the_zeros_the_methods_give(method):
    coarse = _coarsen(_fringe(), "keep", method).coarse
    assert (coarse.kx[0, 0, 0], coarse.ky[0, 0, 0]) == (0.0, 0.0)
    assert coarse.kx[0, 0, 1] > 0 and coarse.ky[0, 0, 1] == 0.0
    assert np.isfinite(coarse.kx).all()


@pytest.mark.parametrize("method", ["flow", "tubes"])
def test_auto_drops_blocks_without_flow_and_floors_partial_zeros(method):
    k = _fringe()
    kept, auto = _coarsen(k, "keep", method), _coarsen(k, "auto", method)
    c = auto.coarse
    assert np.isnan(c.kx[0, 0, 0]) and np.isnan(c.ky[0, 0, 0]) and np.isnan(c.porosity[0, 0, 0])
    tightest = kept.coarse.ky[kept.coarse.ky > 0].min()
    assert c.ky[0, 0, 1] == 1e-3 * tightest
    assert c.kx[0, 0, 1] == kept.coarse.kx[0, 0, 1]
    others = np.ones(c.kx.shape, bool)
    others[0, 0, :2] = False
    for name in ("kx", "ky", "porosity"):
        np.testing.assert_array_equal(getattr(c, name)[others], getattr(kept.coarse, name)[others])
    # pore volume of block (0, 0): porosity x the volume of its 4 active cells (2D: 1 m thick)
    assert auto.zeros.pore_volume_removed == pytest.approx(PHI * 4 * CELL * CELL * 1.0, rel=1e-12)
    assert (auto.zeros.inactive_blocks, auto.zeros.floored) == (1, {"ky": 1})


def test_inactive_and_floor_rules():
    k = _fringe()
    inactive = _coarsen(k, "inactive").coarse
    assert np.isnan(inactive.kx[0, 0, :2]).all()
    floor = _coarsen(k, "floor")
    assert np.isfinite(floor.coarse.kx).all() and floor.zeros.inactive_blocks == 0
    assert floor.zeros.floored == {"kx": 1, "ky": 2}
    fixed = _coarsen(k, "floor:0.5").coarse
    assert (fixed.kx[0, 0, 0], fixed.ky[0, 0, 0], fixed.ky[0, 0, 1]) == (0.5, 0.5, 0.5)


def test_relative_floor_scales_with_the_unit_of_k():
    k = _fringe()
    small, large = _coarsen(k, "auto").coarse, _coarsen(1000.0 * k, "auto").coarse
    assert large.ky[0, 0, 1] == pytest.approx(1000.0 * small.ky[0, 0, 1], rel=1e-12)


def test_apply_zero_rule_keeps_blocks_already_inactive_out_of_the_counts():
    k = {"kx": np.array([[[0.0, 0.0]]]), "ky": np.array([[[0.0, 3.0]]])}
    before = np.array([[[True, False]]])
    _, inactive, outcome = apply_zero_rule(BlockSpec(2, 2), k, before, None)
    assert inactive.tolist() == [[[True, False]]]
    assert (outcome.inactive_blocks, outcome.floored) == (0, {"kx": 1})


@pytest.mark.parametrize("rule", ["nope", "floor:0", "floor:-1", "floor:x", "floor:inf", "keep:1", "floor:"])
def test_bad_rule_is_refused(rule):
    with pytest.raises(ValueError, match="zero-k rule must be"):
        BlockSpec(4, 4, zero_k=rule)


def _cells(folder) -> list[dict[str, str]]:
    with open(folder / "cells.csv", newline="") as table:
        return list(csv.DictReader(table))


def test_run_writes_no_active_block_with_zero_k(write_tif, run_cli, tmp_path):
    nodata = -9999.0
    k = np.nan_to_num(_fringe(), nan=nodata)
    path = write_tif("k.tif", k, nodata=nodata, cell_size=CELL)
    porosity = write_tif("phi.tif", np.where(k == nodata, nodata, PHI), nodata=nodata, cell_size=CELL)
    out, kept = tmp_path / "auto", tmp_path / "keep"
    code, stdout, err = run_cli("run", path, "--porosity", porosity, "--block", "4x4", "--method", "flow",
                                "--report", "--out", out)  # fmt: skip
    assert (code, err) == (0, "")
    told = "1 block made inactive (pore volume 80 m³ taken out); 1 block floored"
    assert f"zero k       {told}" in stdout
    assert f"Blocks with k = 0: flow (sealed): {told}" in (out / "report.html").read_text()
    rows = [r for r in _cells(out) if r["active"] == "1"]
    assert len(rows) == 8 and all(float(r["kx"]) > 0 and float(r["ky"]) > 0 for r in rows)
    zero_k = json.loads((out / "summary.json").read_text())["active"]["zero_k"]
    assert zero_k["rule"] == "auto" and zero_k["blocks_made_inactive"] == 1
    assert zero_k["pore_volume_removed_m3"] == pytest.approx(80.0, rel=1e-9)
    code, _, err = run_cli("run", path, "--block", "4x4", "--method", "flow", "--zero-k", "keep",
                           "--out", kept)  # fmt: skip
    assert (code, err) == (0, "")
    rows = [r for r in _cells(kept) if r["active"] == "1"]
    assert len(rows) == 9 and sum(float(r["ky"]) == 0 for r in rows) == 2


def test_bad_zero_k_option_is_one_line(write_tif, run_cli, tmp_path):
    path = write_tif("k.tif", np.full((8, 8), 5.0))
    code, _, err = run_cli("run", path, "--block", "4x4", "--method", "flow", "--zero-k", "floor:-2",
                           "--out", tmp_path / "out")  # fmt: skip
    assert code == 2 and err.count("\n") == 1
    assert err.startswith("upscale: error: zero-k rule must be auto, inactive, floor, floor:VALUE")
    assert not (tmp_path / "out").exists()


def test_a_floor_needs_a_block_that_passes_flow():
    k = {"kx": np.zeros((1, 1, 2)), "ky": np.zeros((1, 1, 2))}
    with pytest.raises(ValueError, match="no active block passes flow along any axis"):
        apply_zero_rule(BlockSpec(2, 2, zero_k="floor"), k, np.zeros((1, 1, 2), bool), None)
    floored, _, _ = apply_zero_rule(BlockSpec(2, 2, zero_k="floor:0.1"), k, np.zeros((1, 1, 2), bool), None)
    assert floored["kx"].tolist() == [[[0.1, 0.1]]]
