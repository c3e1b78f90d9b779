"""Fuzzing of the raster reader: mutated GeoTIFF bytes end cleanly, never in a crash or a hang.

What is tested
--------------
Five small valid GeoTIFFs are written with rasterio in the test: float32
and int16, stripped and tiled, all with a nodata value and some nodata
cells, one of them with 3 bands. From them a fixed-seed generator makes
`CASES` mutated files, each with one mutation:

* random bytes flipped in the header and IFD region (before the first
  pixel byte) or in the pixel data;
* the file cut at a random offset;
* a run of bytes duplicated in place (everything after it shifts) or zeroed;
* the byte-order mark swapped (``II`` <-> ``MM``), with or without the
  magic number 42 rewritten in the new order;
* ImageWidth/ImageLength (256/257) or TileWidth/TileLength (322/323) set to
  a huge value (up to 2**32 - 1) or 0 in the IFD, found by parsing the IFD
  with `struct` (TIFF 6.0, section 2 "Image File Directory"); GDAL reads the
  blocks such a file lacks as nodata, so image sizes that make real work
  for the tool are left out (see `HUGE_SIZES`);
* StripOffsets/TileOffsets (273/324) pointed past the end of the file, or
  StripByteCounts/TileByteCounts (279/325) made huge.

Every mutated file goes through the command line, ``upscale.cli.main.main``,
both ``upscale -q run FILE --block 2x2 --method geometric --no-check --out
DIR`` (plus ``--dz 1`` for the 3-band file) and ``upscale info FILE``. The
commands run in-process in one child Python process (a batch), under an
address-space limit of `MEMORY`, with warnings turned into errors as in this
suite; the child reports when each command starts and ends, and one that
takes more than `CASE_SECONDS` is killed with its child, counted as a hang,
and the batch goes on in a new child (a hang fails the test instead of
hanging CI, and a crash of GDAL cannot take pytest down). Every command must
end in one of two ways:

* exit 0: for ``run`` a complete output folder (``summary.json`` present),
  no staging folder beside it, and coarse kx values finite or NaN; for
  ``info`` a description on stdout; no traceback, no "internal error";
* exit 1 or 2 with exactly one ``upscale: error: ...`` line on stderr, no
  traceback, never "internal error"; for ``run`` no output folder and no
  ``.partial-`` folder left. The one other line allowed is the warning that
  integer values are converted to float64 (upscale/io/read.py logs it on
  purpose for every integer raster; ``info`` runs without ``-q``).

All offending commands are collected and reported in one assertion message
(case number, base file, mutation, command, exit status, last stderr line).

Two more tests over the same batch (each a bug the fuzzing found, now fixed):

* no GDAL remark (such as "GeoTIFF tags apparently corrupt", "Incorrect
  count for ...", "tags are not sorted") reaches stderr as an extra
  ``upscale: CPLE_... in ...`` line before the error line
  (`test_failed_commands_print_no_messages_of_gdal`);
* an ImageWidth of 2**31 - 1 in a file of a few kB is refused as damaged
  before anything is allocated for it, not "out of memory" after it
  (`test_no_mutant_makes_the_command_run_out_of_memory`);

`test_error_lines_say_what_failed` guards a fixed one: a failed read said
"Read failed. See previous exception for details." and dropped that exception.

Fuzzing parsers with random byte flips, truncation and structural edits
(lengths, offsets) is common practice (e.g. GDAL's own OSS-Fuzz targets
feed mutated TIFF bytes to the driver).
"""

from __future__ import annotations

import json
import os
import re
import select
import struct
import subprocess
import sys
import time
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import pytest
import rasterio
from conftest import PROJECTED, north_up, partial_leftovers, read_raster

from upscale.gallery.problems import uncorrelated_lognormal

SEED = 5_204_117_963
#: Mutated files made from the valid ones (about 0.05 s each for ``run`` + ``info``).
CASES = 240
#: Seconds a single command may take before it counts as a hang.
CASE_SECONDS = 20.0
#: Seconds the child process may take to import the package.
STARTUP_SECONDS = 60.0
#: Seconds for the whole batch; past them the rest is not run and the test fails.
TOTAL_SECONDS = 240.0
#: Address-space limit of the child (bytes): a mutant that makes the tool allocate without
#: bound ends in a MemoryError instead of exhausting the machine running the tests.
MEMORY = 4 * 2**30
NODATA_FLOAT = -9999.0
NODATA_INT = -1
SHAPE = (16, 32)

