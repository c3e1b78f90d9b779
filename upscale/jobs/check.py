"""The check job: the flow check of a finished run solved again from its folder."""

from __future__ import annotations

from pathlib import Path
from typing import Any

from ..check.axis import check_summary
from ..check.limits import DEFAULT_LIMIT, too_large
from ..check.wells import coarse_wells, fine_wells, place_wells
from ..export import update_summary
from ..io.package import read_coarse_field, read_package, read_package_wells
from ..io.results import read_run
from ..io.wells import read_wells
from ..methods.coarsen import refuse_bad_values


def check_folder(folder: str | Path, *, solver: str = "auto", tolerance: float = 1e-10,
                 check_limit: int = DEFAULT_LIMIT, wells: str | None = None,
                 outer_pressure: float | None = None,
                 well_connection: str = "near-well") -> dict[str, Any]:  # fmt: skip
    """Solve the flow check of the run in `folder` again and record it in its ``summary.json``.

    The fine field is read from the inputs the summary names (their SHA-256
    must match), the coarse model from the coarse-grid package alone.

    Parameters
    ----------
    folder : str or Path
        A finished run's output folder.
    solver, tolerance
        The pressure solver (`upscale.flow.solvers.SOLVERS`) and its relative
        residual tolerance.
    check_limit : int
        Fine cells solved at once; a larger field is reported as skipped.
    wells : str, optional
        A wells file (``docs/wells.md``): the well check is solved too and
        recorded as ``well_check``. The coarse wells connect as the package's
        wells table says (``wells.csv``, and the faces of ``well_faces.csv``),
        which must hold the same wells in the same blocks; a package written
        without wells has none, and its blocks (kx, ky of ``cells.csv``)
        connect as `well_connection` says.
    outer_pressure : float, optional
        Pressure on the four side faces in the well check; None: closed.
    well_connection : {'near-well', 'peaceman'}
        For a package without a wells table: how the coarse connection factors are set.

    Returns
    -------
    dict
        The updated summary.
    """
    _, fine = read_run(folder)
    refuse_bad_values(fine)  # the run checked them, but it may have recorded no SHA-256
    well_list = read_wells(wells) if wells is not None else ()
    if well_list and not too_large(fine.shape, check_limit):
        place_wells(fine, well_list, outer_pressure)  # refused before any solve
    manifest, coarse = read_package(folder)
    table = read_package_wells(folder, manifest, coarse.shape) if well_list else None
    result = check_summary(fine, coarse, solver=solver, tolerance=tolerance, max_cells=check_limit)
    if not well_list:
        return update_summary(folder, {"check": result})
    reason = too_large(fine.shape, check_limit)
    if reason:
        return update_summary(folder, {"check": result, "well_check": {"file": wells, "skipped": reason}})
    shared = fine_wells(fine, well_list, outer_pressure=outer_pressure, connection=well_connection,
                        solver=solver, tolerance=tolerance)  # fmt: skip
    found = coarse_wells(shared, read_coarse_field(folder, coarse, fine.unit), coarse_trans=coarse,
                         given=table, solver=solver, tolerance=tolerance)  # fmt: skip
    return update_summary(folder, {"check": result, "well_check": {"file": wells, **found.summary()}})
