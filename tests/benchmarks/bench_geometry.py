"""Benchmark: what a model's geometry costs (issue 20, item 2).

Run on demand (not collected by pytest)::

    python tests/benchmarks/bench_geometry.py [--quick] [--json results.json]

The same lognormal model (geometric mean 60 mD, sigma(ln k) 1.2, kz = 0.1 kx,
cells of 20 m, layers of 2 m; project-built) is upscaled three ways, in one
process and one run:

* ``flat``: layers of one thickness each (``dz``);
* ``uniform geometry``: a sloping top and cells whose thickness is the same
  2 m, so the result must equal the flat one (checked here, to 1e-12);
* ``varying geometry``: the thickness varies from 1 to 3 m across the model
  and one layer pinches out over a quarter of it.

Timed: `upscale.coarsen` with geometric (an average), flow (local solves) and
global (local solves and the fine model's global flows), and the fine solves
of the check along x and z. Reported: each time, and the ratio of each
geometry's time to the flat one. There is no target beyond "close to the
flat run": the geometry adds elementwise work (the reference field, the
thickness weights and the ratios of the blocks), no solve.
"""

from __future__ import annotations

import argparse
import json
import os
import time

import numpy as np

from upscale import Field, Geometry, coarsen
from upscale.check.axis import fine_solves
from upscale.gallery.fields import lognormal_field

METHODS = {"geometric": {}, "flow": {}, "global": {}}


def _models(shape: tuple[int, int, int]) -> dict[str, Field]:
    layers, rows, columns = shape
    k = lognormal_field(shape, (2.0, 12.0, 12.0), geometric_mean=60.0, sigma_ln=1.2, seed=20)
    x = np.arange(columns)[None, :] * np.ones((rows, 1))
    top = 500.0 - 0.02 * 20.0 * x
    uniform = Geometry(top=top, thickness=np.full(shape, 2.0))
    varying = np.broadcast_to(1.0 + 2.0 * x / columns, shape).copy()
    varying[layers // 2, :, : columns // 4] = 0.0
    cell = (20.0, 20.0)
    return {
        "flat": Field.from_arrays(k, kz=0.1 * k, cell_size=cell, dz=2.0),
        "uniform geometry": Field.from_arrays(k, kz=0.1 * k, cell_size=cell, geometry=uniform),
        "varying geometry": Field.from_arrays(k, kz=0.1 * k, cell_size=cell,
                                              geometry=Geometry(top=top, thickness=varying)),
    }  # fmt: skip


def _timed(run, *args, **kwargs) -> tuple[float, object]:
    start = time.perf_counter()
    found = run(*args, **kwargs)
    return time.perf_counter() - start, found


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("--quick", action="store_true", help="a smaller model")
    parser.add_argument("--json", help="write the results to this file")
    args = parser.parse_args()
    shape = (8, 64, 64) if args.quick else (16, 192, 192)
    models = _models(shape)
    print(f"model {shape[2]} x {shape[1]} x {shape[0]} cells, blocks 8x8x4, {os.cpu_count()} CPUs")
    results: dict[str, dict[str, float]] = {}
    flat_values = {}
    for name, field in models.items():
        times = {}
        for method, options in METHODS.items():
            coarsen(field, "8x8x4", method, **options)  # compile and warm
            seconds, result = _timed(coarsen, field, "8x8x4", method, **options)
            times[method] = seconds
            if name == "flat":
                flat_values[method] = result.coarse.kx
            elif name == "uniform geometry":
                np.testing.assert_allclose(result.coarse.kx, flat_values[method], rtol=1e-12)
        seconds, _ = _timed(fine_solves, field, ("x", "z"), solver="auto")
        times["fine solves x, z"] = seconds
        results[name] = times
    print(f"{'':22}" + "".join(f"{m:>18}" for m in results["flat"]))
    for name, times in results.items():
        cells = "".join(f"{t:>10.3f} s {t / results['flat'][m]:>4.2f}x" for m, t in times.items())
        print(f"{name:22}{cells}")
    if args.json:
        with open(args.json, "w") as out:
            json.dump({"shape": shape, "seconds": results}, out, indent=2)


if __name__ == "__main__":
    main()
