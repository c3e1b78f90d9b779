"""Benchmark: where the first use of a command spends its compiling, kernel by kernel.

Run on demand (not collected by pytest), from the repository's top folder::

    python tests/benchmarks/bench_compile.py [flow|flow-active|flow-transmissibility|geometric|compare]
                                             [--top 25]

Runs one command of `bench_first_use.py` inside this process with an empty
numba cache of its own (``NUMBA_CACHE_DIR``, set before numba is imported),
and listens to numba's compile events (``numba:compile``, one per dispatcher
and signature, nested when a kernel types a kernel it calls) and to its
compiler passes (``numba:run_pass``). Times are CPU seconds of this process
(``time.process_time``: a shared machine's other loads count less than in wall time),
*exclusive*: a kernel's time leaves out the kernels compiled inside it, a
pass's time the passes nested in it. Reported: the whole process, the
compiling, the run's own record of it (``timings_s.compile_s`` of
``summary.json``, wall seconds), every kernel compiled (with its signature
count) and the passes.
"""

from __future__ import annotations

import argparse
import json
import math
import os
import sys
import tempfile
import time
from collections import defaultdict
from pathlib import Path

FOLDER = Path(tempfile.mkdtemp())
os.environ["NUMBA_CACHE_DIR"] = str(FOLDER / "numba-cache")  # before numba reads its configuration
sys.path.insert(0, str(Path(__file__).resolve().parent))

from bench_first_use import COMMANDS  # noqa: E402
from numba.core import event  # noqa: E402


class _Exclusive(event.Listener):
    """Exclusive CPU seconds per name from start/end events that nest."""

    def __init__(self, name_of) -> None:
        self.name_of = name_of
        self.stack: list[list] = []  # [name, start, time spent in children]
        self.seconds: dict[str, float] = defaultdict(float)
        self.calls: dict[str, int] = defaultdict(int)
        self.outer = 0.0

    def on_start(self, happened) -> None:
        self.stack.append([self.name_of(happened.data), time.process_time(), 0.0])

    def on_end(self, happened) -> None:
        name, start, children = self.stack.pop()
        spent = time.process_time() - start
        self.seconds[name] += spent - children
        self.calls[name] += 1
        if self.stack:
            self.stack[-1][2] += spent
        else:
            self.outer += spent


def _kernel_name(data: dict) -> str:
    dispatcher = data["dispatcher"]
    return f"{dispatcher.py_func.__module__}.{dispatcher.py_func.__qualname__}"


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("command", nargs="?", default="flow",
                        choices=["geometric", "flow", "flow-active", "flow-transmissibility",
                                 "compare"])  # fmt: skip
    parser.add_argument("--top", type=int, default=25, help="kernels and passes listed")
    args = parser.parse_args()
    start = time.process_time()
    kernels = _Exclusive(_kernel_name)
    passes = _Exclusive(lambda data: data["name"].split(" [")[0])
    event.register("numba:compile", kernels)
    event.register("numba:run_pass", passes)
    from upscale.cli.main import cli

    name = next(n for n in COMMANDS if n.split()[1].rstrip(",") == args.command.replace("compare", "every"))
    command = [*map(str, COMMANDS[name]), "--out", str(FOLDER / "out")]
    try:
        cli.main(["-q", *command], standalone_mode=False)
    except SystemExit:
        pass
    total = time.process_time() - start
    summary = FOLDER / "out" / "summary.json"
    recorded = json.loads(summary.read_text())["timings_s"]["compile_s"] if summary.exists() else math.nan
    print(f"{name}: process {total:.1f} CPU s (imports included), compiling {kernels.outer:.1f} CPU s, "
          f"{sum(kernels.calls.values())} compilations; compile_s recorded by the run {recorded:.1f} s "
          "(wall)")  # fmt: skip
    print("\n| kernel | compilations | exclusive CPU s |\n|---|---|---|")
    for kernel, seconds in sorted(kernels.seconds.items(), key=lambda kv: -kv[1])[: args.top]:
        print(f"| {kernel} | {kernels.calls[kernel]} | {seconds:.2f} |")
    print("\n| compiler pass | runs | exclusive CPU s |\n|---|---|---|")
    for step, seconds in sorted(passes.seconds.items(), key=lambda kv: -kv[1])[: args.top]:
        print(f"| {step} | {passes.calls[step]} | {seconds:.2f} |")


if __name__ == "__main__":
    main()
