"""``upscale compare`` on an ensemble, and the spread pages of both ensemble commands.

What is tested
--------------
* ``upscale compare`` on a glob of four small generated realizations (three
  means on 8x8 blocks): exit 0; one comparison folder per realization
  (``compare.json``, ``report.html``, ``figures/``), ``ranking.csv``,
  ``figures/spread.png`` and ``.svg``, ``report.html`` and
  ``ensemble.json``, whose ``files`` lists exactly these; no staging folder
  is left behind. Each realization's folder is what a standalone
  ``upscale compare`` of that one field writes: the same ``compare.json``
  (``rel_error`` per method and axis, and everything else but the command
  line and the timings) and the same figures, byte for byte.
* ``ensemble.json``, per method: the 10th, 50th and 90th percentiles, keys
  ``p10_nonexceed`` ... (and mean, min, max, count)
  of the largest ``|rel_error|`` over the axes and of ``rel_error`` along
  each axis equal ``numpy.percentile`` over the realizations'
  ``compare.json`` — linear interpolation between order statistics (Hyndman
  & Fan 1996, "Sample quantiles in statistical packages", definition 7),
  also checked against that formula written out. The methods are ranked by
  the median of their largest error; the realizations are chosen so that each
  method ranks first on at least one of them and the order of the means
  differs from that of the medians, so the ranking, ``best`` and
  ``rank_in_realizations`` (how often first, mean rank: counted from the
  realizations' ranks) are not right by accident. ``ranking.csv`` holds the
  values of ``ensemble.json``; stdout (no ``-q``) shows the ranking table
  and "best over the ensemble", and stderr stays empty.
* ``upscale run`` on the same ensemble with ``--plot --report``:
  ``figures/ensemble.png`` (a PNG that decodes, of non-zero size) and
  ``.svg``, and ``report.html`` whose table holds the three percentiles, mean,
  min and max of ``ensemble.json`` formatted as the page formats them, all
  listed in ``ensemble.json``.
* Bad input to ``compare`` on an ensemble: a glob that matches nothing,
  realizations on different grids (another shape or another cell size; the
  message names the odd one), ``--check-limit`` below the field's size —
  exit 2, one line on stderr starting "upscale: error: ", no traceback, no
  output folder. A realization on which no method runs (zeros under the
  geometric and harmonic means) is refused the same way, naming it, as a
  comparison of that field alone is.
* Both ensemble pages (compare and run) in headless Chromium, with the probe
  of ``tests/browser_probe.py`` (as in ``tests/report/test_report_browser.py``):
  no script or console errors, every image decodes to a non-empty image,
  table ``#spread`` has one row per method (compare) or per quantity and
  axis (run) holding the values of ``ensemble.json``, the caution and the
  command line are on the page, and the page is self-contained (its one
  figure is ``figures/*.png`` as a data URI). Skipped only where no
  Chromium binary is found.

The command line runs in this process through `upscale.cli.main.main`
(`_run` for the module-scoped runs shared by several tests, the ``run_cli``
fixture for the others).
"""

from __future__ import annotations

import base64
import csv
import hashlib
import html
import io
import json
import os
import shlex
import struct
from contextlib import redirect_stderr, redirect_stdout
from pathlib import Path

import numpy as np
import pytest
from browser_probe import assert_self_contained, probe
from comparison_records import comparison, method
from conftest import partial_leftovers, snapshot, write_raster
from PIL import Image

from upscale.analysis.comparison_record import ComparisonRecord
from upscale.analysis.ensemble import method_spread
from upscale.analysis.percentiles import PERCENTILES, key, note
from upscale.caution import CAUTION
from upscale.check.axis import flow_label
from upscale.cli.main import main
from upscale.gallery.problems import uncorrelated_lognormal
from upscale.methods.registry import METHODS as REGISTRY

SIZE = (32, 32)
NAMES = ["r0", "r1", "r2", "r3"]
AXES = "xy"
FLOWS = (*AXES, "corner")  # every check also holds the held-out corner-to-corner flow
#: Not in ranked order, so that the ranking shows in the order of the output.
METHODS = "arithmetic,harmonic,geometric"
#: The figures of a 2D comparison.
FIGURES = ["maps", "errors", "bounds", "histograms", "mismatch_x", "mismatch_y", "pressure"]
PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"
#: The default reading of the percentiles, and the key of the median in it.
READING = "nonexceedance"
MEDIAN = key(50, READING)


