"""Benchmark: automatic against uniform coarse layers on 3D models with thin barriers (issue 19).

Run on demand (not collected by pytest)::

    python tests/benchmarks/bench_layers.py [--quick] [--json results.json]

Fields (3D, 96 x 96 cells of 20 m; the last two families project-built here):

* ``demo 3D``: ``demo-fields/marrowfen_3d.tif`` (``--dz 2 --kv-kh 0.1``), 16
  layers of 2 m, a 4 m mudstone (layers 9-10) crossed in two erosional windows
  of 6 % of its area (demo scenario, invented);
* ``layer cake``: ``demo-fields/marrowfen_layered.tif`` (``--dz 1``; 64 x 64
  cells of 25 m), 20 layers, a continuous 0.01 mD shale every fifth layer;
* ``1 shale``, ``2 shales``, ``3 shales``: a lognormal model like the demo's
  (geometric mean 60 mD, sigma(ln k) 1.2, 16 layers of 2 m, kz = 0.1 kx, its
  own seed) cut by 1-3 shales of 1-2 fine layers, 0.01 mD (sigma(ln k) 0.3),
  each with three square holes of 6 x 6 cells where the sand crosses: holes
  smaller than a block, the hardest case for any block value;
* the same three with the holes left out (``continuous``).

For every field, a few coarse layer counts N (from 2 up to the count that
keeps every barrier apart and one more), blocks of 8 x 8 cells, and the
methods geometric, power (omega = 1/3), flow (sealed sides), flow-transmissibility
(sealed, border 2) and global: the z check error (and the x one, for
information) of the uniform grouping of N layers (sizes as equal as the
count allows, the larger ones on top) against ``auto:N``, with one fine solve
per field and axis shared by all.

Target (issue 19): with the same N, the automatic grouping's z check error is
at most half the uniform one's, in every case. Also timed: the grouping of a
500-layer model (profile and dynamic programme), target under a second.
"""

from __future__ import annotations

import argparse
import json
import os
import time
from pathlib import Path

import numpy as np

from upscale import BlockSpec, Field, coarsen, read_field
from upscale.analysis.layers import choose_groups, layer_profile, resolve_layers
from upscale.check.axis import coarse_check, fine_solves
from upscale.gallery.fields import lognormal_field
from upscale.grid.layers import LayerRequest

DEMO = Path(__file__).resolve().parents[2] / "demo-fields"
METHODS = {
    "geometric": {},
    "power": {"exponent": 1 / 3},
    "flow": {},
    "flow-transmissibility": {"border": 2},
    "global": {},
}
SHALES = {"1 shale": [(7, 1)], "2 shales": [(4, 1), (9, 2)], "3 shales": [(3, 1), (8, 2), (12, 1)]}


def shaly_model(shales: list[tuple[int, int]], holes: bool, seed: int = 7) -> Field:
    """The project-built model: lognormal sands cut by shales ``(first layer, thickness)``."""
    n = 96
    k = lognormal_field((16, n, n), (2.0, 6.0, 10.0), geometric_mean=60.0, sigma_ln=1.2, seed=seed)
    rng = np.random.default_rng(seed)
    for top, thickness in shales:
        shale = 0.01 * np.exp(0.3 * rng.standard_normal((n, n)))
        if holes:
            for _ in range(3):
                r, c = rng.integers(0, n - 6, 2)
                shale[r : r + 6, c : c + 6] = np.nan
        for layer in range(top, top + thickness):
            k[layer] = np.where(np.isnan(shale), k[layer], shale)
    return Field.from_arrays(k, kz=0.1 * k, dz=2.0, cell_size=(20.0, 20.0), three_d=True)


def fields(quick: bool) -> dict[str, Field]:
    found = {"demo 3D": read_field(DEMO / "marrowfen_3d.tif", dz=2.0, kv_kh=0.1, checksum=False),
             "layer cake": read_field(DEMO / "marrowfen_layered.tif", dz=1.0, checksum=False)}  # fmt: skip
    for name, shales in SHALES.items():
        found[f"{name}, holes"] = shaly_model(shales, holes=True)
        if not quick:
            found[f"{name}, continuous"] = shaly_model(shales, holes=False)
    return found


def uniform_sizes(layers: int, count: int) -> str:
    """Group sizes as equal as `count` allows, the larger ones on top: ``16, 5 -> 4,3,3,3,3``."""
    base, extra = divmod(layers, count)
    return ",".join(str(base + (g < extra)) for g in range(count))


