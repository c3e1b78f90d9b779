"""The HTML report of ``upscale compare`` opened in a real headless browser, and its content.

What is tested
--------------
* ``report.html`` loads in headless Chromium without script errors, console
  errors or warnings and failed resources; every embedded figure decodes to
  an image of non-zero size; the ranking table has one row per method.
  Approach: a copy of the page gets a probe script at the start of ``<head>``
  (records ``error`` events, including failed resources, and
  ``console.error``/``console.warn`` calls) and one at the end of ``<body>``
  that, on window load, writes a JSON verdict into ``<pre id="probe">``;
  Chromium's ``--dump-dom`` gives the DOM back after loading. At 1280 px
  no number cell of the ranking breaks over two lines, the page is no
  wider than the window and no figure wider than 1100 px; the bound in the
  ranking (harmonic) carries its mark.
* The page of ``upscale plan`` the same way: loads without errors, its one figure decodes,
  its table has one row per method with the error at every block and the coarsest block
  (in bold in its row), no number cell wraps, self-contained with command and checksum.
* A screenshot of the original page (1280 x 4000; the plan's page 1280 x
  2400) is kept as a test artifact in ``$UPSCALE_ARTIFACTS`` or
  ``<repo>/test-artifacts/``, and must be a non-empty PNG of that size.
* The page is self-contained (no http(s) or protocol-relative references, no
  scripts, no stylesheet links; figures are the PNG files of figures/ as
  data URIs) and carries the caution, the exact command line (after a ``cd``
  into the folder it ran in) and the SHA-256 of the input.

Chromium is Debian's (``/usr/bin/chromium``; CI installs it, see
``.ci/run``): the browser tests are skipped, saying so, only where no
Chromium binary is found. The browser and the head probe are shared with
the ensemble pages' tests (``tests/browser_probe.py``).
"""

from __future__ import annotations

import base64
import hashlib
import html
import json
import os
import re
import shlex
import struct
from pathlib import Path

import pytest
from browser_probe import assert_self_contained, browse, probe
from comparison_records import comparison, method

from upscale.analysis.ensemble import ensemble_ranking
from upscale.caution import CAUTION
from upscale.cli.main import main
from upscale.report.bundle import spread_bundle

REPO = Path(__file__).resolve().parents[2]
METHODS = "geometric,harmonic,flow"
#: Labels in the ranking: flow without --bc stands for its three boundary conditions.
LABELS = {"geometric", "harmonic", "flow (sealed)", "flow (linear)", "flow (periodic)"}
FIGURES = ["maps", "errors", "bounds", "histograms", "mismatch_x", "mismatch_y", "pressure"]


def _artifacts() -> Path:
    folder = Path(os.environ.get("UPSCALE_ARTIFACTS") or REPO / "test-artifacts")
    folder.mkdir(parents=True, exist_ok=True)
    return folder


@pytest.fixture(scope="module")
def report(demo_dir, tmp_path_factory):
    """``upscale -q compare`` of the lognormal demo with three methods (five candidates)."""
    field = demo_dir / "marrowfen_lognormal.tif"
    out = tmp_path_factory.mktemp("report") / "cmp"
    args = ["-q", "compare", str(field), "--block", "16x16", "--methods", METHODS, "--out", str(out)]
    assert main(args) == 0
    return {"field": field, "out": out, "command": ["upscale", *args], "page": out / "report.html"}


PROBE_VERDICT = """  var images = Array.prototype.map.call(document.images, function (img) {
    return {figure: img.parentElement.id, complete: img.complete,
            width: img.naturalWidth, height: img.naturalHeight};
  });
  var verdict = {
    errors: window.__problems,
    images: images,
    ranking_rows: document.querySelectorAll("#ranking tr.method").length,
    best_rows: document.querySelectorAll("#ranking tr.method.best").length,
    labels: Array.prototype.map.call(document.querySelectorAll("#ranking tr.method td:first-child"),
                                     function (td) { return td.firstChild.textContent.trim(); }),
    marks: Array.prototype.map.call(document.querySelectorAll("#ranking .bound"),
                                    function (span) { return span.textContent; }),
    wrapped: wrappedCells(),
    overflow: document.documentElement.scrollWidth > window.innerWidth,
    widest_image: Math.max.apply(null, Array.prototype.map.call(document.images,
                                                               function (img) { return img.width; })),
    bold: document.querySelectorAll("b").length,
    title: document.title
  };
"""


@pytest.fixture(scope="module")
def verdict(report, chromium, tmp_path_factory):
    """What the probe saw when Chromium loaded a probed copy of the page."""
    return probe(chromium, report["page"], tmp_path_factory.mktemp("probe"), PROBE_VERDICT)


# --- in the browser ------------------------------------------------------------------------------


