"""Ensembles and dask clusters: ``upscale run`` on several realizations, on threads or a cluster.

What is tested
--------------
* An ensemble of small generated realizations: one complete run folder per
  realization, ``ensemble.csv`` with one row per realization equal to each
  folder's check, and ``ensemble.json`` percentiles equal to
  ``numpy.percentile`` over the per-realization results (Hyndman & Fan 1996,
  "Sample quantiles in statistical packages", definition 7: numpy's default).
* An ensemble whose fields are past the check limit (each checked on
  windows instead) is summarised with no check spread instead of stopping.
* The same outputs, array for array, from the threaded scheduler, a
  ``dask.distributed.LocalCluster`` started by the test (``--scheduler``) and
  ``--workers 2``, for an average and for the flow method with a border; and
  with many chunks against one.
* Bad input: a pattern that matches nothing, realizations on different grids
  (refused before any work, naming the odd one), two files with one name, an
  unreachable scheduler (a clear error within the timeout), --workers with
  --scheduler — one line on stderr, exit 2, no output folder.
"""

from __future__ import annotations

import csv
import json

import numpy as np
import pytest
import rasterio
from conftest import write_raster

import upscale.jobs.cluster
from upscale.analysis.ensemble import QUANTITIES
from upscale.analysis.percentiles import PERCENTILES, key
from upscale.gallery.problems import uncorrelated_lognormal

SIZE = (48, 40)


@pytest.fixture(scope="module")
def realizations(tmp_path_factory):
    folder = tmp_path_factory.mktemp("realizations")
    for r in range(5):
        write_raster(folder / f"r{r}.tif", uncorrelated_lognormal(SIZE, seed=9_100 + r), cell_size=10.0)
    return folder


def _arrays(folder):
    arrays = {}
    for path in sorted(folder.rglob("*.tif")):
        with rasterio.open(path) as src:
            arrays[path.relative_to(folder).as_posix()] = src.read()
    return arrays


def _one_error(code, stdout, stderr):
    assert code == 2 and stdout == "", (code, stdout, stderr)
    lines = stderr.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("upscale: error: ") and "Traceback" not in stderr
    return lines[0]


def test_ensemble_folders_csv_and_percentiles(run_cli, realizations, tmp_path):
    out = tmp_path / "ens"
    code, stdout, stderr = run_cli("-v", "run", str(realizations / "r*.tif"), "--block", "8x8",
                                   "--method", "geometric", "--solver", "direct", "--out", out)  # fmt: skip
    assert code == 0, stderr
    assert "ensemble of 5 realizations" in stdout and "10th-pct" in stdout
    assert sorted(p.name for p in out.iterdir()) == [
        "ensemble.csv", "ensemble.json", "maps", "r0", "r1", "r2", "r3", "r4"]  # fmt: skip
    # progress: every step of every realization, after its name, and each realization done
    assert stderr.count("realizations done") == 5
    for name in ("r0", "r1", "r2", "r3", "r4"):
        for step in ("reading", "upscaling", "checking the flow", "writing"):
            assert f"upscale: {name}: {step}" in stderr, (name, step)
    ensemble = json.loads((out / "ensemble.json").read_text())
    with open(out / "ensemble.csv", newline="") as f:
        rows = list(csv.DictReader(f))
    assert [r["name"] for r in rows] == ["r0", "r1", "r2", "r3", "r4"]
    for row in rows:
        summary = json.loads((out / row["name"] / "summary.json").read_text())
        for axis in ("x", "y"):
            for quantity in QUANTITIES:
                assert float(row[f"{quantity}_{axis}"]) == summary["check"][axis][quantity]
    for quantity in QUANTITIES:
        for axis in ("x", "y"):
            values = [float(r[f"{quantity}_{axis}"]) for r in rows]
            want = np.percentile(values, PERCENTILES)
            got = [ensemble["statistics"][quantity][axis][key(p, "nonexceedance")] for p in PERCENTILES]
            np.testing.assert_allclose(got, want, rtol=1e-15)
            assert ensemble["statistics"][quantity][axis]["count"] == 5


