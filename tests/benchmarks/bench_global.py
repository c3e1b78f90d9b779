"""Benchmark: what ``--method global`` adds to a run that checks anyway, against ``--method flow``.

Run on demand (not collected by pytest)::

    python tests/benchmarks/bench_global.py [--size 1024] [--repeats 3]

The field: lognormal (geometric mean 100 mD, σ(ln k) 2, exponential
covariance, correlation length 32 cells), ``--size`` squared cells of 1 m,
written as a GeoTIFF. Each repetition runs ``upscale_file`` (the job behind
``upscale run``; read, upscale, check, write the package) with 8 x 8 blocks
and ``--method flow`` (sealed), then ``--method global``, each in a child
process of its own after a warm-up run of each (numba's cache); wall and CPU
time (user + system of the child) are recorded, and the summary's step
timings. Runs alternate so that a change of the machine's load hits both.

Target (issue 16): global adds at most 20 % to a run that checks anyway,
i.e. the median ratio global / flow ≤ 1.2.
"""

from __future__ import annotations

import argparse
import json
import resource
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

CHILD = """
import sys
from upscale.grid import BlockSpec
from upscale.jobs.run import Settings, upscale_file
settings = Settings(BlockSpec.parse("8x8"), sys.argv[2], {}, {}, {})
upscale_file(sys.argv[1], settings, sys.argv[3], overwrite=True)
"""


def _field(path: Path, size: int) -> None:
    import numpy as np
    import rasterio
    from rasterio.transform import from_origin

    from upscale.gallery.fields import lognormal_field

    k = lognormal_field((size, size), (32, 32), geometric_mean=100.0, sigma_ln=2.0, seed=918_273_645)
    with rasterio.open(path, "w", driver="GTiff", height=size, width=size, count=1, dtype="float64",
                       transform=from_origin(0, size, 1, 1)) as out:  # fmt: skip
        out.write(np.asarray(k)[None])


def _run(field: Path, method: str, out: Path) -> dict:
    before = resource.getrusage(resource.RUSAGE_CHILDREN)
    start = time.perf_counter()
    subprocess.run([sys.executable, "-c", CHILD, str(field), method, str(out)], check=True)
    wall = time.perf_counter() - start
    after = resource.getrusage(resource.RUSAGE_CHILDREN)
    cpu = (after.ru_utime - before.ru_utime) + (after.ru_stime - before.ru_stime)
    summary = json.loads((out / "summary.json").read_text())
    return {"wall": wall, "cpu": cpu, "steps": summary["timings_s"],
            "errors": {a: summary["check"][a]["rel_error"] for a in ("x", "y")}}  # fmt: skip


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--size", type=int, default=1024)
    parser.add_argument("--repeats", type=int, default=3)
    args = parser.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        field = folder / "field.tif"
        _field(field, args.size)
        for method in ("flow", "global"):
            _run(field, method, folder / method)  # warm-up: compile once, cache
        found: dict[str, list[dict]] = {"flow": [], "global": []}
        for _ in range(args.repeats):
            for method in found:
                found[method].append(_run(field, method, folder / method))
                last = found[method][-1]
                steps = ", ".join(f"{k} {v:.2f}" for k, v in last["steps"].items())
                errors = ", ".join(f"{a} {e:+.2%}" for a, e in last["errors"].items())
                print(f"{method:7s} wall {last['wall']:6.2f} s  cpu {last['cpu']:6.2f} s  ({steps}; "
                      f"check {errors})")  # fmt: skip
        for kind in ("wall", "cpu"):
            ratios = [g[kind] / f[kind] for f, g in zip(found["flow"], found["global"])]
            print(f"global / flow, {kind}: median {statistics.median(ratios):.3f} "
                  f"(each repetition: {', '.join(f'{r:.3f}' for r in ratios)})")


if __name__ == "__main__":
    main()
