"""A reader that stops reading: the command ends quietly with status 141, and what it finished stays.

What is tested
--------------
The installed console script runs in a subprocess whose stdout or stderr
is a pipe; the test closes its end of the pipe, as ``head -3`` does once it
has its lines, and looks at the exit status, the other stream and the
output folder. Exit status 141 is 128 + SIGPIPE (13), what a shell reports
for a command a closed pipe ended (POSIX, XCU 2.8.2 "Exit Status for
Commands"); the command line returns it itself (upscale/cli/main.py).

* stdout closed before the command prints a byte (no race: every command
  prints only after its work) — info, run, compare on a small field, check
  and demo: status 141, nothing on stderr, and the folder the command wrote
  is complete (its completion marker, and every file the marker lists),
  with no staging folder left beside it.
* ``--help`` of the group and of commands into a closed stdout: the same.
* stderr closed mid-run: the progress lines (``-v``) of an ensemble are
  read until the first realization is done and staged, then the pipe is
  closed: status 141, nothing on stdout, the output folder (holding an
  earlier complete result, run with ``--overwrite``) byte for byte as
  before, and no staging folder left.

A reader that goes away while the command is blocked in one large write is
left out: the kernel then ends that write early without an error, and
Python's buffered stdout does not write the rest nor raise (CPython 3.11,
seen with strace: ``write(1, ..., 8266) = 4096``, SIGPIPE ignored, no
further write, status 0) — the command cannot tell.
"""

from __future__ import annotations

import json
import shutil
import subprocess
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import Any

import pytest
from conftest import UPSCALE_EXE, partial_leftovers, snapshot, write_raster

from upscale.cli.main import CLOSED_PIPE, main
from upscale.gallery.problems import uncorrelated_lognormal

SEED = 5_502_871_936
#: Seconds a command may take.
DEADLINE = 300


@pytest.fixture(scope="module")
def folder(tmp_path_factory) -> Path:
    """Two small realizations and a finished run of the first one."""
    folder = tmp_path_factory.mktemp("pipes")
    for r in range(2):
        write_raster(folder / f"r{r}.tif", uncorrelated_lognormal((128, 128), SEED + r))
    assert main(["-q", "run", str(folder / "r0.tif"), "--block", "8x8", "--method", "geometric",
                 "--out", str(folder / "finished")]) == 0  # fmt: skip
    return folder


@contextmanager
def _upscale(args: list, cwd: Path, **streams: Any) -> Iterator[subprocess.Popen]:
    """The console script running ``upscale ARGS``; killed if still running at the end, pipes closed."""
    proc = subprocess.Popen([str(UPSCALE_EXE), *map(str, args)], text=True, cwd=cwd, **streams)
    try:
        yield proc
    finally:
        if proc.poll() is None:
            proc.kill()
        proc.wait()
        for stream in (proc.stdout, proc.stderr):
            if stream is not None:
                stream.close()


def _closed_stdout(args: list, cwd: Path) -> tuple[int, str]:
    """Run ``upscale ARGS`` with its stdout a pipe closed at once; (status, stderr)."""
    with _upscale(args, cwd, stdout=subprocess.PIPE, stderr=subprocess.PIPE) as proc:
        proc.stdout.close()  # the reader is gone before the command prints anything
        err = proc.stderr.read()
        proc.wait(timeout=DEADLINE)
    return proc.returncode, err


def _complete(out: Path, marker: str) -> None:
    """`out` holds its completion marker and every file it lists, and nothing staged is left."""
    listed = json.loads((out / marker).read_text()).get("files", [])
    assert all((out / name).exists() for name in listed), listed
    assert partial_leftovers(out.parent) == []


def test_info_into_a_closed_pipe_ends_quietly(folder, tmp_path):
    assert _closed_stdout(["info", folder / "r0.tif"], tmp_path) == (CLOSED_PIPE, "")


def test_run_into_a_closed_pipe_leaves_its_folder_complete(folder, tmp_path):
    out = tmp_path / "run"
    args = ["run", folder / "r0.tif", "--block", "8x8", "--method", "geometric", "--out", out]
    assert _closed_stdout(args, tmp_path) == (CLOSED_PIPE, "")
    _complete(out, "summary.json")
    assert {"kx.tif", "ky.tif", "cells.csv"} <= set(json.loads((out / "summary.json").read_text())["files"])


@pytest.mark.slow
def test_compare_into_a_closed_pipe_leaves_its_folder_complete(folder, tmp_path):
    out = tmp_path / "cmp"
    args = ["compare", folder / "r0.tif", "--block", "16x16", "--methods", "geometric,harmonic",
            "--solver", "direct", "--out", out]  # fmt: skip
    assert _closed_stdout(args, tmp_path) == (CLOSED_PIPE, "")
    _complete(out, "compare.json")
    assert (out / "report.html").is_file()


def test_check_into_a_closed_pipe_records_its_check(folder, tmp_path):
    run = tmp_path / "finished"
    shutil.copytree(folder / "finished", run)
    (run / "summary.json").write_text(json.dumps({**json.loads((run / "summary.json").read_text()),
                                                  "check": None}))  # fmt: skip
    assert _closed_stdout(["check", run, "--solver", "direct"], tmp_path) == (CLOSED_PIPE, "")
    assert set(json.loads((run / "summary.json").read_text())["check"]) >= {"x", "y"}


def test_demo_into_a_closed_pipe_leaves_every_field(tmp_path):
    out = tmp_path / "demo-fields"
    assert _closed_stdout(["demo", "--out", out], tmp_path) == (CLOSED_PIPE, "")
    _complete(out, "fields.json")


@pytest.mark.parametrize("command", [[], ["run"], ["info"]], ids=["upscale", "run", "info"])
def test_help_into_a_closed_pipe_ends_quietly(tmp_path, command):
    assert _closed_stdout([*command, "--help"], tmp_path) == (CLOSED_PIPE, "")


def test_progress_reader_gone_mid_run_leaves_the_earlier_result(folder, tmp_path):
    out = tmp_path / "ens"
    shutil.copytree(folder / "finished", out)
    before = snapshot(out)
    args = ["run", folder / "r0.tif", folder / "r1.tif", "--block", "8x8", "--method", "geometric",
            "--overwrite", "--out", out, "-v"]  # fmt: skip
    with _upscale(args, tmp_path, stdout=subprocess.PIPE, stderr=subprocess.PIPE) as proc:
        told = []
        for line in proc.stderr:
            told.append(line)
            if "[1/2] realizations done" in line:
                break  # r0 is written into the staging folder; r1 is under way
        staged = {p.name: {f.relative_to(p).as_posix() for f in p.rglob("*")}
                  for p in tmp_path.iterdir() if ".partial-" in p.name}  # fmt: skip
        proc.stderr.close()
        stdout = proc.stdout.read()
        proc.wait(timeout=DEADLINE)
    assert "[1/2] realizations done" in told[-1], told
    assert any("r0/summary.json" in files for files in staged.values()), staged  # work to undo
    assert (proc.returncode, stdout) == (CLOSED_PIPE, "")
    assert snapshot(out) == before
    assert partial_leftovers(tmp_path) == []
