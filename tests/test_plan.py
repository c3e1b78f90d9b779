"""Tests of ``upscale plan``: every method at every block size, against one set of fine solves.

What is tested
--------------
* End to end on the lognormal demo GeoTIFF (real raster input, real solves):
  ``plan.json``, the figure and ``report.html`` are written; every error in
  ``plan.json`` equals, to 1e-12, the one ``upscale compare`` finds at that
  block alone (the fine solves are the same), and the coarsest block of each
  method is the one the separate comparisons give.
* Layered field (a GeoTIFF of random layers along x): the shared fine solves
  give Bear's exact effective permeabilities, arithmetic (along the layers) and
  harmonic (across), and the arithmetic average is exact along the layers at
  every block; ``flow`` with sealed sides is exact along and across, so its
  coarsest block is the coarsest listed, while the arithmetic average (wrong
  across the layers) passes at no block that mixes layers.
* The fine model is solved once per axis flow, however many blocks are
  listed, and once per block for the corner flow (counted at the solver that
  every pressure solve goes through).
* Bad input ends with one line on stderr, exit status 2, no traceback and no
  folder: blocks that do not grow, blocks that do not fit the grid or crop it
  differently, a largest error that is not a percentage or is out of
  (0 %, 100 %), an unknown method; an output folder that holds files needs
  ``--overwrite``.
* The notes: a method that passes at a coarse block but not at a finer one
  is named; when no method passes at any block, a warning says so.
* With wells: the wells' fine solve is shared by every block (done once),
  each method's well error at each block equals the one a comparison at
  that block alone finds, joins its largest error, and is written in
  ``plan.json`` beside the flows' errors (``upscale plan --wells``).
"""

from __future__ import annotations

import dataclasses
import io
import json
from contextlib import redirect_stderr, redirect_stdout

import pytest

import upscale.flow.steady as steady
from upscale import Field
from upscale.analysis.compare import candidates
from upscale.analysis.plan import plan_blocks
from upscale.analysis.plan_record import PlanRecord, plan_record
from upscale.check.axis import HELD_OUT
from upscale.cli.main import main
from upscale.gallery.problems import random_layers, uncorrelated_lognormal
from upscale.grid import BlockSpec

BLOCKS = ["4x4", "8x8", "16x16", "32x32"]
METHODS = "geometric,flow-transmissibility"


def _run(*args) -> tuple[int, str, str]:
    """The command line in this process, for module-scoped fixtures (no capsys there)."""
    out, err = io.StringIO(), io.StringIO()
    with redirect_stdout(out), redirect_stderr(err):
        code = main([str(a) for a in args])
    return code, out.getvalue(), err.getvalue()


# --- end to end, against separate comparisons ----------------------------------------------------


@pytest.fixture(scope="module")
def lognormal_plan(demo_dir, tmp_path_factory):
    """``upscale plan`` of the lognormal demo (256 x 256) at four blocks, and ``compare`` at each."""
    field = demo_dir / "marrowfen_lognormal.tif"
    root = tmp_path_factory.mktemp("plan")
    code, out, err = _run("plan", field, "--blocks", ",".join(BLOCKS), "--methods", METHODS,
                          "--solver", "direct", "--max-error", "5%", "--out", root / "plan")  # fmt: skip
    assert code == 0, err
    compared = {}
    for block in BLOCKS:
        done = _run("-q", "compare", field, "--block", block, "--methods", METHODS, "--solver", "direct",
                    "--out", root / f"compare-{block}")  # fmt: skip
        assert done[0] == 0, done[2]
        compared[block] = json.loads((root / f"compare-{block}" / "compare.json").read_text())
    plan = json.loads((root / "plan" / "plan.json").read_text())
    return {"folder": root / "plan", "stdout": out, "plan": plan, "compared": compared}


@pytest.mark.slow
def test_plan_errors_equal_those_of_separate_comparisons(lognormal_plan):
    plan, compared = lognormal_plan["plan"], lognormal_plan["compared"]
    assert [b["name"] for b in plan["blocks"]] == BLOCKS
    assert [b["cells"] for b in plan["blocks"]] == [16, 64, 256, 1024]
    for method in plan["methods"]:
        for check in method["blocks"]:
            alone = next(m for m in compared[check["block"]]["methods"] if m["name"] == method["name"])
            assert check["rel_error"].keys() == alone["check"].keys()
            for flow, error in check["rel_error"].items():
                assert error == pytest.approx(alone["check"][flow]["rel_error"], abs=1e-12)
            assert check["largest_error"] == pytest.approx(
                max(abs(c["rel_error"]) for c in alone["check"].values()), abs=1e-12)
        for block in BLOCKS:  # the fine model is the one every comparison solved
            for flow, k in plan["fine_k_eff"].items():
                fine = compared[block]["methods"][0]["check"][flow]["k_fine"]
                assert k == pytest.approx(fine, rel=1e-12)