def test_report_loads_without_errors(verdict):
    assert verdict["errors"] == []


def test_every_figure_decodes_to_an_image(verdict):
    assert [image["figure"] for image in verdict["images"]] == FIGURES
    for image in verdict["images"]:
        assert image["complete"] and image["width"] > 0 and image["height"] > 0, image


def test_one_ranking_row_per_method(verdict, report):
    assert verdict["ranking_rows"] == len(LABELS) == 5
    assert set(verdict["labels"]) == LABELS
    assert verdict["best_rows"] == 1
    assert verdict["title"] == f"upscale — methods compared on {report['field']}"
    assert verdict["bold"] == 0  # no markup leaks in from text
    assert verdict["marks"] == ["lower bound"]  # harmonic: the Wiener lower bound


def test_number_cells_stay_on_one_line_and_the_page_fits_the_window(verdict):
    # at 1280 px: "5 / 5" or "11.34 %" broken over two lines reads as two numbers
    assert verdict["wrapped"] == []
    assert not verdict["overflow"]
    assert 0 < verdict["widest_image"] <= 1100  # the page's width for figures (report/layout.py)


def _screenshot(chromium: str, page: Path, name: str, height: int, profile: Path) -> None:
    """Save a 1280 x `height` screenshot of `page` as the artifact `name`, and check it is that PNG."""
    target = _artifacts() / name
    target.unlink(missing_ok=True)
    options = [f"--screenshot={target}", f"--window-size=1280,{height}", "--virtual-time-budget=10000"]
    done = browse(chromium, profile, "--hide-scrollbars", *options, page.as_uri())
    assert target.is_file(), f"no screenshot (exit {done.returncode}): {done.stderr[-2000:]}"
    data = target.read_bytes()
    assert data.startswith(b"\x89PNG\r\n\x1a\n") and len(data) > 10_000
    width, shown = struct.unpack(">II", data[16:24])  # the IHDR chunk
    assert (width, shown) == (1280, height)


def test_screenshot_is_saved_as_an_artifact(report, chromium, tmp_path):
    _screenshot(chromium, report["page"], "report-screenshot.png", 4000, tmp_path / "profile")


def test_a_wide_ranking_keeps_its_numbers_on_one_line(chromium, tmp_path):
    # the widest ranking: methods compared over an ensemble of a 3D model (11 columns), long labels
    labels = ["flow-transmissibility (sealed, border 2)", "flow (periodic, border 2)", "power (ω=0.333)",
              "renormalization", "arithmetic"]  # fmt: skip
    names = [f"realization_{i:02d}" for i in range(5)]
    compared = [comparison([method(label, j + 1, {a: (-1) ** j * (0.05 + 0.03 * j + 0.002 * i + 0.01 * k)
                                                  for k, a in enumerate("xyz")}, label.split(" ")[0])
                            for j, label in enumerate(labels)], 3, path=f"/data/fields/{n}.tif",
                           block={"x": 8, "y": 8, "z": 4}) for i, n in enumerate(names)]  # fmt: skip
    command = ["upscale", "compare", "r*.tif"]
    ranking = ensemble_ranking(names, compared, command=command)
    made = spread_bundle(ranking, title="ensemble", command=command)
    page = tmp_path / "report.html"
    page.write_text(made.page, encoding="utf-8")
    seen = probe(chromium, page, tmp_path, """  var verdict = {wrapped: wrappedCells(),
    cells: document.querySelectorAll("#spread td").length};""")
    assert seen["cells"] == len(labels) * 11
    assert seen["wrapped"] == []  # "5 / 5" and "11.34 %" broke over two lines before


# --- the page itself -----------------------------------------------------------------------------


def test_page_is_self_contained(report):
    assert_self_contained(report["page"].read_text(encoding="utf-8"))


def test_embedded_figures_are_the_png_files(report):
    page = report["page"].read_text(encoding="utf-8")
    embedded = re.findall(r'<figure id="([^"]+)"><img alt="[^"]*" src="data:image/png;base64,([^"]+)">', page)
    assert [name for name, _ in embedded] == FIGURES
    for name, data in embedded:
        assert base64.b64decode(data) == (report["out"] / "figures" / f"{name}.png").read_bytes(), name


def test_page_has_the_caution_command_and_checksum(report):
    page = report["page"].read_text(encoding="utf-8")
    assert f'<p class="caution">{html.escape(CAUTION)}</p>' in page
    command = shlex.join(report["command"])
    reproduce = f"cd {shlex.quote(os.getcwd())} && {command}"  # the folder the command ran in
    assert f"<pre><code>{html.escape(reproduce)}</code></pre>" in page
    assert "--methods geometric,harmonic,flow" in command
    sha256 = hashlib.sha256(report["field"].read_bytes()).hexdigest()
    assert f"<code>{sha256}</code>" in page
    summary = json.loads((report["out"] / "compare.json").read_text())
    assert summary["inputs"][0]["sha256"] == sha256 and summary["command"] == report["command"]
    # the verdict names the best method of compare.json
    assert f"Best on this field: <strong>{html.escape(summary['best'])}</strong>" in page


