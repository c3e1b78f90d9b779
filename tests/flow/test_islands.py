"""Tests of connected regions (`upscale.flow.islands`) and how the solve uses them.

What is tested
--------------
* `regions` labels connected cells alike and unconnected cells apart;
  `anchored` keeps regions that touch a fixed-pressure face and says whether
  one region touches both.
* Zero-permeability barriers: a full barrier across the flow axis gives
  ``connected == False`` and k_eff 0 without an exception; the same barrier
  along the flow axis leaves the flow connected (and, when it is one cell
  thick in the middle, k_eff is the width-weighted arithmetic mean).
* Cells that touch only at a corner do not connect (two-point fluxes).
* Isolated pockets: active cells enclosed by NaN or by zero permeability
  are left out of the solve, counted as isolated, and have NaN pressure; the
  solve succeeds and the flow is the same as with the pocket filled in.
  Zero-permeability cells themselves count as isolated (each is a region
  that touches neither face).
* A column of inactive cells across x cuts the flow (``connected`` False).
* Dead ends: a region joined to the inlet only is solved and sits at the
  inlet pressure; one joined to the outlet only sits at 0.
* Nothing active at all: k_eff 0, no unknowns, with every solver.
"""

from __future__ import annotations

import numpy as np
import pytest

from upscale.field import Field
from upscale.flow import pressure_drop, transmissibilities
from upscale.flow.islands import anchored, regions
from upscale.gallery.fields import lognormal_field


def _flow(k, axis, **kwargs):
    return pressure_drop(transmissibilities(Field.from_arrays(np.asarray(k, float))), axis, **kwargs)


def _background(shape=(20, 24), seed=733_190_455):
    return lognormal_field(shape, (3.0, 3.0), geometric_mean=10.0, sigma_ln=1.0, seed=seed)


# --------------------------------------------------------------------------------------
# regions and anchored
# --------------------------------------------------------------------------------------


def test_regions_labels_connected_cells():
    labels = regions(7, np.array([0, 1, 4]), np.array([1, 2, 5]))
    assert labels[0] == labels[1] == labels[2]
    assert labels[4] == labels[5]
    assert len({labels[0], labels[3], labels[4], labels[6]}) == 4


def test_anchored_keeps_regions_touching_a_face():
    labels = np.array([0, 0, 1, 1, 2, 3])
    keep, connected = anchored(labels, inlet=np.array([0, 2]), outlet=np.array([3]))
    assert keep.tolist() == [True, True, True, True, False, False]
    assert connected  # region 1 touches both faces
    keep, connected = anchored(labels, inlet=np.array([0]), outlet=np.array([5]))
    assert keep.tolist() == [True, True, False, False, False, True]
    assert not connected


# --------------------------------------------------------------------------------------
# Barriers
# --------------------------------------------------------------------------------------


def test_zero_barrier_across_the_flow_blocks_it():
    k = _background()
    k[:, 11] = 0.0  # a full column of zeros: a barrier across x
    flow = _flow(k, "x")
    assert not flow.connected
    assert flow.k_eff == 0.0 and flow.outflow == 0.0
    assert abs(flow.inflow) < 1e-12 * k.max()
    assert flow.mass_balance <= 1.0
    # the cells before the barrier sit at the inlet pressure, after it at the outlet's
    np.testing.assert_allclose(flow.pressure[0, :, :11], 1.0, atol=1e-12)
    np.testing.assert_allclose(flow.pressure[0, :, 12:], 0.0, atol=1e-12)
    assert np.isnan(flow.pressure[0, :, 11]).all()
    assert flow.isolated == 20  # the zero cells: each is a region touching neither face


def test_same_barrier_along_the_flow_leaves_it_connected():
    k = _background()
    k[:, 11] = 0.0
    along = _flow(k, "y")
    assert along.connected and along.k_eff > 0
    assert along.mass_balance < 1e-10
    # in layers along y the zero column is simply a layer of k = 0 (Bear 1972, Dynamics of
    # Fluids in Porous Media: arithmetic mean along layers)
    layered = np.broadcast_to(np.where(np.arange(24) == 11, 0.0, 5.0), (20, 24))
    assert _flow(layered, "y").k_eff == pytest.approx(5.0 * 23 / 24, rel=1e-13)


