"""Tests of the Cardwell–Parsons bounds in `upscale.methods.bounds`.

What is tested
--------------
* For layered media (3D with unequal layer thicknesses, and 2D with rows or
  columns as layers) both bounds equal the exact answers: the weighted
  arithmetic mean along the layers and the weighted harmonic mean across
  them (Cardwell & Parsons 1945; Bear 1972).
* The 2x2 checkerboard ``[[1, 100], [100, 1]]`` worked by hand.
* Inactive (NaN) cells are impermeable: a tube holding one carries nothing, a
  slab holding only inactive cells stops the flow.
* Property-based ordering on random fields: harmonic <= tubes <= slabs <=
  arithmetic (Wiener bounds outside, Cardwell–Parsons bounds inside), and
  with inactive cells 0 <= tubes <= slabs <= bulk mean.
* A block one cell long along the flow axis: both bounds are the weighted
  arithmetic mean of the cross-section.
"""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from upscale.methods.averages import arithmetic_mean, bulk_mean, harmonic_mean
from upscale.methods.bounds import slabs_bound, tubes_bound

SETTINGS = settings(max_examples=80, deadline=None, database=None)
BOUNDS = [tubes_bound, slabs_bound]


# --------------------------------------------------------------------------------------
# Layered media: both bounds are exact
# --------------------------------------------------------------------------------------


@pytest.mark.parametrize("bound", BOUNDS, ids=["tubes", "slabs"])
def test_layered_3d_unequal_thickness(bound):
    # Cardwell & Parsons 1945, Average permeabilities of heterogeneous oil sands: for a
    # layered block both bounds coincide with the exact answer, which is (Bear 1972,
    # Dynamics of Fluids in Porous Media) the thickness-weighted arithmetic mean along
    # the layers and the thickness-weighted harmonic mean across them.
    dz = np.array([0.5, 2.0, 1.0, 3.5, 0.25])
    layer_k = np.array([120.0, 3.0, 45.0, 0.8, 600.0])
    k = np.broadcast_to(layer_k[:, None, None], (5, 4, 6)).copy()
    along = np.sum(dz * layer_k) / dz.sum()
    across = dz.sum() / np.sum(dz / layer_k)
    block = (5, 4, 6)
    np.testing.assert_allclose(bound(k, dz, block, axis=2), along, rtol=1e-14)
    np.testing.assert_allclose(bound(k, dz, block, axis=1), along, rtol=1e-14)
    np.testing.assert_allclose(bound(k, dz, block, axis=0), across, rtol=1e-14)
    # the unweighted answers are far off, so the weights are exercised
    assert abs(layer_k.mean() - along) > 10.0
    assert abs(5.0 / np.sum(1.0 / layer_k) - across) > 0.1


@pytest.mark.parametrize("bound", BOUNDS, ids=["tubes", "slabs"])
def test_layered_3d_several_blocks_with_edge_blocks(bound):
    # Cardwell & Parsons 1945 / Bear 1972, per block of 2 layers (and an edge block of 1).
    dz = np.array([1.0, 4.0, 0.5, 2.0, 3.0])
    layer_k = np.array([10.0, 0.1, 300.0, 2.0, 50.0])
    k = np.broadcast_to(layer_k[:, None, None], (5, 3, 4)).copy()
    z = bound(k, dz, (2, 3, 4), axis=0)[:, 0, 0]
    x = bound(k, dz, (2, 3, 4), axis=2)[:, 0, 0]
    for i, (a, b) in enumerate([(0, 2), (2, 4), (4, 5)]):
        w, v = dz[a:b], layer_k[a:b]
        assert z[i] == pytest.approx(w.sum() / np.sum(w / v), rel=1e-14)
        assert x[i] == pytest.approx(np.sum(w * v) / w.sum(), rel=1e-14)


