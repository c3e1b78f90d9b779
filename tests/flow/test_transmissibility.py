"""Tests of the two-point transmissibilities in `upscale.flow.transmissibility`.

What is tested
--------------
* `half_cell`: ``t = k A / (Δ/2)`` along every axis on a grid with unequal
  cell sizes, computed by hand; NaN gives 0.
* `harmonic_faces`: the series rule ``t_i t_j / (t_i + t_j)`` along every
  axis, and 0 where either side is 0 (zero permeability or inactive).
* `transmissibilities`: the shapes of the face and boundary arrays of 3D
  fields and 2D maps, the property used per axis (kx, ky, kz), the active
  mask, and dask input giving the same numbers as NumPy input.
* Two materials in series: the face rule reproduces the exact
  series-resistance flux ``Q = Δp A / (L1/k1 + L2/k2)`` for unequal cell
  lengths, both at the face and through a whole column solved with
  `upscale.flow.pressure_drop`.
* Why the rule matters: an arithmetic average of the two permeabilities at
  the face, written out in the test, lets about 250 times too much flow
  through a 1000:1 contrast and makes a one-cell barrier disappear.
"""

from __future__ import annotations

import dataclasses

import dask.array as da
import numpy as np
import pytest

from upscale.field import Field, Grid
from upscale.flow import Transmissibilities, pressure_drop, transmissibilities
from upscale.flow.transmissibility import half_cell, harmonic_faces

# An uneven 3D grid used throughout: 3 layers, 4 rows, 5 columns.
DZ = np.array([0.5, 2.0, 1.25])
DY = np.array([3.0, 1.0, 4.0, 2.5])
DX = np.array([2.0, 7.0, 1.5, 3.0, 5.0])
GRID = Grid(dz=DZ, dy=DY, dx=DX)


def _random_k(shape, seed):
    return np.exp(np.random.default_rng(seed).normal(1.0, 1.5, shape))


# --------------------------------------------------------------------------------------
# half_cell and harmonic_faces by hand
# --------------------------------------------------------------------------------------


@pytest.mark.parametrize("axis", [0, 1, 2])
def test_half_cell_by_hand(axis):
    k = _random_k(GRID.shape, 731_559_208)
    t = half_cell(k, GRID, axis)
    for layer, row, col in np.ndindex(GRID.shape):
        size = {0: DZ[layer], 1: DY[row], 2: DX[col]}
        length = size.pop(axis)
        area = np.prod(list(size.values()))
        expected = k[layer, row, col] * area / (length / 2.0)
        assert t[layer, row, col] == pytest.approx(expected, rel=1e-14)


def test_half_cell_inactive_and_zero_give_zero():
    k = _random_k(GRID.shape, 290_114_657)
    k[0, 1, 2] = np.nan
    k[2, 3, 4] = 0.0
    t = half_cell(k, GRID, 2)
    assert t[0, 1, 2] == 0.0 and t[2, 3, 4] == 0.0
    assert np.all(t[~np.isnan(k) & (k > 0)] > 0)
    assert not np.isnan(t).any()


@pytest.mark.parametrize("axis", [0, 1, 2])
def test_harmonic_faces_by_hand(axis):
    t = half_cell(_random_k(GRID.shape, 618_033_988), GRID, axis)
    T = harmonic_faces(t, axis)
    expected_shape = list(GRID.shape)
    expected_shape[axis] -= 1
    assert T.shape == tuple(expected_shape)
    first = np.moveaxis(t, axis, 0)[:-1]
    second = np.moveaxis(t, axis, 0)[1:]
    # series combination of two half cells: resistances add (common practice)
    np.testing.assert_allclose(np.moveaxis(T, axis, 0), 1.0 / (1.0 / first + 1.0 / second), rtol=1e-14)


def test_harmonic_faces_closed_by_zero_either_side():
    t = np.array([[[0.0, 3.0, 0.0, 0.0, 6.0, 6.0]]])
    np.testing.assert_array_equal(harmonic_faces(t, axis=2), [[[0.0, 0.0, 0.0, 0.0, 3.0]]])


