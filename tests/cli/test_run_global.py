"""``upscale run --method global`` and ``upscale compare`` with it: the fine solves shared.

What is tested
--------------
* A run with ``--method global`` solves the fine model once per axis — the
  same solves the method fits and the check compares with (solves counted) —
  and its check passes the fine flow within the tolerance of
  tests/methods/test_global_flow.py; ``summary.json`` names the rule and
  counts the fallback faces; ``connections.csv`` says ``global`` for the
  fitted faces and ``harmonic`` for the fallback ones.
* ``upscale compare`` lists and ranks ``global`` (all methods by default, or
  named), still with one fine solve per axis for all methods.
* ``global`` past ``--check-limit`` is refused before any work, in one line
  that points to ``local-global``; no folder is written.
"""

from __future__ import annotations

import csv
import json
from collections import Counter

import pytest

import upscale.check.axis
import upscale.methods.global_flow
from upscale.flow import steady
from upscale.gallery.fields import lognormal_field

SEED = 604_118_273


@pytest.fixture
def field(write_tif):
    k = lognormal_field((64, 64), (8, 8), geometric_mean=50.0, sigma_ln=1.5, seed=SEED)
    k[20:28, 30:34] = 0.0  # a shale lens: some blocks floored, faces closed
    return write_tif("field.tif", k[None])


@pytest.fixture
def solves(monkeypatch):
    """The shapes of the grids solved by `pressure_drop`, wherever it is called from."""
    shapes = []

    def counted(trans, axis, **options):
        shapes.append(trans.shape)
        return steady.pressure_drop(trans, axis, **options)

    for module in (upscale.check.axis, upscale.methods.global_flow):
        monkeypatch.setattr(module, "pressure_drop", counted)
    return shapes


def test_run_fits_and_checks_with_one_fine_solve_per_axis(run_cli, field, tmp_path, solves):
    code, out, err = run_cli("run", field, "--block", "8x8", "--method", "global", "--out", tmp_path / "g")
    assert code == 0, err
    assert Counter(solves) == {(1, 64, 64): 2, (1, 8, 8): 2}  # x and y, fine and coarse
    summary = json.loads((tmp_path / "g" / "summary.json").read_text())
    assert summary["method"]["name"] == "global"
    assert summary["transmissibility"]["rule"] == "fits to the fine global flows"
    assert "fine_s" in summary["timings_s"]
    assert max(abs(summary["check"][a]["rel_error"]) for a in "xy") < 0.01
    with open(tmp_path / "g" / "connections.csv", newline="") as f:
        sources = Counter(row["source"] for row in csv.DictReader(f))
    assert set(sources) <= {"global", "harmonic"} and sources["global"] > 0
    inner = sum(sources.values())
    assert sources["harmonic"] <= summary["transmissibility"]["replaced_faces"] < inner


def test_compare_ranks_global_with_the_shared_fine_solves(run_cli, field, tmp_path, solves):
    code, out, err = run_cli("compare", field, "--block", "8x8", "--methods",
                             "geometric,flow-transmissibility,global", "--out", tmp_path / "c")  # fmt: skip
    assert code == 0, err
    assert Counter(solves)[(1, 64, 64)] == 2
    record = json.loads((tmp_path / "c" / "compare.json").read_text())
    ranked = {m["name"]: m for m in record["methods"]}
    assert ranked["global"]["rank"] == 1
    assert "global" in out


def test_global_is_in_the_default_comparison():
    from upscale.analysis.compare import candidates

    assert "global" in [c.label for c in candidates()]


def test_global_past_the_check_limit_is_refused_and_points_to_local_global(run_cli, field, tmp_path, solves):
    code, out, err = run_cli("run", field, "--block", "8x8", "--method", "global", "--check-limit", "1000",
                             "--out", tmp_path / "g")  # fmt: skip
    assert code == 2
    assert err.count("\n") == 1 and err.startswith("upscale: error: ")
    assert "local-global works there" in err and "check limit of 1000" in err
    assert not (tmp_path / "g").exists() and solves == []
