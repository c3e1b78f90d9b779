"""Memory stays bounded by the chunk, not the raster; a check that would not fit is refused.

What is tested
--------------
* ``upscale run`` with 16 MiB chunks (an average; the flow-based methods'
  memory is measured by tests/benchmarks/bench_scale.py) on float32
  GeoTIFFs of 256 MiB and 1 GiB (8192² and 16384² cells, written window by
  window here): the 1 GiB raster is upscaled by a process whose peak
  resident memory is less than the raster's size (about half); four times
  the raster adds less than a fifth of the difference to the peak; and the
  1 GiB raster needs less extra memory than its own size over the same
  command on a tiny raster (interpreter, libraries, compiled kernels,
  GDAL's 64 MB block cache). The peak comes from ``os.wait4``'s resource
  usage of each run, started from a small interpreter of its own (a child's
  peak starts from the high-water mark of the process it is forked from).
  Blocks of 2 x 2, 64 x 64 and 128 x 128 give every raster the same
  128 x 128 coarse grid: the coarse result, held in memory until written,
  is then the same for all three. Two coarse values are checked against the
  geometric mean of their fine cells read directly with rasterio.
* Under an address-space limit (``RLIMIT_AS``, 3 GiB) a run whose flow
  check would need more memory than is left is refused before any work:
  exit 2, one line naming the memory and a ``--check-limit`` that fits, no
  output folder; with a small ``--check-limit`` the same run completes and
  checks on sub-domains.
* In a container's memory limit — a cgroup of its own (v1, or v2 where its
  memory controller is delegated) that the command sees at the top of
  ``/sys/fs/cgroup``, as in Docker or Kubernetes: a private mount namespace
  with the cgroup bind-mounted there; the kernel enforces the limit — the
  memory the tool finds is within the limit, and so is the default chunk (a
  64th of it, not the 128 MiB the machine's 24 GiB would give); a run whose
  check would need more than the container holds is refused before any
  work, as above, and the same run without the check completes in it.
  Needs root (as CI runs) and ``unshare``; skipped otherwise.
"""

from __future__ import annotations

import json
import os
import re
import resource
import shutil
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest
import rasterio
from conftest import UPSCALE_EXE, north_up, write_raster
from rasterio.windows import Window

from upscale.gallery.problems import uncorrelated_lognormal

SIDE = 16384


def _write(path, side):
    profile = {"driver": "GTiff", "dtype": "float32", "width": side, "height": side, "count": 1,
               "crs": "EPSG:32633", "transform": north_up(10.0), "tiled": True,
               "blockxsize": 256, "blockysize": 256}  # fmt: skip
    rng = np.random.default_rng(77)
    with rasterio.open(path, "w", **profile) as dst:
        step = 1024
        for row in range(0, side, step):
            rows = min(step, side - row)
            values = np.exp(rng.normal(3.0, 1.0, (rows, side))).astype(np.float32)
            dst.write(values, 1, window=Window(0, row, side, rows))
    return path


#: Runs a command and prints its peak resident memory in kB. A child's ``ru_maxrss`` starts from
#: the high-water mark of the process it was forked from, so the command is started from this
#: small interpreter rather than from the test process, whose own peak would mask the run's.
_MEASURE = """
import os, subprocess, sys
child = subprocess.Popen(sys.argv[1:], stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
error = child.stderr.read().decode()
_, status, usage = os.wait4(child.pid, 0)
print(os.waitstatus_to_exitcode(status), usage.ru_maxrss)
sys.stderr.write(error)
"""


def _peak_rss(args):
    """Peak resident memory (bytes) of one child running the command line (``-q``)."""
    done = subprocess.run([sys.executable, "-c", _MEASURE, str(UPSCALE_EXE), "-q", *map(str, args)],
                          capture_output=True, text=True, timeout=600)  # fmt: skip
    status, kilobytes = map(int, done.stdout.split())
    assert status == 0, done.stderr
    return kilobytes * 1024  # kilobytes on Linux


