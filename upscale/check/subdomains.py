"""The flow check on sub-domains, when the fine model is too large to solve whole.

Beyond ``--check-limit`` fine cells the global fine solve is not run — the
run says so — and the check is made instead on a fixed, documented set of
windows: up to 3 x 3 windows of whole blocks (all layers), spread evenly
over the map (first, middle and last position along each axis), each as
large as the limit allows. In every window the fine cells and the coarse
blocks are solved under the same pressure drop across each axis (fixed
pressures on the window's two faces across the axis, the other faces
closed), and the held-out corner-to-corner flow between the window's corner
blocks, exactly as the global check does on the whole domain. Inside a
window the coarse model uses the run's own transmissibilities (directly
upscaled ones included); on the window's sides that are not the domain's
edge, the blocks' half transmissibilities come from their permeabilities
by the half-block rule. The per-window errors and their spread (min,
median, max) are reported.
"""

from __future__ import annotations

import math
from dataclasses import replace
from typing import Any

import numpy as np

from ..field import Field
from ..flow import Transmissibilities, transmissibilities
from ..grid import BlockSpec
from .axis import HELD_OUT, coarse_check, fine_solves

#: Windows per map axis (first, middle, last position).
PER_AXIS = 3


def plan_windows(shape: tuple[int, int, int], block: tuple[int, int, int], max_cells: int
                 ) -> list[tuple[slice, slice]]:  # fmt: skip
    """Windows of whole blocks as (row slice, column slice) of *coarse* blocks.

    Each window holds at most `max_cells` fine cells (all layers) and at least
    one block; windows are square in blocks where the grid allows.

    Examples
    --------
    >>> plan_windows((1, 100, 100), (1, 10, 10), 900)[:2]
    [(slice(0, 3, None), slice(0, 3, None)), (slice(0, 3, None), slice(4, 7, None))]
    """
    layers, rows, cols = shape
    _, by, bx = block
    nby, nbx = -(-rows // by), -(-cols // bx)
    side = max(1, math.isqrt(max(1, max_cells // (layers * by * bx))))
    wy, wx = min(side, nby), min(side, nbx)
    starts_y = sorted({round(v) for v in np.linspace(0, nby - wy, PER_AXIS)})
    starts_x = sorted({round(v) for v in np.linspace(0, nbx - wx, PER_AXIS)})
    return [(slice(y, y + wy), slice(x, x + wx)) for y in starts_y for x in starts_x]


def _coarse_window(coarse: Field, trans: Transmissibilities, rows: slice, cols: slice
                   ) -> Transmissibilities:  # fmt: skip
    """The run's coarse system cut to a window; half-block rule on its inner sides."""
    part = coarse.window(rows, cols)
    local = transmissibilities(part)
    box = (slice(None), rows, cols)
    faces = []
    for a, own in enumerate(trans.faces):
        inner = list(box)
        n = local.grid.shape[a]
        start = range(trans.grid.shape[a])[box[a]].start if a else 0
        inner[a] = slice(start, start + n - 1)
        faces.append(own[tuple(inner)])
    boundary = []
    for a, (first, last) in enumerate(trans.boundary):
        sides = list(local.boundary[a])
        if a == 0:
            sides = [first[box], last[box]]
        else:
            span = range(trans.grid.shape[a])[box[a]]
            across = list(box)
            across[a] = slice(None)
            if span.start == 0:
                sides[0] = first[tuple(across)]
            if span.stop == trans.grid.shape[a]:
                sides[1] = last[tuple(across)]
        boundary.append(tuple(sides))
    return replace(local, faces=tuple(faces), boundary=tuple(boundary))


def check_subdomains(fine: Field, coarse: Field, trans: Transmissibilities, block: BlockSpec,
                     max_cells: int, *, solver: str = "auto", tolerance: float = 1e-10
                     ) -> dict[str, Any]:  # fmt: skip
    """The check on the windows of `plan_windows`, as JSON-ready data.

    Returns
    -------
    dict
        ``windows``: per window its ``rows`` and ``columns`` (fine cells,
        zero-based, end excluded) and its per-axis check (as in the global
        check); ``spread``: per axis ``min``, ``median``, ``max`` and ``mean``
        of the windows' ``rel_error``; ``rule``: how the windows were chosen.
    """
    bz, by, bx = block.cells
    windows = []
    errors: dict[str, list[float]] = {name: [] for name in (*fine.axes, *HELD_OUT)}
    for rows, cols in plan_windows(fine.shape, block.cells, max_cells):
        fine_rows = slice(rows.start * by, min(rows.stop * by, fine.shape[1]))
        fine_cols = slice(cols.start * bx, min(cols.stop * bx, fine.shape[2]))
        part, coarse_part = fine.window(fine_rows, fine_cols), _coarse_window(coarse, trans, rows, cols)
        flows = fine_solves(part, part.axes, coarse_grid=coarse_part.grid, solver=solver, tolerance=tolerance)
        checks = coarse_check(flows, coarse_part, solver=solver, tolerance=tolerance)
        windows.append({"rows": [fine_rows.start, fine_rows.stop],
                        "columns": [fine_cols.start, fine_cols.stop],
                        "check": {axis: c.summary() for axis, c in checks.items()}})  # fmt: skip
        for axis, c in checks.items():
            errors[axis].append(c.rel_error)
    spread = {}
    for axis, values in errors.items():
        found = np.array([v for v in values if math.isfinite(v)])
        spread[axis] = None if found.size == 0 else {
            "min": float(found.min()), "median": float(np.median(found)),
            "max": float(found.max()), "mean": float(found.mean()), "windows": int(found.size)}  # fmt: skip
    rule = (f"up to {PER_AXIS} x {PER_AXIS} windows of whole blocks, all layers, at the first, "
            f"middle and last position along x and y, each at most {max_cells} fine cells")
    return {"windows": windows, "spread": spread, "rule": rule}