def _run(*args) -> tuple[int, str, str]:
    """The command line in this process, for module-scoped fixtures (no capsys there)."""
    out, err = io.StringIO(), io.StringIO()
    with redirect_stdout(out), redirect_stderr(err):
        code = main([str(a) for a in args])
    return code, out.getvalue(), err.getvalue()


def _json(path: Path) -> dict:
    return json.loads(path.read_text(encoding="utf-8"))


def _png_size(data: bytes) -> tuple[int, int]:
    """Width and height from the IHDR chunk, which must follow the PNG signature."""
    assert data.startswith(PNG_SIGNATURE) and data[12:16] == b"IHDR"
    return struct.unpack(">II", data[16:24])


def _one_error(code: int, stdout: str, stderr: str) -> str:
    assert code == 2 and stdout == "", (code, stdout, stderr)
    lines = stderr.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("upscale: error: ") and "Traceback" not in stderr
    return lines[0]


@pytest.fixture(scope="module")
def realizations(tmp_path_factory):
    """Four realizations on one 32x32 grid of 10 m cells; every method ranks first on one at least.

    r0 and r1 are uncorrelated lognormal fields (geometric first), r2 holds 10 % of 1000 mD
    cells in 1 mD rock (harmonic first, arithmetic about 80 times too high), r3 lognormal
    patches of the blocks' size with a little noise (arithmetic first, by less than 1 %).
    """
    folder = tmp_path_factory.mktemp("realizations")
    fields = [
        uncorrelated_lognormal(SIZE, seed=9_300),
        uncorrelated_lognormal(SIZE, seed=9_301),
        np.where(np.random.default_rng(9_302).random(SIZE) < 0.1, 1000.0, 1.0),
        np.kron(uncorrelated_lognormal((4, 4), seed=9_303, sigma_ln=1.5), np.ones((8, 8)))
        * uncorrelated_lognormal(SIZE, seed=9_304, mean_ln=0.0, sigma_ln=0.1),
    ]
    for name, values in zip(NAMES, fields):
        write_raster(folder / f"{name}.tif", values, cell_size=10.0)
    return folder


@pytest.fixture(scope="module")
def compared(realizations, tmp_path_factory):
    """``upscale compare 'r*.tif' --block 8x8 --methods ...`` (no -q: stdout is tested)."""
    out = tmp_path_factory.mktemp("compared") / "cmp"
    args = ["compare", str(realizations / "r*.tif"), "--block", "8x8", "--methods", METHODS,
            "--out", str(out)]  # fmt: skip
    code, stdout, stderr = _run(*args)
    assert code == 0, stderr
    return {"out": out, "stdout": stdout, "stderr": stderr, "command": ["upscale", *args],
            "ensemble": _json(out / "ensemble.json")}  # fmt: skip


@pytest.fixture(scope="module")
def standalone(realizations, tmp_path_factory):
    """``upscale -q compare`` of each realization alone, into one folder each."""
    folder = tmp_path_factory.mktemp("standalone")
    for name in NAMES:
        code, stdout, stderr = _run("-q", "compare", realizations / f"{name}.tif", "--block", "8x8",
                                    "--methods", METHODS, "--out", folder / name)  # fmt: skip
        assert (code, stdout, stderr) == (0, "", ""), name
    return folder


@pytest.fixture(scope="module")
def ran(realizations, tmp_path_factory):
    """``upscale -q run 'r*.tif' --block 8x8 --method geometric --plot --report``."""
    out = tmp_path_factory.mktemp("ran") / "ens"
    args = ["-q", "run", str(realizations / "r*.tif"), "--block", "8x8", "--method", "geometric",
            "--plot", "--report", "--out", str(out)]  # fmt: skip
    code, stdout, stderr = _run(*args)
    assert (code, stdout, stderr) == (0, "", "")
    return {"out": out, "command": ["upscale", *args], "ensemble": _json(out / "ensemble.json")}


def _comparisons(out: Path) -> dict[str, dict]:
    return {name: _json(out / name / "compare.json") for name in NAMES}


def _entry(comparison: dict, label: str) -> dict:
    return next(m for m in comparison["methods"] if m["name"] == label)


