"""Where a coarse model errs: the flux through each coarse face against the fine flux through it.

After the check's pressure-drop solves, the flux through a fine face is
``T (p_i - p_j)``. A coarse face between two blocks is made of the fine
faces between their cells; the sum of the fine fluxes through them is what
the coarse face should carry. The mismatch, coarse minus fine, divided by
the fine model's total flow rate, shows which channels or barriers a method
misses (common practice for judging upscaled transmissibilities).
"""

from __future__ import annotations

import numpy as np

from ..flow import AxisFlow
from ..grid.blocks import Size, axis_edges


def face_fluxes(flow: AxisFlow, axis: int) -> np.ndarray:
    """Flux through every inner face along `axis` (towards higher index), per unit Δp/μ.

    Parameters
    ----------
    flow : AxisFlow
        A solve from `upscale.flow.pressure_drop`.
    axis : int
        Array axis (0 = z, 1 = y, 2 = x).

    Returns
    -------
    ndarray
        The grid's shape with `axis` one shorter; 0 where a cell was not solved.
    """
    p = np.nan_to_num(flow.pressure, nan=0.0)
    n = p.shape[axis]
    drop = np.take(p, np.arange(n - 1), axis=axis) - np.take(p, np.arange(1, n), axis=axis)
    return flow.trans.faces[axis] * drop


def coarse_face_mismatch(
    fine: AxisFlow, coarse: AxisFlow, block: tuple[Size, int, int], axis: int
) -> np.ndarray:
    """Coarse-face flux minus the summed fine flux through the same face, over the fine flow rate.

    Parameters
    ----------
    fine, coarse : AxisFlow
        The fine and the coarse solve of one check axis.
    block : (Size, int, int)
        Fine cells per block (layers, rows, columns; `upscale.grid.blocks.Size`).
    axis : int
        Array axis of the faces (0 = z, 1 = y, 2 = x).

    Returns
    -------
    ndarray
        The coarse grid's shape with `axis` one shorter: dimensionless
        (1 = the whole flow rate of the fine model).

    Examples
    --------
    >>> import numpy as np
    >>> from upscale import Field, coarsen
    >>> from upscale.check import check_flow
    >>> r = coarsen(Field.from_arrays(np.ones((4, 4))), "2x2", "arithmetic")
    >>> c = check_flow(r.fine, r.coarse)["x"]
    >>> bool(np.abs(coarse_face_mismatch(c.fine, c.coarse, (1, 2, 2), 2)).max() < 1e-12)
    True
    """
    fine_faces = face_fluxes(fine, axis)
    on_coarse = axis_edges(block[axis], fine.pressure.shape[axis])[1:-1] - 1
    summed = np.take(fine_faces, on_coarse, axis=axis)
    for other in range(3):
        if other != axis:
            starts = axis_edges(block[other], summed.shape[other])[:-1]
            summed = np.add.reduceat(summed, starts, axis=other)
    total = fine.outflow if fine.outflow else 1.0
    return (face_fluxes(coarse, axis) - summed) / total