@pytest.mark.slow
def test_coarsest_block_is_the_one_the_comparisons_give(lognormal_plan):
    plan, compared = lognormal_plan["plan"], lognormal_plan["compared"]
    answers = {}
    for method in plan["methods"]:
        passing = [b for b in BLOCKS
                   if max(abs(c["rel_error"]) for c in next(
                       m for m in compared[b]["methods"] if m["name"] == method["name"])["check"].values())
                   <= 0.05]  # fmt: skip
        assert method["coarsest"] == (passing[-1] if passing else None)
        answers[method["name"]] = method["coarsest"] or "none"
    table = lognormal_plan["stdout"].splitlines()
    assert table[0].split() == ["method", *BLOCKS, "coarsest", "within", "5", "%"]
    for row, (name, answer) in zip(table[1:], answers.items()):
        assert row.startswith(name) and row.split()[-1] == answer


@pytest.mark.slow
def test_plan_folder_holds_the_json_figure_and_page(lognormal_plan):
    folder, plan = lognormal_plan["folder"], lognormal_plan["plan"]
    assert plan["files"] == ["figures/error_by_block.png", "figures/error_by_block.svg", "report.html"]
    for name in plan["files"]:
        assert (folder / name).stat().st_size > 1000, name
    assert plan["max_error"] == 0.05 and plan["measure"] == "largest |rel_error| over the checked flows"
    assert plan["rules"] == {"remainder": "stop", "min_active": 0.0, "zero_k": "auto"}
    assert plan["blocks"][1]["coarse_shape"] == {"layers": 1, "rows": 32, "columns": 32}
    assert PlanRecord.from_dict(plan).to_dict() == plan
    page = (folder / "report.html").read_text(encoding="utf-8")
    assert "flow-transmissibility (sealed): 16x16" in page and "geometric: 4x4" in page


# --- layered field: exact values -----------------------------------------------------------------


@pytest.mark.slow
def test_layered_field_flow_passes_at_every_block_and_arithmetic_along_the_layers(write_tif, tmp_path):
    # Bear 1972, "Dynamics of Fluids in Porous Media", §5.10: along parallel layers the effective k is
    # their thickness-weighted arithmetic mean, across them the harmonic mean
    layers = random_layers(64, seed=602_114_937, sigma_ln=1.5)
    field = write_tif("layered.tif", layers.rows(64), cell_size=1.0)
    out = tmp_path / "plan"
    code, _, err = _run("-q", "plan", field, "--blocks", "2x2,4x4,8x8,16x16", "--methods", "arithmetic,flow",
                        "--bc", "sealed", "--solver", "direct", "--out", out)  # fmt: skip
    assert code == 0, err
    plan = json.loads((out / "plan.json").read_text())
    assert plan["fine_k_eff"]["x"] == pytest.approx(layers.along, rel=1e-10)
    assert plan["fine_k_eff"]["y"] == pytest.approx(layers.across, rel=1e-10)
    arithmetic, flow = plan["methods"]
    for check in arithmetic["blocks"]:
        assert abs(check["rel_error"]["x"]) < 1e-10, check  # exact along the layers at every block
        assert check["rel_error"]["y"] > 0.05 and not check["meets"]  # too high across them
    assert arithmetic["coarsest"] is None
    for check in flow["blocks"]:
        # exact on both axes; the held-out corner flow crosses the layers at an angle, so exact axis
        # values still miss it (tests/flow/test_corner.py), and it decides whether a block passes
        assert abs(check["rel_error"]["x"]) < 1e-10 and abs(check["rel_error"]["y"]) < 1e-10, check
        assert check["largest_error"] == max(abs(e) for e in check["rel_error"].values())
        assert check["meets"] == (check["largest_error"] <= 0.05)
    passing = [check["block"] for check in flow["blocks"] if check["meets"]]
    assert passing and flow["coarsest"] == passing[-1]


# --- the fine model is solved once ---------------------------------------------------------------


def _count_solves(monkeypatch) -> list[int]:
    """Record the size of every pressure solve's matrix (the real solver still runs)."""
    sizes: list[int] = []
    solver = steady.make_solver

    def counted(A, *args, **kwargs):
        sizes.append(A.shape[0])
        return solver(A, *args, **kwargs)

    monkeypatch.setattr(steady, "make_solver", counted)
    return sizes


