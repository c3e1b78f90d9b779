"""Tests of the linear solvers in `upscale.flow.solvers`.

What is tested
--------------
* The direct and the amg solver agree to about 1e-8 on the same two-point
  system, built here by hand from a lognormal field independently of
  `upscale.flow.steady`, and the engine's own pressures match the solution
  of that hand-built system.
* ``auto`` chooses ``direct`` up to `DIRECT_LIMIT` unknowns and ``amg`` above.
* A solve that cannot reach its tolerance raises `ConvergenceError` with a
  message that names the method, the residual reached and the tolerance
  asked for — for amg with one iteration, and for any method asked for a
  residual below float64 precision; through `pressure_drop` too.
* An unknown solver name raises ValueError, in `Solver` and `pressure_drop`.
* `SolveInfo` holds the method, the iterations (0 for direct) and the true
  relative residual; an all-zero right-hand side returns zeros; a solver is
  reused for several right-hand sides; an empty system solves.
* The multigrid's conjugate gradients (`conjugate_gradients`) agree with
  SciPy's ``cg`` given the same V-cycle, and on a system that is not positive
  definite they stop without a warning and without touching the process's
  warning filters (pyamg's own Krylov functions insert an ``always`` filter,
  which let "Indefinite preconditioner detected in CG" reach the terminal).
"""

from __future__ import annotations

import dataclasses
import warnings

import numpy as np
import pyamg
import pytest
from scipy import sparse
from scipy.sparse import linalg

from upscale.errors import UpscaleError
from upscale.field import Field
from upscale.flow import ConvergenceError, make_solver, pressure_drop, transmissibilities
from upscale.flow.solvers import DIRECT_LIMIT, SOLVERS, SolveInfo, Solver, conjugate_gradients
from upscale.gallery.fields import lognormal_field


def _tpfa_system(k, dx=1.0, dy=1.0):
    """Two-point system of a 2D map with p = 1 left, p = 0 right, written out by hand.

    Face T = 1 / (1/t_i + 1/t_j) with t = k A / (Δ/2); unit thickness.
    Returns the matrix, the right-hand side and the boundary t of the last column.
    """
    M, N = k.shape
    index = np.arange(M * N).reshape(M, N)
    tx = k * dy / (dx / 2)
    ty = k * dx / (dy / 2)
    rows, cols, vals = [], [], []
    diag = np.zeros(M * N)

    def connect(a, b, T):
        rows.extend([a, b])
        cols.extend([b, a])
        vals.extend([-T, -T])
        diag[a] += T
        diag[b] += T

    for i in range(M):
        for j in range(N):
            if j + 1 < N:
                connect(index[i, j], index[i, j + 1], 1 / (1 / tx[i, j] + 1 / tx[i, j + 1]))
            if i + 1 < M:
                connect(index[i, j], index[i + 1, j], 1 / (1 / ty[i, j] + 1 / ty[i + 1, j]))
    b = np.zeros(M * N)
    diag[index[:, 0]] += tx[:, 0]
    b[index[:, 0]] = tx[:, 0]
    diag[index[:, -1]] += tx[:, -1]
    A = sparse.coo_matrix((vals, (rows, cols)), shape=(M * N, M * N)) + sparse.diags(diag)
    return A.tocsr(), b, tx[:, -1]


K = lognormal_field((30, 45), (4.0, 4.0), geometric_mean=25.0, sigma_ln=1.5, seed=846_201_337)


