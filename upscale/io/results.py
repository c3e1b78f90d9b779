"""Read a finished run back: its summary and its fine field.

`upscale check DIR` uses this to solve the fine half of the flow check
again. The fine inputs are read from the paths the summary records and must
still have the same SHA-256; the coarse half comes from the run's
coarse-grid package alone (`upscale.io.package`).
"""

from __future__ import annotations

import json
from pathlib import Path

from ..errors import InputError
from ..field import Field
from ..grid import BlockSpec
from .geometry import GEOMETRY_ROLES
from .read import read_field, sha256

SUMMARY = "summary.json"


def read_run(folder: str | Path) -> tuple[dict, Field]:
    """Load the summary and the fine field of an output folder of ``upscale run``.

    Parameters
    ----------
    folder : str or Path
        The folder given as ``--out`` to the run.

    Returns
    -------
    summary : dict
        The run's ``summary.json``.
    fine : Field
        The fine field as the run used it (cut to the template's whole cells
        with ``--grid-like``, cropped to whole blocks if it cropped).

    Raises
    ------
    InputError
        If the folder holds no complete run, or an input changed since the run.
    """
    folder = Path(folder)
    path = folder / SUMMARY
    if not path.is_file():
        raise InputError(f"{folder}: no {SUMMARY} here, so no complete upscale run to check")
    try:
        summary = json.loads(path.read_text())
        inputs = {item["role"]: item for item in summary["inputs"]}
        read = summary["read"] or {}
        block = summary["block"]
    except (ValueError, KeyError, TypeError) as exc:
        raise InputError(f"{path}: not a summary written by upscale run ({exc})") from None
    for role, item in inputs.items():
        source = Path(item["resolved"])
        if not source.is_file():
            raise InputError(f"{source}: the run's {role} input is gone; it is needed to check again")
        if item["sha256"] and sha256(source) != item["sha256"]:
            raise InputError(f"{source}: the run's {role} input changed since the run (SHA-256 differs)")
    paths = {role: inputs[role]["resolved"] for role in ("ky", "kz", *GEOMETRY_ROLES) if role in inputs}
    fine = read_field(inputs["kx"]["resolved"], checksum=False, **paths, **read)
    grid_like = summary.get("grid_like")
    if grid_like is not None:  # the rows and columns under the template's whole cells
        fine = fine.window(slice(*grid_like["rows"]), slice(*grid_like["columns"]))
    # runs recorded before the zero-k rule kept their zeros
    spec = BlockSpec.from_summary(block)
    fine = fine.leading(spec.used_shape(fine.shape))
    return summary, fine.in_unit(summary.get("unit", fine.unit))  # the run's --out-unit
