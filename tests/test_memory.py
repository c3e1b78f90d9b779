"""Memory stays bounded by the chunk, not the raster.

What is tested
--------------
* ``upscale run`` with 16 MiB chunks (an average; the flow-based methods'
  memory is measured by tests/benchmarks/bench_scale.py) on float32 GeoTIFFs of 64 MiB and 256 MiB (4096² and
  8192² cells, written window by window here): four times the raster adds
  less than a tenth of the difference to the peak resident memory, and the
  256 MiB raster needs less extra memory than its own size over the same
  command on a tiny raster (interpreter, libraries, compiled kernels, GDAL's
  64 MB block cache). The peak comes from ``os.wait4``'s resource usage of
  each child alone. Blocks of 64 x 64 keep the coarse outputs, which are
  built in memory (about 1 kB per coarse cell at the peak), out of the
  measurement.
"""

from __future__ import annotations

import os
import subprocess

import numpy as np
import pytest
import rasterio
from conftest import UPSCALE_EXE, north_up
from rasterio.windows import Window

SIDE = 8192


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


def _peak_rss(args):
    """Peak resident memory (bytes) of one child running the command line."""
    child = subprocess.Popen([str(UPSCALE_EXE), "-q", *map(str, args)], stdout=subprocess.PIPE,
                             stderr=subprocess.PIPE)  # fmt: skip
    stderr = child.stderr.read().decode()  # -q: nothing but errors, so the pipe cannot fill
    _, status, usage = os.wait4(child.pid, 0)
    child.returncode = os.waitstatus_to_exitcode(status)
    child.stdout.close()
    child.stderr.close()
    assert child.returncode == 0, stderr
    return usage.ru_maxrss * 1024  # kilobytes on Linux


@pytest.fixture(scope="module")
def rasters(tmp_path_factory):
    folder = tmp_path_factory.mktemp("memory")
    return (_write(folder / "big.tif", SIDE), _write(folder / "medium.tif", SIDE // 2),
            _write(folder / "small.tif", 256))  # fmt: skip


def test_peak_memory_follows_the_chunk_not_the_raster(rasters, tmp_path):
    method = ["--method", "geometric"]
    big, medium, small = rasters
    size, smaller = big.stat().st_size, medium.stat().st_size
    assert size >= 256 * 2**20
    # 64 x 64 blocks keep the coarse grid small: its outputs (package tables, NetCDF, VTK) are
    # built in memory, about 1 kB per coarse cell at the peak — this test is about the fine data
    common = ["--block", "64x64", *method, "--no-check", "--chunk", "16MB"]
    baseline = _peak_rss(["run", small, *common, "--out", tmp_path / "small"])
    middle = _peak_rss(["run", medium, *common, "--out", tmp_path / "medium"])
    peak = _peak_rss(["run", big, *common, "--out", tmp_path / "big"])
    print(f"rasters {smaller / 2**20:.0f} and {size / 2**20:.0f} MiB: peak RSS {middle / 2**20:.0f} "
          f"and {peak / 2**20:.0f} MiB; tiny raster {baseline / 2**20:.0f} MiB")  # fmt: skip
    assert peak - middle < (size - smaller) / 10
    assert peak - baseline < size
    with rasterio.open(tmp_path / "big" / "kx.tif") as src:
        assert src.shape == (SIDE // 64, SIDE // 64)
