"""Steady flow under fixed pressures on outer faces; the pressure drop along one axis and k_eff.

`fixed_pressures` solves any steady flow with p = 1 on some outer faces,
p = 0 on others and the rest closed; `pressure_drop` is the flow along one
axis (and `upscale.flow.corner` the corner-to-corner flow).

The fixed pressures sit on the two outer faces of the domain across the
chosen axis — on the faces themselves, half a cell from the first and last
cell centres, so each boundary cell connects to its face with its half-cell
transmissibility. The other outer faces are closed. With p = 1 on the inlet
face, p = 0 on the outlet face and unit viscosity, the flow rate Q gives

    k_eff = Q μ L / (A_gross Δp),

with L the length of the domain along the axis and A_gross its whole
cross-section, inactive cells included; k_eff is in the unit of the input k.
"""

from __future__ import annotations

from dataclasses import dataclass, fields

import numpy as np
from scipy import sparse

from ..field import AXES
from .islands import anchored
from .solvers import Solver, make_solver
from .transmissibility import Transmissibilities


@dataclass(frozen=True, eq=False)
class SteadyFlow:
    """A steady solve with fixed pressures 1 (inlet faces) and 0 (outlet faces), the rest closed.

    Attributes
    ----------
    inflow, outflow : float
        Flow rate through the inlet and the outlet faces, in (unit of k) · m per
        unit of pressure drop over viscosity.
    mass_balance : float
        ``|inflow - outflow| / max(|inflow|, |outflow|)`` (0 when nothing flows).
    connected : bool
        Whether any path of permeable active cells joins the inlet and the outlet.
    unknowns : int
        Cells solved for.
    isolated : int
        Active cells in regions touching neither the inlet nor the outlet (left out; no flow).
    method, iterations, residual
        How the linear solve went (see `upscale.flow.solvers.SolveInfo`).
    pressure : ndarray of shape (L, M, N)
        Cell pressures (inlet 1, outlet 0); NaN where not solved.
    trans : Transmissibilities
        The transmissibilities solved with (for face fluxes from `pressure`).
    """

    inflow: float
    outflow: float
    mass_balance: float
    connected: bool
    unknowns: int
    isolated: int
    method: str
    iterations: int
    residual: float
    pressure: np.ndarray
    trans: Transmissibilities


@dataclass(frozen=True, eq=False)
class AxisFlow(SteadyFlow):
    """The result of one pressure-drop solve across an axis (the fields of `SteadyFlow`, and these).

    Attributes
    ----------
    axis : str
        ``"x"``, ``"y"`` or ``"z"``.
    k_eff : float
        Effective permeability along the axis, unit of the input k.
    """

    axis: str
    k_eff: float


def pressure_drop(
    trans: Transmissibilities, axis: str, *, solver: str = "auto", tolerance: float = 1e-10
) -> AxisFlow:
    """Solve steady flow with p = 1 on the inlet face and p = 0 on the outlet face of `axis`.

    Parameters
    ----------
    trans : Transmissibilities
        The grid's transmissibilities.
    axis : {'x', 'y', 'z'}
        Flow axis; the inlet is the face before the first cell (first column,
        first row or top layer), the outlet the face after the last.
    solver : {'auto', 'amg', 'direct'}
        See `upscale.flow.solvers.Solver`.
    tolerance : float
        Relative residual required of the linear solve.

    Returns
    -------
    AxisFlow

    Examples
    --------
    >>> import numpy as np
    >>> from upscale.field import Field
    >>> from upscale.flow.transmissibility import transmissibilities
    >>> layers_across_x = np.array([[1.0, 4.0], [1.0, 4.0]])   # two columns in series
    >>> flow = pressure_drop(transmissibilities(Field.from_arrays(layers_across_x)), "x")
    >>> round(flow.k_eff, 12)   # the harmonic mean of 1 and 4
    1.6
    """
    a = AXES[axis]
    shape = trans.shape
    index = np.arange(int(np.prod(shape))).reshape(shape)
    t_in, t_out = (t.ravel() for t in trans.boundary[a])
    inlet = np.take(index, [0], axis=a).ravel(), t_in
    outlet = np.take(index, [shape[a] - 1], axis=a).ravel(), t_out
    solved = fixed_pressures(trans, inlet, outlet, solver=solver, tolerance=tolerance)
    sizes = [trans.grid.dz.sum(), trans.grid.dy.sum(), trans.grid.dx.sum()]
    length = sizes.pop(a)
    k_eff = float(solved.outflow * length / (sizes[0] * sizes[1]))
    k_eff = k_eff * trans.volume_ratio if a == 0 else k_eff / trans.volume_ratio
    return AxisFlow(**{f.name: getattr(solved, f.name) for f in fields(SteadyFlow)}, axis=axis, k_eff=k_eff)


