"""Tests of the flow engine against published results and an independent code.

What is tested
--------------
* Layered media, 2D (rows as layers with unequal heights, columns of unequal
  widths) and 3D (unequal layer thicknesses, anisotropic): k_eff is the
  thickness-weighted arithmetic mean along the layers and the weighted
  harmonic mean across them to 1e-10 — exact for the two-point scheme —
  with the direct and the amg solver, and ``auto`` picking amg above
  20 000 unknowns (Bear 1972).
* 2D statistically isotropic lognormal fields, σ(ln k) = 1, correlation
  length 8 cells on 256 x 256 cells (32 correlation lengths): k_eff within
  3 % of the sample geometric mean (Matheron 1967).
* 2D checkerboards of two materials, contrast 5: k_eff tends to √(k1 k2)
  (Dykhne 1970; Keller 1964) as the cells per square grow from 2 to 16, the
  error roughly halving at each doubling; kx = ky by the board's symmetry.
* 3D isotropic lognormal field, σ(ln k) = 1, 48³ cells with correlation
  length 4: k_eff within 5 % of k_G exp(σ²/6) (Landau–Lifshitz–Matheron).
* The same steady diffusion problem solved by FiPy, an independent
  finite-volume library, with a harmonic face coefficient: the outlet flow
  rates agree to 1e-6 (in practice to rounding).
* Inflow equals outflow to 1e-8 on every field above.
"""

from __future__ import annotations

import warnings

import numpy as np
import pytest

from upscale.field import Field, Grid
from upscale.flow import pressure_drop, transmissibilities
from upscale.gallery.fields import lognormal_field
from upscale.gallery.problems import (
    checkerboard,
    checkerboard_k_eff,
    lognormal_k_eff,
    random_layers,
)


def _map(k, dy, dx):
    """A 2D map with row heights `dy` and column widths `dx` (unit thickness)."""
    k = np.asarray(k, float)[None]
    return Field(kx=k, ky=k, kz=None, porosity=None, grid=Grid(dz=[1.0], dy=dy, dx=dx))


def _flow(field, axis, **kwargs):
    return pressure_drop(transmissibilities(field), axis, **kwargs)


def _sample_geometric_mean(k):
    return float(np.exp(np.mean(np.log(k))))


# --------------------------------------------------------------------------------------
# Layered media: exact for the two-point scheme
# --------------------------------------------------------------------------------------

ROW_SEED = 918_273_645


def _rows_as_layers(rows, columns):
    """Rows of random heights as layers (`upscale.gallery.problems.random_layers`), 2 m columns."""
    layers = random_layers(rows, seed=ROW_SEED, thickness=(0.2, 3.0))
    return _map(layers.rows(columns), layers.thickness, np.full(columns, 2.0)), layers


@pytest.mark.parametrize("solver, tolerance", [("direct", 1e-10), ("amg", 1e-12)])
def test_layered_2d_rows_with_unequal_heights(solver, tolerance):
    field, layers = _rows_as_layers(37, 50)
    trans = transmissibilities(field)
    along = pressure_drop(trans, "x", solver=solver, tolerance=tolerance)
    across = pressure_drop(trans, "y", solver=solver, tolerance=tolerance)
    # Bear 1972, Dynamics of Fluids in Porous Media: thickness-weighted arithmetic mean
    # along layers, weighted harmonic mean across; the two-point scheme is exact here
    assert along.k_eff == pytest.approx(layers.along, rel=1e-10)
    assert across.k_eff == pytest.approx(layers.across, rel=1e-10)
    assert along.method == across.method == solver
    assert along.mass_balance < 1e-8 and across.mass_balance < 1e-8


