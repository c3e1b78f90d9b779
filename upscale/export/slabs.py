"""Slabs of a coarse grid small enough to write one at a time, so outputs never hold the whole grid."""

from __future__ import annotations

from collections.abc import Callable, Iterator

import numpy as np

#: Cells per slab: about 50 MB of table rows (some 200 bytes a cell with every column).
SLAB_CELLS = 1 << 18

#: A slab of an (L, M, N) grid: layers, rows, columns.
Region = tuple[slice, slice, slice]
#: The values of a coarse property over a region, computed when written.
Values = Callable[[Region], np.ndarray]


def slabs(shape: tuple[int, int, int], cells: int | None = None) -> Iterator[Region]:
    """Cover an (L, M, N) array with slabs of at most about `cells` cells, in C order.

    Whole layers are grouped while they fit; a larger layer is cut into runs of
    whole rows (one row at least). Reading the slabs in turn and ravelling
    each visits the cells in the order of ``array.ravel()``.

    Examples
    --------
    >>> list(slabs((1, 5, 4), cells=8))  # doctest: +NORMALIZE_WHITESPACE
    [(slice(0, 1, None), slice(0, 2, None), slice(0, 4, None)),
     (slice(0, 1, None), slice(2, 4, None), slice(0, 4, None)),
     (slice(0, 1, None), slice(4, 5, None), slice(0, 4, None))]
    """
    cells = SLAB_CELLS if cells is None else cells
    L, M, N = shape
    columns = slice(0, N)
    if M * N <= cells:
        step = max(1, cells // max(1, M * N))
        for k in range(0, L, step):
            yield slice(k, min(L, k + step)), slice(0, M), columns
        return
    step = max(1, cells // max(1, N))
    for k in range(L):
        for j in range(0, M, step):
            yield slice(k, k + 1), slice(j, min(M, j + step)), columns