def counts(field: Field, quick: bool) -> list[int]:
    """N from 2 up to one more than the count that keeps every barrier apart."""
    profile = layer_profile(field)
    apart = choose_groups(profile, LayerRequest(count=2))[0].apart
    top = min(apart + 1, field.shape[0] - 1)
    return [2, apart, top] if quick else sorted(set(range(2, top + 1)))


def run_case(field: Field, flows: dict, sizes: str, method: str) -> dict[str, float]:
    result = coarsen(field, f"8x8x{sizes}", method, **METHODS[method])
    check = coarse_check(flows, result.transmissibilities())
    return {axis: 100.0 * check[axis].rel_error for axis in ("x", "z")}


def grouping_time() -> dict[str, float]:
    """Seconds to group a 500-layer model: its profile (500 x 64 x 64 cells) and the programme."""
    rng = np.random.default_rng(5)
    k = np.exp(rng.normal(np.log(100.0), 1.0, (500, 64, 64)))
    k[rng.choice(500, 25, replace=False)] = 0.01
    field = Field.from_arrays(k, dz=0.5, three_d=True)
    start = time.perf_counter()
    profile = layer_profile(field)
    profiled = time.perf_counter()
    timings = {"profile, 2.0 M cells": profiled - start}
    for request in ("auto:50", "auto:90%"):
        start = time.perf_counter()
        choose_groups(profile, LayerRequest.parse(request))
        timings[f"programme {request}"] = time.perf_counter() - start
    spec = BlockSpec.parse("8x8xauto:50")
    start = time.perf_counter()
    resolve_layers(spec, field)
    timings["resolve_layers auto:50 (profile + programme)"] = time.perf_counter() - start
    return timings


def print_summary(rows: list[dict]) -> None:
    """Per method: cases meeting the target, among them those whose grouping merged no barrier, and x."""
    print("\n| method | cases | auto z at most half of uniform | of the cases merging no barrier "
          "| median auto / uniform (z) | auto closer in x |")
    print("|---|---|---|---|---|---|")
    for method in METHODS:
        found = [r for r in rows if r["method"] == method]
        kept = [r for r in found if r["merged"] == 0]
        closer = sum(abs(r["auto_x"]) < abs(r["uniform_x"]) for r in found)
        median = np.median([r["ratio"] for r in found])
        print(f"| {method} | {len(found)} | {sum(r['met'] for r in found)} "
              f"| {sum(r['met'] for r in kept)} of {len(kept)} | {median:.2f} | {closer} of {len(found)} |")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="fewer fields and counts")
    parser.add_argument("--json", type=Path, help="write the results here")
    args = parser.parse_args()
    print(f"load average at start: {os.getloadavg()[0]:.2f}")
    rows = []
    print("| field | N | uniform | auto | method | uniform z | auto z | auto / uniform | met | uniform x "
          "| auto x |")
    print("|---|---|---|---|---|---|---|---|---|---|---|")
    for name, field in fields(args.quick).items():
        layers = field.shape[0]
        flows = fine_solves(field, ("x", "z"))
        for count in counts(field, args.quick):
            _, choice = resolve_layers(BlockSpec.parse(f"8x8xauto:{count}"), field)
            auto = ",".join(map(str, choice.grouping.sizes))
            uniform = uniform_sizes(layers, count)
            for method in METHODS:
                u, a = run_case(field, flows, uniform, method), run_case(field, flows, auto, method)
                ratio = abs(a["z"]) / abs(u["z"]) if u["z"] else float("inf")
                row = {"field": name, "count": count, "uniform": uniform, "auto": auto, "method": method,
                       "uniform_z": u["z"], "auto_z": a["z"], "ratio": ratio, "met": ratio <= 0.5,
                       "uniform_x": u["x"], "auto_x": a["x"], "merged": choice.grouping.merged}  # fmt: skip
                rows.append(row)
                print(f"| {name} | {count} | {uniform} | {auto} | {method} | {u['z']:+.1f} % "
                      f"| {a['z']:+.1f} % | {ratio:.2f} | {'yes' if row['met'] else 'no'} | {u['x']:+.1f} % "
                      f"| {a['x']:+.1f} % |", flush=True)  # fmt: skip
    print_summary(rows)
    timings = grouping_time()
    for what, seconds in timings.items():
        print(f"500 layers, {what}: {seconds:.3f} s")
    print(f"load average at end: {os.getloadavg()[0]:.2f}")
    if args.json:
        args.json.write_text(json.dumps({"rows": rows, "grouping_s": timings}, indent=2))


if __name__ == "__main__":
    main()
