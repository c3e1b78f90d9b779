"""A dask worker that dies during ``upscale run --scheduler``: retried, or one clear error.

What is tested
--------------
Each test starts a ``dask.distributed.LocalCluster`` of two single-threaded
worker processes (each under a nanny, which starts a new worker when one
dies), runs the installed ``upscale`` console script against it in a
subprocess — the flow method with a border on a 1024 x 1024 lognormal field
in many small chunks, several seconds of work — and SIGKILLs one worker
while it holds finished results and runs a task of that run.

* With the scheduler's default ``allowed-failures``, the run completes
  (exit 0): the tasks that were running on the dead worker go to another
  one, and the results lost with it are computed again. kx.tif and ky.tif
  equal, bit for bit, `upscale.coarsen` of the same field on dask's threaded
  scheduler in this process; the nanny replaced the killed worker.
* With ``allowed-failures`` 0 the first loss is fatal: exit 1, one line on
  stderr starting "upscale: error: the dask cluster lost the workers", no
  traceback, and the complete result already in the output folder (the run
  had ``--overwrite``) is left byte for byte as it was, with no staging
  folder beside it.

The retry behaviour relied on is dask's: a task that was running on a worker
that died is counted "suspicious" and rescheduled until it has been running
on more than ``distributed.scheduler.allowed-failures`` (default 3) dying
workers, then fails with ``KilledWorker`` — dask.distributed documentation,
"Resilience" (allowed-failures, worker loss).
"""

from __future__ import annotations

import os
import signal
import subprocess
import time

import dask
import numpy as np
import pytest
import rasterio
from conftest import UPSCALE_EXE, partial_leftovers, snapshot, write_raster

import upscale
from upscale.gallery.problems import uncorrelated_lognormal
from upscale.parallel import _run_region_chunk

#: Fine cells of the slow field: big enough that the run on two single-threaded
#: workers lasts several seconds, so a worker can be killed in the middle of it.
SIZE = (1024, 1024)
#: The slow run: the flow method with a border in many small chunks (a few hundred tasks).
FLOW = ["--block", "8x8", "--method", "flow", "--border", "2", "--no-check", "--chunk", "128kB"]
#: Name in the dask keys of the tasks that solve the local flow problems of a chunk of blocks.
SOLVES = _run_region_chunk.__name__
#: Seconds allowed for a run to reach the point where a worker is killed, and to end.
DEADLINE = 60


@pytest.fixture(scope="module")
def slow_field(tmp_path_factory):
    """The 1024 x 1024 field and its flow upscaling on dask's threaded scheduler."""
    path = write_raster(tmp_path_factory.mktemp("slow") / "field.tif",
                        uncorrelated_lognormal(SIZE, seed=4_711))
    with dask.config.set(scheduler="threads"):  # not a cluster: the reference is computed here
        expected = upscale.coarsen(upscale.read_field(path), "8x8", "flow", border=2)
    return path, expected


def _cluster():
    from dask.distributed import LocalCluster

    # dashboard_address=None still binds the scheduler's HTTP routes to port 8787 when it is free
    # and warns otherwise (an error under this suite's filterwarnings); ":0" takes any free port.
    return LocalCluster(n_workers=2, threads_per_worker=1, processes=True, dashboard_address=None,
                        scheduler_kwargs={"dashboard_address": ":0"})  # fmt: skip


def _pids(client):
    """Worker address -> process id of the workers that answer."""
    return client.run(os.getpid, on_error="ignore")


def _start(field, out, address, *extra):
    command = [str(UPSCALE_EXE), "run", str(field), *FLOW, "--scheduler", address, "--out", str(out),
               *extra]  # fmt: skip
    return subprocess.Popen(command, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
                            cwd=out.parent)  # fmt: skip


def _solves(key):
    """Whether `key` is the result of the local flow solves of a chunk."""
    name = key[0] if isinstance(key, tuple) else key
    return str(name).startswith(f"{SOLVES}-")