CLUSTER_METHODS = {
    "geometric": ["--method", "geometric"],
    "flow": ["--method", "flow", "--bc", "periodic", "--border", "3"],
    "global": ["--method", "global"],  # fits the fine flows, solved on the client
    "local-global": ["--method", "local-global", "--border", "2"],  # its regions on the workers
}


@pytest.fixture(scope="module")
def threaded(realizations, tmp_path_factory):
    from upscale.cli.main import main

    outs = {}
    for name, method in CLUSTER_METHODS.items():
        out = tmp_path_factory.mktemp("threaded") / name
        assert main(["-q", "run", str(realizations / "r*.tif"), "--block", "8x8", *method,
                     "--solver", "direct", "--out", str(out)]) == 0  # fmt: skip
        outs[name] = out
    return outs


@pytest.mark.parametrize("method", list(CLUSTER_METHODS))
def test_local_cluster_gives_the_threaded_arrays(realizations, threaded, tmp_path, method):
    from dask.distributed import LocalCluster

    from upscale.cli.main import main

    options = CLUSTER_METHODS[method]
    # no dashboard, and the scheduler's HTTP server on a free port: a taken 8787 would warn
    with LocalCluster(n_workers=2, threads_per_worker=1, processes=False, dashboard_address=None,
                      scheduler_kwargs={"dashboard_address": ":0"}) as cluster:  # fmt: skip
        out = tmp_path / "cluster"
        assert main(["-q", "run", str(realizations / "r*.tif"), "--block", "8x8", *options,
                     "--solver", "direct", "--scheduler", cluster.scheduler_address,
                     "--chunk", "2KB", "--out", str(out)]) == 0  # fmt: skip
    want, got = _arrays(threaded[method]), _arrays(out)
    assert want.keys() == got.keys() and len(want) >= 10
    for name in want:
        np.testing.assert_array_equal(got[name], want[name], err_msg=name)
    a = json.loads((threaded[method] / "ensemble.json").read_text())["statistics"]
    b = json.loads((out / "ensemble.json").read_text())["statistics"]
    assert a == b


def test_an_ensemble_checked_on_windows_has_no_check_spread(run_cli, realizations, tmp_path):
    out = tmp_path / "ens"
    code, stdout, stderr = run_cli("-q", "run", realizations / "r*.tif", "--block", "8x8", "--method",
                                   "geometric", "--check-limit", 500, "--out", out)  # fmt: skip
    assert (code, stdout, stderr) == (0, "", "")
    names = [f"r{r}" for r in range(5)]
    for name in names:
        check = json.loads((out / name / "summary.json").read_text())["check"]
        assert check["skipped"] and check["windows"]
    ensemble = json.loads((out / "ensemble.json").read_text())
    assert [r["name"] for r in ensemble["realizations"]] == names
    assert ensemble["statistics"] == {quantity: {} for quantity in QUANTITIES}


@pytest.mark.slow
def test_workers_option_gives_the_threaded_arrays(realizations, threaded, tmp_path, run_cli):
    out = tmp_path / "workers"
    code, _, stderr = run_cli("run", str(realizations / "r*.tif"), "--block", "8x8", "--method",
                              "geometric", "--solver", "direct", "--workers", "2", "--out", out)  # fmt: skip
    assert code == 0, stderr
    want, got = _arrays(threaded["geometric"]), _arrays(out)
    for name in want:
        np.testing.assert_array_equal(got[name], want[name], err_msg=name)


def test_pattern_matching_nothing(run_cli, tmp_path):
    out = tmp_path / "never"
    line = _one_error(*run_cli("run", str(tmp_path / "none*.tif"), "--block", "8x8", "--method",
                               "geometric", "--out", out))  # fmt: skip
    assert "matches no file" in line and not out.exists()


def test_realizations_on_different_grids_are_refused(run_cli, realizations, tmp_path):
    odd = tmp_path / "odd.tif"
    write_raster(odd, uncorrelated_lognormal((SIZE[0], SIZE[1] + 8), seed=5), cell_size=10.0)
    out = tmp_path / "never"
    paths = [str(realizations / "r0.tif"), str(realizations / "r1.tif"), str(odd)]
    line = _one_error(*run_cli("run", *paths, "--block", "8x8", "--method", "geometric", "--out", out))
    assert "; not on the grid of r0, r1: odd (shape) — " in line and not out.exists()