def test_layered_2d_auto_chooses_amg_above_the_direct_limit():
    field, layers = _rows_as_layers(101, 200)  # 20 200 unknowns > 20 000
    trans = transmissibilities(field)
    along = pressure_drop(trans, "x", tolerance=1e-12)
    across = pressure_drop(trans, "y", tolerance=1e-12)
    assert along.method == across.method == "amg" and along.unknowns == 20_200
    assert along.iterations > 0
    # Bear 1972, Dynamics of Fluids in Porous Media (layers: arithmetic along, harmonic across)
    assert along.k_eff == pytest.approx(layers.along, rel=1e-10)
    assert across.k_eff == pytest.approx(layers.across, rel=1e-10)


@pytest.mark.parametrize("solver, tolerance", [("direct", 1e-10), ("amg", 1e-12)])
def test_layered_3d_unequal_thickness_anisotropic(solver, tolerance):
    layers = random_layers(7, seed=552_019_377, mean_ln=1.0, sigma_ln=1.5, thickness=(0.3, 4.0))
    kx = layers.stack(9, 11)
    field = Field.from_arrays(kx, ky=2.0 * kx, kz=kx / 7.0, dz=layers.thickness, cell_size=(3.0, 5.0))
    trans = transmissibilities(field)
    arithmetic = layers.along
    harmonic = layers.across / 7.0
    # Bear 1972, Dynamics of Fluids in Porous Media: weighted arithmetic along, harmonic across
    for axis, expected in (("x", arithmetic), ("y", 2.0 * arithmetic), ("z", harmonic)):
        flow = pressure_drop(trans, axis, solver=solver, tolerance=tolerance)
        assert flow.method == solver
        assert flow.k_eff == pytest.approx(expected, rel=1e-10)
        assert flow.mass_balance < 1e-8


def test_columns_of_unequal_width_in_series():
    columns = random_layers(23, seed=664_301_853, sigma_ln=2.5, thickness=(0.1, 5.0))
    field = _map(columns.rows(6).T, np.full(6, 1.5), columns.thickness)
    # Bear 1972, Dynamics of Fluids in Porous Media: width-weighted harmonic mean in series
    assert _flow(field, "x").k_eff == pytest.approx(columns.across, rel=1e-10)
    assert _flow(field, "y").k_eff == pytest.approx(columns.along, rel=1e-10)


# --------------------------------------------------------------------------------------
# 2D isotropic lognormal: the geometric mean
# --------------------------------------------------------------------------------------

LOGNORMAL_2D_SEEDS = (739_104_223, 58_221_907, 9_310_477_551)


def test_lognormal_2d_tends_to_the_geometric_mean():
    # Matheron 1967, Éléments pour une théorie des milieux poreux: in 2D, for a statistically
    # isotropic lognormal medium, k_eff = k_G, the geometric mean.
    #
    # Tolerance reasoning. 256 x 256 cells with an exponential covariance of length 8 cells
    # give 32 correlation lengths per side. One realisation's kx or ky still fluctuates by a
    # few per cent (closed sides, finite domain: measured while writing, -4.5 % .. +2.3 %
    # per axis), so the test averages ln k_eff over x and y and over three seeds. The
    # two-point scheme also falls a little below the continuum value on an exponential
    # covariance, which is rough at the cell scale (about -1 %). The reference is each
    # field's own sample geometric mean. Observed: -1.5 %, -1.1 %, -1.2 % per seed, -1.3 %
    # for the average; 3 % leaves room for the fluctuation and still fails if the engine
    # drifts towards the arithmetic mean (k_G exp(σ²/2), +65 %) or the harmonic mean
    # (k_G exp(-σ²/2), -39 %; both common practice for lognormal k).
    log_ratios = []
    for seed in LOGNORMAL_2D_SEEDS:
        k = lognormal_field((256, 256), (8.0, 8.0), geometric_mean=50.0, sigma_ln=1.0, seed=seed)
        assert 0.9 < np.log(k).std() < 1.1
        k_g = lognormal_k_eff(_sample_geometric_mean(k), np.log(k).std(), 2)  # k_G itself in 2D
        trans = transmissibilities(Field.from_arrays(k, cell_size=(5.0, 5.0)))
        for axis in ("x", "y"):
            flow = pressure_drop(trans, axis)
            assert flow.method == "amg" and flow.mass_balance < 1e-8
            log_ratios.append(np.log(flow.k_eff / k_g))
        # per realisation, the mean of x and y stays within 3 % as well (observed <= 1.5 %)
        assert abs(np.expm1(np.mean(log_ratios[-2:]))) < 0.03
    assert abs(np.expm1(np.mean(log_ratios))) < 0.03