# --------------------------------------------------------------------------------------
# transmissibilities of whole fields
# --------------------------------------------------------------------------------------


def test_shapes_and_properties_per_axis_3d():
    kx, ky, kz = (_random_k(GRID.shape, s) for s in (401_227_913, 402_338_024, 403_449_135))
    kx[1, 2, 3] = np.nan  # inactive in one property makes it inactive in all
    field = Field(kx=kx, ky=np.where(np.isnan(kx), np.nan, ky), kz=np.where(np.isnan(kx), np.nan, kz),
                  porosity=None, grid=GRID)  # fmt: skip
    trans = transmissibilities(field)
    assert isinstance(trans, Transmissibilities)
    assert trans.shape == (3, 4, 5) and trans.grid is GRID
    assert [f.shape for f in trans.faces] == [(2, 4, 5), (3, 3, 5), (3, 4, 4)]
    for axis, k in zip((0, 1, 2), (field.kz, field.ky, field.kx)):
        t = half_cell(k, GRID, axis)
        np.testing.assert_array_equal(trans.faces[axis], harmonic_faces(t, axis))
        inlet, outlet = trans.boundary[axis]
        one = list(GRID.shape)
        one[axis] = 1
        assert inlet.shape == outlet.shape == tuple(one)
        np.testing.assert_array_equal(inlet, np.take(t, [0], axis=axis))
        np.testing.assert_array_equal(outlet, np.take(t, [GRID.shape[axis] - 1], axis=axis))
    expected_active = np.ones(GRID.shape, bool)
    expected_active[1, 2, 3] = False
    np.testing.assert_array_equal(trans.active, expected_active)
    # the inactive cell closes its six faces
    assert trans.faces[2][1, 2, 2] == trans.faces[2][1, 2, 3] == 0.0
    assert trans.faces[1][1, 1, 3] == trans.faces[1][1, 2, 3] == 0.0
    assert trans.faces[0][0, 2, 3] == trans.faces[0][1, 2, 3] == 0.0


def test_map_has_no_z_faces():
    k = _random_k((6, 7), 577_215_664)
    trans = transmissibilities(Field.from_arrays(k, ky=2.0 * k, cell_size=(4.0, 3.0)))
    assert trans.shape == (1, 6, 7)
    assert trans.faces[0].shape == (0, 6, 7)
    # y faces use ky: twice the kx field gives twice the T of the kx field along y
    along_y_of_kx = harmonic_faces(half_cell(k[None], trans.grid, 1), 1)
    np.testing.assert_allclose(trans.faces[1], 2.0 * along_y_of_kx, rtol=1e-14)


def test_dask_input_gives_the_same_numbers():
    k = _random_k((2, 9, 11), 141_421_356)
    k[1, 4, 5] = np.nan
    eager = transmissibilities(Field.from_arrays(k, dz=[1.5, 0.5]))
    lazy = transmissibilities(Field.from_arrays(da.from_array(k, chunks=(1, 4, 4)), dz=[1.5, 0.5]))
    for a, b in zip(eager.faces, lazy.faces):
        assert isinstance(b, np.ndarray)
        np.testing.assert_array_equal(a, b)
    for (a1, a2), (b1, b2) in zip(eager.boundary, lazy.boundary):
        np.testing.assert_array_equal(a1, b1)
        np.testing.assert_array_equal(a2, b2)
    np.testing.assert_array_equal(eager.active, lazy.active)


# --------------------------------------------------------------------------------------
# Two materials in series
# --------------------------------------------------------------------------------------


def _column(k_cells, dx, dy=2.0, dz=3.0):
    """A single row of cells along x with the given permeabilities and widths."""
    k = np.asarray(k_cells, float)[None, None, :]
    grid = Grid(dz=[dz], dy=[dy], dx=dx)
    return Field(kx=k, ky=k, kz=None, porosity=None, grid=grid)


