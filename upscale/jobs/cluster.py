"""Where dask computes: this machine's threads, a local cluster, or an existing cluster.

With neither ``--workers`` nor ``--scheduler``, dask's threaded scheduler
runs the chunks on this machine. ``--workers N`` starts a
`dask.distributed.LocalCluster` of N single-threaded worker processes for
the run; ``--scheduler ADDRESS`` connects to a running cluster. Every
computation inside the context then goes to that cluster. Workers read the
rasters themselves from the paths in the task graph, so every worker must
reach the input files at the same path (a shared file system); only small
objects (paths, windows, options) travel from the client.
"""

from __future__ import annotations

import logging
from collections.abc import Iterator
from concurrent.futures import CancelledError
from contextlib import contextmanager

from ..errors import ClusterError, InputError
from ..optional import require

#: Seconds to wait for a scheduler before giving up.
CONNECT_TIMEOUT = 10


@contextmanager
def compute_on(workers: int | None = None, address: str | None = None) -> Iterator[int]:
    """Send dask computations to a local cluster or a scheduler for the duration of the block.

    Yields
    ------
    int
        How many workers compute (1 for the threaded scheduler: its threads
        share one process).

    Raises
    ------
    InputError
        If both are given, or the scheduler cannot be reached within `CONNECT_TIMEOUT` s.
    MissingLibraryError
        If the ``cluster`` extra (distributed) is not installed.
    """
    if workers is not None and address is not None:
        raise InputError("give `workers` (a local cluster) or `scheduler` (an existing one), not both")
    if workers is None and address is None:
        yield 1
        return
    distributed = require("distributed", "cluster")
    if workers is not None:
        if workers < 1:
            raise InputError(f"`workers` must be 1 or more, not {workers}")
        logging.getLogger("distributed").setLevel(logging.ERROR)  # its start-up chatter
        # no dashboard; the scheduler's HTTP server on any free port (a taken 8787 would warn)
        with distributed.LocalCluster(n_workers=workers, threads_per_worker=1, processes=True,
                          dashboard_address=None, scheduler_kwargs={"dashboard_address": ":0"},
                          silence_logs=logging.ERROR) as cluster, \
                distributed.Client(cluster) as client, _failures_explained():  # fmt: skip
            yield len(client.scheduler_info()["workers"])
        return
    try:
        client = distributed.Client(address, timeout=CONNECT_TIMEOUT)
    except (OSError, TimeoutError, ValueError) as exc:
        raise InputError(
            f"cannot reach the dask scheduler at {address!r} within {CONNECT_TIMEOUT} s ({exc})"
        ) from None
    with client, _failures_explained():
        yield max(1, len(client.scheduler_info()["workers"]))


@contextmanager
def _failures_explained() -> Iterator[None]:
    """Turn a cluster's failure into one clear `ClusterError`.

    A worker that dies while it runs a task (killed, out of memory) costs a
    retry: dask gives the task to another worker, up to the scheduler's
    ``distributed.scheduler.allowed-failures`` times (3 by default), so a
    run that loses a worker usually completes with the same results. Past
    that, or when the scheduler goes away, the run stops here; the output
    folder, written only at the end through a staged folder, is left as it was.
    """
    from dask.utils import key_split
    from distributed import KilledWorker
    from distributed.comm.core import CommClosedError

    try:
        yield
    except KilledWorker as exc:
        raise ClusterError(
            f"the dask cluster lost the workers running one task too many times ({key_split(exc.task)}); "
            "nothing was written — check the workers' memory limits and logs, then run again"
        ) from None
    except (CommClosedError, CancelledError) as exc:
        raise ClusterError(
            f"the dask cluster stopped answering ({type(exc).__name__}: {exc}); nothing was written "
            "— check the scheduler, then run again"
        ) from None
