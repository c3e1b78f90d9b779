"""Benchmark: the first use of each command after an installation, against the second.

Run on demand (not collected by pytest), from the repository's top folder::

    python tests/benchmarks/bench_first_use.py

Each command runs twice as a whole process with an empty numba cache of its
own (``NUMBA_CACHE_DIR``), as on a fresh installation: the first run compiles
the kernels it uses, the second loads them from the cache. Reported per
command: CPU seconds of the whole process (less sensitive to a busy shared
machine than wall time), the compile time the tool records (``compile_s`` in
``summary.json``, the sum of ``compile_seconds`` in ``compare.json``), and the
ratio of the first run's CPU time to the second's.
"""

from __future__ import annotations

import json
import os
import resource
import subprocess
import sys
import tempfile
from pathlib import Path

DEMO = Path(__file__).resolve().parents[2] / "demo-fields"
COMMANDS = {
    "run geometric, lognormal 8x8": ["run", DEMO / "marrowfen_lognormal.tif", "--block", "8x8",
                                     "--method", "geometric"],
    "run flow sealed, lognormal 8x8": ["run", DEMO / "marrowfen_lognormal.tif", "--block", "8x8",
                                       "--method", "flow"],
    "run flow-active sealed, channels 8x8 (no inactive cell)": ["run", DEMO / "marrowfen_channels.tif",
                                                                "--block", "8x8", "--method", "flow"],
    "run flow-transmissibility, 3D 8x8x4": ["run", DEMO / "marrowfen_3d.tif", "--dz", "2", "--block",
                                            "8x8x4", "--method", "flow-transmissibility"],
    "compare every method, channels 8x8": ["compare", DEMO / "marrowfen_channels.tif", "--block", "8x8"],
}  # fmt: skip


def _timed(args: list, out: Path, cache: Path) -> tuple[float, float]:
    """CPU seconds of the child process and the compile seconds it recorded."""
    before = resource.getrusage(resource.RUSAGE_CHILDREN)
    env = {**os.environ, "NUMBA_CACHE_DIR": str(cache)}
    upscale = Path(sys.executable).with_name("upscale")
    subprocess.run([str(upscale), "-q", *map(str, args), "--out", str(out)], env=env, check=True)
    after = resource.getrusage(resource.RUSAGE_CHILDREN)
    cpu = (after.ru_utime - before.ru_utime) + (after.ru_stime - before.ru_stime)
    if args[0] == "compare":
        methods = json.loads((out / "compare.json").read_text())["methods"]
        compiled = sum(m["compile_seconds"] for m in methods)
    else:
        compiled = json.loads((out / "summary.json").read_text())["timings_s"]["compile_s"]
    return cpu, compiled


def main() -> None:
    print("| command | first run: CPU s (compiling s) | second run: CPU s (compiling s) | first / second |")
    print("|---|---|---|---|")
    for name, args in COMMANDS.items():
        with tempfile.TemporaryDirectory() as folder:
            cache = Path(folder) / "numba-cache"
            (cpu1, c1), (cpu2, c2) = (_timed(args, Path(folder) / f"out{i}", cache) for i in (1, 2))
        print(f"| {name} | {cpu1:.1f} ({c1:.1f}) | {cpu2:.1f} ({c2:.1f}) | {cpu1 / cpu2:.1f} |", flush=True)


if __name__ == "__main__":
    main()
