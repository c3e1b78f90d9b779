"""What the report and the terminal say about the methods (`upscale.report.verdict`).

What is tested
--------------
* A run's report is that method's check, not a contest: no "Best on this
  field", no "Methods, ranked", no rank column, and no figure names a rank
  ("1. harmonic") or a "best"/"worst" panel.
* No method within the ±5 % band: said prominently on the page of
  ``compare``, of ``run --report`` and of both ensemble commands, in the
  check-error figure, and on the terminal of ``compare`` (one field and an
  ensemble); and not said when a method is within it.
* A bound ranked first: the arithmetic and harmonic means are the Wiener
  (1912) upper and lower bounds, slabs and tubes those of Cardwell & Parsons
  (1945), "Average permeabilities of heterogeneous oil sands". When one
  ranks first the page and the terminal note that its error cancels on this
  field; the ranking tables mark every bound.

The field: rows of 1 and 4 mD (layers along x) in 4 x 4 blocks, two rows of
each per block, so the arithmetic mean is exact along the layers and
+56.25 % across them, the harmonic mean exact across and −36 % along
(Cardwell & Parsons 1945: series and parallel flow); the harmonic mean
ranks first, and no method is within the band.
"""

from __future__ import annotations

import contextlib
import html
import io
import json
import re

import numpy as np
import pytest
from conftest import write_raster

from upscale import Field, coarsen
from upscale.analysis.compare import candidates, compare_methods, single
from upscale.check.axis import check_flow
from upscale.cli.main import main
from upscale.gallery.problems import Layers
from upscale.report.bundle import bundle
from upscale.report.figures import build_figures

#: Rows of 1 and 4 mD (layers along x), 16 x 16 cells.
LAYERS = Layers(np.tile([1.0, 1.0, 4.0, 4.0], 4), np.ones(16)).rows(16)
WARNING = re.compile(r'<p class="warning">([^<]*)</p>')
NOTE = re.compile(r'<p class="note">([^<]*)</p>')


@pytest.fixture(scope="module")
def layered(tmp_path_factory):
    folder = tmp_path_factory.mktemp("layers")
    for i in range(2):  # an ensemble of two: the same layers, scaled
        write_raster(folder / f"r{i + 1}.tif", LAYERS * (1.0 + 0.1 * i))
    return folder


def _page(out) -> str:
    return (out / "report.html").read_text(encoding="utf-8")


# --- one method: its check, not a contest --------------------------------------------------------


@pytest.mark.slow
def test_a_run_report_is_the_check_of_its_method(run_cli, layered, tmp_path):
    out = tmp_path / "run"
    code, _, err = run_cli("-q", "run", layered / "r1.tif", "--block", "4x4", "--method", "harmonic",
                           "--plot", "--report", "--out", out)  # fmt: skip
    assert code == 0, err
    page = _page(out)
    for contest in ("Best on this field", "Methods, ranked", "<th>rank</th>", 'class="method best"'):
        assert contest not in page, contest
    assert ("<strong>harmonic</strong> on this field: largest check error 36.00 % over the axes and the "
            "corner-to-corner flow.") in page
    assert WARNING.findall(page) == [
        "harmonic is outside the ±5 % band on this field: its largest check error is 36.00 %."]
    assert NOTE.findall(page) == []  # alone, the bound ranks against nothing


def test_figures_of_one_method_name_no_rank_and_no_best(layered):
    result = coarsen(Field.from_arrays(LAYERS), "4x4", "harmonic")
    comparison = single(result, check_flow(result.fine, result.transmissibilities()))
    for plot in build_figures(comparison, "mD"):
        figure = plot.figure
        texts = [figure.get_suptitle()] + [t.get_text() for ax in figure.axes
                                           for t in (ax.title, *ax.get_xticklabels())]  # fmt: skip
        for text in texts:
            assert not re.match(r"\d+\. ", text) and "best" not in text and "worst" not in text, (
                plot.name, text)
        assert "best" not in plot.caption and "each method" not in plot.caption, plot.name
    titles = {p.name: [ax.get_title() for ax in p.figure.axes if ax.get_title()]
              for p in build_figures(comparison, "mD")}  # fmt: skip
    assert titles["pressure"] == ["fine", "harmonic"]


# --- the band and the bounds on the page of one field --------------------------------------------


