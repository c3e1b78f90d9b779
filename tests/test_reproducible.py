"""The same inputs and options give the same bytes: every run can be repeated and traced.

What is tested
--------------
* The same command run twice (in separate processes, so no cache or state
  is shared; same relative ``--out`` from two working folders) writes the
  same files, byte for byte: GeoTIFFs, the package's CSV, Parquet, NetCDF
  and VTK, figures (PNG and SVG). ``summary.json`` differs only in its
  timings and in ``working_folder`` (each run's own folder), report.html
  only in its cells of class ``time`` and in the folder of its ``cd ... &&``
  reproduce line — so run twice from the same folder, the same command
  writes the same bytes but for the timings. Cases: an average on a 2D map
  with porosity, flow with periodic conditions and a border on a 3D model,
  direct transmissibilities with ``--plot --report``.
* The numeric outputs do not depend on how the work is cut or where it
  runs: the same run with one chunk, with tiny chunks and on two local dask
  workers writes the same GeoTIFFs and package tables, byte for byte
  (NetCDF and the summary record the command line, which differs).
* ``summary.json`` traces the run: the tool and dependency versions, the
  command line and the folder it ran in (its relative paths start there),
  the SHA-256 of every input (equal to hashlib's over the file) and the
  time of every step. ``compare.json`` and ``ensemble.json`` record the
  folder too, and every report shows ``cd '<folder>' && <command>``,
  shell-quoted, under "Reproduce".
"""

from __future__ import annotations

import hashlib
import html
import json
import re
import shlex
import subprocess
from pathlib import Path

import pytest
from conftest import UPSCALE_EXE, write_raster

from upscale.gallery.problems import uncorrelated_lognormal

#: Files whose bytes hold the numbers of a run (not the command line that made them).
NUMERIC = ("kx.tif", "ky.tif", "cells.csv", "connections.csv", "boundary.csv", "cells.parquet",
           "connections.parquet", "boundary.parquet")  # fmt: skip

CASES = {
    "geometric 2D with porosity": ["@marrowfen_lognormal.tif", "--porosity", "@marrowfen_porosity.tif",
                                   "--block", "8x8", "--method", "geometric"],
    "flow periodic, border, 3D": ["@marrowfen_3d.tif", "--dz", "2", "--block", "8x8x4", "--method",
                                  "flow", "--bc", "periodic", "--border", "2"],
    "flow-transmissibility, figures": ["@marrowfen_channels.tif", "--block", "16x16", "--remainder",
                                       "crop", "--method", "flow-transmissibility", "--plot", "--report"],
}  # fmt: skip


def _run(args: list[str], demo: Path, cwd: Path, out: str = "out") -> Path:
    """``upscale -q run ARGS --out OUT`` in a process of its own, in `cwd`."""
    resolved = [str(demo / a[1:]) if a.startswith("@") else a for a in args]
    done = subprocess.run([str(UPSCALE_EXE), "-q", "run", *resolved, "--out", out], cwd=cwd,
                          capture_output=True, text=True, timeout=300)  # fmt: skip
    assert done.returncode == 0, done.stderr
    return cwd / out


def _files(folder: Path) -> dict[str, bytes]:
    return {p.relative_to(folder).as_posix(): p.read_bytes() for p in sorted(folder.rglob("*"))
            if p.is_file()}  # fmt: skip


@pytest.mark.slow
@pytest.mark.parametrize("case", list(CASES))
def test_the_same_command_twice_writes_the_same_bytes(case, demo_dir, tmp_path):
    first, second = (tmp_path / "a", tmp_path / "b")
    first.mkdir(), second.mkdir()
    a = _files(_run(CASES[case], demo_dir, first))
    b = _files(_run(CASES[case], demo_dir, second))
    assert a.keys() == b.keys()
    differ = sorted(name for name in a if a[name] != b[name])
    assert set(differ) <= {"summary.json", "report.html"}, differ
    if "report.html" in a:
        timeless = [re.sub(rb'<td class="time">[0-9.]+</td>', b"", x["report.html"]) for x in (a, b)]
        placed = [page.replace(f"cd {shlex.quote(str(folder))} &amp;&amp; ".encode(), b"")
                  for page, folder in zip(timeless, (first, second))]  # fmt: skip
        assert placed[0] == placed[1] and placed[0] != timeless[0]
    summaries = [json.loads(x["summary.json"]) for x in (a, b)]
    for s, folder in zip(summaries, (first, second)):
        assert set(s.pop("timings_s")) >= {"read_s", "upscale_s", "check_s"}
        assert s.pop("working_folder") == str(folder)
    assert summaries[0] == summaries[1]


