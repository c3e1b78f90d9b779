"""The check job: the flow check of a finished run solved again from its folder."""

from __future__ import annotations

from pathlib import Path
from typing import Any

from ..check.axis import check_summary
from ..check.limits import DEFAULT_LIMIT
from ..export import update_summary
from ..io.package import read_package
from ..io.results import read_run
from ..methods.coarsen import refuse_bad_values


def check_folder(folder: str | Path, *, solver: str = "auto", tolerance: float = 1e-10,
                 check_limit: int = DEFAULT_LIMIT) -> dict[str, Any]:  # fmt: skip
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

    Returns
    -------
    dict
        The updated summary.
    """
    _, fine = read_run(folder)
    refuse_bad_values(fine)  # the run checked them, but it may have recorded no SHA-256
    _, coarse = read_package(folder)
    result = check_summary(fine, coarse, solver=solver, tolerance=tolerance, max_cells=check_limit)
    return update_summary(folder, {"check": result})