@pytest.fixture(scope="module")
def compared(layered, tmp_path_factory):
    """``upscale compare`` of the layers with the arithmetic and harmonic means (stdout kept)."""
    out = tmp_path_factory.mktemp("cmp") / "cmp"
    stdout = io.StringIO()
    with contextlib.redirect_stdout(stdout):
        code = main(["compare", str(layered / "r1.tif"), "--block", "4x4", "--methods",
                     "arithmetic,harmonic", "--out", str(out)])  # fmt: skip
    assert code == 0
    summary = json.loads((out / "compare.json").read_text())
    return {"out": out, "stdout": stdout.getvalue(), "summary": summary}


def test_compare_page_warns_that_no_method_is_within_the_band(compared):
    page = _page(compared["out"])
    assert compared["summary"]["best"] == "harmonic"
    assert WARNING.findall(page) == ["No method is within the ±5 % band on this field: the best, harmonic, "
                                     "has a largest check error of 36.00 %."]  # fmt: skip
    assert page.index('class="warning"') < page.index("<h2>")  # before anything else


def test_a_bound_ranked_first_carries_a_note_and_every_bound_a_mark(compared):
    page = _page(compared["out"])
    (note,) = NOTE.findall(page)
    assert note.startswith("harmonic is a lower bound of the effective permeability")
    assert "errors cancel" in note.replace("error cancels", "errors cancel")
    for label, mark in (("harmonic", "lower bound"), ("arithmetic", "upper bound")):
        assert f'<td>{label} <span class="bound">{mark}</span></td>' in page, label


def test_compare_terminal_says_the_band_and_the_bound(compared):
    lines = compared["stdout"].splitlines()
    assert "best: harmonic" in lines
    after = lines[lines.index("best: harmonic") + 1:]
    assert after[0] == ("warning: No method is within the ±5 % band on this field: the best, harmonic, has "
                        "a largest check error of 36.00 %.")  # fmt: skip
    assert after[1].startswith("note: harmonic is a lower bound of the effective permeability")


def test_no_warning_when_a_method_is_within_the_band(run_cli, tmp_path):
    even = write_raster(tmp_path / "even.tif", np.full((16, 16), 5.0))  # every mean is exact
    code, stdout, err = run_cli("compare", even, "--block", "4x4", "--methods", "geometric,harmonic",
                                "--out", tmp_path / "c")  # fmt: skip
    assert code == 0, err
    assert "warning:" not in stdout and "note:" not in stdout
    page = _page(tmp_path / "c")
    assert WARNING.findall(page) == [] and NOTE.findall(page) == []


def test_the_error_figure_of_a_comparison_says_no_method_is_within_the_band():
    comparison = compare_methods(Field.from_arrays(LAYERS), "4x4", candidates(["arithmetic", "harmonic"]))
    made = bundle(comparison, title="t", command=["upscale"])
    assert 'class="warning"' in made.page
    (ax,) = {p.name: p for p in build_figures(comparison, "mD")}["errors"].figure.axes
    assert ax.get_title().startswith("No method is within the ±5 % band")


# --- ensembles -----------------------------------------------------------------------------------


@pytest.mark.slow
def test_ensemble_pages_warn_and_note_too(run_cli, layered, tmp_path):
    code, stdout, err = run_cli("compare", layered / "r*.tif", "--block", "4x4", "--methods",
                                "arithmetic,harmonic", "--out", tmp_path / "ce")  # fmt: skip
    assert code == 0, err
    page = _page(tmp_path / "ce")
    assert WARNING.findall(page) == ["No method is within the ±5 % band over these realizations: the best, "
                                     "harmonic, has a median largest check error of 36.00 %."]  # fmt: skip
    assert NOTE.findall(page)[0].startswith("harmonic is a lower bound")
    assert f"<td>{html.escape('harmonic (lower bound)')}</td>" in page
    assert "warning: No method is within the ±5 % band over these realizations" in stdout
    assert "note: harmonic is a lower bound" in stdout
    code, _, err = run_cli("-q", "run", layered / "r*.tif", "--block", "4x4", "--method", "harmonic",
                           "--plot", "--report", "--out", tmp_path / "re")  # fmt: skip
    assert code == 0, err
    assert WARNING.findall(_page(tmp_path / "re")) == [
        "harmonic is outside the ±5 % band over these realizations: its median check error is 36.00 %."]
