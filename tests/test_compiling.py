"""Compiling the kernels on first use: told apart from the work, done once, one copy each.

What is tested
--------------
* A step of a job leaves out the time numba spends compiling a kernel on its
  first use and sums it apart as ``compile_s`` (a new kernel, really
  compiled, inside a step).
* With an empty numba cache (a fresh installation), ``upscale compare``
  records each method's compiling as ``compile_seconds``, apart from its
  ``seconds``; the same command again with the same cache compiles nothing:
  a user pays the first-use cost once. Before, the first ``compare`` of the
  channel demo listed flow-transmissibility at 12.98 s against 0.35 s on the
  second run, and ``summary.json`` recorded 16.4 s against 0.87 s.
* The local flow solves compile one copy of each kernel: a literal constant
  passed between kernels (a face side of 0 or 1, the sealed condition) made
  numba compile four copies of ``_face`` and two of five other kernels
  (measured: 50.6 s of compiling for the channel comparison, now 40.8 s).
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
import textwrap
import time

import numba as nb
import numpy as np
import pytest
from conftest import UPSCALE_EXE, write_raster

from upscale.steps import Steps


def _fresh_cache_env(cache) -> dict[str, str]:
    return {**os.environ, "NUMBA_CACHE_DIR": str(cache)}


def test_a_step_leaves_first_use_compilation_out():
    @nb.njit(cache=False)
    def kernel(values):  # new to this process: compiled on its first call
        return values.sum()

    steps = Steps()
    start = time.perf_counter()
    with steps("upscale_s", "upscaling"):
        kernel(np.arange(10.0))
    wall = time.perf_counter() - start
    timings = steps.timings
    assert timings["compile_s"] > 0
    assert abs(timings["upscale_s"] + timings["compile_s"] - wall) < 0.01 * wall + 1e-3
    with steps("check_s", "checking"):
        kernel(np.arange(10.0))  # compiled already
    assert steps.timings["compile_s"] == timings["compile_s"]


@pytest.mark.slow
def test_compare_records_first_use_compilation_apart_and_only_once(tmp_path):
    k = np.random.default_rng(760_413).lognormal(3.0, 1.0, (24, 24))
    field = write_raster(tmp_path / "k.tif", k)
    compiled = []
    for attempt in ("first", "second"):
        out = tmp_path / attempt
        subprocess.run([str(UPSCALE_EXE), "-q", "compare", str(field), "--block", "4x4", "--methods",
                        "geometric,harmonic", "--out", str(out)], env=_fresh_cache_env(tmp_path / "cache"),
                       capture_output=True, text=True, timeout=600, check=True)  # fmt: skip
        methods = json.loads((out / "compare.json").read_text())["methods"]
        assert all(m["seconds"] >= 0 and m["compile_seconds"] >= 0 for m in methods)
        compiled.append({m["name"]: m["compile_seconds"] for m in methods})
    assert compiled[0]["geometric"] > 0  # the block kernels compiled on first use
    assert set(compiled[1].values()) == {0}  # and were loaded from the cache the second time


@pytest.mark.slow
def test_local_solves_compile_one_copy_of_each_kernel(tmp_path):
    script = textwrap.dedent("""
        import numpy as np
        from numba.core.registry import CPUDispatcher
        from upscale import Field, coarsen
        from upscale.flow import local, paths
        k = np.random.default_rng(318_275).lognormal(2.0, 1.0, (12, 12))
        coarsen(Field.from_arrays(k), "4x4", "flow", bc="sealed", border=1)
        print("whole boxes: graph search compiled", bool(paths.live_faces.signatures))
        k[5, 6] = np.nan  # an inactive cell: faces of its boxes may carry no flow
        field = Field.from_arrays(k)
        coarsen(field, "4x4", "flow", bc="sealed", border=1)
        coarsen(field, "4x4", "flow-transmissibility").transmissibilities()
        for module in (local, paths):
            for name, kernel in sorted(vars(module).items()):
                if isinstance(kernel, CPUDispatcher) and kernel.signatures:
                    print(module.__name__, name, len(kernel.signatures))
    """)
    # an empty cache, so that every kernel is compiled here (a cached one shows no signatures)
    done = subprocess.run([sys.executable, "-c", script], env=_fresh_cache_env(tmp_path / "cache"),
                          capture_output=True, text=True, timeout=600, check=True)  # fmt: skip
    lines = done.stdout.splitlines()
    assert lines[0] == "whole boxes: graph search compiled False"  # pruned by type (flow.paths.all_whole)
    counts = {line.rsplit(" ", 1)[0]: int(line.rsplit(" ", 1)[1]) for line in lines[1:]}
    expected = {"upscale.flow.local _face", "upscale.flow.local _assemble", "upscale.flow.paths live_faces"}
    assert expected <= counts.keys()
    # the two solver entries: one copy with the graph search and one without (``whole`` None or True)
    entries = {"upscale.flow.local _tensors", "upscale.flow.local _pairs"}
    assert {name: n for name, n in counts.items() if n != (2 if name in entries else 1)} == {}
