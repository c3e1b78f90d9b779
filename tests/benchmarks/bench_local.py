"""Benchmark: flow-based upscaling (all blocks of a chunk in one compiled call) against a per-block loop.

Run on demand (not collected by pytest)::

    python tests/benchmarks/bench_local.py [--repeats 3] [--dz 10] [--loop-blocks-3d 0]
                                           [--timeout 900] [--json results.json] [--only 3D]

Fields: lognormal (geometric mean 100 mD, sigma_ln 1, exponential
covariance, correlation lengths 8 cells across and 2 layers down), 10 m
cells, ``--dz`` m layers in 3D (10 by default: cubic cells).

* 2D: 1024 x 1024 cells in 16 x 16 blocks (4096 blocks), sealed sides,
  no border, both axes. In the same run:

  (a) a straightforward loop that solves each block separately with scipy's
      sparse direct solver: per block, ``Field.from_arrays`` of its cells,
      ``upscale.flow.transmissibilities`` and
      ``pressure_drop(..., solver="direct")`` (SuperLU) along each axis;
  (a') the same loop stripped to the bone: per block the matrix assembled
      with NumPy from the package's half-cell and face transmissibilities and
      solved with ``scipy.sparse.linalg.spsolve`` (no Field, no island check,
      no residual check) — the stricter baseline;
  (b) the tool, ``coarsen(field, "16x16", "flow", bc="sealed", border=0)``,
      after a warm-up run on a small field (numba compilation), best and
      median of ``--repeats`` runs (the median enters the ratios); also
      with one numba thread, for scale, and with a dask array input;
  (g) one fine-scale global solve of the same field by the flow engine,
      ``pressure_drop(transmissibilities(field), "x")`` (multigrid).

  (a), (a') and (b) must agree to 1e-8 relative on every block and axis (same
  two-point discretisation; this is asserted), and the dask result must
  equal the NumPy one bit for bit. Also timed (one line each): flow with
  linear and periodic sides, border 0 and 4, sealed with border 4,
  flow-transmissibility and renormalization.
* 3D: 256 x 256 x 64 cells (4.2 million) in 8 x 8 x 4 blocks (16384 blocks),
  all three axes, with the same comparison. The loops run over every block
  by default; ``--loop-blocks-3d N`` times a random subset of N blocks and
  extrapolates to all of them (said so in the output). A loop that does not
  finish within ``--loop-timeout`` s is rerun on 500 random blocks and
  extrapolated.
* Memory: peak resident memory of each run's child process from the moment
  before it loads the field (the kernel's high-water mark ``VmHWM``, reset
  through ``/proc/self/clear_refs``; Linux only), against its resident
  memory at that moment (imports and warm-up done). Dask runs read
  their chunks lazily from a ``.npy`` file, so only chunks in flight are in
  memory; the 2D dask run is repeated on a 2048 x 2048 field with the same
  chunks (peak should not grow), the 3D one with 8x larger chunks (peak
  should grow with the chunk, not the field).

Every measurement runs in a child process of its own with a time limit.

Targets (issue): (b) >= 10x faster than (a); the whole flow-based upscaling
(all axes) costs no more than one fine-scale global solve of the same field
(g / b >= 1); 3D completes with the same comparison; peak memory bounded by
the chunk size.
"""

from __future__ import annotations

import argparse
import json
import os
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path
from typing import Any

import numpy as np

SEED = 33_018_457
CELL = (10.0, 10.0)  # column width and row height in m
DZ = [10.0]  # layer thickness of the 3D field in m, set from --dz in every process
#: name -> (shape (L, M, N), correlation lengths in cells, block text, cells per block (L, M, N))
CASES: dict[str, tuple[tuple[int, int, int], tuple[float, float, float], str, tuple[int, int, int]]] = {
    "2D": ((1, 1024, 1024), (1.0, 8.0, 8.0), "16x16", (1, 16, 16)),
    "2D 4M": ((1, 2048, 2048), (1.0, 8.0, 8.0), "16x16", (1, 16, 16)),
    "3D": ((64, 256, 256), (2.0, 8.0, 8.0), "8x8x4", (4, 8, 8)),
}
#: dask chunks (L, M, N) of the timed runs with a dask input
DASK_CHUNKS = {"2D": (1, 256, 256), "3D": (16, 64, 64)}
NAMES = {0: "kz", 1: "ky", 2: "kx"}  # array axis -> coarse property
AXIS_NAMES = {0: "z", 1: "y", 2: "x"}
TOLERANCE = 1e-8  # relative agreement required of the loop and the tool