@pytest.mark.parametrize("blocks", [["4x4"], ["2x2", "4x4", "8x8", "16x16"]])
def test_the_fine_model_is_solved_once_per_flow_whatever_the_blocks(monkeypatch, blocks):
    field = Field.from_arrays(uncorrelated_lognormal((32, 32), seed=771_350_284))
    sizes = _count_solves(monkeypatch)
    plan = plan_blocks(field, [BlockSpec.parse(b) for b in blocks], candidates(["geometric", "harmonic"]))
    fine = [s for s in sizes if s == 32 * 32]
    # the axis flows once; per block the held-out flows (their regions are whole blocks), each
    # with its solve of k = 1 on the same grid (`upscale.flow.corner`)
    held = 2 * len(HELD_OUT)
    assert len(plan.fine_flows) == 2 and len(fine) == 2 + held * len(blocks)
    # and every coarse model was solved under each of those flows
    assert len(sizes) - len(fine) == len(blocks) * 2 * (2 + held)
    for comparison in plan.comparisons:
        assert all(comparison.fine_flows[a] is plan.fine_flows[a] for a in "xy")
        assert set(comparison.fine_flows) == {"x", "y", *HELD_OUT}


def test_planner_answer_agrees_with_each_comparison_in_memory():
    from upscale.analysis.compare import compare_methods

    field = Field.from_arrays(uncorrelated_lognormal((32, 32), seed=918_224_067, sigma_ln=1.0))
    chosen = candidates(["geometric", "arithmetic"])
    blocks = [BlockSpec.parse(b) for b in ("2x2", "4x4", "8x8")]
    plan = plan_blocks(field, blocks, chosen, max_error=0.1)
    for block, shared in zip(blocks, plan.comparisons):
        alone = compare_methods(field, block, chosen)
        for a, b in zip(sorted(alone.entries, key=lambda e: e.candidate.label),
                        sorted(shared.entries, key=lambda e: e.candidate.label)):  # fmt: skip
            assert a.worst_error == pytest.approx(b.worst_error, abs=1e-12)
    for candidate in chosen:
        passing = [b for b, e in zip(blocks, plan.errors(candidate)) if e <= 0.1]
        assert plan.coarsest(candidate) == (passing[-1] if passing else None)


def test_plan_with_wells_shares_their_fine_solve_and_ranks_on_them():
    from upscale.analysis.compare import compare_methods
    from upscale.check.wells import fine_wells
    from upscale.flow.wells import Well

    field = Field.from_arrays(uncorrelated_lognormal((32, 32), seed=918_224_067, sigma_ln=1.0),
                              cell_size=(10.0, 10.0))  # fmt: skip
    wells = [Well("I", 25.0, -25.0, None, "pressure", 1.0, 0.1), Well("P", 295.0, -295.0, None, "pressure",
                                                                       0.0, 0.1)]  # fmt: skip
    shared = fine_wells(field, wells)
    chosen = candidates(["geometric", "flow"])
    blocks = [BlockSpec.parse(b) for b in ("4x4", "8x8")]
    plan = plan_blocks(field, blocks, chosen, max_error=0.1, wells=shared)
    for block, found in zip(blocks, plan.comparisons):
        alone = {e.candidate.label: e for e in compare_methods(field, block, chosen, wells=shared).entries}
        for entry in found.entries:
            assert entry.wells.fine is shared.flow  # the one fine solve, at every block
            want = alone[entry.candidate.label].wells.rel_error
            assert entry.wells.rel_error == pytest.approx(want, abs=1e-12)
            assert entry.worst_error >= abs(entry.wells.rel_error)
    record = plan_record(plan, command=[], read=None).to_dict()
    assert record["measure"] == "largest |rel_error| over the checked flows and the wells' total rate"
    for method in record["methods"]:
        for check in method["blocks"]:
            assert set(check["rel_error"]) == {"x", "y", "corner", "wells"}


def test_plan_command_takes_a_wells_file(small_field, tmp_path, run_cli):
    from conftest import ORIGIN

    wells = tmp_path / "wells.csv"
    x0, y0 = ORIGIN
    wells.write_text(f"name,x,y,control,value,radius\nI,{x0 + 15},{y0 - 15},pressure,2,0.1\n"
                     f"P,{x0 + 615},{y0 - 615},pressure,1,0.1\n")  # fmt: skip
    out = tmp_path / "plan"
    code, stdout, stderr = run_cli("plan", small_field, "--blocks", "8x8,16x16", "--methods", "geometric",
                                   "--wells", wells, "--out", out)  # fmt: skip
    assert code == 0, stderr
    assert "over the checked flows and the wells' total rate" in stdout
    record = json.loads((out / "plan.json").read_text())
    assert all("wells" in b["rel_error"] for m in record["methods"] for b in m["blocks"])


# --- bad input -----------------------------------------------------------------------------------


