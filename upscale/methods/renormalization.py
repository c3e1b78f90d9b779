"""King's renormalization: effective permeability by repeated 2 x 2 (x 2) coarsening.

King (1989, "The use of renormalization for calculating effective
permeability") replaces every group of 2 x 2 cells (2 x 2 x 2 in 3D) by one
cell whose permeability along each axis is that of the group's resistor
network with no flow through its sides, then repeats on the coarser grid
until one cell is left per block. Here each step solves the group's
two-point flow problem exactly with sealed sides — the same network — with
the local solver of `upscale.flow.local`, so anisotropic cells (kx ≠ ky)
and inactive cells are handled like everywhere else.

It is fast (a few unknowns per group) but only an approximation: each step
forgets how the flow was arranged inside the group. Block sizes must be
powers of two along every axis; an axis whose block is 1 cell is left as it
is while the others are coarsened.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from ..errors import InputError
from ..field import Field
from ..parallel import apply_regions
from .flow_based import block_tensor_chunk, options_for, refuse_grouping


def renormalized_chunk(
    kz: np.ndarray,
    ky: np.ndarray,
    kx: np.ndarray,
    *,
    dz: np.ndarray,
    core: tuple[tuple[int, int], ...],
    block: tuple[int, int, int],
    cell: tuple[float, float],
    axes: tuple[bool, bool, bool],
) -> np.ndarray:
    """Renormalized kz, ky, kx of every block of a chunk of whole blocks.

    Parameters
    ----------
    kz, ky, kx, dz, core, block, cell, axes
        As in `upscale.methods.flow_based.block_tensor_chunk` (no border).

    Returns
    -------
    ndarray of shape (9, l, m, n)
        A diagonal tensor in the order of `upscale.methods.flow_based.TENSOR`.
    """
    box = tuple(slice(c0, c1) for c0, c1 in core)
    values, layers, sizes = [kz[box], ky[box], kx[box]], dz[box[0]], cell
    left = list(block)
    while max(left) > 1:
        step = tuple(2 if n > 1 else 1 for n in left)
        core_now = tuple((0, n) for n in values[0].shape)
        K = block_tensor_chunk(*values, dz=layers, core=core_now, block=step, cell=sizes,
                               bc="sealed", border=0, axes=axes)  # fmt: skip
        values = [K[0], K[4], K[8]]
        layers = np.add.reduceat(layers, np.arange(0, layers.size, step[0]))
        sizes = (sizes[0] * step[1], sizes[1] * step[2])
        left = [n // s for n, s in zip(left, step)]
    tensor = np.zeros((9, *values[0].shape))
    tensor[0], tensor[4], tensor[8] = values
    return tensor


def renormalized_properties(field: Field, cells: tuple[int, int, int]) -> dict[str, Any]:
    """King's renormalization of every block, lazily for dask arrays.

    Parameters
    ----------
    field : Field
        The fine field, cropped to whole blocks.
    cells : (int, int, int)
        Cells per block (layers, rows, columns): powers of two.

    Returns
    -------
    dict
        ``{"tensor": array of shape (9, L', M', N')}`` (diagonal).

    Raises
    ------
    InputError
        If a block size is not a power of two or the grid does not divide
        into whole blocks.
    """
    refuse_grouping(cells, "renormalization", "it halves every block at each step, the same for all")
    wrong = [n for n in cells if n & (n - 1)]
    if wrong:
        block = "x".join(map(str, cells[::-1][: field.ndim]))
        raise InputError(
            f"renormalization coarsens by 2 at each step, so every block size must be a power of "
            f"two; {block} is not (use e.g. 4, 8, 16 or 32 cells, or `method=flow`)"
        )
    if any(n % b for n, b in zip(field.shape, cells)):
        raise InputError(
            "renormalization needs whole blocks; the grid does not divide into them — use "
            "`remainder=crop`"
        )
    arrays = [field.kz if field.kz is not None else field.kx, field.ky, field.kx]
    tensor = apply_regions(renormalized_chunk, arrays, field.grid.dz, cells, (0, 0, 0), 9,
                           **options_for(field.grid, field.ndim))  # fmt: skip
    return {"tensor": tensor}
