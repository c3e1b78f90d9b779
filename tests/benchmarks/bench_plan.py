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
commands ``--repeats`` times (the best of each enters the ratio):

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


def _timed(args: list[str]) -> float:
    start = time.perf_counter()
    code = main(args)
    seconds = time.perf_counter() - start
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
    found: dict[str, list[float]] = {"compare": [], "plan": []}
    for _ in range(repeats):
        start = time.perf_counter()
        compare_methods(fine, BLOCKS[0], chosen)
        found["compare"].append(time.perf_counter() - start)
        start = time.perf_counter()
        plan = plan_blocks(fine, [BlockSpec.parse(b) for b in BLOCKS], chosen)
        found["plan"].append(time.perf_counter() - start)
    breakdown = {str(c.block): {e.candidate.method: e.seconds for e in c.entries} for c in plan.comparisons}
    return {name: min(times) for name, times in found.items()}, breakdown


def run(size: int, repeats: int) -> dict:
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        small = _write(folder / "small.tif", lognormal_field((64, 64), (8, 8), geometric_mean=100.0,
                                                             sigma_ln=1.0, seed=731_202_118))  # fmt: skip
        for args in _commands(small, folder, "warm").values():
            _timed(args)
        k = lognormal_field((size, size), (16, 16), geometric_mean=100.0, sigma_ln=1.0, seed=402_991_735)
        field = _write(folder / "field.tif", k)
        times: dict[str, list[float]] = {"compare": [], "plan": []}
        for i in range(repeats):
            for name, args in _commands(field, folder, str(i)).items():
                times[name].append(_timed(args))
                print(f"  {name}: {times[name][-1]:.1f} s", flush=True)
        library, breakdown = _library(field, repeats)
    best = {name: min(t) for name, t in times.items()}
    return {"size": size, "methods": METHODS, "blocks": BLOCKS, "bc": "sealed", "repeats": repeats,
            "seconds": times, "best": best, "ratio": best["plan"] / best["compare"],
            "library_best": library, "library_ratio": library["plan"] / library["compare"],
            "plan_breakdown_s": breakdown}  # fmt: skip


def main_() -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("--size", type=int, default=1024)
    parser.add_argument("--repeats", type=int, default=2)
    parser.add_argument("--json", type=Path, default=None)
    options = parser.parse_args()
    result = run(options.size, options.repeats)
    best, library = result["best"], result["library_best"]
    print(f"{options.size}^2, methods {METHODS} (sealed), blocks {','.join(BLOCKS)}")
    print(f"  end to end: compare at {BLOCKS[0]} {best['compare']:.1f} s, plan {best['plan']:.1f} s, "
          f"ratio {result['ratio']:.2f} (target <= 1.5)")
    print(f"  library (no figures, no files): compare_methods {library['compare']:.1f} s, plan_blocks "
          f"{library['plan']:.1f} s, ratio {result['library_ratio']:.2f}")
    for block, seconds in result["plan_breakdown_s"].items():
        print(f"  plan at {block}: " + ", ".join(f"{m} {s:.2f} s" for m, s in seconds.items()))
    if options.json:
        options.json.write_text(json.dumps(result, indent=2) + "\n")


if __name__ == "__main__":
    main_()
