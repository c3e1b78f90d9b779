"""Benchmark: the command line at scale — a 1.6 GB raster, a 4096² flow run, an ensemble, 1 and 2 workers.

Run on demand (not collected by pytest)::

    python tests/benchmarks/bench_scale.py [--side 20000] [--flow-side 4096] [--realizations 20]
                                           [--ensemble-side 1024] [--timeout 900] [--workdir DIR]
                                           [--quiet-load 0.8] [--max-wait 300] [--json results.json]

Every measurement runs in a child process of its own with a time limit.
Most are a real ``upscale run`` (the installed command line); for each the
wall time, the peak resident memory of the run (``wait4`` of the child: the
largest single process, dask worker processes included once reaped — not
their sum) and the times the run records in ``summary.json`` are reported:
``read_s`` (opening the raster and its SHA-256), ``upscale_s`` (reading the
cells and averaging them: the streaming part, the only one the workers
share) and ``check_s`` (the fine-versus-coarse check). "job" is read +
upscale; "rest" is wall - read - upscale - check: interpreter start-up,
cluster start and writing the coarse-grid package (GeoTIFFs, cells and
connections as CSV and Parquet, NetCDF, VTK), all in the client process.

(a) A ``--side``² float32 GeoTIFF (20 000² = 1.6 GB; tiled 256 x 256,
    uncompressed, written window by window: lognormal values, ln k normal
    with mean ln 100 and σ 1, from uncorrelated noise) upscaled by each
    average — arithmetic, harmonic, geometric, power (ω = 0.5), tubes,
    slabs — with ``--block 10x10 --no-check``. The raster has just been
    written, so it is read from the page cache: compute, not disk.
(a') The same read + upscale through the library in a child of its own
    (``read_field`` and ``coarsen``, as ``upscale run`` calls them, nothing
    written), its peak resident memory from the moment before it opens the
    raster (the kernel's high-water mark ``VmHWM``, reset through
    ``/proc/self/clear_refs``; Linux only), after a warm-up on a small
    raster: the memory of the streaming part alone.
(b) Flow-based sealed upscaling of a ``--flow-side``² lognormal field
    (FFT-MA, geometric mean 100 mD, σ(ln k) = 1, exponential covariance,
    correlation length 8 cells): ``--block 16x16 --method flow --bc sealed
    --no-check``, with ``--border`` 0 and 4; and the same on one
    ``--ensemble-side``² realization (1024²: the size of the 0.33 s in-memory
    figure of ``bench_local.py`` in docs/performance.md).
(c) An ensemble of ``--realizations`` ``--ensemble-side``² realizations (same
    generator, one seed each) with the check on: ``upscale run 'DIR/*.tif'
    --block 16x16 --method geometric --out OUT`` and ``--method flow``; total
    wall time, per realization, and one realization run alone, so that
    T(R) = fixed + R x t gives the time t each realization adds.
(d) One local worker against two (``--workers 1`` / ``--workers 2``, each a
    ``LocalCluster`` of single-threaded worker processes): the geometric
    ensemble of (c), the border-0 flow run of (b), and geometric on the
    raster of (a); speed-ups measured in this run.

Then how cost grows with cells (time per cell of each average; flow at
4096² against 1024² and against docs/performance.md's 0.33 s) and with
realizations, and a projection to a 10⁹-cell model on N = 1, 8, 64 workers:
time = cells x cost per cell of one worker / (N x efficiency), efficiency =
speed-up from one worker to two / 2 from (d) (1 for N = 1), both on wall
times; and a split model in which only the job (read + upscale) is shared
by the workers (job cost per cell and job speed-up) while the coarse-grid
package is written by the client alone, at the cost per coarse cell of (a)
geometric. Neither includes the check (a 10⁹-cell grid is past
``--check-limit``: the sub-domain check applies); both assume the efficiency
at 2 workers holds at 64.

Data are written and the numba caches warmed first; then, since other jobs
may share the machine, the timing waits until the 1-minute load average is
below ``--quiet-load`` (polled every 10 s, up to ``--max-wait`` s; past that
it times anyway and says so). The load is printed at the start of every
measurement. The defaults take about 20 minutes on 2 cores (19.6 measured),
11.5 of them the 4 x 20 checked realizations of (c) and (d), whose check
(two global solves of 1 M cells, about 8.5 s a realization) dominates;
``--realizations 10`` keeps the run to about 14 minutes.

Target (issue): peak RSS under 1 GB (10⁹ bytes) for every average of (a).
"""

from __future__ import annotations

import argparse
import json
import os
import shutil
import signal
import statistics
import subprocess
import sys
import tempfile
import threading
import time
from pathlib import Path
from typing import Any

