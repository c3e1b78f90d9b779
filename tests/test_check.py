"""Tests of the fine-versus-coarse flow check, `upscale.check`.

What is tested
--------------
* Layered fields coarsened with `upscale.coarsen`: the arithmetic method
  passes the fine flow exactly along the layers and the harmonic method
  across them (Bear 1972), in 2D (rows as layers) and 3D (unequal layer
  thicknesses); the other axis shows a large error, so the check can tell.
* A homogeneous field has rel_error 0 along every axis for every method,
  also with edge blocks kept (``remainder='keep'``): the coarse grid's
  smaller edge blocks enter the check with their true sizes. A layered field
  with kept edge blocks is still exact along its layers.
* `AxisCheck.rel_error`: (k_coarse - k_fine) / k_fine; 0 when both are 0,
  NaN when only the fine k_eff is 0.
* The coarse model given as a `Transmissibilities` object gives the same
  check as the coarse field; ``axes`` and ``solver`` are passed through.
* `check_summary`: JSON-ready numbers per axis, and ``{"skipped": reason}``
  naming the cell count and the limit when the fine grid exceeds
  ``max_cells``.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest

from upscale import BlockSpec, Field, Grid, coarsen
from upscale.check.axis import AxisCheck, check_flow, check_summary
from upscale.check.limits import DEFAULT_LIMIT
from upscale.errors import InputError
from upscale.flow import pressure_drop, transmissibilities
from upscale.gallery.fields import lognormal_field
from upscale.gallery.problems import Layers, random_layers
from upscale.methods.registry import METHODS

# renormalization takes powers-of-two blocks only; it has its own tests (test_flow_based.py)
ANY_BLOCK = [n for n in METHODS if n != "renormalization"]

OPTIONS = {"power": {"exponent": 0.37}}


def _rows_as_layers(rows, columns, seed):
    return random_layers(rows, seed=seed, mean_ln=1.0, sigma_ln=1.5).rows(columns)


# --------------------------------------------------------------------------------------
# Layered fields: exact along / across the layers
# --------------------------------------------------------------------------------------


def test_layered_2d_arithmetic_along_harmonic_across():
    fine = Field.from_arrays(_rows_as_layers(24, 30, 603_917_248), cell_size=(10.0, 2.0))
    arithmetic = coarsen(fine, "5x4", "arithmetic")
    harmonic = coarsen(fine, "5x4", "harmonic")
    a = check_flow(arithmetic.fine, arithmetic.coarse)
    h = check_flow(harmonic.fine, harmonic.coarse)
    assert set(a) == set(h) == {"x", "y", "corner"}
    # Bear 1972, Dynamics of Fluids in Porous Media: the arithmetic mean is exact along
    # layers, the harmonic mean across them
    assert abs(a["x"].rel_error) < 1e-12
    assert abs(h["y"].rel_error) < 1e-12
    # the wrong average on the other axis shows: arithmetic over-, harmonic underestimates
    assert a["y"].rel_error > 0.1
    assert h["x"].rel_error < -0.1
    assert a["x"].fine.k_eff == pytest.approx(h["x"].fine.k_eff, rel=1e-13)


def test_layered_3d_unequal_thickness():
    dz = np.array([0.4, 2.5, 1.0, 3.0, 0.7, 1.8, 2.2, 0.9])
    k = Layers(random_layers(8, seed=882_041_573, mean_ln=0.5).k, dz).stack(6, 9)
    fine = Field.from_arrays(k, dz=dz, cell_size=(25.0, 25.0))
    a = check_flow(fine, coarsen(fine, "3x2x4", "arithmetic").coarse)
    h = check_flow(fine, coarsen(fine, "3x2x4", "harmonic").coarse)
    # Bear 1972, Dynamics of Fluids in Porous Media: weighted arithmetic along, harmonic across
    assert abs(a["x"].rel_error) < 1e-12 and abs(a["y"].rel_error) < 1e-12
    assert abs(h["z"].rel_error) < 1e-12
    assert a["z"].rel_error > 0.1 and h["x"].rel_error < -0.1


def test_layered_with_kept_edge_blocks_is_exact_along_the_layers():
    # 10 rows in blocks of 4: an edge block of 2 rows; 13 columns in blocks of 5: one of 3
    fine = Field.from_arrays(_rows_as_layers(10, 13, 174_209_663), cell_size=(3.0, 7.0))
    spec = BlockSpec(5, 4, remainder="keep")
    result = coarsen(fine, spec, "arithmetic")
    np.testing.assert_allclose(result.coarse.grid.dy, [28.0, 28.0, 14.0])
    np.testing.assert_allclose(result.coarse.grid.dx, [15.0, 15.0, 9.0])
    checks = check_flow(result.fine, result.coarse)
    # Bear 1972, Dynamics of Fluids in Porous Media: arithmetic mean along layers
    assert abs(checks["x"].rel_error) < 1e-12
    harmonic = coarsen(fine, spec, "harmonic")
    assert abs(check_flow(harmonic.fine, harmonic.coarse)["y"].rel_error) < 1e-12


# --------------------------------------------------------------------------------------
# Homogeneous fields
# --------------------------------------------------------------------------------------


@pytest.mark.parametrize("name", ANY_BLOCK)
def test_homogeneous_field_has_no_error(name):
    fine = Field.from_arrays(np.full((4, 12, 10), 42.0), dz=1.5, cell_size=(8.0, 6.0))
    result = coarsen(fine, "5x4x2", name, **OPTIONS.get(name, {}))  # 10 = 5 + 5, 12 = 3 x 4
    checks = check_flow(result.fine, result.coarse)
    assert set(checks) == {"x", "y", "z", "corner"}
    for check in checks.values():  # the corner flow is a ratio of two solves to 1e-10 residual
        assert check.fine.k_eff == pytest.approx(42.0, rel=1e-13 if check.axis != "corner" else 1e-10)
        assert check.rel_error == pytest.approx(0.0, abs=1e-12 if check.axis != "corner" else 1e-10)


@pytest.mark.parametrize("name", ANY_BLOCK)
def test_homogeneous_field_with_kept_edge_blocks(name):
    dz = np.array([0.5, 3.0, 1.0, 2.0, 0.1])
    fine = Field.from_arrays(np.full((5, 11, 13), 7.25), dz=dz, cell_size=(4.0, 9.0))
    spec = BlockSpec(4, 3, 2, remainder="keep")  # edge blocks of 1 column, 2 rows, 1 layer
    result = coarsen(fine, spec, name, **OPTIONS.get(name, {}))
    assert result.coarse.shape == (3, 4, 4)
    np.testing.assert_allclose(result.coarse.grid.dx, [16.0, 16.0, 16.0, 4.0])
    np.testing.assert_allclose(result.coarse.grid.dz, [3.5, 3.0, 0.1])
    for check in check_flow(result.fine, result.coarse).values():
        assert check.rel_error == pytest.approx(0.0, abs=1e-12 if check.axis != "corner" else 1e-10)


def test_edge_blocks_taken_as_full_size_are_refused():
    # the same coarse values as in the kept-edge test, on a grid whose edge blocks are
    # (wrongly) full size: that grid covers more than the fine one, and the check refuses
    # to compare models of different domains
    fine = Field.from_arrays(_rows_as_layers(10, 13, 174_209_663), cell_size=(3.0, 7.0))
    coarse = coarsen(fine, BlockSpec(5, 4, remainder="keep"), "arithmetic").coarse
    full_size = Grid(dz=coarse.grid.dz, dy=[28.0, 28.0, 28.0], dx=[15.0, 15.0, 15.0])
    wrong = Field(kx=coarse.kx, ky=coarse.ky, kz=None, porosity=None, grid=full_size)
    assert abs(check_flow(fine, coarse)["x"].rel_error) < 1e-12
    with pytest.raises(InputError, match=r"differ in extent along y: 70 m against 84 m"):
        check_flow(fine, wrong)


# --------------------------------------------------------------------------------------
# AxisCheck.rel_error
# --------------------------------------------------------------------------------------


def _barrier_flow(barrier):
    k = np.full((6, 8), 5.0)
    if barrier:
        k[:, 4] = 0.0
    return pressure_drop(transmissibilities(Field.from_arrays(k)), "x")


def test_rel_error_cases():
    blocked, open_ = _barrier_flow(True), _barrier_flow(False)
    assert blocked.k_eff == 0.0 and open_.k_eff == pytest.approx(5.0, rel=1e-13)
    assert AxisCheck("x", blocked, blocked).rel_error == 0.0
    assert math.isnan(AxisCheck("x", blocked, open_).rel_error)
    assert AxisCheck("x", open_, blocked).rel_error == -1.0
    assert AxisCheck("x", open_, open_).rel_error == 0.0
    fine = Field.from_arrays(np.full((6, 8), 5.0))
    coarse = Field.from_arrays(np.full((3, 4), 6.5), cell_size=(2.0, 2.0))
    assert check_flow(fine, coarse)["x"].rel_error == pytest.approx(0.3, rel=1e-12)


# --------------------------------------------------------------------------------------
# Transmissibilities as the coarse model; options
# --------------------------------------------------------------------------------------

HETERO = lognormal_field((2, 16, 20), (1.0, 4.0, 4.0), geometric_mean=30.0, sigma_ln=1.2, seed=557_310_829)


def test_coarse_transmissibilities_give_the_same_check():
    fine = Field.from_arrays(HETERO, dz=[2.0, 3.0], cell_size=(10.0, 10.0))
    coarse = coarsen(fine, "4x4", "geometric").coarse
    as_field = check_flow(fine, coarse)
    as_trans = check_flow(fine, transmissibilities(coarse))
    assert set(as_field) == set(as_trans) == {"x", "y", "z", "corner"}
    for axis in as_field:
        assert as_trans[axis].coarse.k_eff == pytest.approx(as_field[axis].coarse.k_eff, rel=1e-13)
        assert as_trans[axis].rel_error == pytest.approx(as_field[axis].rel_error, rel=1e-10, abs=1e-14)
        assert as_field[axis].rel_error != 0.0  # a heterogeneous field: the check sees a difference


def test_axes_and_solver_are_passed_on():
    fine = Field.from_arrays(HETERO, dz=1.0)
    coarse = coarsen(fine, "4x4x2", "arithmetic").coarse
    only_y = check_flow(fine, coarse, axes=("y",), solver="amg", tolerance=1e-11)
    assert list(only_y) == ["y", "corner"]  # the held-out flow is always checked
    assert only_y["y"].fine.method == only_y["y"].coarse.method == "amg"
    direct = check_flow(fine, coarse, axes=("y",), solver="direct")["y"]
    assert only_y["y"].fine.k_eff == pytest.approx(direct.fine.k_eff, rel=1e-9)


# --------------------------------------------------------------------------------------
# check_summary
# --------------------------------------------------------------------------------------


def test_summary_numbers_are_json_ready():
    fine = Field.from_arrays(HETERO[0], cell_size=(5.0, 5.0))
    result = coarsen(fine, "4x4", "harmonic")
    summary = check_summary(result.fine, result.coarse)
    assert set(summary) == {"x", "y", "corner"}
    json.dumps(summary, allow_nan=False)
    for entry in summary.values():
        assert set(entry) == {"k_fine", "k_coarse", "rel_error", "fine", "coarse"}
        assert entry["rel_error"] == pytest.approx((entry["k_coarse"] - entry["k_fine"]) / entry["k_fine"])
        assert entry["fine"]["unknowns"] == 16 * 20 and entry["coarse"]["unknowns"] == 4 * 5
        assert entry["fine"]["connected"] is True and entry["fine"]["isolated_cells"] == 0
        assert entry["fine"]["solver"] == "direct" and entry["fine"]["mass_balance"] < 1e-10
        assert entry["fine"]["k_eff"] == entry["k_fine"]
    # the harmonic mean of each block underestimates the flow, the corner-to-corner one too
    assert all(summary[f]["rel_error"] < 0 for f in ("x", "y", "corner"))


def test_summary_skips_grids_above_the_limit():
    fine = Field.from_arrays(HETERO, dz=1.0)  # 2 x 16 x 20 = 640 cells
    coarse = coarsen(fine, "4x4x2", "geometric").coarse
    skipped = check_summary(fine, coarse, max_cells=639)
    assert list(skipped) == ["skipped"]
    assert "640 cells" in skipped["skipped"] and "limit of 639" in skipped["skipped"]
    assert "more than the check limit of" in skipped["skipped"]
    assert set(check_summary(fine, coarse, max_cells=640)) == {"x", "y", "z", "corner"}
    assert DEFAULT_LIMIT == 20_000_000
