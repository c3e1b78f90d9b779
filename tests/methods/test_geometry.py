"""Upscaling a model whose top and cell thicknesses vary (`upscale.geometry`).

Checks: the layered-medium formulas with thicknesses that vary from column to
column (Bear 1972), pore and bulk volume kept exactly through a wedge, a
tilted box that flows as the flat one, the pinch-out rule, and every method
giving on a geometry what it gives on the flat grid of the same thicknesses.
"""

from __future__ import annotations

import numpy as np
import pytest

from upscale import METHODS
from upscale.check import coarse_check, fine_solves
from upscale.errors import InputError
from upscale.field import Field, Grid
from upscale.flow import pressure_drop, transmissibilities
from upscale.geometry import PASS_THROUGH, Geometry
from upscale.methods.coarsen import coarsen

OPTIONS = {"power": {"exponent": 0.5}}


def _field(k: np.ndarray, thickness: np.ndarray, top: np.ndarray | None = None, *,
           kz: np.ndarray | None = None, porosity: np.ndarray | None = None,
           cell: float = 10.0) -> Field:  # fmt: skip
    """A model with the given cell thicknesses; the reference dz is each layer's mean."""
    geometry = Geometry(top=np.zeros(k.shape[1:]) if top is None else top, thickness=thickness)
    grid = Grid(dz=geometry.layer_thickness(), dy=np.full(k.shape[1], cell), dx=np.full(k.shape[2], cell))
    flat = Field.from_arrays(k, kz=k if kz is None else kz, porosity=porosity, dz=1.0)
    return Field(kx=flat.kx, ky=flat.ky, kz=flat.kz, porosity=flat.porosity, grid=grid, geometry=geometry)


@pytest.fixture(scope="module")
def lognormal() -> np.ndarray:
    return np.exp(np.random.default_rng(7).normal(3.0, 1.0, (4, 8, 8)))


@pytest.mark.parametrize("method", METHODS)
def test_layer_thicknesses_as_a_geometry_give_the_flat_grid_of_those_thicknesses(method, lognormal):
    # the same model said two ways: dz per layer, or a geometry whose cells have those thicknesses
    # while the reference thickness (grid.dz) is another; every method must agree (common practice)
    dz = np.array([1.0, 3.0, 0.5, 2.0])
    flat = Field.from_arrays(lognormal, kz=0.1 * lognormal, porosity=np.full(lognormal.shape, 0.2),
                             cell_size=(10.0, 10.0), dz=dz)  # fmt: skip
    thickness = np.broadcast_to(dz[:, None, None], lognormal.shape).copy()
    geometry = Geometry(top=np.zeros((8, 8)), thickness=thickness)
    grid = Grid(dz=np.ones(4), dy=flat.grid.dy, dx=flat.grid.dx)
    shifted = Field(kx=flat.kx, ky=flat.ky, kz=flat.kz, porosity=flat.porosity, grid=grid, geometry=geometry)
    a = coarsen(flat, "4x4x2", method, **OPTIONS.get(method, {}))
    b = coarsen(shifted, "4x4x2", method, **OPTIONS.get(method, {}))
    for name in ("kx", "ky", "kz", "porosity"):
        np.testing.assert_allclose(getattr(b.coarse, name), getattr(a.coarse, name), rtol=1e-13)
    plan_area = 1600.0  # 4 x 4 cells of 10 m
    thickness = a.coarse.grid.cell_volumes() / plan_area
    np.testing.assert_allclose(b.coarse.geometry.thickness, thickness, rtol=1e-14)


def test_columns_of_different_thickness_follow_the_layered_formulas():
    # Bear 1972, "Dynamics of Fluids in Porous Media", §5.10: along layers k = Σ k_i b_i / Σ b_i,
    # across them k = Σ b_i / Σ (b_i / k_i), in each column with its own thicknesses b_i
    k = np.array([10.0, 1.0, 100.0])[:, None, None] * np.ones((3, 2, 3))
    thickness = np.random.default_rng(3).uniform(0.5, 4.0, (3, 2, 3))
    field = _field(k, thickness)
    along = (k * thickness).sum(axis=0) / thickness.sum(axis=0)
    across = thickness.sum(axis=0) / (thickness / k).sum(axis=0)
    for method in ("arithmetic", "slabs", "flow"):
        np.testing.assert_allclose(coarsen(field, "1x1x3", method).coarse.kx[0], along, rtol=1e-13)
    for method in ("harmonic", "tubes", "flow"):
        np.testing.assert_allclose(coarsen(field, "1x1x3", method).coarse.kz[0], across, rtol=1e-13)
    per_axis = coarsen(field, "1x1x3", "xy=arithmetic,z=harmonic").coarse
    np.testing.assert_allclose(per_axis.kx[0], along, rtol=1e-13)
    np.testing.assert_allclose(per_axis.kz[0], across, rtol=1e-13)