# --------------------------------------------------------------------------------------
# 2D checkerboard: √(k1 k2)
# --------------------------------------------------------------------------------------

K1, K2 = 2.0, 10.0  # contrast 5
SQUARES = 16  # squares per side: an even number, so the board is symmetric (see below)


def test_checkerboard_converges_to_the_square_root():
    # Dykhne 1970, Conductivity of a two-dimensional two-phase system; Keller 1964, A theorem
    # on the conductivity of a composite medium: a 2D checkerboard has k_eff = √(k1 k2).
    # This also holds for the finite square of this engine (p fixed on two opposite faces,
    # the other two closed): Keller's reciprocal relation k_x[k] k_y[1/k] = 1 holds on a
    # square with these conditions, 1/k is the board with the colours swapped divided by
    # k1 k2, and with an even number of squares the swapped board is the mirror image of
    # the original, while the transpose gives kx = ky (our derivation from Keller 1964).
    # What remains is the discretisation error: the two-point scheme resolves the flow
    # around the squares' corners poorly and converges slowly, from below.
    exact = checkerboard_k_eff(K1, K2)
    errors = {}
    for n in (2, 4, 8, 16):
        trans = transmissibilities(Field.from_arrays(checkerboard(SQUARES, K1, K2, cells_per_square=n)))
        fx = pressure_drop(trans, "x", solver="direct")
        fy = pressure_drop(trans, "y", solver="direct")
        assert fx.k_eff == pytest.approx(fy.k_eff, rel=1e-12)  # the board's symmetry
        assert fx.mass_balance < 1e-8 and fy.mass_balance < 1e-8
        errors[n] = fx.k_eff / exact - 1.0
    # observed: -15.0 %, -7.9 %, -3.9 %, -1.9 % at 2, 4, 8 and 16 cells per square
    assert all(e < 0 for e in errors.values())
    for coarse, fine in ((2, 4), (4, 8), (8, 16)):
        assert abs(errors[fine]) < 0.6 * abs(errors[coarse])  # about first order
    assert abs(errors[16]) < 0.025  # 16 squares per side, 16 cells per square
    # first-order extrapolation from 8 and 16 cells per square (observed +0.14 %)
    assert abs(2 * errors[16] - errors[8]) < 0.005


# --------------------------------------------------------------------------------------
# 3D isotropic lognormal: k_G exp(σ²/6)
# --------------------------------------------------------------------------------------