@pytest.fixture(scope="module")
def rasters(tmp_path_factory):
    folder = tmp_path_factory.mktemp("memory")
    return (_write(folder / "big.tif", SIDE), _write(folder / "medium.tif", SIDE // 2),
            _write(folder / "small.tif", 256))  # fmt: skip


@pytest.mark.slow
def test_peak_memory_follows_the_chunk_not_the_raster(rasters, tmp_path):
    method = ["--method", "geometric"]
    big, medium, small = rasters
    size, smaller = big.stat().st_size, medium.stat().st_size
    assert size >= 2**30
    # blocks that make the same 128 x 128 coarse grid of every raster: the coarse result is held in
    # memory until it is written, and this test is about the fine data
    common = [*method, "--no-check", "--chunk", "16MB"]
    baseline = _peak_rss(["run", small, "--block", "2x2", *common, "--out", tmp_path / "small"])
    middle = _peak_rss(["run", medium, "--block", "64x64", *common, "--out", tmp_path / "medium"])
    peak = _peak_rss(["run", big, "--block", "128x128", *common, "--out", tmp_path / "big"])
    print(f"rasters {smaller / 2**20:.0f} and {size / 2**20:.0f} MiB: peak RSS {middle / 2**20:.0f} "
          f"and {peak / 2**20:.0f} MiB; tiny raster {baseline / 2**20:.0f} MiB")  # fmt: skip
    assert peak < size  # the raster is larger than the whole memory of the run upscaling it (0.49)
    # four times the raster: measured +0.14 of the difference, in native allocations (GDAL, the C
    # allocator); the arrays Python allocates peak at about 20 MiB (tracemalloc) whatever the raster
    assert peak - middle < (size - smaller) / 5
    assert peak - baseline < size
    with rasterio.open(tmp_path / "big" / "kx.tif") as src:
        assert src.shape == (128, 128)
        coarse = src.read(1)
    with rasterio.open(big) as src:
        for bi, bj in ((0, 0), (100, 37)):  # a corner block and an inner one
            cells = src.read(1, window=Window(bj * 128, bi * 128, 128, 128)).astype(np.float64)
            # common practice: the geometric mean is exp of the mean of ln k
            np.testing.assert_allclose(coarse[bi, bj], np.exp(np.log(cells).mean()), rtol=1e-6)


def _capped(args, limit_bytes):
    """Run the command line under an address-space limit: (exit status, stdout, stderr)."""

    def cap():
        resource.setrlimit(resource.RLIMIT_AS, (limit_bytes, limit_bytes))

    env = dict(os.environ, MALLOC_ARENA_MAX="2")  # fewer allocator arenas: less address space
    done = subprocess.run([str(UPSCALE_EXE), *map(str, args)], capture_output=True, text=True,
                          timeout=300, preexec_fn=cap, env=env)  # fmt: skip
    return done.returncode, done.stdout, done.stderr


@pytest.mark.slow
def test_a_check_that_would_not_fit_in_memory_is_refused_before_any_work(rasters, tmp_path):
    _, medium, _ = rasters  # 8192² cells: a whole check would need about 44 GB
    out = tmp_path / "refused"
    code, stdout, stderr = _capped(["run", medium, "--block", "64x64", "--method", "geometric",
                                    "--out", out], 3 * 2**30)  # fmt: skip
    assert code == 2, stderr
    assert stderr.count("\n") == 1 and "Traceback" not in stderr, stderr
    assert "the flow check would solve 20000000 fine cells at once" in stderr
    fits = int(re.search(r"give --check-limit (\d+) or less", stderr).group(1))
    assert 0 < fits < 20_000_000
    assert not out.exists()
    # within the limit, the same run checks on sub-domain windows
    done = tmp_path / "windows"
    code, _, stderr = _capped(["-q", "run", medium, "--block", "64x64", "--method", "geometric",
                               "--check-limit", "300000", "--out", done], 3 * 2**30)  # fmt: skip
    assert code == 0, stderr
    check = json.loads((done / "summary.json").read_text())["check"]
    assert "300000" in check["skipped"] and len(check["windows"]) == 9


#: Where a memory controller's hierarchy is mounted and the name of a cgroup's limit there: v1, v2.
_CGROUPS = ((Path("/sys/fs/cgroup/memory"), "memory.limit_in_bytes"), (Path("/sys/fs/cgroup"), "memory.max"))
#: Runs a command with the cgroup given first mounted where the hierarchy's top is (given second).
_AS_IN_A_CONTAINER = 'mount --bind "$0" "$1" && shift && exec "$@"'


@pytest.fixture
def container():
    """``run(limit_bytes, args)``: a command line in a new cgroup with that memory limit, as a container."""
    groups: list[Path] = []

    def run(limit: int, args: list) -> subprocess.CompletedProcess:
        if os.geteuid() != 0 or shutil.which("unshare") is None:
            pytest.skip("a cgroup of its own needs root and unshare")
        for top, limit_file in _CGROUPS:
            group = top / f"upscale-test-{os.getpid()}-{len(groups)}"
            try:
                group.mkdir()
            except OSError:
                continue
            groups.append(group)
            if (group / limit_file).exists():  # v2: only where the memory controller is delegated
                (group / limit_file).write_text(str(limit))
                break
        else:
            pytest.skip("no cgroup memory controller to make a group in")
        enter = (group / "cgroup.procs").write_text  # the child, before it runs the command
        command = ["unshare", "--mount", "--propagation", "private", "sh", "-c", _AS_IN_A_CONTAINER,
                   str(group), str(top), *map(str, args)]  # fmt: skip
        return subprocess.run(command, capture_output=True, text=True, timeout=300,
                              preexec_fn=lambda: enter(str(os.getpid())))  # fmt: skip

    yield run
    for group in groups:
        for _ in range(50):  # the group is removable once its last process has been reaped
            try:
                group.rmdir()
                break
            except OSError:
                time.sleep(0.1)


def test_the_memory_found_and_the_default_chunk_follow_a_containers_limit(container):
    limit = 1536 * 2**20
    probe = ("from upscale.io.windows import available_memory, default_chunk_bytes; "
             "print(available_memory(), default_chunk_bytes())")  # fmt: skip
    done = container(limit, [sys.executable, "-c", probe])
    assert done.returncode == 0, done.stderr
    available, chunk = map(int, done.stdout.split())
    assert 0 < available < limit  # less what the interpreter holds
    assert 16 * 2**20 <= chunk <= limit // 64  # the machine's memory would give 128 MiB


def test_a_check_that_would_not_fit_in_a_container_is_refused_before_any_work(container, tmp_path):
    raster = write_raster(tmp_path / "k.tif", uncorrelated_lognormal((1024, 1024), 2_906_117_473))
    limit = 640 * 2**20  # a whole check of 1024² cells needs about 0.65 GB; the machine has 24 GiB
    args = ["run", raster, "--block", "16x16", "--method", "geometric"]
    out = tmp_path / "refused"
    done = container(limit, [UPSCALE_EXE, *args, "--out", out])
    assert done.returncode == 2, done.stderr
    assert done.stderr.count("\n") == 1 and "Traceback" not in done.stderr, done.stderr
    assert "the flow check would solve 1048576 fine cells at once" in done.stderr
    available = float(re.search(r"more than the ([\d.]+) GiB available", done.stderr).group(1))
    assert available <= limit / 2**30
    assert not out.exists()
    done = container(limit, [UPSCALE_EXE, "-q", *args, "--no-check", "--out", tmp_path / "unchecked"])
    assert done.returncode == 0, done.stderr
    assert (tmp_path / "unchecked" / "summary.json").exists()
