"""Everything a report folder holds, rendered in memory: figures as PNG and SVG, and the page."""

from __future__ import annotations

from dataclasses import dataclass

from ..caution import CAUTION
from ..compare import Comparison
from ..export.summary import versions
from .figures import build_figures, rendered
from .html import report_page


@dataclass(frozen=True)
class Bundle:
    """Rendered figures ``(name, png, svg)`` and the HTML page."""

    images: list[tuple[str, bytes, bytes]]
    page: str


def _dims(shape: tuple[int, int, int], ndim: int) -> str:
    layers, rows, cols = shape
    return f"{cols} × {rows}" + (f" × {layers}" if ndim == 3 else "")


def bundle(comparison: Comparison, *, title: str, command: list[str], layer: int | None = None) -> Bundle:
    """Render the figures and the HTML report of a comparison (or of one run).

    Parameters
    ----------
    comparison : Comparison
        With at least one method that ran.
    title : str
        Page title.
    command : list of str
        The command line that reproduces the run.
    layer : int, optional
        Fine layer shown in plan for a 3D model (default: the middle one).

    Returns
    -------
    Bundle
    """
    fine = comparison.fine
    plots = build_figures(comparison, fine.unit, layer=layer)
    images = []
    for plot in plots:
        png, svg = rendered(plot)
        images.append((plot.name, png, svg))
    grid = fine.grid
    job = {
        "title": title,
        "command": command,
        "inputs": [{"role": s.role, "path": s.path, "sha256": s.sha256} for s in fine.sources],
        "unit": fine.unit,
        "grid": f"{_dims(fine.shape, fine.ndim)} cells of {grid.dx[0]:g} m × {grid.dy[0]:g} m"
        + (f", {grid.dz.sum():g} m thick in all" if fine.ndim == 3 else ""),
        "block": f"{comparison.block} fine cells (x first)",
        "caution": CAUTION,
        "versions": versions(),
    }
    page = report_page(comparison, [(p, png) for p, (_, png, _) in zip(plots, images)], job)
    return Bundle(images, page)