def _compare_rows(ensemble: dict) -> list[list[str]]:
    """The rows of the compare page's table ``#spread``, from ``ensemble.json``, as the page formats them."""
    rows = []
    for m in ensemble["methods"]:
        w, mean_rank = m["worst_error"], m["rank_in_realizations"]["mean"]
        mark = REGISTRY[m["method"]].bound  # the means are the Wiener bounds (Wiener 1912)
        rows.append([str(m["rank"]), m["name"] + (f" ({mark} bound)" if mark else ""),
                     f"{m['ran']} / {m['ran'] + m['failed']}",
                     *(f"{100 * w[key(q, READING)]:.2f} %" for q in PERCENTILES),
                     *(f"{100 * m['rel_error'][a][MEDIAN]:+.2f} %" for a in FLOWS),
                     f"{mean_rank:.1f}", str(m["rank_in_realizations"]["first"])])  # fmt: skip
    return rows


def _run_rows(ensemble: dict) -> list[list[str]]:
    """The rows of the run page's table ``#spread``: k_eff as 4 significant digits, errors in %."""
    rows = []
    for quantity, label in (("k_fine", "fine k_eff"), ("k_coarse", "coarse k_eff"), ("rel_error", "error")):
        for axis in FLOWS:
            s = ensemble["statistics"][quantity][axis]
            values = [s[k] for k in (*(key(q, READING) for q in PERCENTILES), "mean", "min", "max")]
            cells = [f"{100 * v:+.2f} %" if quantity == "rel_error" else f"{v:.4g}" for v in values]
            rows.append([f"{label} {flow_label(axis)}", *cells, str(s["count"])])
    return rows


def _html_row(cells: list[str]) -> str:
    return "<tr>" + "".join(f"<td>{html.escape(c)}</td>" for c in cells) + "</tr>"


# --- compare on an ensemble: the folder ------------------------------------------------------------


@pytest.mark.slow
def test_compare_ensemble_writes_one_folder_per_realization_and_the_ranking(compared, realizations):
    out, ensemble = compared["out"], compared["ensemble"]
    assert sorted(p.name for p in out.iterdir()) == sorted(
        [*NAMES, "ranking.csv", "figures", "report.html", "ensemble.json"])  # fmt: skip
    assert sorted(p.name for p in (out / "figures").iterdir()) == ["spread.png", "spread.svg"]
    # ensemble.json lists exactly the files beside it (and is written last, so lists not itself)
    assert ensemble["files"] == [*NAMES, "ranking.csv", "figures/spread.png", "figures/spread.svg",
                                 "report.html"]  # fmt: skip
    on_disk = [p.relative_to(out).as_posix() for p in [*out.iterdir(), *(out / "figures").iterdir()]]
    assert sorted(on_disk) == sorted([*ensemble["files"], "figures", "ensemble.json"])
    assert partial_leftovers(out.parent) == [] and partial_leftovers(out) == []
    assert min(_png_size((out / "figures" / "spread.png").read_bytes())) > 0
    assert b"<svg" in (out / "figures" / "spread.svg").read_bytes()[:2000]

    figures = sorted(f"figures/{n}.{kind}" for n in FIGURES for kind in ("png", "svg"))
    for name in NAMES:
        folder = out / name
        assert sorted(p.name for p in folder.iterdir()) == ["compare.json", "figures", "report.html"]
        comparison = _json(folder / "compare.json")
        assert sorted(comparison["files"]) == sorted([*figures, "report.html"])
        for file in comparison["files"]:
            assert (folder / file).stat().st_size > 0, (name, file)
        assert comparison["command"] == compared["command"]
        assert comparison["inputs"][0]["path"] == str(realizations / f"{name}.tif")

    assert ensemble["command"] == compared["command"]
    assert ensemble["caution"] == CAUTION and ensemble["percentiles"] == note(READING)
    assert ensemble["percentile_convention"] == READING
    assert ensemble["axes"] == AXES
    assert ensemble["block"] == {"x": 8, "y": 8, "z": 1, "remainder": "stop", "min_active": 0.0,
                                 "zero_k": "auto"}
    assert ensemble["realizations"] == [
        {"name": name, "path": str(realizations / f"{name}.tif"),
         "sha256": hashlib.sha256((realizations / f"{name}.tif").read_bytes()).hexdigest()}
        for name in NAMES
    ]  # fmt: skip