# --- the page of a plan (upscale plan) -----------------------------------------------------------

PLAN_METHODS = "geometric,harmonic,flow-transmissibility"
PLAN_BLOCKS = ["8x8", "16x16", "32x32"]


@pytest.fixture(scope="module")
def plan_report(demo_dir, tmp_path_factory):
    """``upscale -q plan`` of the lognormal demo at three blocks with three methods."""
    field = demo_dir / "marrowfen_lognormal.tif"
    out = tmp_path_factory.mktemp("plan") / "plan"
    args = ["-q", "plan", str(field), "--blocks", ",".join(PLAN_BLOCKS), "--methods", PLAN_METHODS,
            "--out", str(out)]  # fmt: skip
    assert main(args) == 0
    return {"field": field, "out": out, "command": ["upscale", *args], "page": out / "report.html"}


PLAN_VERDICT = """  var verdict = {
    errors: window.__problems,
    images: Array.prototype.map.call(document.images, function (img) {
      return {figure: img.parentElement.id, complete: img.complete, width: img.naturalWidth,
              height: img.naturalHeight, shown: img.width};
    }),
    head: Array.prototype.map.call(document.querySelectorAll("#plan th"), function (th) {
      return th.textContent; }),
    rows: Array.prototype.map.call(document.querySelectorAll("#plan tr.method"), function (tr) {
      return Array.prototype.map.call(tr.cells, function (td) { return td.textContent; }); }),
    strong: Array.prototype.map.call(document.querySelectorAll("#plan strong"), function (s) {
      return s.textContent; }),
    wrapped: wrappedCells(),
    overflow: document.documentElement.scrollWidth > window.innerWidth,
    title: document.title
  };
"""


@pytest.fixture(scope="module")
def plan_verdict(plan_report, chromium, tmp_path_factory):
    """What the probe saw when Chromium loaded a probed copy of the plan's page."""
    return probe(chromium, plan_report["page"], tmp_path_factory.mktemp("plan-probe"), PLAN_VERDICT)


@pytest.mark.slow
def test_plan_page_loads_and_shows_every_method_at_every_block(plan_verdict, plan_report):
    plan = json.loads((plan_report["out"] / "plan.json").read_text())
    assert plan_verdict["errors"] == []
    assert plan_verdict["title"] == f"upscale — how coarse can {plan_report['field']} go?"
    [image] = plan_verdict["images"]
    assert image["figure"] == "error_by_block" and image["complete"] and image["width"] > 0
    assert 0 < image["shown"] <= 1100  # the page's width for figures (report/layout.py)
    assert plan_verdict["head"] == ["method", *(f"error at {b}" for b in PLAN_BLOCKS), "coarsest within 5 %"]
    # one row per method, in plan.json's order, its coarsest block last and in bold in its row
    assert [row[0] for row in plan_verdict["rows"]] == [m["name"] for m in plan["methods"]]
    for row, planned in zip(plan_verdict["rows"], plan["methods"]):
        assert row[1:-1] == [f"{100 * b['largest_error']:.2f} %" for b in planned["blocks"]]
        assert row[-1] == (planned["coarsest"] or "none")
    coarsest = [m for m in plan["methods"] if m["coarsest"]]
    assert len(plan_verdict["strong"]) == len(coarsest) >= 1
    assert plan_verdict["wrapped"] == [] and not plan_verdict["overflow"]


def test_plan_page_is_self_contained_with_the_command_and_checksum(plan_report):
    page = plan_report["page"].read_text(encoding="utf-8")
    assert_self_contained(page)
    assert f'<p class="caution">{html.escape(CAUTION)}</p>' in page
    reproduce = f"cd {shlex.quote(os.getcwd())} && {shlex.join(plan_report['command'])}"
    assert f"<pre><code>{html.escape(reproduce)}</code></pre>" in page
    assert f"<code>{hashlib.sha256(plan_report['field'].read_bytes()).hexdigest()}</code>" in page
    embedded = re.findall(r'src="data:image/png;base64,([^"]+)"', page)
    assert [base64.b64decode(d) for d in embedded] == [
        (plan_report["out"] / "figures" / "error_by_block.png").read_bytes()]


def test_plan_page_screenshot_is_saved_as_an_artifact(plan_report, chromium, tmp_path):
    _screenshot(chromium, plan_report["page"], "plan-report-screenshot.png", 2400, tmp_path / "profile")