# TIFF 6.0 tags (TIFF 6.0 specification, section 8 "Baseline Field Reference Guide", and
# section 15 "Tiled Images").
WIDTH, LENGTH = 256, 257
STRIP_OFFSETS, STRIP_BYTE_COUNTS = 273, 279
TILE_WIDTH, TILE_LENGTH, TILE_OFFSETS, TILE_BYTE_COUNTS = 322, 323, 324, 325
#: Field types and their sizes in bytes (TIFF 6.0, section 2): BYTE, ASCII, SHORT, LONG, RATIONAL ...
TYPE_SIZES = {1: 1, 2: 1, 3: 2, 4: 4, 5: 8, 6: 1, 7: 1, 8: 2, 9: 4, 10: 8, 11: 4, 12: 8}
SHORT, LONG = 3, 4
#: Values for ImageWidth/ImageLength. GDAL reads the blocks a file lacks as nodata (a sparse
#: raster), so a declared size up to about INT_MAX is real work for the tool: 65535 x 32 cells
#: take a few seconds; 2**20 x 32 cells 20-30 s, too long for the batch, so they are left out.
#: Past INT_MAX GDAL refuses the file ("Too large image size").
HUGE_SIZES = (0, 4096, 65_535, (1 << 31) - 1, (1 << 32) - 1)
#: Values for TileWidth/TileLength (GDAL refuses tiles past 2**31 bytes, "Too large block size").
HUGE_TILES = (0, 65_535, 1 << 20, 1 << 24, (1 << 31) - 1, (1 << 32) - 1)


# --- the valid inputs -------------------------------------------------------------------------


def _values(shape: tuple[int, ...], dtype: str, seed: int) -> np.ndarray:
    """Lognormal values, every 7th cell and the top-left 2 x 2 cells of each band nodata, as `dtype`."""
    k = uncorrelated_lognormal(shape, seed)
    nodata = NODATA_FLOAT if dtype == "float32" else NODATA_INT
    if dtype == "int16":
        k = np.clip(np.rint(k), 1, 30_000)
    flat = k.reshape(-1)
    flat[::7] = nodata
    k[..., :2, :2] = nodata  # a whole 2 x 2 block: one inactive coarse cell
    return k.astype(dtype)


def _write(path: Path, values: np.ndarray, nodata: float, **creation: Any) -> Path:
    """Write `values` (bands, rows, columns) as a north-up GeoTIFF with `creation` options."""
    profile = {"driver": "GTiff", "width": values.shape[2], "height": values.shape[1],
               "count": values.shape[0], "dtype": values.dtype, "nodata": nodata,
               "crs": PROJECTED, "transform": north_up(10.0), **creation}  # fmt: skip
    with rasterio.open(path, "w", **profile) as dst:
        dst.write(values)
    return path


@dataclass(frozen=True)
class Base:
    """One valid GeoTIFF: its bytes and the extra options ``run`` needs for it."""

    name: str
    data: bytes
    extra: tuple[str, ...]


@pytest.fixture(scope="module")
def bases(tmp_path_factory) -> list[Base]:
    folder = tmp_path_factory.mktemp("fuzz-bases")
    tiled = {"tiled": True, "blockxsize": 16, "blockysize": 16}
    made = {
        "float32 stripped": (_values((1, *SHAPE), "float32", SEED), NODATA_FLOAT, {"blockysize": 8}, ()),
        "float32 tiled": (_values((1, 32, 32), "float32", SEED + 1), NODATA_FLOAT, tiled, ()),
        "int16 stripped": (_values((1, *SHAPE), "int16", SEED + 2), NODATA_INT, {"blockysize": 4}, ()),
        "int16 tiled": (_values((1, 32, 32), "int16", SEED + 3), NODATA_INT, tiled, ()),
        "float32 3-band": (_values((3, *SHAPE), "float32", SEED + 4), NODATA_FLOAT, {"blockysize": 8},
                           ("--dz", "1")),
    }
    out = []
    for i, (name, (values, nodata, creation, extra)) in enumerate(made.items()):
        path = _write(folder / f"base{i}.tif", values, nodata, **creation)
        out.append(Base(name, path.read_bytes(), extra))
    return out


# --- parsing the first IFD (TIFF 6.0, section 2) ----------------------------------------------