def test_a_wedge_keeps_its_pore_and_bulk_volume():
    # layers thin to zero towards the east (a wedge): pore volume is kept by upscaling (common practice)
    rows, columns = 6, 12
    fraction = np.linspace(1.0, 0.0, columns)[None, None, :] * np.ones((4, rows, 1))
    thickness = np.array([2.0, 1.0, 3.0, 1.5])[:, None, None] * fraction
    rng = np.random.default_rng(11)
    k = np.exp(rng.normal(2.0, 1.0, thickness.shape))
    porosity = rng.uniform(0.05, 0.3, thickness.shape)
    top = 50.0 - 0.01 * np.arange(columns)[None, :] * np.ones((rows, 1))
    field = _field(k, thickness, top, porosity=porosity)
    fine_pore = float((porosity * field.cell_volumes()).sum())
    for method in ("geometric", "flow", "global"):
        result = coarsen(field, "3x2x2", method)
        coarse = result.coarse
        volumes = coarse.cell_volumes()
        assert np.nansum(coarse.porosity * volumes) == pytest.approx(fine_pore, rel=1e-12)
        assert volumes.sum() == pytest.approx(float(field.cell_volumes().sum()), rel=1e-12)
        # the last column of blocks is a knife edge of 1/11 and 0 of the thickness: still active
        assert np.isfinite(coarse.kx).all()


def test_a_tilted_box_flows_as_the_flat_one(lognormal):
    # parallel layers under a sloping top: with no gravity, the flow is that of the flat box
    # (common practice; two-point flow on vertical pillars, module docstring of upscale.geometry)
    thickness = np.broadcast_to(np.array([2.0, 1.0, 3.0, 1.5])[:, None, None], lognormal.shape).copy()
    columns = np.arange(8)
    tilted = _field(lognormal, thickness, 200.0 - 0.8 * columns[None, :] - 0.3 * columns[:, None])
    flat = _field(lognormal, thickness)
    for axis in ("x", "y", "z"):
        a = pressure_drop(transmissibilities(tilted), axis, solver="direct")
        b = pressure_drop(transmissibilities(flat), axis, solver="direct")
        assert a.k_eff == b.k_eff
    coarse = coarsen(tilted, "4x4x2", "flow").coarse
    assert coarse.geometry.top[0, 0] == pytest.approx(200.0 - 0.8 * 1.5 - 0.3 * 1.5, rel=1e-15)
    np.testing.assert_array_equal(coarse.kx, coarsen(flat, "4x4x2", "flow").coarse.kx)


def test_a_tilted_box_checks_as_the_flat_one(lognormal):
    thickness = np.full(lognormal.shape, 2.0)
    tilted = _field(lognormal, thickness, 30.0 - 0.5 * np.arange(8)[None, :] * np.ones((8, 1)))
    flat = _field(lognormal, thickness)
    checks = []
    for field in (tilted, flat):
        result = coarsen(field, "4x4x2", "flow")
        flows = fine_solves(result.fine, ("x", "y", "z"), solver="direct")
        checks.append(coarse_check(flows, result.transmissibilities(), solver="direct"))
    for axis in ("x", "y", "z"):
        assert checks[0][axis].rel_error == checks[1][axis].rel_error


def _column(k_pinched: float) -> Field:
    """Three layers in one column of 1 m²; the middle one pinched out."""
    k = np.array([4.0, k_pinched, 1.0])[:, None, None]
    return _field(k, np.array([2.0, 0.0, 3.0])[:, None, None], cell=1.0)


@pytest.mark.parametrize("k_pinched", [1e-6, 1e4, np.nan])
def test_a_pinched_cell_passes_vertical_flow_whatever_its_own_permeability(k_pinched):
    # the documented rule (upscale.geometry): the cells above and below connect through a pinched
    # cell by the harmonic combination of their half-cell transmissibilities, as if it were absent;
    # the series law of Bear 1972 for the two remaining layers gives k = 5 / (2/4 + 3/1)
    flow = pressure_drop(transmissibilities(_column(k_pinched)), "z", solver="direct")
    assert flow.k_eff == pytest.approx(5.0 / (2.0 / 4.0 + 3.0 / 1.0), rel=2 / PASS_THROUGH)
    assert flow.k_eff != pytest.approx(5.0 / (2.0 / 4.0 + 3.0 / 1.0), rel=1e-12)  # the documented 1e-6


def test_a_run_of_pinched_cells_passes_vertical_flow_within_the_documented_bound():
    k = np.array([4.0, 0.01, 0.01, 0.01, 1.0])[:, None, None]
    field = _field(k, np.array([2.0, 0.0, 0.0, 0.0, 3.0])[:, None, None], cell=1.0)
    flow = pressure_drop(transmissibilities(field), "z", solver="direct")
    assert flow.k_eff == pytest.approx(5.0 / (2.0 / 4.0 + 3.0 / 1.0), rel=3 * 2 / PASS_THROUGH)


