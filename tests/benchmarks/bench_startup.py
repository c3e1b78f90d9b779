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
import resource
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


#: CPU seconds (user and system) of each process `wall` ran, in order: less sensitive than wall time
#: to the other loads of a shared machine, but blind to how many cores a process keeps busy.
CPU: list[float] = []


def wall(command: list[str]) -> float:
    """Seconds a whole process takes, from its start to its exit (its CPU seconds go to `CPU`)."""
    before = resource.getrusage(resource.RUSAGE_CHILDREN)
    start = time.perf_counter()
    subprocess.run(command, check=True, stdout=subprocess.DEVNULL)
    seconds = time.perf_counter() - start
    after = resource.getrusage(resource.RUSAGE_CHILDREN)
    CPU.append(after.ru_utime - before.ru_utime + after.ru_stime - before.ru_stime)
    return seconds


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


def median_of(command: list[str], repeats: int, out: Path | None = None) -> float:
    """Median wall seconds of `command` after a warm-up run; each run writes to a new ``--out`` in `out`."""
    runs = [[*command, "--out", str(out / f"run{i}")] if out else command for i in range(repeats + 1)]
    wall(runs[0])  # warm-up: numba's cache, the file system's
    return statistics.median(wall(run) for run in runs[1:])


def flow_runs(size: int, repeats: int, work: Path) -> None:
    """The tool and the loop, alternately, on a `size`² field; their agreement asserted."""
    field = work / f"k{size}.tif"
    write_field(field, size)
    wall([UPSCALE, "run", str(field), *FLOW, "--out", str(work / "warm")])
    tool_s, loop_s, tool_cpu, loop_cpu = [], [], [], []
    for i in range(repeats):
        tool_s.append(wall([UPSCALE, "run", str(field), *FLOW, "--out", str(work / f"tool{i}")]))
        tool_cpu.append(CPU[-1])
        loop_s.append(wall([sys.executable, str(HERE / "loop_spsolve.py"), str(field), "16", "16",
                            str(work / f"loop{i}.tif")]))  # fmt: skip
        loop_cpu.append(CPU[-1])
    difference = agreement(work / "tool0", work / "loop0.tif")
    assert difference <= 1e-10, f"the tool and the loop differ by {difference:.1e} relative"
    tool, loop = statistics.median(tool_s), statistics.median(loop_s)
    cpu_tool, cpu_loop = statistics.median(tool_cpu), statistics.median(loop_cpu)
    for name, median, each, cpu in (("tool", tool, tool_s, cpu_tool), ("loop", loop, loop_s, cpu_loop)):
        runs = " ".join(f"{t:.2f}" for t in each)
        print(f"| {size}² flow 16x16 --no-check, {name} | {median:.2f} s ({runs}); CPU {cpu:.2f} s | |")
    print(f"| loop / tool, wall | {loop / tool:.1f} (CPU {cpu_loop / cpu_tool:.1f}) | >= 8 |")
    print(f"largest relative difference of kx, ky: {difference:.1e}")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeats", type=int, default=3)
    parser.add_argument("--size", type=int, default=2048, help="Side of the flow run's field (0: skip it).")
    args = parser.parse_args()
    print(f"load average before: {' '.join(f'{x:.2f}' for x in os.getloadavg())}")
    with tempfile.TemporaryDirectory() as folder:
        work = Path(folder)
        help_s = median_of([UPSCALE, "--help"], max(args.repeats, 5))
        print(f"| `upscale --help` | {help_s:.2f} s | <= 0.3 s |", flush=True)
        small_s = median_of([UPSCALE, *SMALL], args.repeats, work / "small")
        print(f"| `upscale run` 256² geometric 8x8, checked | {small_s:.2f} s | <= 1.0 s |", flush=True)
        if args.size:
            flow_runs(args.size, args.repeats, work)
    print(f"load average after: {' '.join(f'{x:.2f}' for x in os.getloadavg())}")


if __name__ == "__main__":
    main()