def test_direct_and_amg_agree_on_a_hand_built_system():
    A, b, t_out = _tpfa_system(K, dx=3.0, dy=2.0)
    x_direct, info_direct = Solver(A, "direct").solve(b)
    x_amg, info_amg = Solver(A, "amg").solve(b)
    assert info_direct == SolveInfo("direct", 0, info_direct.residual)
    assert info_direct.residual < 1e-13
    assert info_amg.method == "amg" and 0 < info_amg.iterations <= 300
    assert info_amg.residual <= 1e-9
    np.testing.assert_allclose(x_amg, x_direct, rtol=1e-8)
    q_direct = np.sum(t_out * x_direct.reshape(K.shape)[:, -1])
    q_amg = np.sum(t_out * x_amg.reshape(K.shape)[:, -1])
    assert q_amg == pytest.approx(q_direct, rel=1e-8)
    # the engine assembles the same system: its pressures solve the hand-built one
    flow = pressure_drop(transmissibilities(Field.from_arrays(K, cell_size=(3.0, 2.0))), "x")
    np.testing.assert_allclose(flow.pressure[0].ravel(), x_direct, rtol=0, atol=1e-12)
    assert flow.outflow == pytest.approx(q_direct, rel=1e-12)


def test_direct_and_amg_agree_through_pressure_drop():
    k = lognormal_field((6, 20, 24), (2.0, 5.0, 5.0), geometric_mean=3.0, sigma_ln=1.5, seed=505_606_707)
    trans = transmissibilities(Field.from_arrays(k, dz=0.5))
    for axis in "xyz":
        direct = pressure_drop(trans, axis, solver="direct")
        amg = pressure_drop(trans, axis, solver="amg")
        assert (direct.method, amg.method) == ("direct", "amg")
        assert amg.k_eff == pytest.approx(direct.k_eff, rel=1e-8)
        np.testing.assert_allclose(amg.pressure, direct.pressure, rtol=0, atol=1e-8)


def _laplacian_1d(n):
    return sparse.diags([np.full(n - 1, -1.0), np.full(n, 2.0), np.full(n - 1, -1.0)], [-1, 0, 1]).tocsr()


def test_auto_switches_at_the_direct_limit():
    assert DIRECT_LIMIT == 20_000 and SOLVERS == ("auto", "amg", "direct")
    assert Solver(_laplacian_1d(DIRECT_LIMIT)).method == "direct"
    assert Solver(_laplacian_1d(DIRECT_LIMIT + 1)).method == "amg"
    assert Solver(_laplacian_1d(50), "amg").method == "amg"
    assert Solver(_laplacian_1d(DIRECT_LIMIT + 1), "direct").method == "direct"


def test_docstring_example_of_make_solver():
    A = _laplacian_1d(4)
    x, info = make_solver(A).solve(np.ones(4))
    np.testing.assert_allclose(x, [2.0, 3.0, 3.0, 2.0], rtol=1e-14)
    assert info.method == "direct" and info.iterations == 0


# --------------------------------------------------------------------------------------
# Failures
# --------------------------------------------------------------------------------------


def _contrast_system():
    """A system from a binary field with a 1e8 contrast between neighbouring cells."""
    g = lognormal_field((40, 40), (3.0, 3.0), geometric_mean=1.0, sigma_ln=1.0, seed=364_718_295)
    return _tpfa_system(np.where(g > 1.0, 1e4, 1e-4))


def test_amg_that_cannot_converge_raises():
    A, b, _ = _contrast_system()
    solver = Solver(A, "amg", tolerance=1e-14, max_iterations=1)
    with pytest.raises(ConvergenceError, match=r"amg pressure solve stopped at a scaled residual of .* "
                       r"after 1 iterations \(asked for 1e-14\)") as caught:  # fmt: skip
        solver.solve(b)
    assert isinstance(caught.value, UpscaleError) and isinstance(caught.value, RuntimeError)
    assert caught.value.exit_code == 1
    assert "`solver=direct`" in str(caught.value)


@pytest.mark.parametrize("method", ["direct", "amg"])
def test_tolerance_below_float64_precision_raises(method):
    A, b, _ = _tpfa_system(K)
    with pytest.raises(ConvergenceError, match=f"the {method} pressure solve stopped"):
        Solver(A, method, tolerance=1e-22, max_iterations=20).solve(b)


def test_pressure_drop_passes_the_convergence_error_on():
    trans = transmissibilities(Field.from_arrays(K))
    with pytest.raises(ConvergenceError, match=r"asked for 1e-22"):
        pressure_drop(trans, "x", solver="direct", tolerance=1e-22)


