"""The plan job: every method at every block size on one field, checked once, written to a folder.

`plan_file` is ``upscale plan``: it reads the field, refuses before any work
what the check cannot rank or a plan cannot share (`upscale.analysis.plan.check_blocks`),
checks every method at every block against one set of fine solves, and
writes ``plan.json``, the figure and ``report.html``.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

from ..analysis.compare import Candidate
from ..analysis.plan import Plan, check_blocks, check_max_error, plan_blocks
from ..analysis.plan_record import PlanRecord, plan_record
from ..export.comparison import PLAN, write_report_folder
from ..grid import BlockSpec
from ..io import read_field
from ..steps import Say, Steps, silent
from .compare import refuse_comparison, wells_of_file
from .run import with_layers


def plan_file(path: str, blocks: list[BlockSpec], chosen: list[Candidate], out: str | Path, *,
              read: dict[str, Any], max_error: float = 0.05, chunk_bytes: int | None = None,
              solver: str = "auto", tolerance: float = 1e-10, check_limit: int = 20_000_000,
              recorded_read: dict[str, Any] | None = None, command: list[str] | None = None,
              overwrite: bool = False, say: Say = silent, wells: str | None = None,
              outer_pressure: float | None = None,
              well_connection: str = "near-well") -> tuple[Plan, PlanRecord]:  # fmt: skip
    """Plan the block size of the field in `path` and write ``plan.json``, the figure and the page.

    Parameters
    ----------
    path : str
        The fine field.
    blocks : list of BlockSpec
        Block sizes, finest first, with the same rules; their layers may be
        grouped, explicitly or automatically (chosen from the field, once each).
    chosen : list of Candidate
        From `upscale.analysis.compare.candidates`.
    out : str or Path
        The plan's folder.
    read : dict
        Keyword arguments of `upscale.read_field`.
    max_error : float
        Largest check error accepted, a fraction in (0, 1).
    chunk_bytes, solver, tolerance, check_limit
        As for a comparison (`upscale.jobs.compare.compare_file`).
    recorded_read, command
        Recorded in the outputs.
    overwrite : bool
        Replace the results in a folder that holds some.
    say : callable, optional
        Receives progress lines (silent by default).
    wells, outer_pressure, well_connection : optional
        A wells file and how to drive its wells, as for a comparison: every
        method at every block is also checked by them (one fine solve).

    Returns
    -------
    (Plan, PlanRecord)
        The plan, and the content of ``plan.json`` as written.

    Raises
    ------
    InputError
        A field past `check_limit` or the memory, a block list `check_blocks`
        refuses, a `max_error` out of range (all before any work).
    """
    check_max_error(max_error)
    chunk = blocks[-1].chunk_cells if blocks else (1, 1, 1)
    fine = read_field(path, chunk_bytes=chunk_bytes, block=chunk, **read)
    refuse_comparison(fine, check_limit, None)
    blocks, layers, fine = with_layers(path, blocks, fine, chunk_bytes=chunk_bytes, read=read)
    check_blocks(blocks, fine.shape, fine.ndim)
    shared = wells_of_file(fine, blocks[0], wells, (outer_pressure, well_connection), solver, tolerance, say)
    plan = plan_blocks(fine, blocks, chosen, max_error=max_error, solver=solver, tolerance=tolerance,
                       report=say, say=say, wells=shared, layers=layers)  # fmt: skip
    record = plan_record(plan, command=command or [], read=recorded_read)
    from ..report.bundle import plan_bundle  # matplotlib: the figures extra

    with Steps(say)(None, "drawing the figure and writing"):
        made = plan_bundle(record, title=f"upscale — how coarse can {path} go?", command=command or [])
        write_report_folder(out, record, made.images, made.page, marker=PLAN, overwrite=overwrite)
    return plan, record