# The parent imports no NumPy or GDAL and never holds data: a command started
# by vfork and exec starts its peak RSS (ru_maxrss) from its parent's.
SEED = 52_907_311
CELL = 10.0  # m, square cells
TILE = 256
GEOMETRIC_MEAN, SIGMA_LN, CORRELATION = 100.0, 1.0, 8.0  # mD, -, cells
#: method, command-line options, library options
AVERAGES: list[tuple[str, list[str], dict[str, float]]] = [
    ("arithmetic", [], {}), ("harmonic", [], {}), ("geometric", [], {}),
    ("power", ["--exponent", "0.5"], {"exponent": 0.5}), ("tubes", [], {}), ("slabs", [], {}),
]  # fmt: skip
RSS_TARGET = 1e9  # bytes: 1 GB
DOCS_FLOW_1024_S = 0.33  # docs/performance.md: coarsen(1024², 16x16, flow, sealed), in memory, median
PROJECTED_CELLS = 1e9
CLUSTER_SIZES = (1, 8, 64)
SMALL_SIDE = 320  # warm-up raster: divides into 10x10 and 16x16 blocks


# ----------------------------------------------------------------------------- child-process tasks


def _status_mib(key: str) -> float:
    """A memory figure of this process from Linux ``/proc/self/status``, in MiB."""
    for line in Path("/proc/self/status").read_text().splitlines():
        if line.startswith(key + ":"):
            return int(line.split()[1]) / 2**10
    raise KeyError(key)


def reset_peak() -> float:
    """Reset the peak resident memory (``VmHWM``) of this process; return the current one in MiB."""
    Path("/proc/self/clear_refs").write_text("5")
    return _status_mib("VmRSS")


def profile(side: int) -> dict:
    """GeoTIFF creation options: float32, tiled 256 x 256, uncompressed, 10 m cells in UTM 33N."""
    from affine import Affine

    return dict(driver="GTiff", width=side, height=side, count=1, dtype="float32", crs="EPSG:32633",
                transform=Affine(CELL, 0, 400_000, 0, -CELL, 6_000_000), nodata=-9999.0, tiled=True,
                blockxsize=TILE, blockysize=TILE, BIGTIFF="IF_SAFER")  # fmt: skip


def task_raster(spec: dict) -> dict:
    """Write the large raster one row of tiles at a time: exp of normal noise, no correlation."""
    import numpy as np
    import rasterio
    from rasterio.windows import Window

    side, mu = spec["side"], float(np.log(GEOMETRIC_MEAN))
    start = time.perf_counter()
    with rasterio.Env(GDAL_CACHEMAX=256), rasterio.open(spec["path"], "w", **profile(side)) as dst:
        for top in range(0, side, TILE):
            height = min(TILE, side - top)
            values = np.random.default_rng([SEED, top]).standard_normal((height, side), dtype=np.float32)
            values *= SIGMA_LN
            values += mu
            np.exp(values, out=values)
            dst.write(values, 1, window=Window(0, top, side, height))
    return {"seconds": time.perf_counter() - start, "bytes": Path(spec["path"]).stat().st_size}


def task_fields(spec: dict) -> dict:
    """Write correlated lognormal realizations (FFT-MA), one seed each, as float32 GeoTIFFs."""
    import numpy as np
    import rasterio

    from upscale.gallery.fields import lognormal_field

    start = time.perf_counter()
    side = spec["side"]
    for path, seed in zip(spec["paths"], spec["seeds"]):
        k = lognormal_field((side, side), (CORRELATION, CORRELATION), geometric_mean=GEOMETRIC_MEAN,
                            sigma_ln=SIGMA_LN, seed=seed).astype(np.float32)  # fmt: skip
        with rasterio.open(path, "w", **profile(side)) as dst:
            dst.write(k, 1)
    return {"seconds": time.perf_counter() - start}


def _upscale(path: str, block: str, method: str, options: dict) -> Any:
    """Read and upscale a raster as ``upscale run`` does (`jobs.run.upscale_file`), nothing written."""
    from upscale.grid import BlockSpec
    from upscale.io import read_field
    from upscale.methods.coarsen import coarsen

    spec = BlockSpec.parse(block)
    fine = read_field(path, chunk_bytes=None, block=spec.cells)
    return coarsen(fine, spec, method, **{"exponent": None, "bc": None, "border": None, **options})


def task_warm(spec: dict) -> dict:
    """Run every method once on a small raster: numba compiles or loads its caches for float32 input."""
    os.environ.setdefault("GDAL_CACHEMAX", "64")  # as the command line
    start = time.perf_counter()
    for method, block, options in spec["runs"]:
        _upscale(spec["path"], block, method, options)
    return {"seconds": time.perf_counter() - start}


