"""``upscale check``: solve the flow check of a finished run again."""

from __future__ import annotations

import click

from ..analysis.summary import FlowCheck
from ..check.axis import check_summary
from ..export import update_summary
from ..io.package import read_package
from ..io.results import read_run
from ..methods.coarsen import refuse_bad_values
from .options import check_options, global_options
from .report import print_check


@click.command()
@click.argument("folder", type=click.Path(file_okay=False))
@check_options
@global_options
@click.pass_context
def check(ctx: click.Context, folder: str, solver: str, tolerance: float, check_limit: int) -> None:
    """Check again that the coarse grid in FOLDER passes the fine model's flow.

    Reads the run's summary.json and its fine inputs (which must be
    unchanged: their SHA-256 is compared), rebuilds the coarse model from the
    coarse-grid package alone (cells.csv, connections.csv, boundary.csv,
    manifest.json), applies the same pressure drop across each axis to both,
    prints the errors and records them in summary.json.

    \b
    Example:
      upscale check out/ --solver direct
    """
    _, fine = read_run(folder)
    refuse_bad_values(fine)  # the run checked them, but it may have recorded no SHA-256
    _, coarse = read_package(folder)
    result = check_summary(fine, coarse, solver=solver, tolerance=tolerance, max_cells=check_limit)
    recorded = update_summary(folder, {"check": result})["check"]
    if not ctx.obj["quiet"]:
        print_check(FlowCheck.from_dict(recorded))