@pytest.mark.slow
def test_each_realization_folder_is_its_standalone_comparison(compared, standalone):
    out = compared["out"]
    for name, inner in _comparisons(out).items():
        alone = _json(standalone / name / "compare.json")
        assert [m["name"] for m in inner["methods"]] == [m["name"] for m in alone["methods"]]
        for label in METHODS.split(","):
            a, b = _entry(inner, label), _entry(alone, label)
            assert a["error"] is None and a["rank"] == b["rank"], (name, label)
            for axis in AXES:
                assert a["check"][axis]["rel_error"] == b["check"][axis]["rel_error"], (name, label, axis)

        # and everything else, but the command line, the time each method took and the best method per
        # axis, which a realization of an ensemble does not suggest (docs/outputs.md, compare.json)
        def kept(comparison: dict) -> dict:
            methods = [{k: v for k, v in m.items() if k != "seconds"} for m in comparison["methods"]]
            rest = {k: v for k, v in comparison.items() if k != "per_axis"}
            return dict(rest, command=None, methods=methods)

        assert "per_axis" not in inner and "per_axis" in alone
        assert kept(inner) == kept(alone), name
        figures = snapshot(out / name / "figures")
        assert figures == snapshot(standalone / name / "figures") and len(figures) == 2 * len(FIGURES)


# --- compare on an ensemble: the numbers -----------------------------------------------------------


def _assert_spread(found: dict, values: list[float]) -> None:
    # numpy.percentile's default, linear: Hyndman & Fan 1996, "Sample quantiles in statistical
    # packages", definition 7
    want = np.percentile(values, PERCENTILES)
    assert [found[key(q, READING)] for q in PERCENTILES] == want.tolist()
    assert (found["mean"], found["min"], found["max"], found["count"]) == (
        np.mean(values), min(values), max(values), len(values))  # fmt: skip
    # definition 7 written out: the order statistic at h = (n - 1) p, interpolated linearly
    x = np.sort(values)
    for q in PERCENTILES:
        h = (len(x) - 1) * q / 100
        lo = int(np.floor(h))
        expected = x[lo] + (h - lo) * (x[min(lo + 1, len(x) - 1)] - x[lo])
        np.testing.assert_allclose(found[key(q, READING)], expected, rtol=1e-12, atol=1e-15)


def test_spreads_are_the_percentiles_of_the_realizations(compared):
    ensemble, comparisons = compared["ensemble"], _comparisons(compared["out"])
    methods = {m["name"]: m for m in ensemble["methods"]}
    assert sorted(methods) == sorted(METHODS.split(","))
    for label, m in methods.items():
        entries = [_entry(comparisons[name], label) for name in NAMES]
        rel = {a: [e["check"][a]["rel_error"] for e in entries] for a in FLOWS}
        worst = [max(abs(rel[a][i]) for a in FLOWS) for i in range(len(NAMES))]  # the held-out flow too
        assert (m["ran"], m["failed"]) == (len(NAMES), 0), label
        _assert_spread(m["worst_error"], worst)
        for axis in FLOWS:
            _assert_spread(m["rel_error"][axis], rel[axis])
        assert m["by_realization"] == {name: {"worst": worst[i], "rel_error": {a: rel[a][i] for a in FLOWS}}
                                       for i, name in enumerate(NAMES)}, label  # fmt: skip
        ranks = [e["rank"] for e in entries]
        assert m["rank_in_realizations"] == {"mean": np.mean(ranks), "first": ranks.count(1)}, label


def test_methods_are_ranked_by_the_median_of_their_largest_error(compared):
    ensemble = compared["ensemble"]
    methods = ensemble["methods"]
    assert [m["rank"] for m in methods] == [1, 2, 3]
    medians = [m["worst_error"][MEDIAN] for m in methods]
    assert medians == sorted(medians) and len(set(medians)) == len(medians)
    assert [m["name"] for m in methods] == ["geometric", "harmonic", "arithmetic"]
    assert ensemble["best"] == methods[0]["name"]
    # what makes these realizations a test of the ranking: each method is first somewhere,
    # and by the mean of the largest error harmonic would beat geometric
    assert sorted(m["rank_in_realizations"]["first"] for m in methods) == [1, 1, 2]
    assert methods[1]["worst_error"]["mean"] < methods[0]["worst_error"]["mean"]


