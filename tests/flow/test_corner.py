"""Tests of the held-out corner-to-corner flow (`upscale.flow.corner`) and of its place in the check.

What is tested, and against what
--------------------------------
* A uniform field upscales exactly by any average (common practice), so the
  corner flow's effective permeability of the fine and of every coarse model
  agree to 1e-10 — with kept edge blocks and in 3D too.
* A layered field whose layers lie inside whole blocks: the directional
  methods are exact along and across the layers (arithmetic and harmonic
  means, Bear 1972, *Dynamics of Fluids in Porous Media*, §5.10), so the
  axis check passes — and the corner flow, which crosses and follows the
  layers at once, still shows an error: the reason the held-out flow exists.
* Mass balance, and symmetry: swapping the two corners (p -> 1 - p, common
  practice: the solution of a linear problem) gives the same |Q|, i.e. the
  field turned by 180° passes the same rate; a field symmetric under the
  swap of x and y passes the same rate as its transpose.
* The regions are whole coarse blocks (the rule of the module docstring).
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy.ndimage import gaussian_filter

from upscale import Field, coarsen
from upscale.check.axis import check_flow
from upscale.field import Grid
from upscale.flow import transmissibilities
from upscale.flow.corner import Corners, corner_flow, corners_of
from upscale.grid import BlockSpec

METHODS = ("arithmetic", "harmonic", "geometric", "power", "tubes", "slabs", "flow", "flow-transmissibility")


def _lognormal(shape: tuple[int, int], seed: int, sigma: float = 2.0) -> np.ndarray:
    g = gaussian_filter(np.random.default_rng(seed).normal(size=shape), 2.0)
    return np.exp(sigma * g / g.std())


@pytest.mark.parametrize("name", METHODS)
def test_uniform_field_corner_flow_is_exact_for_every_method(name):
    fine = Field.from_arrays(np.full((40, 48), 12.5), cell_size=(5.0, 3.0))
    result = coarsen(fine, "8x8", name, **({"exponent": 0.5} if name == "power" else {}))
    corner = check_flow(result.fine, result.transmissibilities())["corner"]
    assert corner.fine.k_eff == pytest.approx(12.5, rel=1e-10)
    assert abs(corner.rel_error) < 1e-10
    # the raw rates differ: the coarse grid itself passes less under the same corner pressures
    assert corner.coarse.outflow < 0.99 * corner.fine.outflow


def test_uniform_3d_field_with_kept_edge_blocks_is_exact():
    fine = Field.from_arrays(np.full((3, 21, 27), 4.0), dz=[1.0, 2.0, 0.5], cell_size=(2.0, 2.0))
    result = coarsen(fine, BlockSpec(4, 4, 2, remainder="keep"), "geometric")
    corner = check_flow(result.fine, result.coarse)["corner"]
    assert abs(corner.rel_error) < 1e-10
    # 6 block rows (the last of 1 row) and 7 block columns (the last of 3): one block each side
    assert corner.coarse.corners == Corners(rows=(1, 1), columns=(1, 1))
    assert corner.fine.corners == Corners(rows=(4, 1), columns=(4, 3))


@pytest.mark.parametrize("name", ["tubes", "slabs", "flow-transmissibility"])
def test_layered_field_passes_the_axes_but_not_the_corner_flow(name):
    # layers of 1 and 100 mD, 4 rows each, along x: each 8x8 block holds one pair
    k = np.tile(np.array([1.0, 100.0]).repeat(4)[:, None], (8, 64))
    result = coarsen(Field.from_arrays(k), "8x8", name)
    checks = check_flow(result.fine, result.transmissibilities())
    assert abs(checks["x"].rel_error) < 1e-10 and abs(checks["y"].rel_error) < 1e-10  # Bear (1972)
    assert checks["corner"].rel_error > 0.05  # measured +10.6 %
    assert checks["corner"].fine.mass_balance < 1e-10 and checks["corner"].coarse.mass_balance < 1e-10


def test_mass_balance_and_swapped_corners_on_a_strong_contrast_field():
    k = _lognormal((48, 40), seed=3, sigma=3.0)  # about 10^7 between the extremes
    trans = transmissibilities(Field.from_arrays(k))
    corners = Corners(rows=(6, 6), columns=(5, 5))
    flow = corner_flow(trans, corners)
    assert flow.connected and flow.mass_balance < 1e-9
    assert np.nanmin(flow.pressure) >= -1e-9 and np.nanmax(flow.pressure) <= 1 + 1e-9  # maximum principle
    # the field turned by 180 degrees puts the outlet corner where the inlet was: the swap
    turned = corner_flow(transmissibilities(Field.from_arrays(k[::-1, ::-1].copy())), corners)
    assert turned.rate == pytest.approx(flow.rate, rel=1e-9)
    # and its pressures are 1 - p of the original, turned
    np.testing.assert_allclose(turned.pressure[0], 1.0 - flow.pressure[0][::-1, ::-1], atol=1e-8)


def test_field_symmetric_under_the_swap_of_x_and_y_passes_the_same_rate_as_its_transpose():
    k = _lognormal((36, 36), seed=5)
    k = np.sqrt(k * k.T)  # symmetric about the diagonal: the transpose is the same field
    corners = Corners(rows=(6, 6), columns=(6, 6))
    flow = corner_flow(transmissibilities(Field.from_arrays(k)), corners)
    swapped = corner_flow(transmissibilities(Field.from_arrays(k.T.copy())), corners)
    assert swapped.rate == pytest.approx(flow.rate, rel=1e-9) and flow.mass_balance < 1e-10
    # any field: x and y swap roles under the transpose, the regions with them
    other = _lognormal((36, 36), seed=6)
    a = corner_flow(transmissibilities(Field.from_arrays(other)), corners)
    b = corner_flow(transmissibilities(Field.from_arrays(other.T.copy())), corners)
    assert a.rate == pytest.approx(b.rate, rel=1e-9)


def test_regions_are_whole_blocks_an_eighth_of_the_blocks_rounded_up():
    fine = Grid(dz=[1.0], dy=[2.0] * 40, dx=[1.0] * 100)
    coarse = Grid(dz=[1.0], dy=[8.0] * 10, dx=[4.0] * 25)  # 4x4 blocks: 10 rows, 25 columns of blocks
    fine_corners, coarse_corners = corners_of(fine, coarse)
    assert coarse_corners == Corners(rows=(2, 2), columns=(4, 4))  # ceil(10/8), ceil(25/8)
    assert fine_corners == Corners(rows=(8, 8), columns=(16, 16))