def test_cells_touching_at_a_corner_do_not_connect():
    k = np.zeros((4, 4))
    k[[0, 1, 2, 3], [0, 1, 2, 3]] = 7.0  # a diagonal: neighbours share only a corner
    flow = _flow(k, "x")
    assert not flow.connected and flow.k_eff == 0.0
    k[[0, 1, 2], [1, 2, 3]] = 7.0  # a staircase with shared faces
    flow = _flow(k, "x")
    assert flow.connected and flow.k_eff > 0


def test_inactive_column_across_x_cuts_the_flow():
    k = _background()
    k[:, 5] = np.nan
    flow = _flow(k, "x")
    assert not flow.connected and flow.k_eff == 0.0
    assert flow.isolated == 0  # both sides are anchored to a face
    assert flow.unknowns == 20 * 23
    assert _flow(k, "y").connected


# --------------------------------------------------------------------------------------
# Isolated pockets and dead ends
# --------------------------------------------------------------------------------------


@pytest.mark.parametrize("wall", [np.nan, 0.0])
def test_enclosed_pocket_is_left_out(wall):
    k = _background()
    k[5:12, 6:14] = wall  # a ring one cell thick around a 5 x 6 pocket
    k[6:11, 7:13] = _background(seed=288_471_603)[6:11, 7:13]
    flow = _flow(k, "x")
    ring = 7 * 8 - 5 * 6
    # zero cells are active: they add to the isolated count; NaN cells are not counted
    expected_isolated = 30 + (ring if wall == 0.0 else 0)
    assert flow.isolated == expected_isolated
    assert flow.unknowns == 20 * 24 - 7 * 8
    assert flow.connected and flow.mass_balance < 1e-10
    assert np.isnan(flow.pressure[0, 6:11, 7:13]).all()
    # the pocket carries no flow: filling it with any value changes nothing
    refilled = k.copy()
    refilled[6:11, 7:13] = 1234.5
    assert _flow(refilled, "x").k_eff == pytest.approx(flow.k_eff, rel=1e-12)


def test_pocket_in_3d_enclosed_on_all_six_sides():
    k = np.full((5, 6, 7), 4.0)
    k[1:4, 1:5, 2:6] = np.nan
    k[2, 2:4, 3:5] = 9.0  # 4 active cells inside a NaN box
    flow = pressure_drop(transmissibilities(Field.from_arrays(k, dz=2.0)), "z")
    assert flow.isolated == 4 and flow.connected
    assert flow.unknowns == 5 * 6 * 7 - 3 * 4 * 4
    assert flow.mass_balance < 1e-10


def test_dead_ends_sit_at_their_face_pressure():
    k = np.full((6, 10), 3.0)
    k[3, :] = 0.0  # rows 4-5 are cut off from rows 0-2 ...
    k[4:, 5] = np.nan  # ... and split into a part at the inlet and a part at the outlet
    flow = _flow(k, "x")
    assert flow.connected  # rows 0-2 carry the flow
    np.testing.assert_allclose(flow.pressure[0, 4:, :5], 1.0, atol=1e-12)
    np.testing.assert_allclose(flow.pressure[0, 4:, 6:], 0.0, atol=1e-12)
    assert flow.isolated == 10  # the zero row
    # only rows 0-2 pass flow: k_eff = 3 * 3/6 over the gross cross-section
    assert flow.k_eff == pytest.approx(1.5, rel=1e-12)


@pytest.mark.parametrize("solver", ["auto", "direct", "amg"])
@pytest.mark.parametrize("value", [0.0, np.nan])
def test_nothing_to_solve(solver, value):
    flow = _flow(np.full((4, 5), value), "x", solver=solver)
    assert not flow.connected and flow.k_eff == 0.0
    assert flow.unknowns == 0 and flow.inflow == flow.outflow == 0.0
    assert flow.mass_balance == 0.0
    assert flow.isolated == (20 if value == 0.0 else 0)
    assert np.isnan(flow.pressure).all()