def task_upscale(spec: dict) -> dict:
    """Time read + upscale of one method in this process; peak RSS from just before the raster opens."""
    os.environ.setdefault("GDAL_CACHEMAX", "64")  # as the command line
    _upscale(spec["small"], spec["block"], spec["method"], spec["options"])  # imports, numba caches
    before = reset_peak()
    start = time.perf_counter()
    result = _upscale(spec["path"], spec["block"], spec["method"], spec["options"])
    seconds = time.perf_counter() - start
    peak = _status_mib("VmHWM")
    return {"seconds": seconds, "before_mib": before, "peak_mib": peak, "coarse": list(result.coarse.shape)}


TASKS = {"raster": task_raster, "fields": task_fields, "warm": task_warm, "upscale": task_upscale}


def run_task(spec: dict, timeout: float) -> dict | None:
    """Run a task in a child process; None if it does not finish within `timeout` s."""
    try:
        done = subprocess.run([sys.executable, __file__, "--one", json.dumps(spec)], capture_output=True,
                              text=True, timeout=timeout, check=False)  # fmt: skip
    except subprocess.TimeoutExpired:
        return None
    if done.returncode:
        raise RuntimeError(f"child {spec['task']} failed:\n{done.stderr}")
    return json.loads(done.stdout.strip().splitlines()[-1])


# ----------------------------------------------------------------------------- timed command lines


def _group_alive(pgid: int) -> bool:
    try:
        os.killpg(pgid, 0)
    except (ProcessLookupError, PermissionError):
        return False
    return True


def _kill_group(pgid: int) -> None:
    """Kill the process group of a run this script started (the run and its dask workers)."""
    try:
        os.killpg(pgid, signal.SIGKILL)
    except ProcessLookupError:
        pass


def run_command(args: list[str], timeout: float, log: Path) -> dict:
    """Run a command in a new session under a time limit; wall time, exit status and peak RSS.

    Parameters
    ----------
    args : list of str
        The command.
    timeout : float
        Seconds allowed; past them the run's whole process group is killed.
    log : Path
        Where its stderr goes.

    Returns
    -------
    dict
        ``status`` (exit code, negative for a signal), ``seconds``, ``peak_bytes``
        (``ru_maxrss`` of ``wait4``: the largest of the process and its reaped
        descendants), ``timed_out``.
    """
    with open(log, "w") as err:
        start = time.perf_counter()
        proc = subprocess.Popen(args, stdout=subprocess.DEVNULL, stderr=err, start_new_session=True)
        timer = threading.Timer(timeout, _kill_group, (proc.pid,))
        timer.start()
        _, status, usage = os.wait4(proc.pid, 0)
        seconds = time.perf_counter() - start
        timer.cancel()
    proc.returncode = code = os.waitstatus_to_exitcode(status)
    # multiprocessing's resource tracker (--workers) outlives the run by about a second: let it
    # go before the next measurement; kill whatever of the run is left after 10 s
    deadline = time.monotonic() + 10.0
    while _group_alive(proc.pid) and time.monotonic() < deadline:
        time.sleep(0.1)
    if _group_alive(proc.pid):
        print(f"  (processes of this run still alive 10 s after it ended: killed, group {proc.pid})")
        _kill_group(proc.pid)
    return {"status": code, "seconds": seconds, "peak_bytes": usage.ru_maxrss * 1024,
            "timed_out": code == -signal.SIGKILL and seconds >= timeout}  # fmt: skip


def gib(ran: dict) -> str:
    return f"{ran['peak_bytes'] / 2**30:.2f} GiB"


def ok(ran: dict | None) -> bool:
    return bool(ran) and ran.get("status") == 0