def _kill_a_busy_worker(client, run):
    """SIGKILL a worker that holds a result of the local flow solves of `run` and is running a task.

    What the rest of the run still needs from the worker's memory is lost with
    it and computed again; the task it was running is retried (or, past the
    allowed failures, fails the run).

    Returns the killed worker's pid; fails if `run` ended before that moment came.
    """
    pids = _pids(client)
    deadline = time.monotonic() + DEADLINE
    while time.monotonic() < deadline:
        assert run.poll() is None, f"the run ended before a worker could be killed: {run.stderr.read()}"
        processing, held = client.processing(), client.has_what()
        busy = [w for w in sorted(processing) if processing[w] and w in pids
                and any(_solves(key) for key in held.get(w, ()))]  # fmt: skip
        if busy:
            pid = pids[busy[0]]
            assert run.poll() is None  # the run is still going when its worker dies
            os.kill(pid, signal.SIGKILL)
            return pid
        time.sleep(0.02)
    pytest.fail(f"no worker held a flow-solve result while running a task within {DEADLINE} s")


def _wait_for_replacement(client, killed, before):
    deadline = time.monotonic() + DEADLINE
    while time.monotonic() < deadline:
        pids = _pids(client)
        if len(pids) == 2 and killed not in pids.values():
            return pids
        time.sleep(0.1)
    pytest.fail(f"the nanny did not replace worker {killed} within {DEADLINE} s: {before} -> {_pids(client)}")


def _read(path):
    with rasterio.open(path) as src:
        return src.read()


@pytest.mark.slow
def test_killed_worker_is_replaced_and_the_result_is_unchanged(slow_field, tmp_path):
    from dask.distributed import Client

    field, expected = slow_field
    out = tmp_path / "coarse"
    with _cluster() as cluster, Client(cluster) as client:
        client.wait_for_workers(2)
        before = _pids(client)
        run = _start(field, out, cluster.scheduler_address)
        try:
            killed = _kill_a_busy_worker(client, run)
            stdout, stderr = run.communicate(timeout=DEADLINE)
        finally:
            run.kill()
        assert killed in before.values()
        after = _wait_for_replacement(client, killed, before)
        assert set(after.values()) != set(before.values())
        # the dead worker's task was given to another one: dask counts it as suspicious
        suspicious = client.run_on_scheduler(
            lambda dask_scheduler: sum(tp.suspicious for tp in dask_scheduler.task_prefixes.values())
        )
    assert run.returncode == 0, stderr
    assert "Traceback" not in stderr
    assert suspicious >= 1
    assert "wrote kx.tif, ky.tif" in stdout
    np.testing.assert_array_equal(_read(out / "kx.tif"), expected.coarse.kx)
    np.testing.assert_array_equal(_read(out / "ky.tif"), expected.coarse.ky)
    assert partial_leftovers(tmp_path) == []


@pytest.mark.slow
def test_workers_lost_too_often_stop_the_run_and_keep_the_previous_result(slow_field, tmp_path):
    from dask.distributed import Client

    field, _ = slow_field
    out = tmp_path / "coarse"
    small = write_raster(tmp_path / "small.tif", uncorrelated_lognormal((64, 48), seed=12))
    done = subprocess.run([str(UPSCALE_EXE), "run", str(small), "--block", "8x8", "--method", "geometric",
                           "--out", str(out)], capture_output=True, text=True, timeout=DEADLINE)  # fmt: skip
    assert done.returncode == 0, done.stderr
    previous = snapshot(out)
    assert {"summary.json", "kx.tif", "ky.tif"} <= previous.keys()

    # the scheduler runs in this process, so it reads this setting when it starts
    with dask.config.set({"distributed.scheduler.allowed-failures": 0}):
        cluster = _cluster()
    with cluster, Client(cluster) as client:
        client.wait_for_workers(2)
        assert client.run_on_scheduler(lambda dask_scheduler: dask_scheduler.allowed_failures) == 0
        run = _start(field, out, cluster.scheduler_address, "--overwrite")
        try:
            _kill_a_busy_worker(client, run)
            stdout, stderr = run.communicate(timeout=DEADLINE)
        finally:
            run.kill()
    assert run.returncode == 1, stderr
    assert stdout == ""
    lines = stderr.splitlines()
    assert len(lines) == 1, stderr
    assert lines[0].startswith("upscale: error: the dask cluster lost the workers"), stderr
    assert "Traceback" not in stderr
    assert snapshot(out) == previous
    assert partial_leftovers(tmp_path) == []