# ----------------------------------------------------------------------------- helpers (any process)


def _status_mib(key: str) -> float:
    """A memory figure of this process from Linux ``/proc/self/status``, in MiB."""
    for line in Path("/proc/self/status").read_text().splitlines():
        if line.startswith(key + ":"):
            return int(line.split()[1]) / 2**10
    raise KeyError(key)


def reset_peak() -> float:
    """Reset the peak resident memory of this process; return the current resident memory in MiB.

    Writing 5 to ``/proc/self/clear_refs`` resets the kernel's high-water
    mark (``VmHWM``). ``ru_maxrss`` cannot be used as is: a child started by
    fork and exec inherits its parent's peak.
    """
    Path("/proc/self/clear_refs").write_text("5")
    return _status_mib("VmRSS")


def mib_peak() -> float:
    """Peak resident memory of this process since the last `reset_peak`, in MiB (``VmHWM``)."""
    return _status_mib("VmHWM")


def flow_axes(case: str) -> list[int]:
    """Array axes of flow: x and y for a map, z, y and x in 3D."""
    return [0, 1, 2] if CASES[case][0][0] > 1 else [1, 2]


def make_field_file(case: str, workdir: Path) -> Path:
    """Generate the case's lognormal field and save it as ``(L, M, N)`` float64 ``.npy``."""
    from upscale.gallery.fields import lognormal_field

    shape, lengths, _, _ = CASES[case]
    if shape[0] == 1:
        k = lognormal_field(shape[1:], lengths[1:], geometric_mean=100.0, sigma_ln=1.0, seed=SEED)[None]
    else:
        k = lognormal_field(shape, lengths, geometric_mean=100.0, sigma_ln=1.0, seed=SEED)
    path = workdir / f"k_{case.replace(' ', '_')}.npy"
    np.save(path, k)
    return path


def lazy_npy(path: str, chunks: tuple[int, int, int]) -> Any:
    """A dask array that reads each chunk from a ``.npy`` file only when the chunk is computed."""
    import dask.array as da
    from dask.array.core import normalize_chunks

    mapped = np.load(path, mmap_mode="r")
    shape, dtype = mapped.shape, mapped.dtype
    del mapped

    def read(block_info: dict | None = None) -> np.ndarray:
        where = tuple(slice(a, b) for a, b in block_info[None]["array-location"])
        mapped = np.load(path, mmap_mode="r")
        out = np.array(mapped[where])  # a copy, so the mapping is dropped with `mapped`
        del mapped
        return out

    return da.map_blocks(read, chunks=normalize_chunks(chunks, shape), dtype=dtype,
                         meta=np.empty((0, 0, 0), dtype=dtype))  # fmt: skip


def make_field(k: Any, case: str) -> Any:
    """`upscale.field.Field` of the case from an ``(L, M, N)`` NumPy or dask array."""
    from upscale.field import Field

    three_d = CASES[case][0][0] > 1
    return Field.from_arrays(k, cell_size=CELL, dz=DZ[0] if three_d else None, three_d=three_d)


# ----------------------------------------------------------------------------- the per-block loops


def k_eff_helpers(k: np.ndarray, case: str, axes: list[int]) -> list[float]:
    """k_eff of one block along `axes` with the package's own flow engine and SuperLU.

    Parameters
    ----------
    k : ndarray of shape (l, m, n)
        The block's permeabilities.
    case : str
        A key of `CASES` (2D or 3D).
    axes : list of int
        Array axes of flow.

    Returns
    -------
    list of float
        Effective permeability along each axis.
    """
    from upscale.flow import pressure_drop, transmissibilities

    trans = transmissibilities(make_field(k, case))
    return [pressure_drop(trans, AXIS_NAMES[a], solver="direct").k_eff for a in axes]


