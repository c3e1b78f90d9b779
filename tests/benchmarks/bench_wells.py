"""Benchmark: the coarse wells' total-rate error, Peaceman's index against near-well upscaling.

Issue 17, items 4a and 4b; measured, not tuned.

Run on demand (not collected by pytest), from the repository's top folder::

    python tests/benchmarks/bench_wells.py [--size 128] [--seeds 3] [--block 8x8]
                                           [--methods flow,flow-transmissibility,local-global]

Fields from `upscale.gallery` (invented, no real data), ``--size`` cells
square, 10 m cells, 1 m thick: ``lognormal σ=1`` and ``lognormal σ=2``
(exponential covariance, correlation length 10 cells, geometric mean
100 mD) and ``channels 100:1`` (`channel_field`: 5 sinuous channels along x,
6 cells wide, sand 100 mD, shale 1 mD), as in ``bench_fidelity.py``. Three
well patterns at fixed fractions of the domain (wells in fine-cell centres,
closed outer faces, radius 0.1 m, no skin):

* ``pair``: an injector (p = 1) and a producer (p = 0) in opposite corners
  (at 10 % and 90 % of each side);
* ``line of 3``: an injector in the middle of the west side, producers at
  the north-east and south-east (pressures 1, 0, 0);
* ``five-spot``: an injector in the centre, four producers at 15 % / 85 %.

Every pattern drives one fine solve (`upscale.check.wells.fine_wells`), and
per method one coarse solve with Peaceman's coarse index and two with
near-well upscaling (`upscale.methods.near_well`: the Peaceman solve, then
the one with the upscaled factors and faces); reported per field, pattern
and method, the median |total-rate error| ``Σ|q| coarse / Σ|q| fine - 1``
over the seeds and the worst error of each, and in how many seeds near-well
upscaling has the smaller |error|, as a Markdown table.
"""

from __future__ import annotations

import argparse
import dataclasses
import statistics
import time
from collections import defaultdict

import numpy as np

from upscale import Field, coarsen
from upscale.check.axis import fine_solves
from upscale.check.wells import coarse_wells, fine_wells
from upscale.flow.wells import Well
from upscale.gallery.fields import channel_field, lognormal_field
from upscale.methods.near_well import CONNECTIONS
from upscale.methods.registry import METHODS

DX = 10.0
FIELDS = ("lognormal σ=1", "lognormal σ=2", "channels 100:1")


def fields(size: int, seed: int) -> dict[str, np.ndarray]:
    """The two fields of one seed, (size, size), mD."""
    return {
        "lognormal σ=1": lognormal_field(
            (size, size), (10.0, 10.0), geometric_mean=100.0, sigma_ln=1.0, seed=seed
        ),
        "lognormal σ=2": lognormal_field(
            (size, size), (10.0, 10.0), geometric_mean=100.0, sigma_ln=2.0, seed=seed
        ),
        "channels 100:1": channel_field(
            (size, size), channels=5, width=6.0, k_sand=100.0, k_shale=1.0, seed=seed
        )[0],
    }  # fmt: skip


def patterns(size: int) -> dict[str, list[Well]]:
    """Well patterns at fixed fractions of the side, each well in a fine-cell centre."""

    def at(name: str, fx: float, fy: float, pressure: float) -> Well:
        x, y = ((np.floor(f * size) + 0.5) * DX for f in (fx, fy))
        return Well(name, float(x), -float(y), None, "pressure", pressure, 0.1)

    return {
        "pair": [at("I", 0.1, 0.1, 1.0), at("P", 0.9, 0.9, 0.0)],
        "line of 3": [at("I", 0.1, 0.5, 1.0), at("P1", 0.9, 0.1, 0.0), at("P2", 0.9, 0.9, 0.0)],
        "five-spot": [at("I", 0.5, 0.5, 1.0), *(at(f"P{i}", fx, fy, 0.0) for i, (fx, fy) in
                      enumerate(((0.15, 0.15), (0.85, 0.15), (0.15, 0.85), (0.85, 0.85)), 1))],
    }  # fmt: skip


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--size", type=int, default=128)
    parser.add_argument("--seeds", type=int, default=3)
    parser.add_argument("--block", default="8x8")
    parser.add_argument("--methods", default="flow,flow-transmissibility,local-global")
    args = parser.parse_args()
    methods = args.methods.split(",")
    errors: dict[tuple[str, str, str, str], list[float]] = defaultdict(list)
    started = time.perf_counter()
    for s in range(args.seeds):
        seed = 7_302_118_645 + 1_009 * s
        for name, k in fields(args.size, seed).items():
            field = Field.from_arrays(k, cell_size=(DX, DX))
            flows = fine_solves(field, field.axes)
            shared = {pattern: fine_wells(field, wells, fine_trans=flows["x"].trans)
                      for pattern, wells in patterns(args.size).items()}  # fmt: skip
            for method in methods:
                given = {"flows": flows} if METHODS[method].global_flows else {}
                result = coarsen(field, args.block, method, **given)
                for pattern, fine in shared.items():
                    for connection in CONNECTIONS:
                        check = coarse_wells(dataclasses.replace(fine, connection=connection), result.coarse,
                                             coarse_trans=result.transmissibilities())  # fmt: skip
                        errors[(name, pattern, method, connection)].append(check.rel_error)
    print(
        f"{args.size}² cells, {args.block} blocks, {args.seeds} seeds, "
        f"{time.perf_counter() - started:.0f} s\n"
    )
    print("| field | wells | method | Peaceman | near-well | near-well better |")
    print("|---|---|---|---|---|---|")
    better = total = 0
    for name in FIELDS:
        for pattern in patterns(args.size):
            for method in methods:
                found = {c: errors[(name, pattern, method, c)] for c in CONNECTIONS}
                cells = []
                for c in ("peaceman", "near-well"):
                    worst = max(found[c], key=abs)
                    median = statistics.median(abs(e) for e in found[c])
                    cells.append(f"{100 * median:.1f} % (worst {100 * worst:+.1f} %)")
                won = sum(abs(n) < abs(p) for n, p in zip(found["near-well"], found["peaceman"]))
                better, total = better + won, total + len(found["peaceman"])
                print(f"| {name} | {pattern} | {method} | " + " | ".join(cells)
                      + f" | {won} of {len(found['peaceman'])} |")
    print(f"\nnear-well upscaling has the smaller |total-rate error| in {better} of {total} cases")


if __name__ == "__main__":
    main()