def test_lognormal_3d_landau_lifshitz_matheron():
    # Landau & Lifshitz 1960, Electrodynamics of Continuous Media, and Matheron 1967,
    # Éléments pour une théorie des milieux poreux: in 3D, k_eff = k_G exp(σ²/6) for an
    # isotropic lognormal medium, exact to first order in σ².
    #
    # 48³ cells with a Gaussian covariance of length 4 cells (12 correlation lengths per
    # side). The Gaussian covariance is smooth, so 4 cells resolve it; with the exponential
    # covariance, rough at the cell scale, the two-point scheme sits 4-5 % low at this
    # resolution (measured while writing, 48³ and 64³), too close to the 5 % bound for an
    # honest test. σ and k_G are the sample values of the generated field. Observed:
    # -0.6 %, -0.1 %, -2.2 % along x, y, z; -1.0 % on average. The 2D answer k_G alone would
    # be 16-18 % off, so the test sees the σ²/6 term.
    k = lognormal_field((48, 48, 48), (4.0, 4.0, 4.0), geometric_mean=20.0, sigma_ln=1.0,
                        covariance="gaussian", seed=604_118_293)  # fmt: skip
    log_k = np.log(k)
    sigma = log_k.std()
    assert 0.9 < sigma < 1.1
    expected = lognormal_k_eff(np.exp(log_k.mean()), sigma, 3)
    trans = transmissibilities(Field.from_arrays(k, dz=1.0))
    ratios = []
    for axis in ("x", "y", "z"):
        flow = pressure_drop(trans, axis)
        assert flow.method == "amg" and flow.mass_balance < 1e-8
        ratios.append(flow.k_eff / expected)
        assert abs(ratios[-1] - 1) < 0.05
    assert abs(np.expm1(np.mean(np.log(ratios)))) < 0.05


# --------------------------------------------------------------------------------------
# An independent finite-volume code: FiPy
# --------------------------------------------------------------------------------------


@pytest.mark.parametrize("axis", ["x", "y"])
def test_fipy_gives_the_same_flow_rate(axis):
    # FiPy (Guyer, Wheeler & Warren 2009, FiPy: Partial Differential Equations with Python,
    # Computing in Science & Engineering 11(3)) solves ∇·(k ∇p) = 0 by cell-centred finite
    # volumes. With the harmonic face value of k and uniform cells (of any aspect ratio), its
    # face coefficient is the engine's 2 k_i k_j / (k_i + k_j) and its fixed values act on the
    # boundary faces half a cell from the centres, as here; the two must agree to rounding.
    ny, nx, dx, dy = 15, 20, 2.5, 4.0
    k = lognormal_field((ny, nx), (3.0, 3.0), geometric_mean=30.0, sigma_ln=1.5, seed=271_828_183)
    ours = _flow(Field.from_arrays(k, cell_size=(dx, dy)), axis)

    with warnings.catch_warnings():  # FiPy's import touches numpy.core (a DeprecationWarning)
        warnings.simplefilter("ignore")
        import fipy

        mesh = fipy.Grid2D(dx=dx, dy=dy, nx=nx, ny=ny)  # cell id = column + row * nx
        kv = fipy.CellVariable(mesh=mesh, value=k.ravel())
        p = fipy.CellVariable(mesh=mesh, value=0.5)
        inlet, outlet = (
            (mesh.facesLeft, mesh.facesRight) if axis == "x" else (mesh.facesBottom, mesh.facesTop)
        )
        p.constrain(1.0, inlet)
        p.constrain(0.0, outlet)
        k_face = kv.harmonicFaceValue
        fipy.DiffusionTerm(coeff=k_face).solve(var=p, solver=fipy.LinearLUSolver(tolerance=1e-14))
        faces = np.asarray(outlet)
        component = 0 if axis == "x" else 1
        gradient = np.asarray(p.faceGrad)[component][faces]
        face_length = dy if axis == "x" else dx
        q_fipy = -np.sum(np.asarray(k_face)[faces] * gradient * face_length)
        pressure = np.asarray(p.value).reshape(ny, nx)

    # the same outflow from the last cells' pressures and their half-cell distance
    last = pressure[:, -1] if axis == "x" else pressure[-1, :]
    k_last = k[:, -1] if axis == "x" else k[-1, :]
    half = dx / 2 if axis == "x" else dy / 2
    q_cells = np.sum(k_last * last / half * face_length)
    assert q_fipy == pytest.approx(q_cells, rel=1e-12)
    assert ours.outflow == pytest.approx(q_fipy, rel=1e-6)  # observed ~3e-15
    assert ours.inflow == pytest.approx(q_fipy, rel=1e-6)
    np.testing.assert_allclose(ours.pressure[0], pressure, rtol=0, atol=1e-10)