class Bench:
    """Runs the measurements, prints one line each and keeps the results."""

    def __init__(self, args: argparse.Namespace, work: Path):
        self.upscale = str(Path(sys.executable).with_name("upscale"))
        self.timeout = args.timeout
        self.work = work
        self.results: dict[str, dict] = {}
        self.failures: list[str] = []
        self.count = 0

    def run(self, key: str, label: str, inputs: list[str], options: list[str], *, cells: int,
            realizations: int = 1, quiet: bool = False) -> dict:  # fmt: skip
        """Time ``upscale -q run INPUTS OPTIONS --out DIR``; read the summaries; delete the output."""
        self.count += 1
        out = self.work / f"out_{self.count}"
        load = os.getloadavg()[0]
        if not quiet:
            print(f"[load {load:.2f}] {label} ...", flush=True)
        log = self.work / f"stderr_{self.count}.txt"
        ran = run_command([self.upscale, "-q", "run", *inputs, *options, "--out", str(out)],
                          self.timeout, log)  # fmt: skip
        ran.update(label=label, load_at_start=load, cells=cells, realizations=realizations,
                   command=" ".join(["upscale", "run", *inputs, *options, "--out", "OUT"]))  # fmt: skip
        if ran["status"] == 0:
            folders = [out] if realizations == 1 else sorted(p.parent for p in out.glob("*/summary.json"))
            timings = [json.loads((f / "summary.json").read_text())["timings_s"] for f in folders]
            ran["timings"] = timings
            ran["job_s"] = sum(t["read_s"] + t["upscale_s"] for t in timings)
            ran["check_s"] = [t.get("check_s", 0.0) for t in timings]
            ran["per_realization_s"] = [sum(t.values()) for t in timings]
            ran["rest_s"] = ran["seconds"] - ran["job_s"] - sum(ran["check_s"])
        else:
            what = f"timed out after {self.timeout:.0f} s" if ran["timed_out"] else f"exit {ran['status']}"
            self.failures.append(f"{label}: {what}")
            print(f"  FAILED ({what}):\n{log.read_text()[-2000:]}", flush=True)
        shutil.rmtree(out, ignore_errors=True)
        self.results[key] = ran
        if not quiet and ran["status"] == 0:
            per = f" ({realizations} realizations: {ran['seconds'] / realizations:.2f} s each)" \
                if realizations > 1 else ""  # fmt: skip
            check = f", check {sum(ran['check_s']):.1f}" if any(ran["check_s"]) else ""
            # realizations run side by side with --workers 2: their times then add up to more than wall
            rest = f", rest {ran['rest_s']:.1f}" if ran["rest_s"] >= 0 else ""
            summed = " (summed over realizations)" if realizations > 1 else ""
            print(f"  {ran['seconds']:.1f} s wall{per}: job {ran['job_s']:.1f}{check}{rest} s{summed}; "
                  f"peak RSS {gib(ran)}; {cells / ran['seconds'] / 1e6:.1f} Mcell/s", flush=True)  # fmt: skip
        return ran

    def library(self, key: str, label: str, spec: dict) -> dict | None:
        """Time read + upscale through the library in a child (`task_upscale`)."""
        load = os.getloadavg()[0]
        print(f"[load {load:.2f}] {label} ...", flush=True)
        out = run_task(dict(spec, task="upscale"), self.timeout)
        if out is None:
            self.failures.append(f"{label}: timed out after {self.timeout:.0f} s")
            print("  FAILED (timed out)", flush=True)
        else:
            out.update(label=label, load_at_start=load)
            print(f"  {out['seconds']:.1f} s; peak RSS {out['peak_mib'] / 2**10:.2f} GiB "
                  f"({out['before_mib'] / 2**10:.2f} GiB after imports and warm-up)", flush=True)  # fmt: skip
        self.results[key] = out or {}
        return out


def wait_for_quiet(threshold: float, limit: float, poll: float = 10.0) -> dict:
    """Wait until the 1-minute load average is below `threshold`, polling every `poll` s, up to `limit` s."""
    start = time.monotonic()
    while True:
        load, waited = os.getloadavg()[0], time.monotonic() - start
        if load < threshold:
            print(f"load average {load:.2f} < {threshold:g} after {waited:.0f} s: timing", flush=True)
            return {"load": load, "waited_s": waited, "quiet": True}
        if waited >= limit:
            print(f"load average still {load:.2f} after {waited:.0f} s: timing anyway (other jobs share "
                  "the cores; times are pessimistic)", flush=True)  # fmt: skip
            return {"load": load, "waited_s": waited, "quiet": False}
        print(f"load average {load:.2f} >= {threshold:g}: waiting ({waited:.0f} s so far)", flush=True)
        time.sleep(poll)


# ----------------------------------------------------------------------------- the parent


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--side", type=int, default=20_000, help="cells on a side of the raster of (a)")
    parser.add_argument("--flow-side", type=int, default=4096, help="cells on a side of the field of (b)")
    parser.add_argument("--ensemble-side", type=int, default=1024, help="cells on a side of a realization")
    parser.add_argument("--realizations", type=int, default=20, help="realizations of the ensemble (c)")
    parser.add_argument("--timeout", type=float, default=900.0, help="s allowed to any one run")
    parser.add_argument("--quiet-load", type=float, default=0.8, help="1-minute load average to wait for")
    parser.add_argument("--max-wait", type=float, default=300.0, help="s to wait for that load at most")
    parser.add_argument("--workdir", default=None, help="where to write the rasters (needs ~2 GB)")
    parser.add_argument("--json", default=None, help="also write the results to this file")
    parser.add_argument("--one", default=None, help=argparse.SUPPRESS)
    args = parser.parse_args()
    if args.one:
        spec = json.loads(args.one)
        print(json.dumps(TASKS[spec["task"]](spec)))
        return
    started = time.perf_counter()
    print(f"# bench_scale: {os.cpu_count()} cores, load average {os.getloadavg()[0]:.2f} at the start",
          flush=True)  # fmt: skip
    work = Path(tempfile.mkdtemp(prefix="upscale-bench-scale-", dir=args.workdir))
    report: dict[str, Any] = {"args": {k: v for k, v in vars(args).items() if k != "one"},
                              "cores": os.cpu_count()}  # fmt: skip
    bench = Bench(args, work)
    try:
        measure(args, work, bench, report)
    finally:
        shutil.rmtree(work, ignore_errors=True)
    report["total_s"] = time.perf_counter() - started
    print(f"\ntotal wall time {report['total_s']:.0f} s")
    if args.json:
        Path(args.json).write_text(json.dumps(report, indent=1))
    if bench.failures:
        raise AssertionError("; ".join(bench.failures))


