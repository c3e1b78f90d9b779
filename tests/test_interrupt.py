"""A run stopped by a signal while it writes: the earlier result stays, nothing looks complete.

What is tested
--------------
The installed console script runs ``upscale run FIELD --block 2x2 --method
geometric --no-check --out DIR --overwrite`` in a subprocess on a 2048 x 2048
lognormal field: writing its coarse grid of about 1 M cells (GeoTIFFs, the
tables of the coarse-grid package, NetCDF, VTK) takes a few seconds, into the
hidden staging folder ``.DIR.partial-*`` beside DIR (upscale/export/staging.py).
The test polls until that folder holds files and then sends SIGINT, SIGTERM
or SIGKILL to the process. DIR either holds a complete earlier result (a run
of a small field) or does not exist yet.

* Every signal: the run ends with a non-zero status; an earlier result in
  DIR is byte for byte as it was (every file); a new DIR is not created; no
  folder beside DIR holds a ``summary.json`` (the completion marker), so
  nothing that looks complete appears.
* SIGINT (Ctrl-C): exit status 130, ``upscale: interrupted; nothing was
  written`` on stderr, and no staging folder left.
* SIGTERM (what ``kill``, systemd, Slurm and container runtimes send first):
  cleaned up like Ctrl-C (upscale/cli/main.py turns it into a
  KeyboardInterrupt): exit status 143, ``upscale: stopped by SIGTERM;
  nothing was written``, no staging folder left.
* SIGKILL cannot be caught: a staging folder may be left, but it holds no
  ``summary.json``.

For SIGINT and SIGTERM the message is the only line on stderr (at a
terminal a newline comes first, to end the line the terminal's ``^C`` echo
is on; stderr is a pipe here).

Exit status 128 + N for a command ended by signal N is the shell's
convention (POSIX, XCU 2.8.2 "Exit Status for Commands"); the command line
returns 130 and 143 itself.
"""

from __future__ import annotations

import shutil
import signal
import subprocess
import sys
import time
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import pytest
from conftest import UPSCALE_EXE, partial_leftovers, snapshot, write_raster

from upscale.cli.main import main
from upscale.gallery.problems import uncorrelated_lognormal

SEED = 6_120_447_391
#: Fine cells of the field: 2x2 blocks make a coarse grid of about 1 M cells, a few seconds of writing.
SIZE = (2048, 2048)
RUN = ["--block", "2x2", "--method", "geometric", "--no-check", "--overwrite"]
#: Seconds allowed for the run to start writing, and for it to end after the signal.
DEADLINE = 120.0
#: Seconds between two looks at the staging folder.
POLL = 0.01
#: Starts a command with SIGINT at its default disposition before exec'ing it: a shell's
#: background job inherits SIGINT ignored (POSIX, XCU 2.11 "Signals and Error Handling"), and
#: a Python started with SIGINT ignored raises no KeyboardInterrupt.
_WITH_SIGINT = ("import os, signal, sys; signal.signal(signal.SIGINT, signal.SIG_DFL); "
                "os.execv(sys.argv[1], sys.argv[1:])")
SIGNALS = [signal.SIGINT, signal.SIGTERM, signal.SIGKILL]


@pytest.fixture(scope="module")
def field(tmp_path_factory) -> Path:
    return write_raster(tmp_path_factory.mktemp("big") / "field.tif", uncorrelated_lognormal(SIZE, SEED))


@pytest.fixture(scope="module")
def earlier(tmp_path_factory) -> Path:
    """A complete result of an earlier run (of a small field), copied into DIR by each case."""
    folder = tmp_path_factory.mktemp("earlier")
    small = write_raster(folder / "small.tif", uncorrelated_lognormal((64, 64), SEED + 1))
    assert main(["-q", "run", str(small), "--block", "8x8", "--method", "geometric", "--out",
                 str(folder / "result")]) == 0  # fmt: skip
    assert (folder / "result" / "summary.json").is_file()
    return folder / "result"


@dataclass(frozen=True)
class Killed:
    """What a run stopped by a signal left behind."""

    signal: signal.Signals
    status: int  # Popen's return code: negative -N when signal N ended the process
    stderr: str
    before: Any  # snapshot of DIR before the run (None: it did not exist)
    after: Any  # snapshot of DIR after the run
    beside: list[str]  # everything in DIR's parent folder after the run
    leftovers: dict[str, list[str]]  # staging folder -> the files it holds


