"""Coarse blocks snapped to a template raster: the fine window its whole cells cover (`snap_to`).

The refusals (ratio, origin, rotation, CRS, overlap) are tested through the
command line in ``tests/cli/test_grid_like.py``.
"""

from __future__ import annotations

import numpy as np
import pytest
from affine import Affine
from conftest import ORIGIN

from upscale.grid.template import Snap, Template, snap_to
from upscale.io import read_field


@pytest.fixture
def grid(write_tif):
    """The grid of a 2D map of 40 x 30 cells of 10 m (values irrelevant)."""
    return read_field(write_tif("fine.tif", np.full((30, 40), 5.0), cell_size=10.0), checksum=False).grid


@pytest.mark.parametrize("offset,ratio,expected", [
    ((0, 0), (1, 1), Snap((0, 10), (0, 16), (0, 10), (0, 16), 1, 1)),  # one fine cell per cell
    ((0, 0), (4, 3), Snap((0, 30), (0, 40), (0, 10), (0, 10), 4, 3)),  # exactly the field
    ((-5, -7), (4, 3), Snap((2, 23), (3, 39), (3, 10), (2, 11), 4, 3)),  # hangs over the north-west
    ((9, 11), (2, 2), Snap((11, 29), (9, 39), (0, 9), (0, 15), 2, 2)),  # inside; the last cells cut
])  # fmt: skip
def test_snap_window(grid, offset, ratio, expected):
    # offset: (columns, rows) of fine cells from the field's origin to the template's, east and south
    (columns, rows), (nx, ny) = offset, ratio
    cells = Affine(10.0 * nx, 0.0, ORIGIN[0] + 10.0 * columns, 0.0, -10.0 * ny, ORIGIN[1] - 10.0 * rows)
    found = snap_to(grid, Template("t.tif", "", cells, grid.crs, 10, 16))
    assert found == expected
    # every template cell covered is whole on the field, and the one beyond each end is not (or none is)
    axes = [(found.rows, found.template_rows, ny, 30, 10),
            (found.columns, found.template_columns, nx, 40, 16)]  # fmt: skip
    for (start, stop), (first, last), size, fine, cells in axes:
        assert 0 <= start and stop <= fine and stop - start == size * (last - first)
        assert first == 0 or start - size < 0
        assert last == cells or stop + size > fine