def measure(args: argparse.Namespace, work: Path, bench: Bench, report: dict) -> None:
    """Write the data, warm up, wait for a quiet machine, run (a) to (d), summarise."""
    side, fside, eside, count = args.side, args.flow_side, args.ensemble_side, args.realizations
    # ------------------------------------------------------------------ data (not timed)
    raster = work / f"big_{side}.tif"
    made = run_task({"task": "raster", "path": str(raster), "side": side}, args.timeout)
    print(f"data: {side} x {side} float32 raster, {made['bytes'] / 1e9:.2f} GB, written in "
          f"{made['seconds']:.0f} s", flush=True)  # fmt: skip
    flow_field, small = work / f"flow_{fside}.tif", work / f"small_{SMALL_SIDE}.tif"
    run_task({"task": "fields", "side": fside, "paths": [str(flow_field)], "seeds": [SEED + 1]}, args.timeout)
    run_task({"task": "fields", "side": SMALL_SIDE, "paths": [str(small)], "seeds": [SEED + 2]}, args.timeout)
    ensemble = work / "ensemble"
    ensemble.mkdir()
    paths = [str(ensemble / f"r{i:03d}.tif") for i in range(count)]
    made = run_task({"task": "fields", "side": eside, "paths": paths,
                     "seeds": [SEED + 100 + i for i in range(count)]}, args.timeout)  # fmt: skip
    print(f"data: {fside}² field and {count} realizations of {eside}² written ({made['seconds']:.0f} s "
          "for the realizations)", flush=True)  # fmt: skip
    glob, one = str(ensemble / "*.tif"), [paths[0]]
    # ------------------------------------------------------------------ warm-up (numba caches, imports)
    runs = [(m, "10x10", o) for m, _, o in AVERAGES]
    runs += [("flow", "16x16", {"bc": "sealed", "border": b}) for b in (0, 4)]
    warm = run_task({"task": "warm", "path": str(small), "runs": runs}, args.timeout)
    bench.run("warm", "warm-up", [str(small)], ["--block", "16x16", "--method", "geometric"],
              cells=SMALL_SIDE**2, quiet=True)  # fmt: skip
    print(f"warm-up: every method once on a {SMALL_SIDE}² raster ({warm['seconds']:.0f} s), "
          "and one checked run", flush=True)  # fmt: skip
    # ------------------------------------------------------------------ wait for a quiet machine
    report["wait"] = wait_for_quiet(args.quiet_load, args.max_wait)
    cells_a, cells_b, cells_e = side * side, fside * fside, eside * eside

    print(f"\n## (0) fixed cost: upscale run on a {SMALL_SIDE}² raster, geometric 10x10, --no-check")
    bench.run("fixed", f"{SMALL_SIDE}² geometric", [str(small)],
              ["--block", "10x10", "--method", "geometric", "--no-check"], cells=SMALL_SIDE**2)  # fmt: skip

    print(f"\n## (a) {side} x {side} float32 raster ({cells_a / 1e6:.0f} M cells), --block 10x10 --no-check;"
          " (a') read + upscale alone through the library")  # fmt: skip
    for method, extra, options in AVERAGES:
        label = method + (" ω=0.5" if extra else "")
        bench.run(f"a_{method}", label, [str(raster)],
                  ["--block", "10x10", "--method", method, *extra, "--no-check"], cells=cells_a)  # fmt: skip
        bench.library(f"a'_{method}", f"{label}, library", {"path": str(raster), "small": str(small),
                      "block": "10x10", "method": method, "options": options})  # fmt: skip

    print(f"\n## (b) flow, sealed, --block 16x16 --no-check (lognormal, correlation {CORRELATION:g} cells)")
    flow = ["--block", "16x16", "--method", "flow", "--bc", "sealed", "--no-check"]
    bench.run("b_small", f"{eside}² border 0", one, flow, cells=cells_e)
    bench.run("b_flow", f"{fside}² border 0", [str(flow_field)], flow, cells=cells_b)
    bench.run("b_border", f"{fside}² border 4", [str(flow_field)], [*flow, "--border", "4"], cells=cells_b)

    print(f"\n## (c) ensemble: {count} realizations of {eside}², --block 16x16, check on")
    for method in ("geometric", "flow"):
        options = ["--block", "16x16", "--method", method]
        bench.run(f"c1_{method}", f"{method}, one realization alone", one, options, cells=cells_e)
        bench.run(f"c_{method}", f"{method}, '{ensemble.name}/*.tif'", [glob], options,
                  cells=cells_e * count, realizations=count)  # fmt: skip

    print("\n## (d) local workers: --workers 1 against --workers 2")
    geometric_e = ["--block", "16x16", "--method", "geometric"]
    geometric_a = ["--block", "10x10", "--method", "geometric", "--no-check"]
    for n in (1, 2):
        bench.run(f"d_ens_{n}", f"ensemble geometric, --workers {n}", [glob],
                  [*geometric_e, "--workers", str(n)], cells=cells_e * count, realizations=count)  # fmt: skip
    for n in (1, 2):
        bench.run(f"d_flow_{n}", f"{fside}² flow sealed, --workers {n}", [str(flow_field)],
                  [*flow, "--workers", str(n)], cells=cells_b)  # fmt: skip
    for n in (1, 2):
        bench.run(f"d_raster_{n}", f"{side}² geometric, --workers {n}", [str(raster)],
                  [*geometric_a, "--workers", str(n)], cells=cells_a)  # fmt: skip
    raster.unlink()
    report["runs"] = {k: v for k, v in bench.results.items() if k != "warm"}
    summarise(args, bench.results, report)


