"""Benchmark: what a user waits for, as whole processes — start-up, a small checked run, a large flow run.

Run on demand (not collected by pytest), from the repository's top folder,
with the ``upscale`` script of the environment this Python belongs to::

    python tests/benchmarks/bench_startup.py [--repeats 3] [--size 2048]

Wall seconds of whole processes (interpreter start, imports, work, writing,
exit), the median of ``--repeats`` runs after one warm-up run that fills
numba's cache (a warm installation):

* ``upscale --help``                                     (target <= 0.3 s)
* ``upscale run`` of the 256² lognormal demo map, 8x8 blocks, geometric,
  with the flow check                                    (target <= 1.0 s)
* ``upscale run`` of a ``--size``² lognormal GeoTIFF (every cell active,
  10 m cells), ``--method flow --bc sealed``, 16x16 blocks, ``--no-check``,
  against ``loop_spsolve.py``: a plain per-block loop with scipy's spsolve
  run as its own process, reading the GeoTIFF with rasterio and writing a
  GeoTIFF of kx and ky. Both sides pay their start-up, reading and writing.
  Runs alternate (tool, loop, tool, loop, ...) so that a change of the
  machine's load touches both; the ratio of the medians is reported
  (target >= 8). Their kx and ky must agree to 1e-10 relative (asserted).

The load average is printed with the results: the machine is shared.
"""

from __future__ import annotations

import argparse
import os
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import rasterio

HERE = Path(__file__).resolve().parent
DEMO = HERE.parents[1] / "demo-fields"
UPSCALE = str(Path(sys.executable).with_name("upscale"))
SMALL = ["run", str(DEMO / "marrowfen_lognormal.tif"), "--block", "8x8", "--method", "geometric", "-q"]
FLOW = ["--block", "16x16", "--method", "flow", "--bc", "sealed", "--no-check", "-q"]


def wall(command: list[str]) -> float:
    """Seconds a whole process takes, from its start to its exit."""
    start = time.perf_counter()
    subprocess.run(command, check=True, stdout=subprocess.DEVNULL)
    return time.perf_counter() - start


def write_field(path: Path, size: int) -> None:
    """A lognormal field (geometric mean 100 mD, sigma_ln 1, correlation 8 cells) as a GeoTIFF."""
    from rasterio.transform import from_origin

    from upscale.gallery.fields import lognormal_field

    k = lognormal_field((1, size, size), (1.0, 8.0, 8.0), geometric_mean=100.0, sigma_ln=1.0, seed=18_020_481)
    profile = {"driver": "GTiff", "width": size, "height": size, "count": 1, "dtype": "float64",
               "crs": "EPSG:32631", "transform": from_origin(500_000.0, 6_000_000.0, 10.0, 10.0)}  # fmt: skip
    with rasterio.open(path, "w", **profile) as target:
        target.write(k[0], 1)


def agreement(tool: Path, loop: Path) -> float:
    """Largest relative difference between the tool's kx, ky and the loop's."""
    with rasterio.open(loop) as source:
        theirs = source.read()
    ours = []
    for name in ("kx", "ky"):
        with rasterio.open(tool / f"{name}.tif") as source:
            ours.append(source.read(1))
    return float(np.max(np.abs(np.stack(ours) - theirs) / np.abs(theirs)))


def median_of(command: list[str], repeats: int) -> float:
    wall(command)  # warm-up: numba's cache, the file system's
    return statistics.median(wall(command) for _ in range(repeats))


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeats", type=int, default=3)
    parser.add_argument("--size", type=int, default=2048)
    args = parser.parse_args()
    print(f"load average before: {' '.join(f'{x:.2f}' for x in os.getloadavg())}")
    with tempfile.TemporaryDirectory() as folder:
        work = Path(folder)
        help_s = median_of([UPSCALE, "--help"], max(args.repeats, 5))
        print(f"| `upscale --help` | {help_s:.2f} s | <= 0.3 s |", flush=True)
        count = iter(range(1000))
        small_s = median_of_outputs(SMALL, work, count, args.repeats)
        print(f"| `upscale run` 256² geometric 8x8, with the check | {small_s:.2f} s | <= 1.0 s |", flush=True)

        field = work / f"k{args.size}.tif"
        write_field(field, args.size)
        wall([UPSCALE, "run", str(field), *FLOW, "--out", str(work / "warm")])
        tool_s, loop_s = [], []
        for i in range(args.repeats):
            tool_s.append(wall([UPSCALE, "run", str(field), *FLOW, "--out", str(work / f"tool{i}")]))
            loop_s.append(wall([sys.executable, str(HERE / "loop_spsolve.py"), str(field), "16", "16",
                                str(work / f"loop{i}.tif")]))  # fmt: skip
        difference = agreement(work / "tool0", work / "loop0.tif")
        assert difference <= 1e-10, f"the tool and the loop differ by {difference:.1e} relative"
        tool, loop = statistics.median(tool_s), statistics.median(loop_s)
        print(f"| whole process {args.size}² flow sealed 16x16 --no-check: tool | {tool:.2f} s "
              f"({' '.join(f'{t:.2f}' for t in tool_s)}) | |")
        print(f"| plain per-block spsolve loop | {loop:.2f} s ({' '.join(f'{t:.2f}' for t in loop_s)}) | |")
        print(f"| loop / tool | {loop / tool:.1f} | >= 8 |  (largest relative difference {difference:.1e})")
    print(f"load average after: {' '.join(f'{x:.2f}' for x in os.getloadavg())}")


def median_of_outputs(command: list[str], work: Path, count, repeats: int) -> float:
    """As `median_of`, each run writing into a fresh folder under `work`."""
    wall([UPSCALE, *command, "--out", str(work / f"small{next(count)}")])
    return statistics.median(wall([UPSCALE, *command, "--out", str(work / f"small{next(count)}")])
                             for _ in range(repeats))  # fmt: skip


if __name__ == "__main__":
    main()
