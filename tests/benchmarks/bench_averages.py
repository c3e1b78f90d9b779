"""Benchmark: throughput of every block average against a plain NumPy sum.

Run on demand (not collected by pytest)::

    python tests/benchmarks/bench_averages.py [--size 8192] [--block 8]

Every timing is taken in the same run on the same float32 array, and each is
reported as a ratio to the throughput of ``numpy.sum`` over that array (the
reference: one read of the data, no output). Two figures per method:

* ``kernel``: the compiled per-chunk kernel on the whole array, one thread;
* ``tool``: the method through `upscale.parallel.apply_blocks` on a dask
  array of 64 MiB chunks, computed with dask's threaded scheduler (all cores),
  which is the path `upscale run` takes after reading.

Target (issue 2): every average at >= 0.25 of the reference throughput.
"""

from __future__ import annotations

import argparse
import os
import time

import dask
import dask.array as da
import numpy as np

from upscale.field import Field
from upscale.methods.coarsen import coarsen
from upscale.methods.registry import METHODS, EachAxis
from upscale.parallel import apply_blocks


def best_of(func, repeat: int = 5) -> float:
    """Shortest wall time of `repeat` calls, in seconds."""
    best = np.inf
    for _ in range(repeat):
        start = time.perf_counter()
        func()
        best = min(best, time.perf_counter() - start)
    return best


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--size", type=int, default=8192)
    parser.add_argument("--block", type=int, default=8)
    args = parser.parse_args()
    n, b = args.size, args.block
    rng = np.random.default_rng(61_530_977)
    k = rng.lognormal(mean=4.0, sigma=1.0, size=(1, n, n)).astype(np.float32)
    dz = np.ones(1)
    block = (1, b, b)
    lazy = da.from_array(k, chunks=(1, max(b, (2**23 // n) // b * b), n))  # 64 MiB of float64

    reference = best_of(lambda: k.sum())
    print(f"array {n} x {n} float32 ({k.nbytes / 2**20:.0f} MiB), blocks {b} x {b}, "
          f"{os.cpu_count()} cores, dask threads")
    print(f"reference numpy.sum: {reference * 1e3:.1f} ms ({k.size / reference / 1e9:.2f} Gcell/s)")
    print(f"{'method':<12}{'kernel 1 thread':>18}{'tool (dask)':>14}")
    for name, method in METHODS.items():
        if not isinstance(method.kernel, EachAxis):  # the flow-based methods: bench_local.py
            continue
        options = {"exponent": 0.5} if name == "power" else {}
        def kernel(method=method, options=options):
            return method.kernel.rule(k, dz, block, 2, **options)

        def tool(method=method, options=options):
            return apply_blocks(method.kernel.rule, lazy, dz, block, 2, **options).compute()

        kernel()  # compile outside the timing
        single = best_of(kernel, 3)
        with dask.config.set(scheduler="threads"):
            tool_time = best_of(tool, 3)
        print(f"{name:<12}{reference / single:>18.2f}{reference / tool_time:>14.2f}")

    field = Field.from_arrays(lazy[0], cell_size=(10.0, 10.0))
    with dask.config.set(scheduler="threads"):
        whole = best_of(lambda: coarsen(field, f"{b}x{b}", "arithmetic"), 3)
    print(f"whole coarsen(arithmetic) incl. value scan and activity count: {reference / whole:.2f}")


if __name__ == "__main__":
    main()
