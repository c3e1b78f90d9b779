"""Benchmark: the fine half of a flow check (`fine_solves`), this code against an earlier one and SuperLU.

Run on demand (not collected by pytest)::

    python tests/benchmarks/bench_check_solver.py [--base main] [--direct-timeout 300] [--cases ...]

For each case, times `upscale.check.axis.fine_solves` — transmissibilities,
one pressure-drop solve per axis and the held-out corner flow (with its
rate at k = 1) on 16 x 16 blocks — three ways, each in a child process of
its own: with this worktree's default solver, with the code of the git
revision `--base` (extracted with ``git archive``; "today's code"), and with
``solver="direct"`` (SuperLU) under a time limit. Wall and CPU seconds,
iterations per flow, the largest relative difference of k_eff from the
base code and the child's peak resident memory above what it held before the check
(bytes per cell) are printed per case,
and the ratios from the same run. The machine is shared: the load average
is printed with every case, and CPU seconds are the steadier measure.

Targets (issue 18): 2D 1 M cells >= 3x faster than the base code and >= 12x
faster than SuperLU; 1 M -> 4 M cells <= 4.5x the time; 3D 1 M cells >= 3x
faster than the base code.
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import tarfile
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]

#: name -> (kind, shape (L, M, N), cell sizes (dz, dy, dx) in m)
CASES = {
    "2D 0.26M lognormal": ("lognormal", (1, 512, 512), (1.0, 1.0, 1.0)),
    "2D 1M lognormal": ("lognormal", (1, 1024, 1024), (1.0, 1.0, 1.0)),
    "2D 4M lognormal": ("lognormal", (1, 2048, 2048), (1.0, 1.0, 1.0)),
    "2D 1M channel": ("channel", (1, 1024, 1024), (1.0, 1.0, 1.0)),
    "2D 4M channel": ("channel", (1, 2048, 2048), (1.0, 1.0, 1.0)),
    "3D 1M lognormal cubic": ("lognormal", (64, 128, 128), (1.0, 1.0, 1.0)),
    "3D 1M lognormal thin": ("lognormal", (64, 128, 128), (1.0, 10.0, 10.0)),
}


def field_of(case: str):
    """The case's field: lognormal (σ ln k = 1, correlation 8 cells, 2 vertically) or channels (1e6)."""
    import numpy as np

    from upscale.field import Field
    from upscale.gallery.fields import channel_field, lognormal_field

    kind, shape, (dz, dy, dx) = CASES[case]
    if kind == "lognormal":
        k = lognormal_field(shape, (2.0 if shape[0] > 1 else 1.0, 8.0, 8.0), geometric_mean=100.0,
                            sigma_ln=1.0, seed=33_018_457)  # fmt: skip
    else:  # sand 1000 mD, shale 1e-3 mD channels along x: a contrast of 1e6
        k = channel_field(shape[1:], channels=shape[1] // 64, width=shape[1] / 64, k_sand=1000.0,
                          k_shale=1e-3, seed=5)  # fmt: skip
    return Field.from_arrays(np.asarray(k), cell_size=(dx, dy), dz=dz, three_d=shape[0] > 1)


def one(case: str, solver: str) -> dict:
    """Time `fine_solves` of the case (runs in the child process)."""
    import resource

    import numpy as np

    from upscale.check.axis import fine_solves
    from upscale.field import Grid

    field = field_of(case)
    g = field.grid
    coarse = Grid(dz=[g.dz.sum()], dy=[g.dy.sum() / 16] * 16, dx=[g.dx.sum() / 16] * 16)
    before = int(Path("/proc/self/statm").read_text().split()[1]) * os.sysconf("SC_PAGE_SIZE")
    wall, cpu = time.perf_counter(), time.process_time()
    flows = fine_solves(field, field.axes, coarse_grid=coarse, solver=solver)
    wall, cpu = time.perf_counter() - wall, time.process_time() - cpu
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024 - before  # the check's own peak
    return {"wall": wall, "cpu": cpu, "peak": peak, "cells": int(np.prod(field.shape)),
            "k_eff": {name: f.k_eff for name, f in flows.items()},
            "iterations": {name: f.iterations for name, f in flows.items()},
            "mass_balance": max(f.mass_balance for f in flows.values())}  # fmt: skip


def timed(code: Path, case: str, solver: str, timeout: float) -> dict | None:
    """Run `one` with the package at `code` in a child process; None if it does not finish in time."""
    env = dict(os.environ, PYTHONPATH=str(code), OPENBLAS_NUM_THREADS="1")
    try:
        done = subprocess.run([sys.executable, __file__, "--one", case, solver], capture_output=True,
                              text=True, timeout=timeout, check=True, env=env, cwd=code)  # fmt: skip
    except subprocess.TimeoutExpired:
        return None
    return json.loads(done.stdout.strip().splitlines()[-1])


def extracted(revision: str, folder: Path) -> Path:
    """The package `upscale` of `revision`, extracted into `folder` (returned)."""
    archive = folder / "base.tar"
    subprocess.run(["git", "-C", str(ROOT), "archive", "-o", str(archive), revision, "upscale"], check=True)
    with tarfile.open(archive) as tar:
        tar.extractall(folder, filter="data")
    return folder


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--base", default="main", help="git revision of today's code")
    parser.add_argument("--direct-timeout", type=float, default=300.0)
    parser.add_argument("--cases", nargs="*", default=list(CASES))
    parser.add_argument("--one", nargs=2, metavar=("CASE", "SOLVER"), help=argparse.SUPPRESS)
    args = parser.parse_args()
    if args.one:
        print(json.dumps(one(*args.one)))
        return
    with tempfile.TemporaryDirectory() as folder:
        base = extracted(args.base, Path(folder))
        for case in args.cases:
            new = timed(ROOT, case, "auto", 3600)
            old = timed(base, case, "auto", 3600)
            direct = timed(ROOT, case, "direct", args.direct_timeout) if "4M" not in case else None
            report(case, new, old, direct, args.direct_timeout)


def report(case: str, new: dict, old: dict, direct: dict | None, limit: float) -> None:
    """One case's line: seconds, ratios, iterations, k_eff agreement, memory, load."""
    differs = max(abs(new["k_eff"][f] - old["k_eff"][f]) / abs(old["k_eff"][f]) for f in new["k_eff"])
    superlu = (f"SuperLU {direct['wall']:.1f} s wall, {direct['cpu']:.1f} s CPU = "
               f"{direct['cpu'] / new['cpu']:.1f}x new (CPU), {direct['wall'] / new['wall']:.1f}x (wall)"
               if direct else f"SuperLU > {limit:.0f} s (stopped) or not run")  # fmt: skip
    print(json.dumps({"case": case, "new": new, "old": old, "direct": direct}), file=sys.stderr)
    print(f"{case}: new {new['wall']:.2f} s wall / {new['cpu']:.2f} s CPU, it {new['iterations']}; "
          f"base {old['wall']:.2f} / {old['cpu']:.2f} s, it {old['iterations']}; "
          f"base/new {old['cpu'] / new['cpu']:.2f}x CPU, {old['wall'] / new['wall']:.2f}x wall; {superlu}; "
          f"k_eff differs by <= {differs:.1e}; mass balance <= {new['mass_balance']:.1e}; peak "
          f"{new['peak'] / new['cells']:.0f} B/cell new, {old['peak'] / old['cells']:.0f} B/cell base; "
          f"load {os.getloadavg()[0]:.1f}", flush=True)  # fmt: skip


if __name__ == "__main__":
    main()