@dataclass(frozen=True)
class Entry:
    """One IFD entry: where it is in the file, its type, count and value field."""

    at: int  # offset of the 12-byte entry
    type: int
    count: int
    value: int  # the 4-byte value field as an unsigned integer (an offset when the values do not fit)


def _order(data: bytes) -> str:
    return "<" if data[:2] == b"II" else ">"


def _ifd(data: bytes) -> dict[int, Entry]:
    """Tag -> entry of the first IFD of a classic (not Big) TIFF."""
    bo = _order(data)
    (first,) = struct.unpack_from(bo + "I", data, 4)
    (n,) = struct.unpack_from(bo + "H", data, first)
    entries = {}
    for i in range(n):
        at = first + 2 + 12 * i
        tag, kind, count = struct.unpack_from(bo + "HHI", data, at)
        (value,) = struct.unpack_from(bo + "I", data, at + 8)
        entries[tag] = Entry(at, kind, count, value)
    return entries


def _values_of(data: bytes, entry: Entry) -> list[int]:
    """The integer values (SHORT or LONG) of an entry, inline or at its offset."""
    bo = _order(data)
    code = "H" if entry.type == SHORT else "I"
    size = TYPE_SIZES[entry.type] * entry.count
    where = entry.at + 8 if size <= 4 else entry.value
    return list(struct.unpack_from(f"{bo}{entry.count}{code}", data, where))


def _data_start(data: bytes) -> int:
    """Offset of the first pixel byte: the end of the header and IFD region."""
    ifd = _ifd(data)
    offsets = ifd.get(STRIP_OFFSETS) or ifd[TILE_OFFSETS]
    return min(_values_of(data, offsets))


def _set_long(data: bytearray, entry: Entry, value: int) -> None:
    """Make `entry` one LONG holding `value` (inline)."""
    bo = _order(bytes(data))
    struct.pack_into(bo + "HI", data, entry.at + 2, LONG, 1)
    struct.pack_into(bo + "I", data, entry.at + 8, value)


# --- mutations --------------------------------------------------------------------------------


def _flip(rng, data, lo, hi):
    out = bytearray(data)
    spots = rng.integers(lo, hi, size=int(rng.integers(1, 5)))
    for at in spots:
        out[at] ^= int(rng.integers(1, 256))
    return f"bytes {sorted(spots.tolist())} flipped", out


def flip_header(rng, data):
    return _flip(rng, data, 0, _data_start(data))


def flip_data(rng, data):
    return _flip(rng, data, _data_start(data), len(data))


def truncate(rng, data):
    at = int(rng.integers(0, len(data)))
    return f"cut at {at} of {len(data)}", bytearray(data[:at])


def duplicate_run(rng, data):
    at = int(rng.integers(0, len(data)))
    n = int(rng.integers(1, 65))
    return f"bytes {at}..{at + n} duplicated", bytearray(data[: at + n] + data[at:])


def zero_run(rng, data):
    at = int(rng.integers(0, len(data)))
    n = int(rng.integers(1, 65))
    out = bytearray(data)
    out[at : at + n] = bytes(len(out[at : at + n]))
    return f"bytes {at}..{at + n} zeroed", out


def swap_order_mark(rng, data):
    out = bytearray(data)
    bo = _order(data)
    out[:2] = b"MM" if bo == "<" else b"II"
    if rng.integers(0, 2):
        struct.pack_into("<H" if bo == ">" else ">H", out, 2, 42)
        return "byte-order mark swapped, magic rewritten", out
    return "byte-order mark swapped", out


def huge_size(rng, data):
    ifd = _ifd(data)
    tags = [t for t in (WIDTH, LENGTH, TILE_WIDTH, TILE_LENGTH) if t in ifd]
    tag = tags[int(rng.integers(0, len(tags)))]
    values = HUGE_SIZES if tag in (WIDTH, LENGTH) else HUGE_TILES
    value = values[int(rng.integers(0, len(values)))]
    out = bytearray(data)
    _set_long(out, ifd[tag], value)
    return f"tag {tag} set to {value}", out


def _set_first(data: bytearray, entry: Entry, value: int) -> int:
    """Set the first value of a SHORT or LONG entry (inline or at its offset); return what was set."""
    code = "H" if entry.type == SHORT else "I"
    value = min(value, 0xFFFF if code == "H" else 0xFFFFFFFF)
    inline = TYPE_SIZES[entry.type] * entry.count <= 4
    struct.pack_into(_order(bytes(data)) + code, data, entry.at + 8 if inline else entry.value, value)
    return value