@pytest.mark.parametrize("bound", BOUNDS, ids=["tubes", "slabs"])
def test_layered_2d_rows_and_columns_as_layers(bound):
    # Cardwell & Parsons 1945; Bear 1972: equal-thickness layers.
    values = np.array([10.0, 1000.0, 0.5, 30.0, 7.0])
    dz = np.ones(1)
    rows = np.broadcast_to(values[None, :, None], (1, 5, 6)).copy()  # rows are layers
    cols = np.broadcast_to(values[None, None, :], (1, 6, 5)).copy()  # columns are layers
    arithmetic, harmonic = values.mean(), 5.0 / np.sum(1.0 / values)
    assert bound(rows, dz, (1, 5, 6), axis=2)[0, 0, 0] == pytest.approx(arithmetic, rel=1e-14)
    assert bound(rows, dz, (1, 5, 6), axis=1)[0, 0, 0] == pytest.approx(harmonic, rel=1e-14)
    assert bound(cols, dz, (1, 6, 5), axis=2)[0, 0, 0] == pytest.approx(harmonic, rel=1e-14)
    assert bound(cols, dz, (1, 6, 5), axis=1)[0, 0, 0] == pytest.approx(arithmetic, rel=1e-14)


def test_checkerboard_2x2_by_hand():
    # Cardwell & Parsons 1945 construction worked by hand for [[1, 100], [100, 1]]:
    # tubes (rows) in series 1 & 100 -> 2 / (1 + 1/100) = 1.980198..., in parallel -> same;
    # slabs (columns) in parallel -> 50.5 each, in series -> 50.5.
    k = np.array([[[1.0, 100.0], [100.0, 1.0]]])
    dz = np.ones(1)
    for axis in (1, 2):  # symmetric under transposition
        assert tubes_bound(k, dz, (1, 2, 2), axis=axis)[0, 0, 0] == pytest.approx(
            200.0 / 101.0, rel=1e-15
        )
        assert slabs_bound(k, dz, (1, 2, 2), axis=axis)[0, 0, 0] == pytest.approx(50.5, rel=1e-15)
    assert 200.0 / 101.0 == pytest.approx(1.98019801980198, rel=1e-14)


def test_one_cell_along_the_flow_is_the_weighted_arithmetic_mean():
    # common practice: cells side by side across the flow are in parallel
    rng = np.random.default_rng(604_118_392)
    k = np.exp(rng.normal(0.0, 2.0, (3, 4, 5)))
    dz = np.array([0.3, 2.0, 1.1])
    per_column = np.sum(dz[:, None] * k.sum(axis=1), axis=0) / (dz.sum() * 4)
    per_layer = k.reshape(3, -1).mean(axis=1)
    for bound in BOUNDS:
        np.testing.assert_allclose(bound(k, dz, (3, 4, 1), axis=2)[0, 0, :], per_column, rtol=1e-13)
        np.testing.assert_allclose(bound(k, dz, (1, 4, 5), axis=0)[:, 0, 0], per_layer, rtol=1e-13)


# --------------------------------------------------------------------------------------
# Inactive cells are impermeable
# --------------------------------------------------------------------------------------


def test_tube_with_an_inactive_cell_carries_nothing():
    k = np.array([[[2.0, np.nan, 2.0], [3.0, 3.0, 3.0]]])
    dz = np.ones(1)
    # tubes along x: row 0 is cut -> 0; row 1 -> 3; in parallel -> 1.5
    assert tubes_bound(k, dz, (1, 2, 3), axis=2)[0, 0, 0] == pytest.approx(1.5, rel=1e-15)
    # slabs across x: columns (2+3)/2, (0+3)/2, (2+3)/2 -> harmonic 3 / (0.4 + 2/3 + 0.4)
    assert slabs_bound(k, dz, (1, 2, 3), axis=2)[0, 0, 0] == pytest.approx(
        3.0 / (0.4 + 2.0 / 3.0 + 0.4), rel=1e-14
    )


def test_inactive_cells_weighted_by_layer_thickness():
    # two layers (dz 1 and 3), flow along x; layer 0 has an inactive cell, layer 1 does not
    k = np.array([[[5.0, np.nan]], [[2.0, 8.0]]])
    dz = np.array([1.0, 3.0])
    # tubes: layer 0 -> 0, layer 1 -> 2/(1/2 + 1/8) = 3.2; weighted (0*1 + 3.2*3)/4 = 2.4
    assert tubes_bound(k, dz, (2, 1, 2), axis=2)[0, 0, 0] == pytest.approx(2.4, rel=1e-14)
    # slabs: column 0 -> (5 + 3*2)/4 = 2.75, column 1 -> (0 + 3*8)/4 = 6; series 2/(1/2.75 + 1/6)
    assert slabs_bound(k, dz, (2, 1, 2), axis=2)[0, 0, 0] == pytest.approx(
        2.0 / (1.0 / 2.75 + 1.0 / 6.0), rel=1e-14
    )


