"""Linear solvers for the symmetric positive-definite two-point flux systems.

`make_solver` chooses a sparse direct factorisation for small systems and
algebraic multigrid as a preconditioner of conjugate gradients for large
ones. The multigrid is `multigrid_cycle` (issue 18): smoothed
aggregation set up in CSR where no cell's couplings spread over more than
`SPREAD_LIMIT` (100; lognormal fields on cubic cells, uniform k), pyamg's
classical Ruge–Stüben coarsening (strength threshold 0.1) beyond (thin
cells, channels, layers and shales of high contrast), both run by our own
V-cycle. Measured on 1 M-cell fields, the fine half of a check (two or
three axes and the corner flow) takes 1.6 times less CPU than the cycle of
earlier versions (pyamg's classical hierarchy and its
``aspreconditioner``) on a 2D lognormal field and 2 times less on a 3D one;
on the demo fields (65 000 to 147 000 cells), one BLAS thread, 1.04 to 1.9
times less wall time (details and the whole table in docs/performance.md).
What the classical choice rests on (issue 3): on the demo layer cake
(82 000 cells, 0.01 mD shales between 500 mD sands, cells 25 times wider
than thick) 12 iterations and 0.2 s where pyamg's smoothed aggregation
needed 138 iterations and 5 s; on the 3D demo (136 000 cells, 10 times
wider than thick) 29 iterations and 0.9 s against 69 and 1.8 s with the
default threshold of 0.25. Every solve checks
its residual and raises `ConvergenceError` rather than return a pressure
that does not satisfy the equations.

The conjugate gradients are our own (`conjugate_gradients`), with the
multigrid V-cycle as preconditioner: pyamg's Krylov functions add an
``always`` entry to the front of the process-wide warning filters on every
call, which overrides any ``warnings.catch_warnings`` around them and let
"Indefinite preconditioner detected in CG" reach the terminal. Ours stop on
a breakdown without a warning and leave the filters alone; the residual
check then reports the failure in one line.

The residual is scaled cell by cell by the diagonal of the matrix, which
turns it into a pressure (a fraction of the unit pressure drop of a check):
a measure that means the same in a 1e4 mD sand and a 1e-4 mD shale.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np
from scipy import sparse
from scipy.sparse import linalg
from threadpoolctl import threadpool_limits

from ..errors import UpscaleError

#: Unknowns up to which ``auto`` factorises directly (fast and exact at this size).
DIRECT_LIMIT = 20_000
SOLVERS = ("auto", "amg", "direct")


class ConvergenceError(UpscaleError, RuntimeError):
    """An iterative solve did not reach its tolerance; no result is returned."""

    exit_code = 1


@dataclass(frozen=True)
class SolveInfo:
    """How a solve went: method, iterations (0 for direct) and the scaled residual reached."""

    method: str
    iterations: int
    residual: float


class Solver:
    """A solver set up for one matrix; call `solve` for each right-hand side.

    Parameters
    ----------
    A : sparse matrix of shape (n, n)
        Symmetric positive definite.
    method : {'auto', 'amg', 'direct'}
        ``auto`` uses ``direct`` up to `DIRECT_LIMIT` unknowns, else ``amg``.
    tolerance : float
        Required scaled residual ``max |b - A x| / diag(A)`` (see `solve`).
    max_iterations : int
        Conjugate-gradient iterations allowed for ``amg``.
    """

    def __init__(
        self, A: sparse.spmatrix, method: str = "auto", tolerance: float = 1e-10, max_iterations: int = 300
    ) -> None:
        if method not in SOLVERS:
            raise ValueError(f"solver must be one of {', '.join(SOLVERS)}, got {method!r}")
        self.A = sparse.csr_matrix(A)
        self.tolerance = tolerance
        self.max_iterations = max_iterations
        n = self.A.shape[0]
        self.method = ("direct" if n <= DIRECT_LIMIT else "amg") if method == "auto" else method
        if self.method == "direct":
            try:
                self._factor = linalg.splu(self.A.tocsc()) if n else None
            except RuntimeError as error:  # "Factor is exactly singular"
                raise ConvergenceError(
                    f"the direct pressure solve met a singular matrix ({error}): part of the field is "
                    "joined to the rest only through transmissibilities below float64 precision "
                    "(contrasts of about 1e16 between neighbouring cells); mark such cells as nodata"
                ) from None
        else:
            with threadpool_limits(limits=1, user_api="blas"):  # see `solve`
                self._cycle = multigrid_cycle(self.A)

    def solve(self, b: np.ndarray) -> tuple[np.ndarray, SolveInfo]:
        """Solve ``A x = b`` until the scaled residual ``max |b - A x| / diag(A)`` meets the tolerance.

        The scaled residual of a cell is the pressure change that cell's own
        equation still asks for; with a unit pressure drop across the domain it
        is a fraction of that drop, whatever the permeabilities. (A residual
        relative to ``|b|`` is not: at contrasts of 1e8 it lets through errors
        larger than the flow through the tight cells.) Multigrid restarts from
        its last iterate until the scaled residual is met; a direct solve is
        refined once if needed.

        Returns
        -------
        x : ndarray of shape (n,)
        info : SolveInfo

        Raises
        ------
        ConvergenceError
            If the scaled residual stays above the tolerance.
        """
        if not np.any(b):
            return np.zeros_like(b), SolveInfo(self.method, 0, 0.0)
        diagonal = self.A.diagonal()

        def scaled(x: np.ndarray) -> float:
            return float(np.max(np.abs(b - self.A @ x) / diagonal))

        iterations = 0
        if self.method == "direct":
            x = self._factor.solve(b)
            if not scaled(x) <= self.tolerance:
                x = x + self._factor.solve(b - self.A @ x)
        else:
            # the 2-norm of r relative to |b| at a thirtieth of the tolerance usually meets the
            # scaled residual in one pass (a restart costs the Krylov space built so far) and keeps
            # k_eff within 1e-10 across thin layers (a tenth let 1.2e-10 through). Stopping on the
            # scaled residual itself saved 2-3 iterations but let the mass balance grow to 1e-6 on
            # a channel field.
            x, best, norm = np.zeros_like(b), np.inf, np.linalg.norm(b)
            target = self.tolerance / 30
            # one BLAS thread: the iterations' dot products and norms of 1e5-1e6 entries ran
            # slower split over threads (0.74 s against 0.65 s for the fine half of the check of
            # the 256² demo, idle machine; 7.3 s against 6.1 s for a whole run on a busy one), and
            # their sums then no longer depend on how many cores the machine has
            with threadpool_limits(limits=1, user_api="blas"):
                while iterations < self.max_iterations:
                    with np.errstate(all="ignore"):  # a breakdown is caught by the residual below
                        x, steps = conjugate_gradients(self.A, b, x, self._cycle, target,
                                                       self.max_iterations - iterations)  # fmt: skip
                    iterations += max(steps, 1)
                    residual = scaled(x)
                    if residual <= self.tolerance or not residual < 0.5 * best:
                        break  # met, or no longer improving (round-off)
                    best = residual
                    # not met: ask for a thousandfold reduction of the current |r|
                    target = max(1e-3 * np.linalg.norm(b - self.A @ x) / norm, 1e-16)
        residual = scaled(x)
        if not residual <= self.tolerance:  # also catches NaN
            raise ConvergenceError(
                f"the {self.method} pressure solve stopped at a scaled residual of {residual:.2e} "
                f"after {iterations} iterations (asked for {self.tolerance:.0e}); the field may hold "
                "extreme contrasts — try `solver=direct` on a smaller grid, or a looser `tolerance`"
            )
        return x, SolveInfo(self.method, iterations, residual)


def conjugate_gradients(
    A: sparse.csr_matrix,
    b: np.ndarray,
    x: np.ndarray,
    precondition: Callable[[np.ndarray], np.ndarray],
    rtol: float,
    max_iterations: int,
) -> tuple[np.ndarray, int]:
    """Preconditioned conjugate gradients for ``A x = b``, from the first guess `x`.

    The textbook iteration (Hestenes & Stiefel 1952; Saad 2003, "Iterative
    Methods for Sparse Linear Systems", Algorithm 9.1), with the residual
    recomputed as ``b - A x`` every eighth step against drift. It stops when
    ``|r| < rtol |b|``, after `max_iterations` steps, or on a breakdown: a
    curvature ``p·Ap`` or ``r·z`` that is not positive (the matrix or the
    preconditioner is not positive definite in floating point, as at
    contrasts near 1e16). It warns about nothing and returns the last
    iterate; the caller judges it by its residual.

    Parameters
    ----------
    A : csr_matrix of shape (n, n)
        Symmetric positive definite.
    b, x : ndarray of shape (n,)
        Right-hand side and first guess (not modified).
    precondition : callable
        ``z = precondition(r)``, symmetric positive definite (a multigrid V-cycle).
    rtol : float
        Relative reduction of the residual's 2-norm asked for.
    max_iterations : int

    Returns
    -------
    x : ndarray of shape (n,)
    iterations : int
        Steps taken.

    Examples
    --------
    >>> A = sparse.csr_matrix(np.array([[4.0, 1.0], [1.0, 3.0]]))
    >>> x, steps = conjugate_gradients(A, np.array([1.0, 2.0]), np.zeros(2), lambda r: r, 1e-12, 10)
    >>> np.round(x, 6).tolist(), steps
    ([0.090909, 0.636364], 2)
    """
    x = x.copy()
    r = b - A @ x
    z = precondition(r)
    p = z.copy()
    rz = float(r @ z)
    target = rtol * (np.linalg.norm(b) or 1.0)
    if np.linalg.norm(r) < target:
        return x, 0
    for step in range(1, max_iterations + 1):
        Ap = A @ p
        curvature = float(p @ Ap)
        if not (curvature > 0.0 and rz > 0.0):  # breakdown, or NaN
            return x, step - 1
        alpha = rz / curvature
        x += alpha * p
        r = b - A @ x if step % 8 == 1 else r - alpha * Ap
        z = precondition(r)
        rz_old, rz = rz, float(r @ z)
        if np.linalg.norm(r) < target:
            return x, step
        p = z + (rz / rz_old) * p
    return x, max_iterations


#: A multigrid hierarchy: (matrix, prolongator) per level, finest first, and the coarsest matrix.
Hierarchy = tuple[list[tuple[sparse.csr_matrix, sparse.csr_matrix]], sparse.csr_matrix]


def aggregation(A: sparse.csr_matrix) -> Hierarchy:
    """A smoothed-aggregation hierarchy for `A`: (matrix, prolongator) per level and the coarsest matrix.

    Smoothed aggregation (Vaněk, Mandel & Brezina 1996, "Algebraic
    multigrid by smoothed aggregation for second and fourth order elliptic
    problems"): cells joined by any nonzero coupling are grouped into
    aggregates of about 3 x 3 (pyamg's standard aggregation, strength
    threshold 0); the piecewise-constant prolongator of the aggregates is
    smoothed by one damped Jacobi step with the weight ``4/3`` over each
    row's absolute sum (Gershgorin's bound on the spectrum, so no eigenvalue
    estimate is needed); the next level's matrix is ``P^T A P``, down to at
    most `COARSEST` unknowns. All in CSR (pyamg's own set-up works in BSR
    blocks of one, several times slower here).
    """
    from pyamg.aggregation.aggregate import standard_aggregation
    from pyamg.strength import symmetric_strength_of_connection

    found = []
    while A.shape[0] > COARSEST:
        aggregates = standard_aggregation(symmetric_strength_of_connection(A, 0.0))[0].tocsr()
        if aggregates.shape[1] in (0, A.shape[0]):
            break  # nothing left to coarsen
        sizes = np.bincount(aggregates.indices, minlength=aggregates.shape[1])
        tentative = aggregates @ sparse.diags(1.0 / np.sqrt(np.maximum(sizes, 1)))
        rows = np.repeat(np.arange(A.shape[0]), np.diff(A.indptr))
        row_sums = np.bincount(rows, np.abs(A.data), minlength=A.shape[0])
        del rows
        weights = np.divide(4.0 / 3.0, row_sums, out=np.zeros_like(row_sums), where=row_sums > 0)
        smoothed = A @ tentative  # scaled row by row in place: fewer copies of the largest matrix
        smoothed.data *= np.repeat(weights, np.diff(smoothed.indptr))
        P = (tentative - smoothed).tocsr()
        del smoothed
        found.append((A, P))
        A = (P.T @ A @ P).tocsr()
    return found, A


#: Unknowns of the coarsest multigrid level at most (solved by its pseudo-inverse).
COARSEST = 500


def classical(A: sparse.csr_matrix) -> Hierarchy:
    """The classical Ruge–Stüben hierarchy of pyamg for `A` (strength threshold 0.1), as `aggregation` gives.

    Measured while building the solver (issue 3): on the demo layer cake
    (0.01 mD shales between 500 mD sands, cells 25 times wider than thick)
    12 iterations where smoothed aggregation needed 138; the threshold 0.1
    beat the default 0.25 on the 3D demo (29 against 69 iterations).
    """
    import pyamg

    # pyamg's default coarsest size (10): the pseudo-inverse of a larger coarsest matrix at contrasts
    # of 1e8 drops directions below its cut-off, and the conjugate gradients diverged (measured)
    hierarchy = pyamg.ruge_stuben_solver(A, strength=("classical", {"theta": 0.1}))
    return [(level.A, level.P) for level in hierarchy.levels[:-1]], hierarchy.levels[-1].A


#: Largest spread of the couplings of one cell (strongest over weakest) that `multigrid_cycle`
#: coarsens by smoothed aggregation; beyond it, by classical coarsening (see there). Measured
#: spreads: 2D lognormal σ 1 9, 3D 39 (cubic cells), 715 (cells 10 x 10 x 1, where aggregation
#: needed twice the iterations of classical coarsening), channels of 1e6 1.3e6.
SPREAD_LIMIT = 100.0


def coupling_spread(A: sparse.csr_matrix) -> float:
    """The largest ratio between the strongest and the weakest coupling of one unknown of `A`.

    Examples
    --------
    >>> A = sparse.csr_matrix(np.array([[3.0, -1.0, -2.0], [-1.0, 1.0, 0.0], [-2.0, 0.0, 2.0]]))
    >>> coupling_spread(A)
    2.0
    """
    rows = np.repeat(np.arange(A.shape[0]), np.diff(A.indptr))
    off = (A.indices != rows) & (A.data != 0)
    rows, values = rows[off], np.abs(A.data[off])
    if not rows.size:
        return 1.0
    starts = np.flatnonzero(np.r_[True, rows[1:] != rows[:-1]])
    return float(np.max(np.maximum.reduceat(values, starts) / np.minimum.reduceat(values, starts)))


def multigrid_cycle(A: sparse.csr_matrix) -> Callable[[np.ndarray], np.ndarray]:
    """A multigrid V-cycle for `A` as a preconditioner ``z = M r`` (symmetric positive definite).

    The levels are those of `aggregation` where no cell's couplings spread
    over more than `SPREAD_LIMIT` (fields of moderate contrast on cells of
    about equal sides, uniform k: a cheaper set-up and cycle), else those of
    `classical` (thin cells, layers, channels and shales of high contrast,
    where aggregates that straddle a contrast need twice the iterations or
    more, or did not converge: measured on rows of 1e8 contrast, issue 18).

    One forward Gauss–Seidel sweep on the way down and one backward sweep
    on the way up make the cycle symmetric, a valid preconditioner for
    conjugate gradients, at half the cost of symmetric sweeps both ways
    (which also stalled near 1e-5 on the lognormal benchmark systems). The
    cycle is our own rather than pyamg's ``aspreconditioner``, which
    computes the residual's norm before and after every cycle: two
    products with the finest matrix more per iteration.
    """
    from pyamg.amg_core import gauss_seidel
    from scipy.linalg import pinv

    levels, last = (aggregation if coupling_spread(A) <= SPREAD_LIMIT else classical)(A)
    coarsest = pinv(last.toarray())

    def cycle(b: np.ndarray) -> np.ndarray:
        # a loop down and up, not a recursion: a closure that calls itself is a reference cycle,
        # which kept every solve's hierarchy alive until the garbage collector ran (measured: the
        # peak memory of a 3D check nearly doubled)
        down = []
        for A, P in levels:
            x = np.zeros_like(b)
            gauss_seidel(A.indptr, A.indices, A.data, x, b, 0, A.shape[0], 1)
            down.append((x, b))
            b = P.T @ (b - A @ x)  # P.T: a view (CSC), no copy held
        correction = coarsest @ b
        for (A, P), (x, b) in zip(reversed(levels), reversed(down)):
            x += P @ correction
            gauss_seidel(A.indptr, A.indices, A.data, x, b, A.shape[0] - 1, -1, -1)
            correction = x
        return correction

    return cycle


def make_solver(
    A: sparse.spmatrix, method: str = "auto", tolerance: float = 1e-10, max_iterations: int = 300
) -> Solver:
    """Set up a `Solver` for `A` (see `Solver` for the parameters).

    Examples
    --------
    >>> from scipy import sparse
    >>> A = sparse.diags([[-1.0] * 3, [2.0] * 4, [-1.0] * 3], [-1, 0, 1])
    >>> x, info = make_solver(A).solve(np.ones(4))
    >>> info.method, np.round(x, 6).tolist()
    ('direct', [2.0, 3.0, 3.0, 2.0])
    """
    return Solver(A, method, tolerance, max_iterations)