def test_ranking_csv_holds_the_values_of_ensemble_json(compared):
    methods = compared["ensemble"]["methods"]
    with open(compared["out"] / "ranking.csv", newline="", encoding="utf-8") as f:
        reader = csv.DictReader(f)
        rows = list(reader)
    spreads = ["largest_error", *(f"rel_error_{a}" for a in AXES)]
    assert reader.fieldnames == ["rank", "method", "ran", "failed",
                                 *(f"{s}_{key(q, READING)}" for s in spreads for q in PERCENTILES),
                                 "mean_rank", "times_first"]  # fmt: skip
    assert len(rows) == len(methods)
    for row, m in zip(rows, methods):
        assert (int(row["rank"]), row["method"], int(row["ran"]), int(row["failed"])) == (
            m["rank"], m["name"], m["ran"], m["failed"])  # fmt: skip
        for q in PERCENTILES:
            assert float(row[f"largest_error_{key(q, READING)}"]) == m["worst_error"][key(q, READING)]
            for a in AXES:
                assert float(row[f"rel_error_{a}_{key(q, READING)}"]) == m["rel_error"][a][key(q, READING)]
        assert float(row["mean_rank"]) == m["rank_in_realizations"]["mean"]
        assert int(row["times_first"]) == m["rank_in_realizations"]["first"]


def test_stdout_shows_the_ranking_and_the_best_method(compared):
    ensemble = compared["ensemble"]
    assert compared["stderr"] == ""  # no progress lines: stderr is no terminal, and no -v
    lines = compared["stdout"].splitlines()
    assert lines[0] == (f"methods compared on {len(NAMES)} realizations, ranked by the median of their "
                        "largest check error over the axes")  # fmt: skip
    assert lines[1] == f"percentiles: {note(READING)}"  # the table's reading, stated above it
    assert lines[2].split() == ["rank", "method", "10th-pct", "50th-pct", "90th-pct", "ran", "first"]
    for line, m in zip(lines[3:], ensemble["methods"]):
        w = m["worst_error"]
        spread = [f"{100 * w[key(q, READING)]:.2f}" for q in PERCENTILES]
        assert line.split() == [str(m["rank"]), m["name"], *spread, f"{len(NAMES)}/{len(NAMES)}",
                                str(m["rank_in_realizations"]["first"])]  # fmt: skip
    assert f"best over the ensemble: {ensemble['best']}" in lines
    assert lines[-1] == ("wrote one comparison folder per realization, ranking.csv, figures, report.html "
                         f"and ensemble.json to {compared['out']}")  # fmt: skip


def test_compare_page_shows_the_ranking(compared):
    ensemble, page = compared["ensemble"], (compared["out"] / "report.html").read_text(encoding="utf-8")
    for row in _compare_rows(ensemble):
        assert _html_row(row) in page, row
    best = ensemble["methods"][0]["worst_error"]
    assert (f"Best over {len(NAMES)} realizations: {ensemble['best']}, median largest check error "
            f"{100 * best[MEDIAN]:.2f} %; 90th percentile: {100 * best[key(90, READING)]:.2f} %.") in page
    for r in ensemble["realizations"]:
        assert f"<code>{r['sha256']}</code>" in page


# --- run on an ensemble with --plot --report -------------------------------------------------------


@pytest.mark.slow
def test_run_ensemble_plot_and_report(ran):
    out, ensemble = ran["out"], ran["ensemble"]
    maps = [f"maps/{k}_{s}.tif" for k in ("kx", "ky") for s in (*(key(q, READING) for q in PERCENTILES),
                                                                 "std_ln")]  # fmt: skip
    # geometric: ky is kx in every block, so one figure of maps (kx) and the GeoTIFFs of both
    figures = ["ensemble.png", "ensemble.svg", "spread_maps_kx.png", "spread_maps_kx.svg"]
    assert ensemble["files"] == [*NAMES, "ensemble.csv", *maps, *(f"figures/{f}" for f in figures),
                                 "report.html"]  # fmt: skip
    assert sorted(p.name for p in out.iterdir()) == sorted(
        [*NAMES, "ensemble.csv", "ensemble.json", "figures", "maps", "report.html"])  # fmt: skip
    assert sorted(p.name for p in (out / "figures").iterdir()) == figures
    png = (out / "figures" / "ensemble.png").read_bytes()
    width, height = _png_size(png)
    assert width > 0 and height > 0
    with Image.open(io.BytesIO(png)) as image:
        image.load()  # decodes every pixel
        assert image.size == (width, height)
    assert b"<svg" in (out / "figures" / "ensemble.svg").read_bytes()[:2000]

    page = (out / "report.html").read_text(encoding="utf-8")
    stats = ensemble["statistics"]
    for row in _run_rows(ensemble):  # percentiles, mean, min, max as the page formats them
        assert _html_row(row) in page, row
    for axis in AXES:  # the medians, spelled out
        assert f"<td>{stats['k_fine'][axis][MEDIAN]:.4g}</td>" in page
        assert f"<td>{stats['k_coarse'][axis][MEDIAN]:.4g}</td>" in page
        assert f"<td>{100 * stats['rel_error'][axis][MEDIAN]:+.2f} %</td>" in page
    largest = max(abs(stats["rel_error"][a][MEDIAN]) for a in FLOWS)
    assert (f"geometric on {len(NAMES)} realizations: median check error within {100 * largest:.2f} % "
            "on every axis and corner to corner.") in page  # fmt: skip
    # --plot and --report also apply to each realization's own run
    for name in NAMES:
        files = _json(out / name / "summary.json")["files"]
        assert "report.html" in files and f"figures/{FIGURES[0]}.png" in files, name