def fixed_pressures(
    trans: Transmissibilities,
    inlet: tuple[np.ndarray, np.ndarray],
    outlet: tuple[np.ndarray, np.ndarray],
    *,
    solver: str = "auto",
    tolerance: float = 1e-10,
) -> SteadyFlow:
    """Solve steady flow with p = 1 on the inlet faces and p = 0 on the outlet faces, the rest closed.

    Parameters
    ----------
    trans : Transmissibilities
        The grid's transmissibilities.
    inlet, outlet : (ndarray of int, ndarray of float)
        The flat index of the cell behind every fixed-pressure outer face, and
        the half-cell transmissibility t of that cell towards the face
        ((unit of k) · m; from ``trans.boundary``). A cell may appear more than
        once (a corner cell with two inlet faces); faces with t = 0 are left out.
    solver, tolerance
        As in `pressure_drop`.

    Returns
    -------
    SteadyFlow
    """
    shape = trans.shape
    n = int(np.prod(shape))
    (inlet_cells, t_in), (outlet_cells, t_out) = inlet, outlet
    inlet_cells, t_in = inlet_cells[t_in > 0], t_in[t_in > 0]
    outlet_cells, t_out = outlet_cells[t_out > 0], t_out[t_out > 0]

    first, second, T = trans.connections
    # inactive cells have t = 0 on every face: regions of their own that are never anchored
    keep, connected = anchored(trans.regions, inlet_cells, outlet_cells)
    isolated = int(trans.active.sum() - keep.sum())
    number = np.full(n, -1)
    number[keep] = np.arange(int(keep.sum()))

    # faces inside the solved set (a face joins two cells of the same region)
    inside = keep[first]
    i, j, T = number[first[inside]], number[second[inside]], T[inside]
    m = int(keep.sum())
    inlet, outlet = number[inlet_cells], number[outlet_cells]
    rhs = np.bincount(inlet, t_in, minlength=m)  # p = 1 on the inlet faces, p = 0 on the outlet faces
    diagonal = (
        np.bincount(i, T, minlength=m) + np.bincount(j, T, minlength=m)
        + rhs + np.bincount(outlet, t_out, minlength=m)
    )  # fmt: skip
    A = sparse.coo_matrix(
        (np.concatenate([diagonal, -T, -T]),
         (np.concatenate([np.arange(m), i, j]), np.concatenate([np.arange(m), j, i]))),
        shape=(m, m),
    ).tocsr()  # fmt: skip

    solve = make_solver(A, solver, tolerance)
    p, info = solve.solve(rhs)
    if m and connected:
        p = _refined(p, solve, tolerance, (i, j, T), (inlet, t_in), (outlet, t_out))
    inflow = float(np.sum(t_in * (1.0 - p[inlet]))) if m else 0.0
    outflow = float(np.sum(t_out * p[outlet])) if m else 0.0
    if not connected:  # no path joins the faces: nothing flows, the rates are rounding
        inflow = outflow = 0.0
    largest = max(abs(inflow), abs(outflow))
    pressure = np.full(n, np.nan)
    pressure[keep] = p
    return SteadyFlow(
        inflow=inflow,
        outflow=outflow,
        mass_balance=abs(inflow - outflow) / largest if largest > 0 else 0.0,
        connected=connected,
        unknowns=m,
        isolated=isolated,
        method=info.method,
        iterations=info.iterations,
        residual=info.residual,
        pressure=pressure.reshape(shape),
        trans=trans,
    )


def _refined(p: np.ndarray, solve: Solver, tolerance: float, faces: tuple, inlet: tuple, outlet: tuple,
             steps: int = 3) -> np.ndarray:  # fmt: skip
    """Pressures corrected against the residual of the face fluxes themselves, when mass is lost.

    The assembled diagonal of a permeable cell holds its tight faces only to
    eps x diagonal, so at contrasts of 1e12 the solution of the assembled
    system can lose percent of the mass between inlet and outlet. While the
    inflow and outflow differ by more than ``sqrt(tolerance)`` of the flow,
    the residual computed face by face (conservative form) is solved for a
    correction with the same factor or hierarchy (iterative refinement, up
    to `steps` times; common practice). A solve that balances costs nothing more.
    """
    i, j, T = faces
    (into, t_in), (out, t_out) = inlet, outlet
    m = p.size
    for _ in range(steps):
        inflow, outflow = np.sum(t_in * (1.0 - p[into])), np.sum(t_out * p[out])
        if abs(inflow - outflow) <= np.sqrt(tolerance) * max(abs(inflow), abs(outflow)):
            break
        flux = T * (p[i] - p[j])
        r = np.bincount(into, t_in * (1.0 - p[into]), minlength=m)
        r -= np.bincount(out, t_out * p[out], minlength=m)
        r -= np.bincount(i, flux, minlength=m)
        r += np.bincount(j, flux, minlength=m)
        p = p + solve.solve(r)[0]
    return p