_ARGS = {"run": ("--method", "geometric"), "compare": ("--methods", "geometric")}


@pytest.mark.parametrize("command", ["run", "compare"])
def test_the_file_on_another_grid_is_named_even_when_it_comes_first(run_cli, realizations, tmp_path,
                                                                   command):  # fmt: skip
    # the majority's grid is the reference, not the first file's: two realizations on one grid
    # after a file on another named the two as odd ("r0, r1 differ from K_ms")
    odd = write_raster(tmp_path / "K_ms.tif", uncorrelated_lognormal(SIZE, seed=5), cell_size=12.5)
    out = tmp_path / "never"
    paths = [odd, realizations / "r0.tif", realizations / "r1.tif"]
    line = _one_error(*run_cli(command, *paths, "--block", "8x8", *_ARGS[command], "--out", out))
    assert line == ("upscale: error: the realizations must share one grid; not on the grid of r0, "
                    "r1: K_ms (cell size, transform) — resample each onto that grid or leave it out")
    assert not out.exists()


def test_on_a_tie_the_first_file_s_grid_is_the_reference(run_cli, realizations, tmp_path):
    # two files on each of two grids: the grid of the first file wins; the odd ones are both named
    wide = [write_raster(tmp_path / f"w{i}.tif", uncorrelated_lognormal((SIZE[0], SIZE[1] + 8), seed=7 + i))
            for i in range(2)]  # fmt: skip
    paths = [realizations / "r0.tif", *wide, realizations / "r1.tif"]
    line = _one_error(*run_cli("run", *paths, "--block", "8x8", "--method", "geometric", "--out",
                               tmp_path / "never"))  # fmt: skip
    assert "; not on the grid of r0, r1: w0 (shape), w1 (shape) — " in line


def test_two_realizations_with_one_name(run_cli, realizations, tmp_path):
    (tmp_path / "other").mkdir()
    twin = tmp_path / "other" / "r0.tif"
    twin.write_bytes((realizations / "r0.tif").read_bytes())
    out = tmp_path / "never"
    line = _one_error(*run_cli("run", str(realizations / "r0.tif"), str(twin), "--block", "8x8",
                               "--method", "geometric", "--out", out))  # fmt: skip
    assert "would both be written to r0/" in line and not out.exists()


def test_unreachable_scheduler(run_cli, realizations, tmp_path, monkeypatch):
    monkeypatch.setattr(upscale.jobs.cluster, "CONNECT_TIMEOUT", 1)
    out = tmp_path / "never"
    line = _one_error(*run_cli("run", str(realizations / "r0.tif"), "--block", "8x8", "--method",
                               "geometric", "--scheduler", "tcp://127.0.0.1:9", "--out", out))  # fmt: skip
    assert "cannot reach the dask scheduler at 'tcp://127.0.0.1:9' within 1 s" in line
    assert not out.exists()


def test_workers_and_scheduler_together(run_cli, realizations, tmp_path):
    out = tmp_path / "never"
    line = _one_error(*run_cli("run", str(realizations / "r0.tif"), "--block", "8x8", "--method",
                               "geometric", "--workers", "2", "--scheduler", "tcp://127.0.0.1:9",
                               "--out", out))  # fmt: skip
    assert "not both" in line and not out.exists()


def test_overwrite_with_fewer_realizations_removes_the_old_ones(realizations, tmp_path):
    from upscale.cli.main import main

    out = tmp_path / "ens"
    args = ["-q", "run", "--block", "8x8", "--method", "geometric", "--no-check", "--out", str(out)]
    assert main([*args[:2], str(realizations / "r*.tif"), *args[2:]]) == 0
    fewer = [str(realizations / f"r{r}.tif") for r in range(3)]
    assert main([*args[:2], *fewer, *args[2:], "--overwrite"]) == 0
    assert sorted(p.name for p in out.iterdir()) == [
        "ensemble.csv", "ensemble.json", "maps", "r0", "r1", "r2"]  # fmt: skip
    assert [r["name"] for r in json.loads((out / "ensemble.json").read_text())["realizations"]] == [
        "r0", "r1", "r2"]  # fmt: skip


# --- the two readings of the percentiles ------------------------------------------------------------