# --- bad input -----------------------------------------------------------------------------------


def test_compare_glob_matching_nothing(run_cli, tmp_path):
    out, pattern = tmp_path / "never", str(tmp_path / "none*.tif")
    line = _one_error(*run_cli("compare", pattern, "--block", "8x8", "--methods", METHODS, "--out", out))
    assert line == f"upscale: error: {pattern!r} matches no file"
    assert not out.exists() and partial_leftovers(tmp_path) == []


@pytest.mark.parametrize("odd", ["shape", "cell size"])
def test_compare_realizations_on_different_grids(run_cli, realizations, tmp_path, odd):
    shape, cell = ((SIZE[0], SIZE[1] + 8), 10.0) if odd == "shape" else (SIZE, 12.5)
    write_raster(tmp_path / "odd.tif", uncorrelated_lognormal(shape, seed=5), cell_size=cell)
    paths = [realizations / "r0.tif", realizations / "r1.tif", tmp_path / "odd.tif", realizations / "r2.tif"]
    out = tmp_path / "never"
    line = _one_error(*run_cli("compare", *paths, "--block", "8x8", "--methods", METHODS, "--out", out))
    differs = "shape" if odd == "shape" else "cell size, transform"  # what the message names
    assert line.startswith("upscale: error: the realizations must share one grid; not on the grid of "
                           f"r0, r1, r2: odd ({differs}) — ")
    assert not out.exists() and partial_leftovers(tmp_path) == []


def test_compare_ensemble_over_the_check_limit(run_cli, realizations, tmp_path):
    out = tmp_path / "never"
    line = _one_error(*run_cli("compare", realizations / "r*.tif", "--block", "8x8", "--methods", METHODS,
                               "--check-limit", "1000", "--out", out))  # fmt: skip
    assert line.startswith("upscale: error: a comparison ranks methods by the flow check, and ")
    assert f"{SIZE[0] * SIZE[1]} cells, more than the check limit of 1000" in line and "--check-limit" in line
    assert not out.exists() and partial_leftovers(tmp_path) == []


def test_compare_ensemble_with_a_realization_no_method_runs_on(run_cli, realizations, tmp_path):
    # zeros: no harmonic nor geometric mean of the top-left block (a standalone compare says so, exit 2)
    values = uncorrelated_lognormal(SIZE, seed=6)
    values[:8, :8] = 0.0
    holes = write_raster(tmp_path / "holes.tif", values, cell_size=10.0)
    out = tmp_path / "never"
    line = _one_error(*run_cli("compare", holes, realizations / "r0.tif", "--block", "8x8",
                               "--methods", "geometric,harmonic", "--out", out))  # fmt: skip
    assert "no method ran on" in line and "holes" in line
    assert not out.exists() and partial_leftovers(tmp_path) == []


# --- both ensemble pages in a browser --------------------------------------------------------------

PROBE_VERDICT = """  function texts(nodes) {
    return Array.prototype.map.call(nodes, function (node) { return node.textContent; });
  }
  var rows = Array.prototype.filter.call(document.querySelectorAll("#spread tr"), function (tr) {
    return tr.querySelector("td") !== null;
  });
  var caution = document.querySelector("p.caution");
  var verdict = {
    errors: window.__problems,
    images: Array.prototype.map.call(document.images, function (img) {
      return {figure: img.parentElement.id, complete: img.complete,
              width: img.naturalWidth, height: img.naturalHeight};
    }),
    head: texts(document.querySelectorAll("#spread th")),
    rows: rows.map(function (tr) { return texts(tr.cells); }),
    caution: caution ? caution.textContent : null,
    wrapped: wrappedCells(),
    code: texts(document.querySelectorAll("pre code")),
    title: document.title
  };
"""


