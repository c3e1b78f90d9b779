"""Benchmark: ``upscale plan`` at four block sizes against one ``upscale compare`` at the finest.

Run on demand (not collected by pytest)::

    python tests/benchmarks/bench_plan.py [--size 1024] [--repeats 2] [--json results.json]

Field: lognormal (geometric mean 100 mD, sigma_ln 1, exponential covariance,
correlation length 16 cells), ``--size`` x ``--size`` cells of 10 m, written
as a GeoTIFF and read back by each command (real raster input).

Methods: geometric, power (ω = 1/3), flow and flow-transmissibility, both
with sealed sides (``--bc sealed``, no border) — two block rules and the
two flow-based methods, whose local solves grow with the block.

Measured, after a warm-up run of both commands on a small field (numba
compilation and the first imports are left out), alternating the two
commands ``--repeats`` times (the best of each enters the ratio), in
wall-clock and in CPU seconds of the process (`time.process_time`, every
thread: steadier than wall-clock on a machine shared with other jobs):

(c) ``upscale -q compare FIELD --block 4x4`` (the finest block);
(p) ``upscale -q plan FIELD --blocks 4x4,8x8,16x16,32x32``;

each end to end in this process (read, upscale, check, figures, page,
staged writes), and the same work without figures and files through the
library: `compare_methods` at 4x4 against `plan_blocks` at the four blocks,
with the plan's time per block and method (upscaling and coarse solves).

Target (issue 16): p / c <= 1.5 — the planner shares the fine solves, so it
should cost little more than one comparison.
"""

from __future__ import annotations

import argparse
import json
import tempfile
import time
from pathlib import Path

import numpy as np
import rasterio
from affine import Affine

from upscale import read_field
from upscale.analysis.compare import candidates, compare_methods
from upscale.analysis.plan import plan_blocks
from upscale.cli.main import main
from upscale.gallery.fields import lognormal_field
from upscale.grid import BlockSpec

METHODS = "geometric,power,flow,flow-transmissibility"
BLOCKS = ["4x4", "8x8", "16x16", "32x32"]


def _write(path: Path, k: np.ndarray) -> Path:
    profile = {"driver": "GTiff", "width": k.shape[1], "height": k.shape[0], "count": 1, "dtype": "float64",
               "crs": "EPSG:32633", "transform": Affine(10.0, 0.0, 412_350.0, 0.0, -10.0, 5_731_800.0)}
    with rasterio.open(path, "w", **profile) as dst:
        dst.write(k[None])
    return path


def _timed(args: list[str]) -> tuple[float, float]:
    """Wall-clock and CPU seconds (`time.process_time`: every thread of this process) of one command."""
    start, cpu = time.perf_counter(), time.process_time()
    code = main(args)
    seconds = (time.perf_counter() - start, time.process_time() - cpu)
    assert code == 0, args
    return seconds


def _commands(field: Path, folder: Path, tag: str) -> dict[str, list[str]]:
    common = ["--methods", METHODS, "--bc", "sealed"]
    return {"compare": ["-q", "compare", str(field), "--block", BLOCKS[0], *common,
                        "--out", str(folder / f"c{tag}")],
            "plan": ["-q", "plan", str(field), "--blocks", ",".join(BLOCKS), *common,
                     "--out", str(folder / f"p{tag}")]}  # fmt: skip


def _library(field: Path, repeats: int) -> tuple[dict[str, float], dict[str, dict[str, float]]]:
    """Best times of `compare_methods` at the finest block and `plan_blocks`, and the plan's breakdown.

    The breakdown (of the last plan) gives the shared fine solves and, per
    block, each method's time to upscale and solve its coarse checks (s).
    """
    fine = read_field(field)
    chosen = candidates(METHODS.split(","), bc="sealed")
    found: dict[str, list[tuple[float, float]]] = {"compare": [], "plan": []}
    for _ in range(repeats):
        start, cpu = time.perf_counter(), time.process_time()
        compare_methods(fine, BLOCKS[0], chosen)
        found["compare"].append((time.perf_counter() - start, time.process_time() - cpu))
        start, cpu = time.perf_counter(), time.process_time()
        plan = plan_blocks(fine, [BlockSpec.parse(b) for b in BLOCKS], chosen)
        found["plan"].append((time.perf_counter() - start, time.process_time() - cpu))
    breakdown = {str(c.block): {e.candidate.method: e.seconds for e in c.entries} for c in plan.comparisons}
    return _best(found), breakdown


def _best(times: dict[str, list[tuple[float, float]]]) -> dict[str, dict[str, float]]:
    """Per command, the least wall-clock and the least CPU seconds over the repeats."""
    return {name: {"wall": min(w for w, _ in t), "cpu": min(c for _, c in t)} for name, t in times.items()}


def run(size: int, repeats: int) -> dict:
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        small = _write(folder / "small.tif", lognormal_field((64, 64), (8, 8), geometric_mean=100.0,
                                                             sigma_ln=1.0, seed=731_202_118))  # fmt: skip
        for args in _commands(small, folder, "warm").values():
            _timed(args)
        k = lognormal_field((size, size), (16, 16), geometric_mean=100.0, sigma_ln=1.0, seed=402_991_735)
        field = _write(folder / "field.tif", k)
        times: dict[str, list[tuple[float, float]]] = {"compare": [], "plan": []}
        for i in range(repeats):
            for name, args in _commands(field, folder, str(i)).items():
                times[name].append(_timed(args))
                print(f"  {name}: {times[name][-1][0]:.1f} s ({times[name][-1][1]:.1f} s CPU)", flush=True)
        library, breakdown = _library(field, repeats)
    best = _best(times)
    return {"size": size, "methods": METHODS, "blocks": BLOCKS, "bc": "sealed", "repeats": repeats,
            "seconds": times, "best": best, "library_best": library, "plan_breakdown_s": breakdown,
            "ratio": {k: best["plan"][k] / best["compare"][k] for k in ("wall", "cpu")},
            "library_ratio": {k: library["plan"][k] / library["compare"][k]
                              for k in ("wall", "cpu")}}  # fmt: skip


def main_() -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("--size", type=int, default=1024)
    parser.add_argument("--repeats", type=int, default=2)
    parser.add_argument("--json", type=Path, default=None)
    options = parser.parse_args()
    result = run(options.size, options.repeats)
    best, library = result["best"], result["library_best"]
    print(f"{options.size}^2, methods {METHODS} (sealed), blocks {','.join(BLOCKS)}")
    for what, found, ratio in (("end to end", best, result["ratio"]),
                               ("library (no figures, no files)", library, result["library_ratio"])):
        print(f"  {what}: compare at {BLOCKS[0]} {found['compare']['wall']:.1f} s "
              f"({found['compare']['cpu']:.1f} s CPU), plan {found['plan']['wall']:.1f} s "
              f"({found['plan']['cpu']:.1f} s CPU), ratio {ratio['wall']:.2f} ({ratio['cpu']:.2f} by CPU "
              "time; target <= 1.5)")
    for block, seconds in result["plan_breakdown_s"].items():
        print(f"  plan at {block}: " + ", ".join(f"{m} {s:.2f} s" for m, s in seconds.items()))
    if options.json:
        options.json.write_text(json.dumps(result, indent=2) + "\n")


if __name__ == "__main__":
    main_()