def test_a_pinched_cell_passes_no_lateral_flow():
    # one layer, one row: a pinched cell across the flow closes it
    k = np.ones((1, 1, 5))
    thickness = np.array([[[1.0, 1.0, 0.0, 1.0, 1.0]]])
    flow = pressure_drop(transmissibilities(_field(k, thickness, cell=1.0)), "x", solver="direct")
    assert flow.k_eff == 0.0


def test_pinched_cells_at_the_base_of_a_column_leave_the_base_where_the_rock_ends():
    # the model's base under the column is the base of its last cell of rock: 2 m of 4 mD
    k = np.array([4.0, 7.0, 7.0])[:, None, None]
    field = _field(k, np.array([2.0, 0.0, 0.0])[:, None, None], cell=1.0)
    flow = pressure_drop(transmissibilities(field), "z", solver="direct")
    assert flow.k_eff == pytest.approx(4.0, rel=2 * 2 / PASS_THROUGH)


def test_a_column_without_rock_stays_inactive():
    # pinched cells pass flow only where their column has a cell of rock (upscale.geometry)
    k = np.ones((2, 1, 2))
    field = _field(k, np.array([[[1.0, 0.0]], [[1.0, 0.0]]]), cell=1.0)
    assert transmissibilities(field).active.tolist() == [[[True, False]], [[True, False]]]


def test_surfaces_that_cross_are_refused():
    with pytest.raises(InputError, match="surface 3 lies above surface 2 in 1 cells"):
        Geometry.from_surfaces(np.array([[[5.0, 5.0]], [[3.0, 3.0]], [[2.0, 4.0]]]))


def test_a_model_without_thickness_is_refused():
    with pytest.raises(InputError, match="every cell has zero thickness"):
        Geometry(top=np.zeros((1, 2)), thickness=np.zeros((2, 1, 2))).layer_thickness()


def test_a_well_is_completed_with_the_true_thickness_and_not_in_pinched_cells():
    # Peaceman 1978, "Interpretation of well-block pressures in numerical reservoir simulation":
    # WI = 2π k h / (ln(r_o / r_w) + s) with r_o = 0.28 √(Δx² + Δy²) / 2 for isotropic k (Peaceman
    # 1983, "Interpretation of well-block pressures ... nonsquare grid blocks and anisotropic
    # permeability"); h is the cell's own thickness, 0 where the layer is pinched out
    from upscale.check.wells import place_wells
    from upscale.flow.wells import Well

    k = np.array([40.0, 5.0, 10.0])[:, None, None] * np.ones((3, 5, 5))
    thickness = np.array([3.0, 1.0, 2.0])[:, None, None] * np.ones((3, 5, 5))
    thickness[1, 2, 2] = 0.0  # the well's column: the middle layer pinches out there
    field = _field(k, thickness, cell=20.0)
    well = Well("W1", x=50.0, y=-50.0, layers=None, control="pressure", value=1.0, radius=0.1)
    (found,) = place_wells(field, [well])
    assert [int(c) for c in found.cells] == [0 * 25 + 12, 2 * 25 + 12]
    r_o = 0.28 * np.hypot(20.0, 20.0) / 2
    peaceman = 2 * np.pi * np.array([40.0 * 3.0, 10.0 * 2.0]) / np.log(r_o / 0.1)
    np.testing.assert_allclose(found.index, peaceman, rtol=1e-12)


@pytest.mark.parametrize("method", ["flow", "flow-transmissibility", "renormalization", "harmonic", "tubes"])
def test_a_pinched_cell_inside_a_block_passes_vertical_flow(method):
    # a column of 4 layers whose second is pinched out in half of the columns: across the layers each
    # block of one column is the series of its cells of rock (Bear 1972, §5.10), the pinched cell
    # absent (upscale.geometry: within 1e-6 per pinched cell on the reference field, exact in the
    # averages, which weigh the pinched cell by its zero volume)
    k = np.array([10.0, 1e-3, 100.0, 1.0])[:, None, None] * np.ones((4, 2, 2))
    thickness = np.array([2.0, 1.0, 3.0, 1.0])[:, None, None] * np.ones((4, 2, 2))
    thickness[1, :, 0] = 0.0
    across = thickness.sum(axis=0) / (thickness / k).sum(axis=0)
    found = coarsen(_field(k, thickness), "1x1x4", method).coarse.kz[0]
    np.testing.assert_allclose(found, across, rtol=1e-13 if method == "harmonic" else 1e-6)
    assert found[0, 0] > 100 * found[0, 1]  # the pinched columns lose the 1e-3 mD barrier