def _stop_while_writing(field: Path, out: Path, sig: signal.Signals) -> Killed:
    before = snapshot(out)
    command = [sys.executable, "-c", _WITH_SIGINT, str(UPSCALE_EXE), "run", str(field), *RUN,
               "--out", str(out)]  # fmt: skip
    proc = subprocess.Popen(command, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True,
                            cwd=out.parent)  # fmt: skip
    try:
        deadline = time.monotonic() + DEADLINE
        while True:
            stages = [out.parent / name for name in partial_leftovers(out.parent)]
            if any(any(stage.iterdir()) for stage in stages if stage.is_dir()):
                break  # writing has begun
            if proc.poll() is not None:
                pytest.fail(f"the run ended (status {proc.returncode}) before it wrote: {proc.stderr.read()}")
            if time.monotonic() > deadline:
                pytest.fail(f"no staging folder with files within {DEADLINE:g} s")
            time.sleep(POLL)
        assert proc.poll() is None
        proc.send_signal(sig)
        _, err = proc.communicate(timeout=DEADLINE)
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.wait()
    leftovers = {name: sorted(p.name for p in (out.parent / name).iterdir())
                 for name in partial_leftovers(out.parent)}  # fmt: skip
    beside = sorted(p.name for p in out.parent.iterdir())
    return Killed(sig, proc.returncode, err, before, snapshot(out), beside, leftovers)


@pytest.fixture(scope="module")
def stopped(field, earlier, tmp_path_factory):
    """``stopped(signal, earlier_result)``: the run stopped by `signal` (each case runs once)."""
    done: dict[tuple[signal.Signals, bool], Killed] = {}

    def get(sig: signal.Signals, earlier_result: bool) -> Killed:
        key = (sig, earlier_result)
        if key not in done:
            parent = tmp_path_factory.mktemp(f"{sig.name}-{'overwrite' if earlier_result else 'fresh'}")
            out = parent / "coarse"
            if earlier_result:
                shutil.copytree(earlier, out)
            done[key] = _stop_while_writing(field, out, sig)
        return done[key]

    return get


def _ids(sig: signal.Signals) -> str:
    return sig.name


@pytest.mark.parametrize("sig", SIGNALS, ids=_ids)
def test_the_earlier_result_is_left_byte_identical(stopped, sig):
    k = stopped(sig, True)
    assert k.before is not None and "summary.json" in k.before
    assert k.status != 0
    assert k.after == k.before  # every file, byte for byte; no file added or removed
    assert set(k.beside) == {"coarse", *k.leftovers}
    assert not any("summary.json" in files for files in k.leftovers.values()), k.leftovers


@pytest.mark.parametrize("sig", SIGNALS, ids=_ids)
def test_a_new_output_folder_is_not_created(stopped, sig):
    k = stopped(sig, False)
    assert k.before is None
    assert k.status != 0
    assert k.after is None
    assert set(k.beside) == set(k.leftovers)
    assert not any("summary.json" in files for files in k.leftovers.values()), k.leftovers


#: What the command line prints when a signal stops it, and its exit status.
CLEAN_STOP = {
    signal.SIGINT: (130, "upscale: interrupted; nothing was written"),
    signal.SIGTERM: (143, "upscale: stopped by SIGTERM; nothing was written"),
}


@pytest.mark.parametrize("earlier_result", [True, False], ids=["overwrite", "fresh"])
@pytest.mark.parametrize("sig", list(CLEAN_STOP), ids=_ids)
def test_sigint_and_sigterm_say_so_in_one_line_and_clean_up(stopped, sig, earlier_result):
    k = stopped(sig, earlier_result)
    status, line = CLEAN_STOP[sig]
    assert k.status == status, k.stderr
    assert "Traceback" not in k.stderr
    assert k.stderr == line + "\n"
    assert k.leftovers == {}


@pytest.mark.parametrize("earlier_result", [True, False], ids=["overwrite", "fresh"])
def test_sigkill_may_leave_a_staging_folder_without_marker(stopped, earlier_result):
    k = stopped(signal.SIGKILL, earlier_result)
    assert k.status == -signal.SIGKILL
    assert len(k.leftovers) <= 1
    for files in k.leftovers.values():
        assert files and "summary.json" not in files  # it was caught while writing, incomplete