def offsets_past_end(rng, data):
    ifd = _ifd(data)
    stripped = STRIP_OFFSETS in ifd
    tag, counts = (STRIP_OFFSETS, STRIP_BYTE_COUNTS) if stripped else (TILE_OFFSETS, TILE_BYTE_COUNTS)
    out = bytearray(data)
    how = int(rng.integers(0, 3))
    if how == 0:
        past = _set_first(out, ifd[tag], len(data) + int(rng.integers(0, 1 << 20)))
        return f"first offset of tag {tag} set to {past}", out
    if how == 1 and ifd[tag].count > 1:  # the array of offsets itself
        past = len(data) + int(rng.integers(0, 1 << 20))
        struct.pack_into(_order(data) + "I", out, ifd[tag].at + 8, past)
        return f"array of tag {tag} moved to {past}", out
    huge = _set_first(out, ifd[counts], (1 << 32) - 1)
    return f"first byte count of tag {counts} set to {huge}", out


MUTATIONS = (flip_header, flip_data, truncate, duplicate_run, zero_run, swap_order_mark, huge_size,
             offsets_past_end)  # fmt: skip


@dataclass(frozen=True)
class Mutant:
    """One mutated file."""

    number: int
    base: Base
    mutation: str
    data: bytes

    def label(self) -> str:
        """Case number, base file and mutation."""
        return f"#{self.number} {self.base.name}: {self.mutation}"


