"""``upscale check``: solve the flow check of a finished run again."""

from __future__ import annotations

import click

from ..analysis.summary import FlowCheck
from ..jobs.check import check_folder
from .options import check_options, well_options
from .report import print_check, print_well_check
from .settings import global_options


@click.command()
@click.argument("folder", type=click.Path(file_okay=False))
@check_options
@well_options
@global_options
@click.pass_context
def check(ctx: click.Context, folder: str, solver: str, tolerance: float, check_limit: int, wells: str | None,
          outer_pressure: float | None, well_connection: str) -> None:  # fmt: skip
    """Check again that the coarse grid in FOLDER passes the fine model's flow.

    Reads the run's summary.json and its fine inputs (which must be
    unchanged: their SHA-256 is compared), rebuilds the coarse model from the
    coarse-grid package alone (cells.csv, connections.csv, boundary.csv,
    manifest.json), applies the same pressure drop across each axis to both,
    prints the errors and records them in summary.json. With --wells, the
    wells are also driven on both grids and the well check is recorded as
    well_check: the coarse wells connect as the package's wells table says
    (wells.csv, with its near-well faces, well_faces.csv), or, for a package
    written without wells, as --well-connection sets them on its blocks.

    \b
    Example:
      upscale check out/ --solver direct
      upscale check out/ --wells wells.csv
    """
    summary = check_folder(folder, solver=solver, tolerance=tolerance, check_limit=check_limit, wells=wells,
                           outer_pressure=outer_pressure, well_connection=well_connection)  # fmt: skip
    if not ctx.obj["quiet"]:
        print_check(FlowCheck.from_dict(summary["check"]), summary.get("unit", "mD"))
        if wells is not None:
            print_well_check(summary["well_check"])
