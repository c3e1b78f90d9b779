"""Benchmark: a raster larger than the memory allowed to the run streams through.

Run on demand (not collected by pytest)::

    python tests/benchmarks/bench_streaming.py [--gib 4] [--limit-gib 3] [--workdir DIR]

Writes a float32 GeoTIFF of about ``--gib`` GiB (window by window, so the
writer itself never holds it), then runs ``upscale run`` on it in a child
process whose address space is capped at ``--limit-gib`` GiB
(``RLIMIT_AS``: every mapping counts, so this is stricter than a cap on
resident memory), with the flow check on sub-domain windows of at most
``--check-limit`` cells (default 10⁶: a check of the whole raster, or of
windows of the default 2·10⁷ cells, would need more than the cap and is
refused before any work). It reports the child's peak resident memory and
wall time, and repeats with a raster a quarter of the size: if memory is
bounded by the chunk size, both peaks are about the same.
"""

from __future__ import annotations

import argparse
import json
import os
import resource
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np


def write_raster(path: Path, rows: int, cols: int) -> None:
    """A lognormal float32 raster written 512 rows at a time."""
    import rasterio
    from affine import Affine
    from rasterio.windows import Window

    profile = dict(driver="GTiff", width=cols, height=rows, count=1, dtype="float32",
                   crs="EPSG:32633", transform=Affine(5.0, 0, 400_000, 0, -5.0, 6_000_000),
                   nodata=-9999.0, BIGTIFF="YES")  # fmt: skip
    rng = np.random.default_rng(90_214_663)
    with rasterio.open(path, "w", **profile) as dst:
        for top in range(0, rows, 512):
            height = min(512, rows - top)
            values = rng.lognormal(4.0, 1.0, size=(height, cols)).astype(np.float32)
            dst.write(values, 1, window=Window(0, top, cols, height))


def run_capped(args: list[str], limit_bytes: int) -> tuple[int, float, float]:
    """Run a command under an address-space cap; return (status, seconds, peak RSS in GiB)."""

    def cap() -> None:
        resource.setrlimit(resource.RLIMIT_AS, (limit_bytes, limit_bytes))

    env = dict(os.environ, MALLOC_ARENA_MAX="2")
    start = time.perf_counter()
    proc = subprocess.Popen(args, preexec_fn=cap, env=env)
    _, status, usage = os.wait4(proc.pid, 0)
    seconds = time.perf_counter() - start
    return os.waitstatus_to_exitcode(status), seconds, usage.ru_maxrss / 2**20


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--gib", type=float, default=4.0, help="size of the large raster")
    parser.add_argument("--limit-gib", type=float, default=3.0, help="address-space cap of the run")
    parser.add_argument("--method", default="geometric")
    parser.add_argument("--block", default="10x10")
    parser.add_argument("--check-limit", default="1000000", help="cells per sub-domain window of the check")
    parser.add_argument("--workdir", default=None, help="where to write the rasters (needs space)")
    args = parser.parse_args()
    upscale = str(Path(sys.executable).with_name("upscale"))
    work = Path(tempfile.mkdtemp(prefix="upscale-bench-", dir=args.workdir))
    results = []
    try:
        for gib in (args.gib / 4, args.gib):
            side = int(np.sqrt(gib * 2**30 / 4)) // 10 * 10
            raster = work / f"big_{side}.tif"
            t0 = time.perf_counter()
            write_raster(raster, side, side)
            written = time.perf_counter() - t0
            out = work / f"out_{side}"
            status, seconds, peak = run_capped(
                [upscale, "-q", "run", str(raster), "--block", args.block, "--method", args.method,
                 "--check-limit", args.check_limit, "--out", str(out)],  # fmt: skip
                int(args.limit_gib * 2**30),
            )
            size = raster.stat().st_size / 2**30
            summary = json.loads((out / "summary.json").read_text()) if status == 0 else {}
            results.append((side, size, status, seconds, peak, summary.get("timings_s", {})))
            timings = " ".join(f"{k} {v:.1f}" for k, v in results[-1][5].items())
            print(f"{side} x {side} float32: {size:.2f} GiB on disk (written in {written:.0f} s); "
                  f"run under a {args.limit_gib:g} GiB address-space cap: exit {status}, "
                  f"{seconds:.1f} s, peak RSS {peak:.2f} GiB, "
                  f"{side * side / seconds / 1e6:.0f} Mcell/s; {timings}", flush=True)  # fmt: skip
            raster.unlink()
    finally:
        shutil.rmtree(work, ignore_errors=True)
    if len(results) == 2 and all(r[2] == 0 for r in results):
        print(f"peak RSS ratio large/small raster: {results[1][4] / results[0][4]:.2f} "
              f"for a {results[1][1] / results[0][1]:.1f}x larger raster")  # fmt: skip


if __name__ == "__main__":
    main()
