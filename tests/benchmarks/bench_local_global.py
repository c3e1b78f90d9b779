"""Local–global against flow-transmissibility on a 1024 x 1024 channel map (8x8 blocks, border 2).

Target (issue 16): local–global costs at most 5x flow-transmissibility. Both run on the map in memory
and on the same map in dask chunks of 256 x 256 cells (local–global then solves its regions chunk by
chunk with a border of three blocks). Run:
    python tests/benchmarks/bench_local_global.py
"""

from __future__ import annotations

import time

import dask.array as da

from upscale import Field, coarsen
from upscale.gallery.fields import channel_field


def main() -> None:
    field = Field.from_arrays(channel_field((1024, 1024), channels=40, width=5, k_sand=100.0, k_shale=1.0,
                                            seed=618_204_557))  # fmt: skip
    small = Field.from_arrays(field.kx[:, :64, :64].copy())
    for method in ("flow-transmissibility", "local-global"):  # compile first
        coarsen(small, "8x8", method, border=2)
    chunked = Field.from_arrays(da.from_array(field.kx, chunks=(1, 256, 256)))
    for name, fine in (("in memory", field), ("in chunks of 256 x 256", chunked)):
        seconds = {}
        for method in ("flow-transmissibility", "local-global"):
            start = time.perf_counter()
            result = coarsen(fine, "8x8", method, border=2)
            seconds[method] = time.perf_counter() - start
            print(f"{name}, {method}: {seconds[method]:.2f} s", result.coupling or "")
        print(f"{name}, ratio: {seconds['local-global'] / seconds['flow-transmissibility']:.2f}")


if __name__ == "__main__":
    main()