def duration(seconds: float) -> str:
    """Seconds as s, min or h."""
    if seconds < 120:
        return f"{seconds:.0f} s"
    if seconds < 7200:
        return f"{seconds / 60:.1f} min"
    return f"{seconds / 3600:.1f} h"


def summarise(args: argparse.Namespace, r: dict[str, dict], report: dict) -> None:
    """Print the results as markdown for docs/performance.md: tables, growth, projection, verdicts."""
    side, fside, eside, count = args.side, args.flow_side, args.ensemble_side, args.realizations
    cells_a, cells_b, cells_e = side * side, fside * fside, eside * eside
    fixed = r["fixed"]["seconds"] if ok(r.get("fixed")) else 0.0
    md: list[str] = []
    verdicts: dict[str, bool] = {}

    def ns(seconds: float, cells: float) -> str:
        return f"{1e9 * seconds / cells:.1f}"

    # ---------------------------------------------------------------- (a), (a')
    md += [f"(a) {side:,}² float32 GeoTIFF ({cells_a * 4 / 1e9:.1f} GB, tiled 256², uncompressed, in the "
           "page cache), `upscale run RASTER --block 10x10 --method M --no-check`; (a′) its read + upscale "
           "alone through the library (`read_field`, `coarsen`; peak from just before the raster opens, "
           "after imports and a warm-up). Target: peak RSS < 1 GB (0.93 GiB).".replace(",", " ", 1), "",
           "| method | wall | job (read + upscale) | rest (start-up, package) | ns/cell wall | ns/cell job "
           "| peak RSS | (a′) library: time, peak RSS | target < 1 GB |",
           "|---|---|---|---|---|---|---|---|---|"]  # fmt: skip
    for method, extra, _ in AVERAGES:
        ran, lib = r[f"a_{method}"], r.get(f"a'_{method}") or {}
        name = method + (" (ω = 0.5)" if extra else "")
        lib_text = f"{lib['seconds']:.1f} s, {lib['peak_mib'] / 2**10:.2f} GiB" if lib else "failed"
        if not ok(ran):
            md.append(f"| {name} | failed | | | | | | {lib_text} | |")
            verdicts[f"(a) {method} peak RSS < 1 GB"] = False
            continue
        met = ran["peak_bytes"] < RSS_TARGET
        verdicts[f"(a) {method} peak RSS < 1 GB"] = met
        if lib:
            verdicts[f"(a') {method} library peak RSS < 1 GB"] = lib["peak_mib"] * 2**20 < RSS_TARGET
        md.append(f"| {name} | {ran['seconds']:.1f} s | {ran['job_s']:.1f} s | {ran['rest_s']:.1f} s "
                  f"| {ns(ran['seconds'], cells_a)} | {ns(ran['job_s'], cells_a)} | {gib(ran)} | {lib_text} "
                  f"| {'met' if met else '**not met**'} |")  # fmt: skip
    coarse_a = cells_a // 100
    export_per_coarse = None
    if ok(r.get("fixed")) and ok(r["a_geometric"]):
        export_per_coarse = max(r["a_geometric"]["rest_s"] - fixed, 0.0) / coarse_a
        md += ["", f"Fixed cost of one `upscale run` (interpreter, imports, numba cache load, a tiny "
               f"package), on a {SMALL_SIDE}² raster: {fixed:.1f} s. Writing the coarse-grid package of "
               f"{coarse_a / 1e6:.1f} M coarse cells (rest - fixed, geometric): "
               f"{r['a_geometric']['rest_s'] - fixed:.0f} s, {1e6 * export_per_coarse:.1f} µs per coarse "
               "cell."]  # fmt: skip
    # ---------------------------------------------------------------- (b)
    md += ["", f"(b) `upscale run F --block 16x16 --method flow --bc sealed --no-check`, lognormal "
           f"(σ(ln k) = 1, correlation {CORRELATION:g} cells).", "",
           "| field | border | wall | read | upscale | ns/cell upscale | peak RSS |",
           "|---|---|---|---|---|---|---|"]  # fmt: skip
    flow_rows = [("b_small", cells_e, f"{eside}²", 0), ("b_flow", cells_b, f"{fside}²", 0),
                 ("b_border", cells_b, f"{fside}²", 4)]  # fmt: skip
    for key, cells, name, border in flow_rows:
        ran = r[key]
        if ok(ran):
            t = ran["timings"][0]
            md.append(f"| {name} | {border} | {ran['seconds']:.1f} s | {t['read_s']:.2f} s "
                      f"| {t['upscale_s']:.2f} s | {ns(t['upscale_s'], cells)} | {gib(ran)} |")  # fmt: skip
        else:
            md.append(f"| {name} | {border} | failed | | | | |")
    growth: dict[str, float] = {}
    if ok(r["b_small"]) and ok(r["b_flow"]):
        small, big = r["b_small"]["timings"][0]["upscale_s"], r["b_flow"]["timings"][0]["upscale_s"]
        growth.update(flow_cells=cells_b / cells_e, flow_vs_small=big / small,
                      flow_vs_docs=big / DOCS_FLOW_1024_S)  # fmt: skip
    # ---------------------------------------------------------------- (c)
    md += ["", f"(c) `upscale run 'DIR/*.tif' --block 16x16 --method M --out OUT`: {count} realizations of "
           f"{eside}² (one seed each), check on (global fine and coarse solves along x and y).", "",
           "| method | one alone | ensemble wall | wall / R | added per realization (fixed + R·t) "
           "| per realization: job, check (median) | peak RSS |",
           "|---|---|---|---|---|---|---|"]  # fmt: skip
    per_realization: dict[str, float] = {}
    for method in ("geometric", "flow"):
        single, ens = r[f"c1_{method}"], r[f"c_{method}"]
        if not (ok(single) and ok(ens)):
            md.append(f"| {method} | failed | | | | | |")
            continue
        t = (ens["seconds"] - single["seconds"]) / (count - 1) if count > 1 else float("nan")
        per_realization[method] = t
        jobs = [x["read_s"] + x["upscale_s"] for x in ens["timings"]]
        md.append(f"| {method} | {single['seconds']:.1f} s | {ens['seconds']:.0f} s "
                  f"| {ens['seconds'] / count:.2f} s | {t:.2f} s | {statistics.median(jobs):.2f} s, "
                  f"{statistics.median(ens['check_s']):.2f} s | {gib(ens)} |")  # fmt: skip
        whole = ens["per_realization_s"]
        half = len(whole) // 2
        if half:
            later, earlier = statistics.median(whole[half:]), statistics.median(whole[:half])
            growth[f"ens_{method}_drift"] = later / earlier
    # ---------------------------------------------------------------- (d)
    md += ["", "(d) `--workers 1` against `--workers 2` (a LocalCluster of single-threaded worker processes; "
           "the check and the package are the client's), same run.", "",
           "| run | 1 worker | 2 workers | speed-up (wall) | efficiency (wall) | job speed-up "
           "| peak RSS, 2 workers |", "|---|---|---|---|---|---|---|"]  # fmt: skip
    efficiency: dict[str, dict[str, float]] = {}
    d_rows = [("d_ens", f"ensemble {count} × {eside}², geometric, check on"),
              ("d_flow", f"{fside}² flow sealed"),
              ("d_raster", f"{side:,}² geometric".replace(",", " "))]  # fmt: skip
    for key, name in d_rows:
        w1, w2 = r[f"{key}_1"], r[f"{key}_2"]
        if not (ok(w1) and ok(w2)):
            md.append(f"| {name} | failed | | | | | |")
            continue
        wall = w1["seconds"] / w2["seconds"]
        job = w1["job_s"] / w2["job_s"]
        efficiency[key] = {"wall": wall / 2, "job": job / 2}
        job_text = "—" if key == "d_ens" else f"{job:.2f}"  # realizations overlap: jobs do not add up
        md.append(f"| {name} | {w1['seconds']:.1f} s | {w2['seconds']:.1f} s | {wall:.2f} | {wall / 2:.2f} "
                  f"| {job_text} | {gib(w2)} |")  # fmt: skip
    if ok(r["b_flow"]):
        md.append(f"\n(For scale: the default, dask's threads in one process, ran the {fside}² flow in "
                  f"{r['b_flow']['seconds']:.1f} s and the raster geometric in "
                  f"{r['a_geometric'].get('seconds', float('nan')):.1f} s.)")  # fmt: skip
    report["efficiency"] = efficiency
    # ---------------------------------------------------------------- growth
    md += ["", "Growth:"]
    if all(ok(r[f"a_{m}"]) for m, _, _ in AVERAGES):
        md.append(f"* with cells, averages ({cells_a / 1e6:.0f} M cells, 10×10 blocks): ns per fine cell, "
                  "wall "
                  + ", ".join(f"{m} {ns(r[f'a_{m}']['seconds'], cells_a)}" for m, _, _ in AVERAGES)
                  + "; of which read + upscale "
                  + ", ".join(f"{ns(r[f'a_{m}']['job_s'], cells_a)}" for m, _, _ in AVERAGES)
                  + ". The rest is the package, which grows with the coarse cells.")  # fmt: skip
    if growth.get("flow_cells"):
        md.append(f"* with cells, flow: {growth['flow_cells']:.0f}× the cells, "
                  f"{growth['flow_vs_small']:.1f}× the upscale step of the {eside}² run "
                  f"({growth['flow_vs_docs']:.1f}× the in-memory "
                  f"{DOCS_FLOW_1024_S} s of docs/performance.md).")  # fmt: skip
    for method, t in per_realization.items():
        drift = growth.get(f"ens_{method}_drift", float("nan"))
        md.append(f"* with realizations ({method}): each adds {t:.2f} s; time per realization, last half "
                  f"over first half of the ensemble: {drift:.2f}.")  # fmt: skip
    report["growth"] = growth
    # ---------------------------------------------------------------- projection
    sources = [("geometric average, 10×10", "d_raster", cells_a, 1.0, 100)]
    slowest = max((m for m, _, _ in AVERAGES if ok(r[f"a_{m}"])), key=lambda m: r[f"a_{m}"]["job_s"],
                  default=None)  # fmt: skip
    if slowest and slowest != "geometric" and ok(r["a_geometric"]):
        ratio = r[f"a_{slowest}"]["job_s"] / r["a_geometric"]["job_s"]
        sources.append((f"{slowest} average, 10×10 (scaled)", "d_raster", cells_a, ratio, 100))
    sources.append(("flow sealed, 16×16", "d_flow", cells_b, 1.0, 256))
    if ok(r["b_flow"]) and ok(r["b_border"]):
        ratio = r["b_border"]["job_s"] / r["b_flow"]["job_s"]
        sources.append(("flow sealed border 4, 16×16 (scaled)", "d_flow", cells_b, ratio, 256))
    sizes = "N = " + ", ".join(str(n) for n in CLUSTER_SIZES)
    md += ["", f"Projection to {PROJECTED_CELLS:.0e} fine cells, no check. Linear: cells × (wall per cell "
           "of the 1-worker run) / (N × efficiency), efficiency = wall speed-up 1 → 2 workers / 2 (1 for "
           "N = 1). Split: cells × (job per cell, 1 worker) / (N × job efficiency) + the package, written "
           "by the client alone at the cost per coarse cell of (a), + the fixed cost. 'scaled': the "
           "measured 1-worker cost times the ratio of the two methods' job times above.", "",
           f"| method | ns/cell wall, job | efficiency wall, job | linear: {sizes} | split: {sizes} |",
           "|---|---|---|---|---|"]  # fmt: skip
    rows = []
    for name, key, cells, scale, per_block in sources:
        w1 = r[f"{key}_1"]
        if not ok(w1) or key not in efficiency:
            continue
        wall_cell, job_cell = w1["seconds"] / cells * scale, w1["job_s"] / cells * scale
        eff = efficiency[key]
        linear = [PROJECTED_CELLS * wall_cell / (n * (1.0 if n == 1 else eff["wall"])) for n in CLUSTER_SIZES]
        package = fixed + (PROJECTED_CELLS / per_block * export_per_coarse if export_per_coarse else 0.0)
        split = [PROJECTED_CELLS * job_cell / (n * (1.0 if n == 1 else eff["job"])) + package
                 for n in CLUSTER_SIZES]  # fmt: skip
        rows.append({"method": name, "wall_s_per_cell": wall_cell, "job_s_per_cell": job_cell,
                     "efficiency": eff, "package_s": package, "linear_s": dict(zip(CLUSTER_SIZES, linear)),
                     "split_s": dict(zip(CLUSTER_SIZES, split))})  # fmt: skip
        md.append(f"| {name} | {1e9 * wall_cell:.0f}, {1e9 * job_cell:.0f} | {eff['wall']:.2f}, "
                  f"{eff['job']:.2f} | {', '.join(duration(t) for t in linear)} "
                  f"| {', '.join(duration(t) for t in split)} |")  # fmt: skip
    report["projection"] = rows
    report["verdicts"] = verdicts
    report["markdown"] = "\n".join(md)
    print("\n----- markdown for docs/performance.md -----\n")
    print("\n".join(md))
    print("\nTargets:")
    for name, met in verdicts.items():
        print(f"  {name}: {'met' if met else 'NOT met'}")


if __name__ == "__main__":
    main()
