"""Tests of ``upscale compare`` and of the figures and report of ``upscale run``.

What is tested
--------------
* ``compare.json`` agrees with running each method alone with ``upscale run``:
  the same ``k_fine``, ``k_coarse`` and ``rel_error`` per axis as the
  ``check`` of each run's ``summary.json``, and the same method options.
* Ranking: ranks 1..n for the methods that ran, ordered by their largest
  ``|rel_error|`` over the axes; a method that cannot run (renormalization on
  12x12 blocks) is listed with rank null and its reason, shown as "did not
  run", and the comparison still succeeds.
* User errors end with exit status 2 and one line on stderr: an unknown
  method name (listing the valid ones), a field over ``--check-limit``,
  ``--plot --no-check`` and ``--layer`` beyond the model.
* Progress lines (with ``-v``: stderr is no terminal here) for the fine solves
  and ``[i/n] label ...`` per method, and nothing at
  all with the group's ``-q``.
* File names with HTML characters are escaped in ``report.html``.
* ``upscale run --plot --report`` on a 3D model with ``--layer 3`` writes
  every figure as PNG and SVG and ``report.html``, all listed in
  ``summary.json``.

The command line runs in this process through `upscale.cli.main.main`
(the ``run_cli`` fixture, or `_run` for the module-scoped runs shared by
several tests).
"""

from __future__ import annotations

import hashlib
import html
import io
import json
import math
import re
from contextlib import redirect_stderr, redirect_stdout

import numpy as np
import pytest
from conftest import write_raster

from upscale.cli.main import main
from upscale.gallery.problems import uncorrelated_lognormal
from upscale.methods.registry import METHODS

LOGNORMAL = "marrowfen_lognormal.tif"
FIGURES_2D = ["maps", "errors", "bounds", "histograms", "mismatch_x", "mismatch_y", "pressure"]
FIGURES_3D = ["maps", "section", "errors", "bounds", "histograms", "mismatch_x", "mismatch_y", "pressure"]


def _run(*args) -> tuple[int, str, str]:
    """The command line in this process, for module-scoped fixtures (no capsys there)."""
    out, err = io.StringIO(), io.StringIO()
    with redirect_stdout(out), redirect_stderr(err):
        code = main([str(a) for a in args])
    return code, out.getvalue(), err.getvalue()