@pytest.fixture(scope="module")
def small_field(tmp_path_factory):
    from conftest import write_raster

    return write_raster(tmp_path_factory.mktemp("small") / "small.tif",
                        uncorrelated_lognormal((64, 64), seed=330_517_862))  # fmt: skip


@pytest.mark.parametrize("options, message", [
    (["--blocks", "8x8,4x4"], "the blocks must grow from the finest to the coarsest (in fine cells per "
                              "block), but 4x4 (16 cells) follows 8x8 (64 cells)"),
    (["--blocks", "8x4,4x8"], "but 4x8 (32 cells) follows 8x4 (32 cells)"),
    (["--blocks", "4x4,128x128"], "block 128x128 is larger than the grid along y (rows): 128 > 64"),
    (["--blocks", "4x4,12x12"], "the grid does not divide into whole 12x12 blocks"),
    (["--blocks", "4x4,12x12", "--remainder", "crop"],
     "the blocks crop the grid to different extents (4x4 keeps 64 x 64 cells, 12x12 keeps 60 x 60 cells)"),
    (["--blocks", "4x4,8x"], "block '8x' is not of the form NXxNY"),
    (["--max-error", "abc"], "'abc' is not a percentage such as 5% or a fraction such as 0.05"),
    (["--max-error", "-3%"],
     "the largest error accepted must be more than 0 % and less than 100 %, got '-3%'"),
    (["--max-error", "0%"], "more than 0 % and less than 100 %, got '0%'"),
    (["--max-error", "150%"], "more than 0 % and less than 100 %, got '150%'"),
    (["--max-error", "nan"], "more than 0 % and less than 100 %, got 'nan'"),
    (["--max-error", "5"], "got '5'; a number without % is a fraction: for 5 percent write 5%"),
    (["--methods", "geometric,nope"], "unknown method 'nope'; choose among"),
])  # fmt: skip
def test_bad_input_is_one_line_and_writes_nothing(small_field, tmp_path, run_cli, options, message):
    out = tmp_path / "plan"
    args = ["plan", small_field, "--blocks", "4x4,8x8", "--methods", "geometric", "--out", out]
    for i in range(0, len(options), 2):  # an option given again replaces the default above
        if options[i] in args:
            args[args.index(options[i]) + 1] = options[i + 1]
        else:
            args += options[i:i + 2]
    code, stdout, stderr = run_cli(*args)
    assert code == 2, stderr
    assert stderr.startswith("upscale: error: ") and stderr.count("\n") == 1, stderr
    assert message in stderr and "Traceback" not in stderr
    assert stdout == "" and not out.exists()


def test_a_folder_that_holds_files_needs_overwrite(small_field, tmp_path, run_cli):
    out = tmp_path / "plan"
    args = ["-q", "plan", small_field, "--blocks", "8x8,16x16", "--methods", "geometric", "--out", out]
    assert run_cli(*args)[0] == 0
    before = (out / "plan.json").read_bytes()
    code, _, stderr = run_cli(*args)
    assert code == 2 and "already holds files" in stderr and "--overwrite" in stderr
    assert (out / "plan.json").read_bytes() == before
    assert run_cli(*args, "--overwrite")[0] == 0
    assert json.loads((out / "plan.json").read_text())["files"][-1] == "report.html"


def test_the_page_and_terminal_notes_name_uneven_answers_and_warn_when_none_passes():
    from upscale.report.verdict import no_block_warning, uneven_note

    field = Field.from_arrays(uncorrelated_lognormal((32, 32), seed=640_018_553, sigma_ln=0.5))
    plan = plan_blocks(field, [BlockSpec.parse(b) for b in ("2x2", "4x4", "8x8")],
                       candidates(["geometric", "arithmetic"]), max_error=0.5)  # fmt: skip
    record = plan_record(plan)
    assert [m.coarsest for m in record.methods] == ["8x8", "8x8"]  # sigma 0.5: every error is small
    assert no_block_warning(record) is None and uneven_note(record) is None
    # the same numbers judged against a tighter limit, with the 4x4 error of geometric made large
    geometric, arithmetic = record.methods
    checks = list(geometric.blocks)
    checks[1] = dataclasses.replace(checks[1], largest_error=0.9, meets=False)
    uneven = dataclasses.replace(geometric, blocks=tuple(checks), finer_all_meet=False)
    assert "geometric: within the error accepted at the coarsest block named but not at some finer one" in \
        uneven_note(dataclasses.replace(record, methods=(uneven, arithmetic)))  # fmt: skip
    nowhere = tuple(dataclasses.replace(m, coarsest=None, finer_all_meet=False) for m in record.methods)
    assert no_block_warning(dataclasses.replace(record, methods=nowhere)) == (
        "No method is within 50 % at any block listed, not even at 2x2: try finer blocks or another method.")
