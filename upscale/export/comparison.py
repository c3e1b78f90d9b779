"""Write a comparison: ``compare.json``, the figures (PNG and SVG) and ``report.html``."""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any

import numpy as np

from ..analysis.compare import Comparison, Entry
from ..analysis.summary import grid_summary, jsonable, versions, working_folder
from ..caution import CAUTION
from ..field import PERMEABILITY
from .staging import staged_folder

#: Name of the comparison file; written last, it marks a complete comparison folder.
COMPARE = "compare.json"


def compare_summary(comparison: Comparison, *, command: list[str] | None = None,
                    read: dict[str, Any] | None = None) -> dict[str, Any]:  # fmt: skip
    """A comparison as JSON-ready data.

    Per method: ``name`` (label), ``method``, ``parameters``, ``rank`` (null if it
    failed), ``error`` (why it failed, or null), ``seconds`` (without compiling
    kernels), ``compile_seconds`` (compiling kernels on first use), ``coarse_mean`` (per
    permeability, over active blocks), ``check`` — per axis the same
    structure as the ``check`` of ``summary.json`` — and ``zero_k`` (what the
    zero-k rule did, as ``active.zero_k`` of ``summary.json``). ``best`` names the top method,
    ``best_along`` the best one along each axis.
    """
    fine = comparison.fine
    methods = []
    for entry in comparison.entries:
        item: dict[str, Any] = {
            "name": entry.candidate.label,
            "method": entry.candidate.method,
            "parameters": entry.candidate.options,
            "rank": entry.rank,
            "error": entry.error,
            "seconds": entry.seconds,
            "compile_seconds": entry.compiling,
            "coarse_mean": None,
            "check": None,
            "zero_k": None,
        }
        if entry.result is not None:
            coarse = entry.result.coarse
            item["coarse_mean"] = {
                PERMEABILITY[a]: float(np.nanmean(getattr(coarse, PERMEABILITY[a]))) for a in fine.axes
            }
            item["check"] = {axis: check.summary() for axis, check in entry.checks.items()}
            item["zero_k"] = entry.result.zeros.summary()
        methods.append(item)
    spec = comparison.block
    return jsonable({
        "tool": "upscale",
        "versions": versions(),
        "command": command,
        "working_folder": working_folder(command),
        "inputs": [{"role": s.role, "path": s.path, "resolved": str(Path(s.path).resolve()),
                    "sha256": s.sha256} for s in fine.sources],
        "read": read,
        "unit": fine.unit,
        "block": spec.summary(),
        "dimensions": fine.ndim,
        "fine": grid_summary(fine.grid),
        "ranking": "largest |rel_error| over the axes, smallest first",
        "methods": methods,
        "best": comparison.best.candidate.label if comparison.best else None,
        "best_along": {axis: _label(comparison.best_along(axis)) for axis in fine.axes},
        "caution": CAUTION,
    })  # fmt: skip


def _label(entry: Entry | None) -> str | None:
    return entry.candidate.label if entry is not None else None


def write_figures(stage: Path, images: list[tuple[str, bytes, bytes]]) -> list[str]:
    """Write each figure as ``figures/NAME.png`` and ``.svg`` under `stage`; the names written."""
    folder = stage / "figures"
    folder.mkdir(exist_ok=True)
    files = []
    for name, png, svg in images:
        (folder / f"{name}.png").write_bytes(png)
        (folder / f"{name}.svg").write_bytes(svg)
        files += [f"figures/{name}.png", f"figures/{name}.svg"]
    return files


def write_comparison(
    folder: str | Path,
    summary: dict[str, Any],
    images: list[tuple[str, bytes, bytes]],
    page: str,
    *,
    overwrite: bool = False,
) -> None:
    """Write a comparison folder all at once (staged, then moved into place).

    Parameters
    ----------
    folder : str or Path
        Output folder.
    summary : dict
        From `compare_summary`; written as ``compare.json``, last.
    images : list of (str, bytes, bytes)
        Each figure's name, PNG and SVG bytes.
    page : str
        The HTML report, written as ``report.html``.
    overwrite : bool
        Replace the results in a folder that holds some.
    """
    with staged_folder(folder, overwrite, marker=COMPARE) as stage:
        files = write_figures(stage, images) + ["report.html"]
        (stage / "report.html").write_text(page, encoding="utf-8")
        summary = dict(summary, files=files)
        (stage / COMPARE).write_text(json.dumps(summary, indent=2, allow_nan=False) + "\n")