@pytest.mark.parametrize("bound", BOUNDS, ids=["tubes", "slabs"])
@pytest.mark.parametrize("axis", [0, 1, 2])
def test_all_inactive_block_passes_no_flow(bound, axis):
    k = np.full((2, 2, 2), np.nan)
    assert bound(k, np.ones(2), (2, 2, 2), axis=axis)[0, 0, 0] == 0.0


@pytest.mark.parametrize("axis", [0, 1, 2])
def test_inactive_plane_across_the_flow_stops_both_bounds(axis):
    k = np.full((3, 3, 3), 7.0)
    index = [slice(None)] * 3
    index[axis] = 1
    k[tuple(index)] = np.nan
    dz = np.array([1.0, 2.0, 3.0])
    assert tubes_bound(k, dz, (3, 3, 3), axis=axis)[0, 0, 0] == 0.0
    assert slabs_bound(k, dz, (3, 3, 3), axis=axis)[0, 0, 0] == 0.0


def test_zero_permeability_cell_blocks_its_tube():
    k = np.array([[[0.0, 4.0], [4.0, 4.0]]])
    assert tubes_bound(k, np.ones(1), (1, 2, 2), axis=2)[0, 0, 0] == pytest.approx(2.0, rel=1e-15)


# --------------------------------------------------------------------------------------
# Property-based orderings
# --------------------------------------------------------------------------------------


@st.composite
def fields(draw, nan_fractions=(0.0,)):
    L = draw(st.integers(1, 4))
    M = draw(st.integers(1, 10))
    N = draw(st.integers(1, 10))
    block = (draw(st.integers(1, L)), draw(st.integers(1, M)), draw(st.integers(1, N)))
    seed = draw(st.integers(10**9, 10**12))
    sigma = draw(st.sampled_from([0.0, 0.5, 2.0, 4.0]))
    nan_fraction = draw(st.sampled_from(nan_fractions))
    rng = np.random.default_rng(seed)
    k = np.exp(rng.normal(0.0, sigma, (L, M, N)))
    k[rng.random(k.shape) < nan_fraction] = np.nan
    dz = rng.uniform(0.05, 20.0, L)
    return k, dz, block, draw(st.integers(0, 2))


@SETTINGS
@given(fields())
def test_wiener_outside_cardwell_parsons_inside(data):
    # Wiener 1912 (arithmetic/harmonic bounds) outside, Cardwell & Parsons 1945 inside.
    k, dz, block, axis = data
    h = harmonic_mean(k, dz, block)
    t = tubes_bound(k, dz, block, axis)
    s = slabs_bound(k, dz, block, axis)
    a = arithmetic_mean(k, dz, block)
    rel = 1e-12
    assert np.all(h <= t * (1 + rel))
    assert np.all(t <= s * (1 + rel))
    assert np.all(s <= a * (1 + rel))


@SETTINGS
@given(fields(nan_fractions=(0.1, 0.4)))
def test_bounds_with_inactive_cells_are_between_zero_and_bulk_mean(data):
    # Inactive cells are impermeable (k = 0): the upper Wiener bound is then the
    # arithmetic mean with k = 0 in them, i.e. the bulk mean.
    k, dz, block, axis = data
    t = tubes_bound(k, dz, block, axis)
    s = slabs_bound(k, dz, block, axis)
    upper = bulk_mean(k, dz, block)
    assert not np.isnan(t).any() and not np.isnan(s).any()
    assert np.all(t >= 0.0)
    assert np.all(t <= s * (1 + 1e-12))
    upper = np.nan_to_num(upper, nan=0.0)
    assert np.all(s <= upper * (1 + 1e-12))


@SETTINGS
@given(fields(nan_fractions=(0.0, 0.3)), st.floats(1e-3, 1e3))
def test_constant_field_without_inactive_cells_is_unchanged(data, c):
    k, dz, block, axis = data
    k = np.full(k.shape, c)
    for bound in BOUNDS:
        np.testing.assert_allclose(bound(k, dz, block, axis), c, rtol=1e-13)