def k_eff_bare(k: np.ndarray, case: str, axes: list[int]) -> list[float]:
    """k_eff of one block along `axes`: the two-point system assembled by hand, `spsolve`.

    Sealed sides: p = 1 on the inlet face and 0 on the outlet face (half a
    cell from the boundary cell centres), the other faces closed; k_eff is
    the outflow times the length over the cross-section, as in
    `upscale.flow.steady.pressure_drop`.

    Parameters
    ----------
    k, case, axes
        As in `k_eff_helpers`.

    Returns
    -------
    list of float
    """
    from scipy import sparse
    from scipy.sparse.linalg import spsolve

    from upscale.field import Grid
    from upscale.flow.transmissibility import half_cell, harmonic_faces

    shape = k.shape
    n = k.size
    three_d = CASES[case][0][0] > 1
    grid = Grid(dz=np.full(shape[0], DZ[0] if three_d else 1.0), dy=np.full(shape[1], CELL[1]),
                dx=np.full(shape[2], CELL[0]))  # fmt: skip
    index = np.arange(n).reshape(shape)
    t = [half_cell(k, grid, a) for a in range(3)]
    first, second, values = [], [], []
    for a in range(3):
        first.append(np.take(index, np.arange(shape[a] - 1), axis=a).ravel())
        second.append(np.take(index, np.arange(1, shape[a]), axis=a).ravel())
        values.append(harmonic_faces(t[a], a).ravel())
    i, j, T = np.concatenate(first), np.concatenate(second), np.concatenate(values)
    inside = np.bincount(i, T, minlength=n) + np.bincount(j, T, minlength=n)
    cells = np.arange(n)
    sizes = [grid.dz.sum(), grid.dy.sum(), grid.dx.sum()]
    out = []
    for a in axes:
        inlet, outlet = np.take(index, 0, axis=a).ravel(), np.take(index, -1, axis=a).ravel()
        t_in, t_out = np.take(t[a], 0, axis=a).ravel(), np.take(t[a], -1, axis=a).ravel()
        rhs = np.bincount(inlet, t_in, minlength=n)
        diagonal = inside + rhs + np.bincount(outlet, t_out, minlength=n)
        A = sparse.csc_matrix((np.concatenate([diagonal, -T, -T]),
                               (np.concatenate([cells, i, j]), np.concatenate([cells, j, i]))),
                              shape=(n, n))  # fmt: skip
        p = spsolve(A, rhs)
        others = [s for b, s in enumerate(sizes) if b != a]
        out.append(float(np.sum(t_out * p[outlet]) * sizes[a] / (others[0] * others[1])))
    return out


LOOPS = {"helpers": k_eff_helpers, "bare": k_eff_bare}
LOOP_LABELS = {
    "helpers": ("(a)", "loop, Field + transmissibilities + pressure_drop(direct)"),
    "bare": ("(a')", "loop, hand-assembled matrix + spsolve"),
}
RUN_NAMES = {"(b)": "tool", "(b1)": "tool_1_thread", "(bd)": "tool_dask"}


# ----------------------------------------------------------------------------- child-process tasks


def task_tool(spec: dict) -> dict:
    """Time `upscale.coarsen` on the case's field (NumPy or lazily read dask input)."""
    from upscale import coarsen

    case, chunks, method = spec["case"], spec.get("chunks"), spec["method"]
    options = {k: spec[k] for k in ("bc", "border") if k in spec}
    block = CASES[case][2]
    # warm-up (numba compilation or cache load, dask and scipy imports) on a small field
    small = np.load(spec["path"], mmap_mode="r")[:8, :64, :64].copy()
    if chunks:
        import dask.array as da

        small = da.from_array(small, chunks=(4, 32, 32))
    coarsen(make_field(small, case), block, method, **options)
    del small
    before = reset_peak()
    k = lazy_npy(spec["path"], tuple(chunks)) if chunks else np.load(spec["path"])
    field = make_field(k, case)
    times, result = [], None
    for _ in range(spec["repeats"]):
        result = None  # let the previous result go before the next run
        start = time.perf_counter()
        result = coarsen(field, block, method, **options)
        times.append(time.perf_counter() - start)
    peak = mib_peak()
    if spec.get("save"):
        coarse = result.coarse
        np.savez(spec["save"], **{NAMES[a]: getattr(coarse, NAMES[a]) for a in flow_axes(case)})
    import numba

    return {"times": times, "best": min(times), "median": float(np.median(times)), "before_mib": before,
            "peak_mib": peak, "threads": numba.get_num_threads(), "load": os.getloadavg()[0]}  # fmt: skip