@pytest.fixture(scope="module", params=["compare", "run"])
def page(request):
    """The ensemble page of `compare` or `run`, what its table must hold and its figures."""
    if request.param == "compare":
        done = request.getfixturevalue("compared")
        rows, figure = _compare_rows(done["ensemble"]), "spread"
    else:
        done = request.getfixturevalue("ran")
        rows, figure = _run_rows(done["ensemble"]), ["ensemble", "spread_maps_kx"]
    figures = [figure] if isinstance(figure, str) else figure
    return dict(done, kind=request.param, path=done["out"] / "report.html", rows=rows, figures=figures)


@pytest.fixture(scope="module")
def verdict(page, chromium, tmp_path_factory):
    """What the probe saw when Chromium loaded a probed copy of the page."""
    return probe(chromium, page["path"], tmp_path_factory.mktemp(f"probe-{page['kind']}"), PROBE_VERDICT)


def test_page_loads_without_errors_and_its_figure_decodes(verdict, page):
    assert verdict["errors"] == []
    assert [image["figure"] for image in verdict["images"]] == page["figures"]
    for image in verdict["images"]:
        assert image["complete"] and image["width"] > 0 and image["height"] > 0, image


def test_spread_table_has_a_row_per_method_or_quantity(verdict, page):
    if page["kind"] == "compare":  # one row per method, best first
        assert [row[1].split(" (")[0] for row in verdict["rows"]] == [
            m["name"] for m in page["ensemble"]["methods"]]  # fmt: skip
        assert verdict["head"][:3] == ["rank", "method", "ran"]
    else:  # one row per quantity and axis
        quantities = ("fine k_eff", "coarse k_eff", "error")
        labels = [f"{q} {flow_label(a)}" for q in quantities for a in FLOWS]
        assert [row[0] for row in verdict["rows"]] == labels
        assert verdict["head"] == ["quantity", "10th percentile", "50th percentile", "90th percentile",
                                   "mean", "min", "max", "realizations"]  # fmt: skip
    assert verdict["rows"] == page["rows"]
    assert all(len(row) == len(verdict["head"]) for row in verdict["rows"])
    assert verdict["wrapped"] == []  # at 1280 px no number breaks over two lines ("5 / 5")


def test_page_has_the_caution_and_the_command_line(verdict, page):
    assert verdict["caution"] == CAUTION
    reproduce = f"cd {shlex.quote(os.getcwd())} && {shlex.join(page['command'])}"  # the folder it ran in
    assert verdict["code"] == [reproduce]
    assert page["ensemble"]["working_folder"] == os.getcwd()
    text = page["path"].read_text(encoding="utf-8")
    assert f'<p class="caution">{html.escape(CAUTION)}</p>' in text
    assert f"<pre><code>{html.escape(reproduce)}</code></pre>" in text


def test_page_is_self_contained_and_embeds_the_figure_files(page):
    text = page["path"].read_text(encoding="utf-8")
    assert_self_contained(text)
    embedded = text.split('src="data:image/png;base64,')[1:]
    assert len(embedded) == len(page["figures"])
    for data, figure in zip(embedded, page["figures"]):
        png = page["out"] / "figures" / f"{figure}.png"
        assert base64.b64decode(data.split('"', 1)[0]) == png.read_bytes()


def test_a_method_that_failed_on_some_realizations_ranks_after_those_that_ran_on_all():
    # built by hand: "flaky" has the smallest median but did not run on r2; "steady" ran everywhere
    def realization(flaky: float | None, steady: float) -> ComparisonRecord:
        def entry(name, error):
            errors = None if error is None else {"x": error, "y": 0.0}
            return method(name, None if error is None else 1, errors)
        return comparison([entry("flaky", flaky), entry("steady", steady)])

    methods = method_spread(["r1", "r2", "r3"], [realization(0.01, 0.05), realization(None, 0.04),
                                                  realization(0.02, 0.06)])  # fmt: skip
    assert [(m.name, m.rank, m.ran, m.failed) for m in methods] == [("steady", 1, 3, 0), ("flaky", 2, 2, 1)]
    assert methods[1].worst_error.q50 == pytest.approx(0.015)  # over the two it ran on
    assert methods[1].by_realization["r2"] is None