@pytest.mark.parametrize("k1, k2", [(1000.0, 1.0), (3.0, 250.0), (7.5, 7.5)])
def test_face_flux_equals_series_resistance(k1, k2):
    # two cells of unequal length; pressures at the two cell centres
    d1, d2, dy, dz = 1.5, 4.0, 2.0, 3.0
    A = dy * dz
    p_i, p_j = 2.75, 1.25
    T = transmissibilities(_column([k1, k2], [d1, d2], dy, dz)).faces[2][0, 0, 0]
    # Darcy's law over the two half cells in series, written by hand (Bear 1972, Dynamics
    # of Fluids in Porous Media: resistances of layers in series add)
    exact = (p_i - p_j) * A / ((d1 / 2) / k1 + (d2 / 2) / k2)
    assert T * (p_i - p_j) == pytest.approx(exact, rel=1e-14)


@pytest.mark.parametrize("k1, k2", [(1000.0, 1.0), (0.02, 45.0)])
def test_two_material_column_passes_the_series_flux(k1, k2):
    # n1 cells of k1 then n2 cells of k2, unequal widths on each side
    dx = np.array([0.5, 1.0, 2.0, 0.75, 3.0, 1.25, 0.4])
    k_cells = np.array([k1, k1, k1, k2, k2, k2, k2])
    dy, dz = 2.0, 3.0
    flow = pressure_drop(transmissibilities(_column(k_cells, dx, dy, dz)), "x")
    L1, L2 = dx[:3].sum(), dx[3:].sum()
    # exact series-resistance flux with Δp = 1 (Bear 1972, Dynamics of Fluids in Porous Media)
    exact = 1.0 * dy * dz / (L1 / k1 + L2 / k2)
    assert flow.outflow == pytest.approx(exact, rel=1e-12)
    assert flow.inflow == pytest.approx(exact, rel=1e-12)
    assert flow.k_eff == pytest.approx((L1 + L2) / (L1 / k1 + L2 / k2), rel=1e-12)


def test_arithmetic_face_average_gets_a_barrier_wrong():
    """An arithmetic average of k at the face passes far too much flow through a barrier.

    Two equal cells of k1 = 1000 and k2 = 1 share a face. The flow between
    their centres must cross half of each cell in series, so the exact flux
    is ``Δp A / ((Δ/2)/k1 + (Δ/2)/k2)`` — set by the low-permeability half.
    The harmonic face rule of the engine gives exactly that. Averaging the two
    permeabilities arithmetically at the face instead, ``T = ((k1 + k2)/2) A / Δ``,
    lets through about 250 times that flux: the face behaves as if the tight
    cell were nearly as permeable as the sand. Over a whole column, a one-cell
    barrier between two sands then stops acting as a barrier. This is why the
    engine combines half cells in series.
    """
    k1, k2, delta, dy, dz = 1000.0, 1.0, 2.0, 2.0, 3.0
    A = dy * dz
    # exact series flux between the two cell centres for Δp = 1 (Bear 1972, Dynamics of
    # Fluids in Porous Media: resistances in series add)
    exact = A / ((delta / 2) / k1 + (delta / 2) / k2)
    T_harmonic = transmissibilities(_column([k1, k2], [delta, delta], dy, dz)).faces[2][0, 0, 0]
    T_arith = ((k1 + k2) / 2) * A / delta  # the alternative rule, written here on purpose
    assert T_harmonic == pytest.approx(exact, rel=1e-14)
    ratio = T_arith / exact
    assert ratio == pytest.approx((k1 + k2) ** 2 / (4 * k1 * k2), rel=1e-14)  # 250.5
    assert 240 < ratio < 260

    # a sand | barrier | sand column: with arithmetic faces the barrier leaks
    k_cells = np.array([k1, k1, k1, k2, k1, k1, k1])
    field = _column(k_cells, np.full(7, delta), dy, dz)
    trans = transmissibilities(field)
    arithmetic_x = ((k_cells[:-1] + k_cells[1:]) / 2 * A / delta)[None, None, :]
    leaky = dataclasses.replace(trans, faces=(trans.faces[0], trans.faces[1], arithmetic_x))
    series = A / (6 * delta / k1 + delta / k2)  # Δp = 1 over six sand cells and one barrier cell
    right = pressure_drop(trans, "x")
    wrong = pressure_drop(leaky, "x")
    assert right.outflow == pytest.approx(series, rel=1e-12)
    assert wrong.outflow > 100 * series