#: numpy's q-th percentile under each reading's name: non-exceedance names the q-th percentile Pq; the
#: exceedance reading (common practice among reservoir engineers) names Pn the value exceeded by n %
#: of the realizations, which is numpy's (100 - n)-th percentile (numpy.percentile documentation:
#: "the q-th percentile ... the value below which q percent of the observations fall").
READINGS = {"nonexceedance": {"p10_nonexceed": 10, "p50_nonexceed": 50, "p90_nonexceed": 90},
            "exceedance": {"p10_exceed": 90, "p50_exceed": 50, "p90_exceed": 10}}


@pytest.mark.parametrize("reading", list(READINGS))
def test_run_percentiles_in_either_reading_are_numpy_s(run_cli, realizations, tmp_path, reading):
    out = tmp_path / "ens"
    code, stdout, stderr = run_cli("run", realizations / "r*.tif", "--block", "8x8", "--method", "geometric",
                                   "--solver", "direct", "--percentiles", reading, "--out", out)  # fmt: skip
    assert code == 0, stderr
    ensemble = json.loads((out / "ensemble.json").read_text())
    assert ensemble["percentile_convention"] == reading
    said = "non-exceedance: " if reading == "nonexceedance" else "exceedance: "
    assert ensemble["percentiles"].startswith(said)
    with open(out / "ensemble.csv", newline="") as f:
        rows = list(csv.DictReader(f))
    for quantity in QUANTITIES:
        for axis in ("x", "y"):
            values = [float(r[f"{quantity}_{axis}"]) for r in rows]
            found = ensemble["statistics"][quantity][axis]
            assert set(found) == {*READINGS[reading], "mean", "min", "max", "count"}
            for name, q in READINGS[reading].items():
                assert found[name] == np.percentile(values, q), (quantity, axis, name)
    # the table says which reading it uses, on the line above it, and names its columns by it
    lines = stdout.splitlines()
    head = lines.index(next(line for line in lines if line.startswith("quantity")))
    assert lines[head - 1] == f"percentiles: {ensemble['percentiles']}"
    columns = ["10th-pct", "50th-pct", "90th-pct"] if reading == "nonexceedance" else ["P90-exc", "P50-exc",
                                                                                       "P10-exc"]  # fmt: skip
    assert lines[head].split() == ["quantity", *columns, "n"]
    first = lines[head + 1].split()  # k_fine x
    s = ensemble["statistics"]["k_fine"]["x"]
    shown = [s[name] for name in sorted(READINGS[reading], key=READINGS[reading].get)]  # low to high
    assert first == ["k_fine", "x", *(f"{v:.4g}" for v in shown), "5"]


def test_compare_percentiles_in_the_exceedance_reading(run_cli, realizations, tmp_path):
    out = tmp_path / "cmp"
    code, stdout, stderr = run_cli("compare", realizations / "r*.tif", "--block", "8x8",
                                   "--methods", "geometric,harmonic", "--percentiles", "exceedance",
                                   "--out", out)  # fmt: skip
    assert code == 0, stderr
    ensemble = json.loads((out / "ensemble.json").read_text())
    assert ensemble["percentile_convention"] == "exceedance"
    names = [r["name"] for r in ensemble["realizations"]]
    with open(out / "ranking.csv", newline="") as f:
        rows = {r["method"]: r for r in csv.DictReader(f)}
    for m in ensemble["methods"]:
        worst = [m["by_realization"][n]["worst"] for n in names]
        for name, q in READINGS["exceedance"].items():
            assert m["worst_error"][name] == np.percentile(worst, q), (m["name"], name)
            assert float(rows[m["name"]][f"largest_error_{name}"]) == m["worst_error"][name]
        assert m["worst_error"]["p10_exceed"] >= m["worst_error"]["p90_exceed"]
    lines = stdout.splitlines()
    assert lines[1] == f"percentiles: {ensemble['percentiles']}"
    assert lines[2].split() == ["rank", "method", "P90-exc", "P50-exc", "P10-exc", "ran", "first"]
    page = (out / "report.html").read_text(encoding="utf-8")
    assert "<th>largest error, P10 (exceeded by 10 %)</th>" in page
    assert f"Percentiles: {ensemble['percentiles']}." in page