def _mutants(bases: list[Base]) -> list[Mutant]:
    rng = np.random.default_rng(SEED)
    out = []
    for number in range(CASES):
        base = bases[number % len(bases)]
        mutate = MUTATIONS[(number // len(bases)) % len(MUTATIONS)]
        what, data = mutate(rng, base.data)
        out.append(Mutant(number, base, f"{mutate.__name__}, {what}", bytes(data)))
    return out


# --- running the commands: a batch in a child process, a time limit per command ---------------

#: The child process: runs `upscale.cli.main.main` in itself on every job (an argument list) of a
#: JSON file from index START on, under an address-space limit, and reports one JSON line on file
#: descriptor FD when a job starts and one with its exit status, stdout and stderr when it ends.
_CHILD = r"""
import contextlib, io, json, os, resource, sys, warnings
fd, jobs_file, start, limit = int(sys.argv[1]), sys.argv[2], int(sys.argv[3]), int(sys.argv[4])
resource.setrlimit(resource.RLIMIT_AS, (limit, limit))
warnings.simplefilter("error")  # as in the test suite (pyproject.toml: filterwarnings = error)
from upscale.cli.main import main
with os.fdopen(fd, "w", buffering=1) as report:
    with open(jobs_file) as f:
        jobs = json.load(f)
    for index in range(start, len(jobs)):
        report.write(json.dumps({"start": index}) + "\n")
        out, err = io.StringIO(), io.StringIO()
        with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
            try:
                code = main(jobs[index])
            except BaseException as exc:  # main should return a status for everything
                code = -1
                err.write(f"[escaped main: {type(exc).__name__}: {exc}]\n")
        report.write(json.dumps({"end": index, "code": code, "stdout": out.getvalue(),
                                 "stderr": err.getvalue()}) + "\n")
    report.write(json.dumps({"finished": True}) + "\n")
"""


@dataclass(frozen=True)
class Outcome:
    """How one command ended; `code` None when it did not end by itself (see `note`)."""

    code: int | None
    stdout: str = ""
    stderr: str = ""
    note: str = ""


def _run_jobs(jobs: list[list[str]], folder: Path) -> tuple[list[Outcome], str]:
    """Run every job through the child, restarted after a job that hangs or kills it.

    Returns the outcome of every job (in order) and whatever the child
    processes wrote on their own stdout and stderr, outside `main`.
    """
    jobs_file = folder / "jobs.json"
    jobs_file.write_text(json.dumps(jobs))
    outcomes: list[Outcome] = [Outcome(None, note="not run: the time for the batch was spent")] * len(jobs)
    raw = folder / "children.log"
    total = time.monotonic() + TOTAL_SECONDS
    start = 0
    while start < len(jobs) and time.monotonic() < total:
        read_end, write_end = os.pipe()
        with raw.open("ab") as log:
            child = subprocess.Popen(
                [sys.executable, "-c", _CHILD, str(write_end), str(jobs_file), str(start), str(MEMORY)],
                pass_fds=(write_end,), stdin=subprocess.DEVNULL, stdout=log, stderr=log, cwd=folder,
            )  # fmt: skip
        os.close(write_end)
        current, buffer, finished = None, b"", False
        limit = time.monotonic() + STARTUP_SECONDS
        try:
            while True:
                wait = min(limit, total) - time.monotonic()
                ready, _, _ = select.select([read_end], [], [], max(0.0, wait))
                if not ready:  # the job (or the start of the child) took too long
                    child.kill()
                    child.wait()
                    if current is None:
                        pytest.fail(f"the child did not start: {raw.read_text(errors='replace')[-2000:]}")
                    outcomes[current] = Outcome(None, note=f"no answer within {CASE_SECONDS:g} s (hang)")
                    start = current + 1
                    break
                chunk = os.read(read_end, 1 << 16)
                if not chunk:  # the child ended
                    status = child.wait()
                    if finished:
                        start = len(jobs)
                    elif current is None:
                        pytest.fail(f"the child ended before its first job: {raw.read_text()[-2000:]}")
                    else:
                        outcomes[current] = Outcome(None, note=f"the process died (status {status})")
                        start = current + 1
                    break
                buffer += chunk
                *lines, buffer = buffer.split(b"\n")
                for line in lines:
                    message = json.loads(line)
                    if "start" in message:
                        current, limit = message["start"], time.monotonic() + CASE_SECONDS
                    elif "end" in message:
                        outcomes[message["end"]] = Outcome(
                            message["code"], message["stdout"], message["stderr"]
                        )
                        current = None
                    else:
                        finished = True
        finally:
            os.close(read_end)
            if child.poll() is None:
                child.kill()
                child.wait()
    return outcomes, raw.read_text(errors="replace")


# --- judging the outcomes ---------------------------------------------------------------------

#: A message of GDAL passed on by rasterio's logger ("CPLE_AppDefined in ...", GDAL's error
#: classes) and printed by the command line's logging with the ``upscale:`` prefix.
GDAL_LINE = re.compile(r"^upscale: CPLE_\w+ in ")
#: The note logged on purpose when a raster of integers is read (upscale/io/read.py, `_open`).
CONVERSION_NOTE = re.compile(r"^upscale: .*: int\d+ values converted to float64")


@dataclass(frozen=True)
class Fuzzed:
    """One mutant, where its ``run`` wrote, and how its two commands ended."""

    mutant: Mutant
    out: Path
    run: Outcome
    info: Outcome

    def commands(self) -> tuple[tuple[str, Outcome], ...]:
        """(name, outcome) of both commands."""
        return ("run", self.run), ("info", self.info)


def _last_line(outcome: Outcome) -> str:
    lines = outcome.stderr.strip().splitlines()
    return outcome.note or (lines[-1] if lines else "(nothing on stderr)")


def _success_problem(case: Fuzzed, command: str, outcome: Outcome) -> str | None:
    if "Traceback" in outcome.stderr or "internal error" in outcome.stderr:
        return "traceback or internal error on stderr"
    if command == "info":
        return None if outcome.stdout.startswith("field ") else "no description on stdout"
    left = partial_leftovers(case.out.parent)
    if not (case.out / "summary.json").is_file() or left:
        return f"no summary.json, or staging folders left: {left}"
    if np.isinf(read_raster(case.out / "kx.tif")).any():
        return "infinite coarse kx values"
    return None


def _failure_problem(case: Fuzzed, command: str, outcome: Outcome, gdal_lines: bool) -> str | None:
    err = outcome.stderr
    if "Traceback" in err:
        return "traceback on stderr"
    lines = [line for line in err.splitlines()
             if not (CONVERSION_NOTE.match(line) or gdal_lines and GDAL_LINE.match(line))]  # fmt: skip
    if len(lines) != 1:
        return f"{len(lines)} lines on stderr"
    if not lines[0].startswith("upscale: error: "):
        return "not one 'upscale: error:' line"
    if command == "run" and (case.out.exists() or partial_leftovers(case.out.parent)):
        return f"output or staging folder left: {sorted(p.name for p in case.out.parent.iterdir())}"
    return None


def broken_promises(case: Fuzzed, gdal_lines: bool = True) -> list[str]:
    """What is wrong with the two commands of `case`; `gdal_lines`: ignore GDAL's lines on stderr."""
    found = []
    for command, outcome in case.commands():
        if outcome.code is None:
            problem = "did not end by itself"
        elif outcome.code == 0:
            problem = _success_problem(case, command, outcome)
        elif outcome.code in (1, 2):
            problem = _failure_problem(case, command, outcome, gdal_lines)
        else:
            problem = "exit status not 0, 1 or 2"
        if problem:
            found.append(f"{command}: exit {outcome.code}, {problem}: {_last_line(outcome)!r}")
    return found


def saying(text: str):
    """Picks the commands of a case whose stderr contains `text`."""

    def pick(case: Fuzzed) -> list[str]:
        return [f"{command}: exit {outcome.code}: {_last_line(outcome)!r}"
                for command, outcome in case.commands() if text in outcome.stderr]  # fmt: skip

    return pick


def offending(cases: list[Fuzzed], pick) -> list[str]:
    """One line per offending command: the case, then what `pick` says about it."""
    return [f"{case.mutant.label()} -> {problem}" for case in cases for problem in pick(case)]


def _message(lines: list[str]) -> str:
    return f"{len(lines)} offending command(s):\n" + "\n".join(lines)


@pytest.fixture(scope="module")
def fuzzed(bases, tmp_path_factory) -> tuple[list[Fuzzed], str]:
    """Every mutant run through ``run`` and ``info``; and what the children printed outside `main`."""
    folder = tmp_path_factory.mktemp("fuzz")
    mutants = _mutants(bases)
    jobs, outs = [], []
    for mutant in mutants:
        case = folder / f"case{mutant.number:03d}"
        case.mkdir()
        path = case / "field.tif"
        path.write_bytes(mutant.data)
        outs.append(case / "out")
        jobs.append(["-q", "run", str(path), *mutant.base.extra, "--block", "2x2", "--method",
                     "geometric", "--no-check", "--out", str(case / "out")])  # fmt: skip
        jobs.append(["info", str(path), *mutant.base.extra])
    outcomes, raw = _run_jobs(jobs, folder)
    cases = [Fuzzed(mutant, out, outcomes[2 * i], outcomes[2 * i + 1])
             for i, (mutant, out) in enumerate(zip(mutants, outs))]  # fmt: skip
    return cases, raw


# --- the tests --------------------------------------------------------------------------------


def test_the_valid_bases_run_and_describe(bases, tmp_path, run_cli):
    """The unmutated files pass both commands: what the mutants start from is sound."""
    for i, base in enumerate(bases):
        path = tmp_path / f"base{i}.tif"
        path.write_bytes(base.data)
        out = tmp_path / f"out{i}"
        code, _, err = run_cli("-q", "run", path, *base.extra, "--block", "2x2", "--method", "geometric",
                               "--no-check", "--out", out)  # fmt: skip
        assert (code, err) == (0, "")
        coarse = read_raster(out / "kx.tif")
        assert np.isnan(coarse[:, 0, 0]).all()  # the nodata block is an inactive coarse cell
        assert np.isfinite(coarse[:, 1:, 1:]).all()
        code, stdout, err = run_cli("info", path, *base.extra)
        assert code == 0 and stdout.startswith("field ")
        assert all(CONVERSION_NOTE.match(line) for line in err.splitlines()), err
        assert bool(err) == ("int16" in base.name)


def test_mutated_geotiffs_end_in_a_result_or_one_error_line(fuzzed):
    cases, raw = fuzzed
    assert len(cases) == CASES
    found = offending(cases, broken_promises)
    assert not found, _message(found)
    assert raw == ""  # nothing printed outside main (GDAL, libtiff or Python on their own)
    # both outcomes are reached, so both sets of promises were exercised
    codes = {case.run.code for case in cases}
    assert {0, 2} <= codes, codes


def test_failed_commands_print_no_messages_of_gdal(fuzzed):
    cases, _ = fuzzed
    found = offending(cases, lambda case: broken_promises(case, gdal_lines=False))
    assert not found, _message(found)


def test_no_mutant_makes_the_command_run_out_of_memory(fuzzed):
    cases, _ = fuzzed
    found = offending(cases, saying("out of memory"))
    assert not found, _message(found)


def test_error_lines_say_what_failed(fuzzed):
    """Not rasterio's 'Read failed. See previous exception for details.': the user never sees that one."""
    cases, _ = fuzzed
    found = offending(cases, saying("previous exception"))
    assert not found, _message(found)