def test_unknown_solver_name():
    with pytest.raises(ValueError, match=r"solver must be one of auto, amg, direct, got 'cholesky'"):
        Solver(_laplacian_1d(5), "cholesky")
    with pytest.raises(ValueError, match="solver must be one of"):
        pressure_drop(transmissibilities(Field.from_arrays(K)), "x", solver="gmres")


# --------------------------------------------------------------------------------------
# SolveInfo, zero right-hand sides, reuse
# --------------------------------------------------------------------------------------


@pytest.mark.parametrize("method", ["direct", "amg"])
def test_zero_right_hand_side_returns_zeros(method):
    A, b, _ = _tpfa_system(K)
    x, info = Solver(A, method).solve(np.zeros_like(b))
    assert x.shape == b.shape and not x.any()
    assert info == SolveInfo(method, 0, 0.0)


@pytest.mark.parametrize("method", ["direct", "amg"])
def test_solver_reused_for_several_right_hand_sides(method):
    A, b, _ = _tpfa_system(K, dx=2.0, dy=5.0)
    solver = make_solver(A, method, tolerance=1e-11)
    rng = np.random.default_rng(192_837_465)
    for rhs in (b, rng.normal(size=b.size), 3.5 * b):
        x, info = solver.solve(rhs)
        # the scaled residual: each cell's imbalance over its own diagonal entry
        residual = np.max(np.abs(rhs - A @ x) / A.diagonal())
        assert info.residual == pytest.approx(residual, rel=1e-6, abs=1e-16)
        assert info.residual <= 1e-11


def test_solve_info_is_frozen():
    info = SolveInfo("direct", 0, 1e-16)
    with pytest.raises(dataclasses.FrozenInstanceError):
        info.iterations = 3  # type: ignore[misc]


def test_empty_system():
    x, info = Solver(sparse.csr_matrix((0, 0)), "direct").solve(np.zeros(0))
    assert x.shape == (0,) and info.iterations == 0


def test_conjugate_gradients_agree_with_scipy_given_the_same_v_cycle():
    # reference: scipy.sparse.linalg.cg, an independent implementation of the same iteration
    k = lognormal_field((120, 120), (8.0, 8.0), geometric_mean=50.0, sigma_ln=1.5, seed=913_527)
    A, b, _ = _tpfa_system(k)
    A = sparse.csr_matrix(A)
    cycle = pyamg.ruge_stuben_solver(A, strength=("classical", {"theta": 0.1})).aspreconditioner(cycle="V")
    ours, steps = conjugate_gradients(A, b, np.zeros_like(b), cycle.matvec, 1e-12, 200)
    theirs, info = linalg.cg(A, b, rtol=1e-12, atol=0.0, maxiter=200, M=cycle)
    assert info == 0 and 0 < steps < 200
    np.testing.assert_allclose(ours, theirs, rtol=0, atol=1e-9 * np.abs(theirs).max())
    assert np.linalg.norm(b - A @ ours) < 1e-12 * np.linalg.norm(b)


def test_amg_on_an_indefinite_system_stops_without_a_warning():
    # The fresh-machine failure of the pocket test: pyamg's cg put ("always", module=
    # "pyamg.krylov._cg") at the front of warnings.filters on every call, so the
    # catch_warnings around it did not hold and its UserWarning reached the terminal.
    # A symmetric matrix with negative diagonal entries makes CG meet p·Ap < 0 or r·z < 0.
    n = DIRECT_LIMIT + 10_000
    diagonal = np.where(np.arange(n) % 7 == 0, -3.0, 2.0)
    A = sparse.diags([np.full(n - 1, -1.0), diagonal, np.full(n - 1, -1.0)], [-1, 0, 1]).tocsr()
    with warnings.catch_warnings(record=True) as seen:
        warnings.simplefilter("always")
        filters = list(warnings.filters)
        with pytest.raises(ConvergenceError, match="amg pressure solve stopped"):
            make_solver(A, "amg").solve(np.ones(n))
        assert warnings.filters == filters
    assert [str(w.message) for w in seen] == []