def _sha256(path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


def _worst(item: dict) -> float:
    return max(abs(c["rel_error"]) for c in item["check"].values())


# --- compare.json against one run per method ---------------------------------------------------

AGREEMENT_METHODS = ["geometric", "harmonic", "flow", "flow-transmissibility"]


@pytest.fixture(scope="module")
def lognormal_compare(demo_dir, tmp_path_factory):
    """``upscale -q compare`` of the lognormal demo on 16x16 blocks, flow methods periodic with border 2.

    The checks use the direct solver (three times faster than multigrid on this grid); the runs
    it is compared with use it too.
    """
    out = tmp_path_factory.mktemp("lognormal") / "cmp"
    result = _run("-q", "compare", demo_dir / LOGNORMAL, "--block", "16x16",
                  "--methods", ",".join(AGREEMENT_METHODS), "--bc", "periodic", "--border", "2",
                  "--solver", "direct", "--out", out)  # fmt: skip
    return out, result


def test_quiet_compare_prints_nothing(lognormal_compare):
    out, (code, stdout, stderr) = lognormal_compare
    assert (code, stdout, stderr) == (0, "", "")
    assert (out / "compare.json").is_file() and (out / "report.html").is_file()


def test_compare_json_agrees_with_each_method_run_alone(lognormal_compare, run_cli, demo_dir, tmp_path):
    field = demo_dir / LOGNORMAL
    out, (code, _, stderr) = lognormal_compare
    assert code == 0, stderr
    found = json.loads((out / "compare.json").read_text())
    by_method = {m["method"]: m for m in found["methods"]}
    assert sorted(by_method) == sorted(AGREEMENT_METHODS)
    assert found["inputs"][0]["sha256"] == _sha256(field)
    assert found["block"] == {"x": 16, "y": 16, "z": 1, "remainder": "stop", "min_active": 0.0,
                              "zero_k": "auto"}
    assert sorted(found["files"]) == sorted(
        [f"figures/{n}.{kind}" for n in FIGURES_2D for kind in ("png", "svg")] + ["report.html"]
    )
    for name in found["files"]:
        assert (out / name).stat().st_size > 0, name

    for method in AGREEMENT_METHODS:
        options = ["--bc", "periodic", "--border", "2"] if "bc" in METHODS[method].options else []
        alone = tmp_path / f"run-{method}"
        code, _, err = run_cli("-q", "run", field, "--block", "16x16", "--method", method, *options,
                               "--solver", "direct", "--out", alone)  # fmt: skip
        assert (code, err) == (0, ""), method
        summary = json.loads((alone / "summary.json").read_text())
        compared = by_method[method]
        assert compared["parameters"] == summary["method"]["options"], method
        assert compared["error"] is None and compared["rank"] in (1, 2, 3, 4)
        assert list(compared["check"]) == list(summary["check"]) == ["x", "y", "corner"]
        for axis, check in summary["check"].items():
            assert compared["check"][axis]["fine"]["solver"] == check["fine"]["solver"] == "direct"
            for key in ("k_fine", "k_coarse", "rel_error"):
                assert math.isclose(compared["check"][axis][key], check[key], rel_tol=1e-12, abs_tol=1e-15), (
                    method, axis, key, compared["check"][axis][key], check[key])  # fmt: skip
        # the mean coarse permeabilities agree with the run's statistics of its coarse grid
        for name in ("kx", "ky"):
            assert math.isclose(compared["coarse_mean"][name], summary["statistics"]["coarse"][name]["mean"],
                                rel_tol=1e-9), (method, name)  # fmt: skip


# --- ranking and a method that cannot run ------------------------------------------------------

CROPPED_METHODS = ["arithmetic", "geometric", "renormalization", "harmonic", "tubes"]


#: A file name with characters that HTML must escape (to test escaping in report.html).
ODD_NAME = "odd<b>&\"x'.tif"


@pytest.fixture(scope="module")
def cropped(tmp_path_factory):
    """``compare`` of a 50x50 field on 12x12 blocks (cropped to 48x48): renormalization cannot run.

    The field's file name holds ``<b>&"x'`` (for the escaping test), where the file system allows.
    """
    folder = tmp_path_factory.mktemp("cropped")
    try:
        field = write_raster(folder / ODD_NAME, uncorrelated_lognormal((50, 50), seed=7))
    except OSError:  # pragma: no cover - a file system that refuses these characters
        field = write_raster(folder / "field.tif", uncorrelated_lognormal((50, 50), seed=7))
    out = folder / "cmp"
    code, stdout, stderr = _run("-v", "compare", field, "--block", "12x12", "--remainder", "crop",
                                "--methods", ",".join(CROPPED_METHODS), "--out", out)  # fmt: skip
    summary = json.loads((out / "compare.json").read_text()) if code == 0 else None
    return field, out, (code, stdout, stderr), summary


def test_ranks_follow_the_largest_error_over_the_axes(cropped):
    _, _, (code, _, stderr), summary = cropped
    assert code == 0, stderr
    ran = [m for m in summary["methods"] if m["rank"] is not None]
    assert [m["rank"] for m in ran] == list(range(1, len(ran) + 1)) and len(ran) == 4
    worst = [_worst(m) for m in ran]
    assert worst == sorted(worst)
    assert len(set(worst)) == len(worst)  # no ties here: the order is the order of the errors
    assert summary["best"] == ran[0]["name"]
    for axis in ("x", "y"):  # best along an axis: the smallest |error| along it
        assert (
            summary["best_along"][axis] == min(ran, key=lambda m: abs(m["check"][axis]["rel_error"]))["name"]
        )
    assert summary["methods"][: len(ran)] == ran  # failed methods come last


def test_a_method_that_cannot_run_is_listed_and_the_others_still_run(cropped):
    _, _, (code, stdout, stderr), summary = cropped
    assert code == 0, stderr
    failed = summary["methods"][-1]
    assert failed["name"] == failed["method"] == "renormalization"
    assert failed["rank"] is None and failed["check"] is None and failed["coarse_mean"] is None
    assert "power of two" in failed["error"] and "12x12" in failed["error"]
    # the fine field used is the cropped one: 48 x 48 cells
    assert summary["fine"]["shape"] == {"layers": 1, "rows": 48, "columns": 48}
    assert summary["block"]["remainder"] == "crop"
    # the table shows it without a rank, and says why
    row = next(line for line in stdout.splitlines() if line.startswith("renormalization "))
    assert row.split()[1] == "-"
    assert f"renormalization did not run: {failed['error']}" in stdout
    assert f"best: {summary['best']}" in stdout
    assert "report.html" in summary["files"]


def test_progress_lines_on_stderr_per_method(cropped):
    _, _, (code, _, stderr), _ = cropped
    assert code == 0
    n = len(CROPPED_METHODS)
    assert all(line.startswith("upscale: ") for line in stderr.splitlines())
    lines = [line.removeprefix("upscale: ") for line in stderr.splitlines()]
    assert lines[0] == "solving the fine model along x, y and corner to corner ..."
    assert lines[1].startswith(lines[0][:-4])
    lines = lines[2:]
    for i, name in enumerate(CROPPED_METHODS, start=1):
        assert f"[{i}/{n}] {name} ..." in lines
        done = [line for line in lines if line.startswith(f"[{i}/{n}] {name}: ")]
        assert len(done) == 1, lines
        if name == "renormalization":
            assert (
                done[0].startswith(f"[{i}/{n}] renormalization: did not run (") and "power of two" in done[0]
            )
        else:
            assert re.fullmatch(rf"\[{i}/{n}\] {name}: done in \d+\.\d\d s", done[0])
    assert len(lines) == 2 * n  # nothing else on stderr (no warnings)


# --- user errors --------------------------------------------------------------------------------


def test_unknown_method_is_a_one_line_error_listing_the_valid_ones(run_cli, write_tif, tmp_path):
    field = write_tif("field.tif", uncorrelated_lognormal((16, 16), seed=1))
    out = tmp_path / "cmp"
    code, stdout, err = run_cli("compare", field, "--block", "8x8", "--methods", "geometric,bogus",
                                "--out", out)  # fmt: skip
    assert code == 2 and stdout == ""
    assert err.count("\n") == 1 and err.startswith("upscale: error: unknown method 'bogus'")
    for name in METHODS:
        assert name in err
    assert not out.exists()


def test_field_over_the_check_limit_is_refused_clearly(run_cli, write_tif, tmp_path):
    field = write_tif("field.tif", uncorrelated_lognormal((16, 16), seed=1))
    out = tmp_path / "cmp"
    code, stdout, err = run_cli("compare", field, "--block", "8x8", "--methods", "geometric",
                                "--check-limit", "100", "--out", out)  # fmt: skip
    assert code == 2 and stdout == ""
    assert err.count("\n") == 1 and err.startswith(
        "upscale: error: a comparison ranks methods by the flow check"
    )
    assert "256 cells, more than the check limit of 100" in err and "--check-limit" in err
    assert not out.exists()


def test_run_plot_without_check_is_a_one_line_error(run_cli, write_tif, tmp_path):
    field = write_tif("field.tif", uncorrelated_lognormal((16, 16), seed=1))
    out = tmp_path / "run"
    for flags in (["--plot"], ["--report"], ["--plot", "--report"]):
        code, stdout, err = run_cli("run", field, "--block", "8x8", "--method", "geometric", *flags,
                                    "--no-check", "--out", out)  # fmt: skip
        assert (code, stdout) == (2, ""), flags
        assert err == "upscale: error: --plot and --report show the flow check; leave out --no-check\n"
        assert not out.exists()


def test_layer_beyond_the_model_is_refused(run_cli, write_tif, tmp_path):
    field = write_tif("model.tif", uncorrelated_lognormal((4, 16, 16), seed=2))
    for command in (["run", "--method", "geometric", "--plot"], ["compare", "--methods", "geometric"]):
        out = tmp_path / command[0]
        code, stdout, err = run_cli(command[0], field, "--dz", "1", "--block", "8x8x2", *command[1:],
                                    "--layer", "5", "--out", out)  # fmt: skip
        assert (code, stdout) == (2, ""), command
        assert err == "upscale: error: --layer is past the field's 4 layer(s)\n"
        assert not out.exists()


def test_file_names_are_escaped_in_the_report(cropped):
    field, out, (code, _, stderr), summary = cropped
    if field.name != ODD_NAME:  # pragma: no cover
        pytest.skip(f"the file system refuses the name {ODD_NAME!r}")
    assert code == 0, stderr
    page = (out / "report.html").read_text(encoding="utf-8")
    escaped = "odd&lt;b&gt;&amp;&quot;x&#x27;.tif"
    assert page.count(escaped) >= 3  # title, heading, inputs table (and the command line)
    assert "<b>" not in page and ODD_NAME not in page
    shown = html.escape(str(field), quote=True)
    assert shown.endswith(escaped)
    assert f"<title>upscale — methods compared on {shown}</title>" in page
    assert f"<h1>upscale — methods compared on {shown}</h1>" in page
    assert f"<td class='text'>{shown}</td>" in page  # the inputs table
    # compare.json keeps the name as it is (JSON needs no HTML escaping)
    assert summary["inputs"][0]["path"] == str(field)
    assert str(field) in summary["command"]


# --- upscale run --plot --report -----------------------------------------------------------------


def test_run_plot_report_on_a_3d_model_writes_figures_and_page(run_cli, write_tif, tmp_path):
    values = np.concatenate([uncorrelated_lognormal((2, 32, 32), seed=s, mean_ln=m)
                             for s, m in ((4, 2.0), (5, 5.0))])
    field = write_tif("model.tif", values)
    out = tmp_path / "run"
    code, stdout, err = run_cli("run", field, "--dz", "2", "--block", "8x8x2", "--method", "geometric",
                                "--plot", "--report", "--layer", "3", "--out", out)  # fmt: skip
    assert (code, err) == (0, "")
    summary = json.loads((out / "summary.json").read_text())
    figures = [f"figures/{name}.{kind}" for name in FIGURES_3D for kind in ("png", "svg")]
    assert set(figures) | {"report.html"} <= set(summary["files"])
    assert sorted(p.relative_to(out).as_posix() for p in (out / "figures").iterdir()) == sorted(figures)
    for name in FIGURES_3D:
        assert (out / "figures" / f"{name}.png").read_bytes().startswith(b"\x89PNG\r\n\x1a\n"), name
        assert b"<svg" in (out / "figures" / f"{name}.svg").read_bytes()[:2000], name
    # --layer 3 (1 = top) is the layer drawn in plan; matplotlib's SVG keeps each text as a comment
    svg = {name: (out / "figures" / f"{name}.svg").read_bytes() for name in ("maps", "section")}
    assert b"<!-- Fine and coarse kx, layer 3 -->" in svg["maps"]
    assert b"<!-- Fine and coarse kx, section through row 16 -->" in svg["section"]
    page = (out / "report.html").read_text(encoding="utf-8")
    # one method: its check, not a ranking with a "best" row
    assert page.count('<tr class="method">') == 1 and page.count('class="method') == 1
    assert page.count("data:image/png;base64,") == len(FIGURES_3D)
    for name in FIGURES_3D:
        assert f'<figure id="{name}">' in page
    assert "upscale — geometric on" in page
    # the check shown in the page is the one recorded in the summary
    for axis in ("x", "y", "z"):
        assert f"{100 * summary['check'][axis]['rel_error']:+.2f} %" in page
    assert f"{len(FIGURES_3D)} figures in figures/ (PNG, SVG), report.html, summary.json" in stdout


def test_run_without_plot_or_report_writes_no_figures(run_cli, write_tif, tmp_path):
    field = write_tif("field.tif", uncorrelated_lognormal((16, 16), seed=1))
    out = tmp_path / "run"
    code, _, err = run_cli("-q", "run", field, "--block", "8x8", "--method", "geometric", "--out", out)
    assert (code, err) == (0, "")
    assert not (out / "figures").exists() and not (out / "report.html").exists()
    summary = json.loads((out / "summary.json").read_text())
    assert not any(f.startswith("figures/") or f == "report.html" for f in summary["files"])
