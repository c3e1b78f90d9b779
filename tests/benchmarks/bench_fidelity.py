"""Benchmark: how close the best method comes to the fine flow on hard fields (issue 16's targets).

Run on demand (not collected by pytest), from the repository's top folder::

    python tests/benchmarks/bench_fidelity.py [--size 128] [--seeds 3] [--blocks 8x8,16x16]
                                              [--border 2] [--json results.json]

The suite is built here, from `upscale.gallery` (invented fields, no real
data), ``--size`` cells square, 10 m cells:

* ``lognormal σ=1``, ``σ=2``, ``σ=2.5``: correlated lognormal
  (exponential covariance, correlation length 10 cells both ways,
  geometric mean 100 mD);
* ``channels 100:1``, ``channels 1000:1``: sinuous sand channels along x
  (`channel_field`, 5 channels 6 cells wide, shale 1 mD, ln k spread 0.3
  within each facies);
* ``anisotropic``: correlated lognormal σ(ln k) = 1.5 with correlation
  lengths 24 cells along x and 3 across;
* ``anisotropic, rotated 30°``: the same field generated on a larger grid,
  rotated by 30° (`scipy.ndimage.rotate`, linear interpolation of ln k)
  and cut to size, so its layering runs across the grid axes.

Each field (``--seeds`` realizations) is compared at each block size with
every method of `upscale.METHODS` (`upscale.analysis.compare.compare_methods`,
one set of fine solves per field), the flow-based ones also with a border
of ``--border`` cells. A method's error on a field is its largest
``|rel_error|`` over every flow the check solves: the axis pressure drops
and whatever held-out flows the check holds (`Entry.worst_error`, the
ranking's own measure). Reported per family and block: the median and the
worst over the seeds of the best method's error, which method was best,
and every method's median, as Markdown tables.
"""

from __future__ import annotations

import argparse
import json
import statistics
import time
from collections import Counter, defaultdict

import numpy as np
from scipy import ndimage

from upscale import Field
from upscale.analysis.compare import candidates, compare_methods
from upscale.gallery.fields import channel_field, lognormal_field


def _rotated(size: int, seed: int, degrees: float) -> np.ndarray:
    big = int(np.ceil(size * 1.5))
    ln_k = np.log(lognormal_field((big, big), (3.0, 24.0), geometric_mean=100.0, sigma_ln=1.5, seed=seed))
    turned = ndimage.rotate(ln_k, degrees, reshape=False, order=1, mode="nearest")
    start = (big - size) // 2
    return np.exp(turned[start : start + size, start : start + size])


def suite(size: int, seed: int) -> dict[str, np.ndarray]:
    """The fields of one seed, each of shape (size, size), mD."""

    def lognormal(sigma: float, lengths=(10.0, 10.0)) -> np.ndarray:
        return lognormal_field((size, size), lengths, geometric_mean=100.0, sigma_ln=sigma, seed=seed)

    def channels(contrast: float) -> np.ndarray:
        return channel_field((size, size), channels=5, width=6.0, k_sand=contrast, k_shale=1.0, seed=seed)[0]

    return {
        "lognormal σ=1": lognormal(1.0),
        "lognormal σ=2": lognormal(2.0),
        "lognormal σ=2.5": lognormal(2.5),
        "channels 100:1": channels(100.0),
        "channels 1000:1": channels(1000.0),
        "anisotropic": lognormal(1.5, (3.0, 24.0)),
        "anisotropic, rotated 30°": _rotated(size, seed, 30.0),
    }


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--size", type=int, default=128)
    parser.add_argument("--seeds", type=int, default=3)
    parser.add_argument("--blocks", default="8x8,16x16")
    parser.add_argument("--border", type=int, default=2)
    parser.add_argument("--json", help="write every error here")
    args = parser.parse_args()
    chosen = candidates()
    chosen += [c for c in candidates([c.method for c in chosen if "border" in c.options], border=args.border)
               if c.label not in {d.label for d in chosen}]  # fmt: skip
    errors: dict[tuple[str, str], dict[str, list[float]]] = defaultdict(lambda: defaultdict(list))
    best: dict[tuple[str, str], list[tuple[float, str]]] = defaultdict(list)
    start = time.perf_counter()
    for seed in range(args.seeds):
        for family, k in suite(args.size, 20261204 + seed).items():
            field = Field.from_arrays(k, cell_size=(10.0, 10.0))
            for block in args.blocks.split(","):
                found = compare_methods(field, block, chosen)
                for entry in found.entries:
                    errors[family, block][entry.candidate.label].append(entry.worst_error)
                top = found.best
                outcome = (top.worst_error, top.candidate.label) if top else (np.inf, "none")
                best[family, block].append(outcome)
                print(f"seed {seed} {family} {block}: best {best[family, block][-1][1]} "
                      f"{100 * best[family, block][-1][0]:.1f} %", flush=True)  # fmt: skip
    print(f"\n{time.perf_counter() - start:.0f} s; error = largest |rel_error| over every checked flow\n")
    print("| field | block | best method's error: median | worst | best method (times) |")
    print("|---|---|---|---|---|")
    for (family, block), outcomes in best.items():
        values = [e for e, _ in outcomes]
        names = Counter(name for _, name in outcomes).most_common()
        print(f"| {family} | {block} | {100 * statistics.median(values):.1f} % | {100 * max(values):.1f} % | "
              f"{', '.join(f'{n} ({c})' for n, c in names)} |")  # fmt: skip
    overall = [e for outcomes in best.values() for e, _ in outcomes]
    print(f"| all | all | {100 * statistics.median(overall):.1f} % | {100 * max(overall):.1f} % | |")
    labels = list(next(iter(errors.values())))
    print("\nEvery method's median error over the seeds (%):\n")
    print("| field | block | " + " | ".join(labels) + " |\n|---|---|" + "---|" * len(labels))
    for (family, block), per in errors.items():
        cells = [f"{100 * statistics.median(per[label]):.1f}" for label in labels]
        print(f"| {family} | {block} | " + " | ".join(cells) + " |")
    if args.json:
        with open(args.json, "w") as out:
            json.dump({f"{f} {b}": dict(per) for (f, b), per in errors.items()}, out, indent=1)


if __name__ == "__main__":
    main()