def task_loop(spec: dict) -> dict:
    """Time a per-block loop (`LOOPS`) over all blocks or a random subset; save the k_eff."""
    case, kernel = spec["case"], LOOPS[spec["variant"]]
    cells, axes = CASES[case][3], flow_axes(case)
    k = np.load(spec["path"])
    counts = [s // c for s, c in zip(k.shape, cells)]
    every = np.stack(np.meshgrid(*[np.arange(c) for c in counts], indexing="ij"), axis=-1).reshape(-1, 3)
    chosen = every
    if spec["blocks"] and spec["blocks"] < len(every):
        rng = np.random.default_rng(SEED)
        chosen = every[np.sort(rng.choice(len(every), spec["blocks"], replace=False))]

    def cut(b: np.ndarray) -> np.ndarray:
        return k[tuple(slice(i * c, (i + 1) * c) for i, c in zip(b, cells))]

    kernel(cut(chosen[0]), case, axes)  # warm-up: imports, first SuperLU call
    values = np.empty((len(chosen), len(axes)))
    start = time.perf_counter()
    for q, b in enumerate(chosen):
        values[q] = kernel(cut(b), case, axes)
    seconds = time.perf_counter() - start
    np.savez(spec["save"], blocks=chosen, values=values)
    return {"seconds": seconds, "done": len(chosen), "total": len(every),
            "estimate_all": seconds * len(every) / len(chosen), "load": os.getloadavg()[0]}  # fmt: skip


def task_global(spec: dict) -> dict:
    """Time one fine-scale pressure solve along x of the whole field (default solver)."""
    from upscale.flow import pressure_drop, transmissibilities

    case = spec["case"]
    field = make_field(np.load(spec["path"]), case)
    before = reset_peak()
    start = time.perf_counter()
    trans = transmissibilities(field)
    assembled = time.perf_counter()
    flow = pressure_drop(trans, "x")
    end = time.perf_counter()
    return {"seconds": end - start, "trans_s": assembled - start, "solve_s": end - assembled,
            "method": flow.method, "iterations": flow.iterations, "k_eff": flow.k_eff,
            "unknowns": flow.unknowns, "before_mib": before, "peak_mib": mib_peak(),
            "load": os.getloadavg()[0]}  # fmt: skip


def task_make(spec: dict) -> dict:
    """Generate a case's field into a file (in a child, so the parent stays small)."""
    return {"path": str(make_field_file(spec["case"], Path(spec["workdir"])))}


TASKS = {"tool": task_tool, "loop": task_loop, "global": task_global, "make": task_make}


def run_child(spec: dict, timeout: float, threads: int | None = None) -> dict | None:
    """Run one task in a child process; None if it does not finish within `timeout` s.

    Parameters
    ----------
    spec : dict
        The task (a key of `TASKS` under ``"task"``) and its parameters.
    timeout : float
        Seconds allowed.
    threads : int, optional
        Numba threads of the child (``NUMBA_NUM_THREADS``); all cores by default.

    Returns
    -------
    dict or None
        What the task returned.
    """
    env = dict(os.environ, **({"NUMBA_NUM_THREADS": str(threads)} if threads else {}))
    try:
        done = subprocess.run(
            [sys.executable, __file__, "--dz", str(DZ[0]), "--one", json.dumps(spec)],
            capture_output=True, text=True, timeout=timeout, check=False, env=env,
        )  # fmt: skip
    except subprocess.TimeoutExpired:
        return None
    if done.returncode:
        raise RuntimeError(f"child {spec} failed:\n{done.stderr}")
    out = json.loads(done.stdout.strip().splitlines()[-1])
    if "load" in out:
        LOADS.append(out["load"])
    return out


LOADS: list[float] = []  # 1-minute load averages seen at the end of the children


# ----------------------------------------------------------------------------- the parent


def field_file(case: str, work: Path, timeout: float) -> Path:
    """Generate the case's field file in a child process (the parent never holds a field)."""
    return Path(run_child({"task": "make", "case": case, "workdir": str(work)}, timeout)["path"])


def compare(loop_file: Path, tool_file: Path, axes: list[int]) -> tuple[float, int]:
    """Largest relative difference between loop and tool k_eff, and the number of values compared."""
    loop, tool = np.load(loop_file), np.load(tool_file)
    blocks, values = loop["blocks"], loop["values"]
    worst = 0.0
    for column, a in enumerate(axes):
        coarse = tool[NAMES[a]][blocks[:, 0], blocks[:, 1], blocks[:, 2]]
        worst = max(worst, float(np.max(np.abs(values[:, column] - coarse) / np.abs(coarse))))
    return worst, values.size


def verdict(ok: bool) -> str:
    """``met`` or ``MISSED``."""
    return "met" if ok else "MISSED"


def timed_loop(spec: dict, args: argparse.Namespace) -> tuple[dict, str]:
    """Run a loop task; if it times out on all blocks, rerun on 500 random blocks and extrapolate."""
    out = run_child(spec, args.loop_timeout)
    if out is None:
        spec = dict(spec, blocks=500)
        out = run_child(spec, args.timeout)
        note = f"full loop > {args.loop_timeout:.0f} s; "
    else:
        note = ""
    if out["done"] < out["total"]:
        note += f"timed on {out['done']} random blocks, extrapolated to {out['total']}"
    else:
        note += f"all {out['total']} blocks timed"
    return out, note


def comparison(case: str, args: argparse.Namespace, paths: dict[str, Path], work: Path,
               report: dict) -> list[str]:  # fmt: skip
    """Loops (a) and (a'), the tool (b) and one global solve (g) on one case; returns failures."""
    axes = flow_axes(case)
    shape, _, block, cells = CASES[case]
    n_blocks = int(np.prod([s // c for s, c in zip(shape, cells)]))
    dims = "x".join(str(s) for s in shape[::-1] if s > 1)
    print(f"\n## {case}: {dims} cells, {block} blocks ({n_blocks}), sealed sides, border 0, "
          f"axes {', '.join(AXIS_NAMES[a] for a in axes)}", flush=True)  # fmt: skip
    base = {"case": case, "path": str(paths[case]), "task": "tool", "method": "flow", "bc": "sealed",
            "border": 0, "repeats": args.repeats}  # fmt: skip
    tool_file, lazy_file = work / f"tool_{case[:2]}.npz", work / f"lazy_{case[:2]}.npz"
    chunks = DASK_CHUNKS[case]
    runs = {
        "(b)": ("tool, NumPy input", run_child(dict(base, save=str(tool_file)), args.timeout)),
        "(b1)": ("tool, NumPy input, 1 numba thread", run_child(base, args.timeout, threads=1)),
        "(bd)": (f"tool, dask input read lazily, chunks {'x'.join(map(str, chunks[::-1]))}",
                 run_child(dict(base, chunks=chunks, save=str(lazy_file)), args.timeout)),
    }  # fmt: skip
    for key, (label, out) in runs.items():
        print(f"{key:<5}{label}: median {out['median']:.2f} s, best {out['best']:.2f} s "
              f"({', '.join(f'{t:.2f}' for t in out['times'])})", flush=True)  # fmt: skip
    rows: dict[str, Any] = {name: runs[key][1] for key, name in RUN_NAMES.items()}
    failures = []
    reference, lazy = np.load(tool_file), np.load(lazy_file)
    if not all(np.array_equal(reference[name], lazy[name]) for name in reference.files):
        failures.append(f"{case}: the dask result differs from the NumPy one")
    loops = {}
    for variant, (key, label) in LOOP_LABELS.items():
        blocks = args.loop_blocks_3d if shape[0] > 1 else 0
        save = work / f"loop_{case[:2]}_{variant}.npz"
        out, note = timed_loop(dict(base, task="loop", variant=variant, blocks=blocks, save=str(save)), args)
        worst, compared = compare(save, tool_file, axes)
        print(f"{key:<5}{label}: {out['estimate_all']:.1f} s ({note}; "
              f"{1e3 * out['seconds'] / out['done']:.2f} ms per block); max rel diff vs (b) {worst:.1e} "
              f"over {compared} values", flush=True)  # fmt: skip
        if not worst <= TOLERANCE:
            failures.append(f"{case} loop {variant} differs from the tool by {worst:.1e}")
        loops[key] = out["estimate_all"]
        rows[variant] = dict(out, max_rel_diff=worst, compared=compared, note=note)
    glob = run_child(dict(base, task="global"), args.timeout)
    if glob is None:
        print(f"(g)  one global fine solve along x: > {args.timeout:.0f} s (timed out)")
    else:
        print(f"(g)  one global fine solve along x ({glob['unknowns']} unknowns, {glob['method']}, "
              f"{glob['iterations']} it): {glob['seconds']:.2f} s (transmissibilities {glob['trans_s']:.2f} "
              f"+ solve {glob['solve_s']:.2f})", flush=True)  # fmt: skip
        rows["global"] = glob
    ratios = {}
    for tool_key in ("(b)", "(bd)"):
        t = runs[tool_key][1]["median"]
        for loop_key, seconds in loops.items():
            ratios[f"{loop_key}/{tool_key}"] = (seconds / t, 10.0)
        if glob is not None:
            ratios[f"(g)/{tool_key}"] = (glob["seconds"] / t, 1.0)
    print("ratios (tool medians; target: loop >= 10x the tool, one global solve >= the tool, all axes):")
    print("  " + "; ".join(f"{name} = {value:.1f} ({verdict(value >= target)})"
                           for name, (value, target) in ratios.items()), flush=True)  # fmt: skip
    rows["ratios"] = {name: value for name, (value, _) in ratios.items()}
    report[case] = rows
    return failures


def memory_runs(args: argparse.Namespace, paths: dict[str, Path], work: Path, report: dict) -> None:
    """Peak RSS of the runs above, and of dask runs on a larger 2D field and with larger 3D chunks."""
    print("\n## Peak memory (child processes; baseline = RSS after imports and warm-up; chunks x first)",
          flush=True)  # fmt: skip
    print(f"{'run':<34}{'field MiB':>10}{'chunk MiB':>10}{'seconds':>9}{'baseline':>10}"
          f"{'peak MiB':>10}{'peak-base':>10}")  # fmt: skip
    runs = [("2D", None), ("2D", DASK_CHUNKS["2D"]), ("2D 4M", DASK_CHUNKS["2D"]),
            ("3D", None), ("3D", DASK_CHUNKS["3D"]), ("3D", (32, 128, 128)), ("2D", "global"),
            ("3D", "global")]  # fmt: skip
    rows = []
    for case, chunks in runs:
        if chunks == "global":
            out, name, chunk_mib = report[case].get("global"), f"{case} one global solve (g)", float("nan")
            if out is None:
                continue
            seconds = out["seconds"]
        else:
            known = {None: "tool", DASK_CHUNKS[case]: "tool_dask"} if case in report else {}
            if chunks in known:
                out = report[case][known[chunks]]
            else:
                if case not in paths:
                    paths[case] = field_file(case, work, args.timeout)
                spec = {"task": "tool", "case": case, "path": str(paths[case]), "method": "flow",
                        "bc": "sealed", "border": 0, "repeats": 1, "chunks": chunks}  # fmt: skip
                out = run_child(spec, args.timeout)
            name = f"{case} dask {'x'.join(map(str, chunks[::-1]))}" if chunks else f"{case} NumPy"
            chunk_mib = float(np.prod(chunks)) * 8 / 2**20 if chunks else float("nan")
            seconds = out["best"]
        field_mib = float(np.prod(CASES[case][0])) * 8 / 2**20
        peak, before = out["peak_mib"], out["before_mib"]
        chunk = f"{chunk_mib:.2f}" if chunk_mib == chunk_mib else "-"
        print(f"{name:<34}{field_mib:>10.1f}{chunk:>10}{seconds:>9.2f}{before:>10.0f}"
              f"{peak:>10.0f}{peak - before:>10.0f}", flush=True)  # fmt: skip
        rows.append(dict(out, run=name, field_mib=field_mib, chunk_mib=chunk_mib))
    report["memory"] = rows


def other_methods(args: argparse.Namespace, paths: dict[str, Path], report: dict) -> None:
    """Times of the other 2D variants, one line each (NumPy input, median of the repeats)."""
    print("\n## 2D 1024x1024, 16x16 blocks, other variants (NumPy input)", flush=True)
    variants = [("flow", "sealed", 4), ("flow", "linear", 0), ("flow", "linear", 4),
                ("flow", "periodic", 0), ("flow", "periodic", 4),
                ("flow-transmissibility", "sealed", 0), ("renormalization", None, None)]  # fmt: skip
    rows = []
    for method, bc, border in variants:
        spec = {"task": "tool", "case": "2D", "path": str(paths["2D"]), "method": method,
                "repeats": args.repeats}  # fmt: skip
        if bc is not None:
            spec.update(bc=bc, border=border)
        out = run_child(spec, args.timeout)
        label = method + (f", bc {bc}, border {border}" if bc else "")
        print(f"{label:<46} median {out['median']:6.2f} s, best {out['best']:6.2f} s", flush=True)
        rows.append(dict(out, label=label))
    report["other_2d"] = rows


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeats", type=int, default=3, help="timed runs of the tool after the warm-up")
    parser.add_argument("--dz", type=float, default=10.0, help="3D layer thickness in m (cells are 10 m)")
    parser.add_argument("--loop-blocks-3d", type=int, default=0,
                        help="time the 3D loops on this many random blocks (0: all)")  # fmt: skip
    parser.add_argument("--loop-timeout", type=float, default=300.0,
                        help="s allowed to a loop over all blocks before it is sampled instead")  # fmt: skip
    parser.add_argument("--timeout", type=float, default=900.0, help="s allowed to any other child")
    parser.add_argument("--json", default=None, help="also write the results to this file")
    parser.add_argument("--only", choices=["2D", "3D"], default=None,
                        help="one case's comparison alone (no other variants, no memory runs)")  # fmt: skip
    parser.add_argument("--one", default=None, help=argparse.SUPPRESS)
    args = parser.parse_args()
    DZ[0] = args.dz
    if args.one:
        spec = json.loads(args.one)
        print(json.dumps(TASKS[spec["task"]](spec)))
        return
    print(f"# bench_local: {os.cpu_count()} cores, 3D cells 10 x 10 x {args.dz:g} m, "
          f"load average {os.getloadavg()[0]:.2f} at the start", flush=True)  # fmt: skip
    started = time.perf_counter()
    work = Path(tempfile.mkdtemp(prefix="upscale-bench-local-"))
    report: dict[str, Any] = {"dz": args.dz, "repeats": args.repeats}
    failures: list[str] = []
    try:
        cases = [args.only] if args.only else ["2D", "3D"]
        paths = {case: field_file(case, work, args.timeout) for case in cases}
        for case in cases:
            failures += comparison(case, args, paths, work, report)
            if case == "2D" and not args.only:
                other_methods(args, paths, report)
        if not args.only:
            memory_runs(args, paths, work, report)
    finally:
        shutil.rmtree(work, ignore_errors=True)
    total = time.perf_counter() - started
    print(f"\ntotal wall time {total:.0f} s; 1-minute load average at the end of the children "
          f"{min(LOADS):.2f} to {max(LOADS):.2f} on {os.cpu_count()} cores (above about 2, other "
          "processes shared the cores and the parallel tool lost more than the serial loops)")  # fmt: skip
    report["total_s"] = total
    report["loads"] = LOADS
    if args.json:
        Path(args.json).write_text(json.dumps(report, indent=1))
    if failures:
        raise AssertionError("; ".join(failures))


if __name__ == "__main__":
    main()