@pytest.mark.slow
def test_numeric_outputs_do_not_depend_on_chunks_or_workers(demo_dir, tmp_path):
    args = ["@marrowfen_lognormal.tif", "--block", "8x8", "--method", "flow", "--bc", "periodic",
            "--border", "3", "--no-check"]  # fmt: skip
    runs = {
        "one chunk": [*args, "--chunk", "1GB"],
        "tiny chunks": [*args, "--chunk", "4blocks"],
        "two workers": [*args, "--workers", "2"],
    }
    files = {name: _files(_run(extra, demo_dir, tmp_path, out=name.replace(" ", "-")))
             for name, extra in runs.items()}  # fmt: skip
    reference = files.pop("one chunk")
    for name, found in files.items():
        for numeric in NUMERIC:
            if numeric in reference:
                assert found[numeric] == reference[numeric], (name, numeric)
    assert {"kx.tif", "ky.tif", "kxy.tif", "cells.csv"} <= reference.keys()
    assert files["tiny chunks"]["kxy.tif"] == reference["kxy.tif"]


def test_the_summary_traces_versions_command_checksums_and_times(demo_dir, tmp_path):
    args = CASES["geometric 2D with porosity"]
    out = _run(args, demo_dir, tmp_path)
    summary = json.loads((out / "summary.json").read_text())
    assert summary["tool"] == "upscale"
    for package in ("upscale", "numpy", "scipy", "dask", "rasterio", "pyamg"):
        assert summary["versions"].get(package), package
    assert summary["command"][:2] == ["upscale", "-q"] and "--porosity" in summary["command"]
    for item in summary["inputs"]:
        expected = hashlib.sha256(Path(item["resolved"]).read_bytes()).hexdigest()
        assert item["sha256"] == expected, item["role"]
    assert {item["role"] for item in summary["inputs"]} == {"kx", "porosity"}
    assert all(seconds >= 0 for seconds in summary["timings_s"].values())


@pytest.mark.slow
def test_the_folder_a_command_ran_in_is_recorded_and_shown(run_cli, tmp_path, monkeypatch):
    # relative paths in the command only mean something from the folder it ran in
    folder = tmp_path / "field work's"  # a space and a quote: the cd line must be shell-quoted
    (folder / "in").mkdir(parents=True)
    for seed, name in ((7741, "map.tif"), (7742, "r1.tif"), (7743, "r2.tif")):  # r1, r2: an ensemble
        write_raster(folder / "in" / name, uncorrelated_lognormal((16, 16), seed=seed))
    monkeypatch.chdir(folder)
    runs = {
        "summary.json": ["run", "in/map.tif", "--block", "8x8", "--method", "geometric",
                         "--report", "--out", "run"],
        "compare.json": ["compare", "in/map.tif", "--block", "8x8", "--methods",
                         "geometric,harmonic", "--out", "cmp"],
        "ensemble.json": ["compare", "in/r*.tif", "--block", "8x8", "--methods", "geometric",
                          "--out", "ens"],
    }  # fmt: skip
    for recorded, args in runs.items():
        code, _, err = run_cli("-q", *args)
        assert code == 0, err
        out = folder / args[-1]
        content = json.loads((out / recorded).read_text())
        assert content["command"] == ["upscale", "-q", *args] and content["working_folder"] == str(folder)
        line = f"cd {shlex.quote(str(folder))} && {shlex.join(content['command'])}"
        assert f"<pre><code>{html.escape(line)}</code></pre>" in (out / "report.html").read_text(), recorded
        # pasted into a shell elsewhere, the line finds the input again
        done = subprocess.run(["sh", "-c", line.split(" && ")[0] + " && test -f in/map.tif"],
                              cwd=tmp_path, timeout=30)  # fmt: skip
        assert done.returncode == 0
