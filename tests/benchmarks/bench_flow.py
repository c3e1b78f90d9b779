"""Benchmark: the fine-scale pressure solve, multigrid against a sparse direct solve.

Run on demand (not collected by pytest)::

    python tests/benchmarks/bench_flow.py [--direct-timeout 600]

For 2D lognormal fields of 0.26, 1 and 4 million cells and a 3D one of 1
million, times one pressure-drop solve along x (assembly, solver set-up and
solution) with the default multigrid solver and with SuperLU (scipy's
sparse direct solver, the `spsolve` route) on the same system. Each solve
runs in a child process of its own with a time limit, so a direct solve
that does not finish is reported as such rather than stalling the run.

Targets (issue 3): multigrid >= 4x faster than direct at 1 million cells in
2D and >= 10x in 3D; 4x the cells -> <= 5x the time.
"""

from __future__ import annotations

import argparse
import json
import subprocess
import sys
import time

CASES = {
    "2D 0.26M": ((1, 512, 512), (1.0, 8.0, 8.0)),
    "2D 1M": ((1, 1024, 1024), (1.0, 8.0, 8.0)),
    "2D 4M": ((1, 2048, 2048), (1.0, 8.0, 8.0)),
    "3D 1M": ((64, 128, 128), (2.0, 8.0, 8.0)),
}


def one(case: str, solver: str) -> dict:
    """Build the case's field and time one solve (runs in the child process)."""
    import resource

    from upscale.field import Field
    from upscale.flow import pressure_drop, transmissibilities
    from upscale.gallery.fields import lognormal_field

    shape, lengths = CASES[case]
    k = lognormal_field(shape, lengths, geometric_mean=100.0, sigma_ln=1.0, seed=33_018_457)
    field = Field.from_arrays(k, dz=1.0, three_d=shape[0] > 1)
    trans = transmissibilities(field)
    start = time.perf_counter()
    flow = pressure_drop(trans, "x", solver=solver)
    seconds = time.perf_counter() - start
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 2**20
    return {"seconds": seconds, "k_eff": flow.k_eff, "iterations": flow.iterations,
            "residual": flow.residual, "mass_balance": flow.mass_balance, "peak_gib": peak}  # fmt: skip


def timed(case: str, solver: str, timeout: float) -> dict | None:
    """Run `one` in a child process; None if it does not finish within `timeout` s."""
    try:
        done = subprocess.run(
            [sys.executable, __file__, "--one", case, solver],
            capture_output=True, text=True, timeout=timeout, check=True,
        )  # fmt: skip
    except subprocess.TimeoutExpired:
        return None
    return json.loads(done.stdout.strip().splitlines()[-1])


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--direct-timeout", type=float, default=600.0)
    parser.add_argument("--one", nargs=2, metavar=("CASE", "SOLVER"), help=argparse.SUPPRESS)
    args = parser.parse_args()
    if args.one:
        print(json.dumps(one(*args.one)))
        return
    print(f"{'case':<10}{'amg s':>9}{'it':>5}{'direct s':>11}{'direct/amg':>12}"
          f"{'k_eff rel diff':>16}{'amg peak GiB':>14}")  # fmt: skip
    amg_times = {}
    for case in CASES:
        amg = timed(case, "amg", 3600)
        direct = timed(case, "direct", args.direct_timeout)
        amg_times[case] = amg["seconds"]
        if direct:
            ratio = f"{direct['seconds'] / amg['seconds']:.1f}"
            diff = f"{abs(amg['k_eff'] - direct['k_eff']) / direct['k_eff']:.1e}"
            shown = f"{direct['seconds']:.1f}"
        else:
            ratio = f"> {args.direct_timeout / amg['seconds']:.0f}"
            diff = "-"
            shown = f"> {args.direct_timeout:.0f}"
        print(f"{case:<10}{amg['seconds']:>9.2f}{amg['iterations']:>5}{shown:>11}{ratio:>12}"
              f"{diff:>16}{amg['peak_gib']:>14.2f}", flush=True)  # fmt: skip
    growth = amg_times["2D 4M"] / amg_times["2D 1M"]
    print(f"2D time growth for 4x the cells: 0.26M -> 1M {amg_times['2D 1M'] / amg_times['2D 0.26M']:.2f}x, "
          f"1M -> 4M {growth:.2f}x")  # fmt: skip


if __name__ == "__main__":
    main()
