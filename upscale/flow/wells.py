"""Wells on a Cartesian grid: Peaceman's well index and the steady flow the wells drive.

A vertical well crosses the cells of one column of the grid, in the layers
it is completed in. Each such cell connects to the well by its well index

    WI = 2π √(kx ky) h / (ln(r_o / r_w) + s),

so that the flow rate from the well into the cell is ``q = WI (p_w - p_c) / μ``,
with ``p_w`` the well's bottom-hole pressure, ``p_c`` the cell pressure,
``h`` the completed thickness of the cell (m), ``r_w`` the well radius (m) and
``s`` the skin. ``r_o`` is the equivalent radius: the distance from the well
at which the radial pressure around it equals the cell pressure of the
five-point scheme. For a rectangular cell Δx × Δy with kx ≠ ky (Peaceman
1983, "Interpretation of well-block pressures in numerical reservoir
simulation with nonsquare grid blocks and anisotropic permeability", SPE
Journal 23(3))

    r_o = 0.28 √(√(ky/kx) Δx² + √(kx/ky) Δy²) / ((ky/kx)^¼ + (kx/ky)^¼),

which for a square cell with kx = ky is ``0.28 Δx / √2 = 0.198 Δx``, the
value Peaceman (1978, "Interpretation of well-block pressures in numerical
reservoir simulation", SPE Journal 18(3)) found by experiment, ≈ 0.2 Δx.
WI is in (unit of k) · m, the unit of the face transmissibilities of
`upscale.flow.transmissibility`, so wells and faces share one equation.

`well_flow` solves the steady pressure problem with the wells as sources:
a pressure well fixes ``p_w``; a rate well fixes its total rate and its
``p_w`` is one more unknown (its row: ``Σ WI (p_w - p_c) = q``), which keeps
the system symmetric positive definite, solved by `upscale.flow.solvers`.
The outer faces are closed, or held at one fixed pressure on the four sides
(top and bottom stay closed). Rates are per unit viscosity: a rate is
``q μ`` in (unit of k) · m · (unit of pressure), positive into the rock
(injection), negative out of it (production).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import sparse

from ..errors import InputError
from ..field import Grid
from .islands import regions
from .solvers import make_solver
from .transmissibility import Transmissibilities

#: The two controls of a well: its bottom-hole pressure or its total rate.
CONTROLS = ("pressure", "rate")
#: Fixed-pressure faces one by one: cell behind each (flat index), its half-cell t, the face pressure.
FixedFaces = tuple[np.ndarray, np.ndarray, np.ndarray]


@dataclass(frozen=True)
class Well:
    """One vertical well.

    Attributes
    ----------
    name : str
    x, y : float
        Position in the units of the grid's CRS (without a transform: m from the
        west edge, and m from the north edge, negative southward).
    layers : (int, int) or None
        First and last completed layer, 1 = top, both included; None: all layers.
    control : {'pressure', 'rate'}
        What is fixed: the bottom-hole pressure or the total rate.
    value : float
        The fixed pressure (unit of pressure), or the fixed rate ``q μ`` in
        (unit of k) · m · (unit of pressure), positive for injection.
    radius : float
        Well radius r_w in m.
    skin : float
        Skin factor s (dimensionless).
    """

    name: str
    x: float
    y: float
    layers: tuple[int, int] | None
    control: str
    value: float
    radius: float
    skin: float = 0.0


@dataclass(frozen=True, eq=False)
class Connections:
    """The cells a well connects to on one grid and their well indices.

    Attributes
    ----------
    well : Well
    cells : ndarray of int, shape (c,)
        Flat indices of the connected cells (layer, row, column order).
    index : ndarray of float, shape (c,)
        Well index WI of each, in (unit of k) · m.
    """

    well: Well
    cells: np.ndarray
    index: np.ndarray


@dataclass(frozen=True, eq=False)
class WellFlow:
    """The steady flow driven by wells on one grid.

    Attributes
    ----------
    rates : dict of str to float
        Each well's rate ``q μ``, (unit of k) · m · (unit of pressure), positive into the rock.
    pressures : dict of str to float
        Each well's bottom-hole pressure (given or solved).
    boundary_rate : float
        Rate out of the rock through the fixed-pressure outer faces (0 when closed).
    pressure : ndarray of shape (L, M, N)
        Cell pressures; NaN where not solved (inactive, or in a region no well reaches).
    unknowns : int
    method, iterations, residual
        How the linear solve went (`upscale.flow.solvers.SolveInfo`; residual in
        pressures scaled to a unit spread).
    """

    rates: dict[str, float]
    pressures: dict[str, float]
    boundary_rate: float
    pressure: np.ndarray
    unknowns: int
    method: str
    iterations: int
    residual: float

    @property
    def total_rate(self) -> float:
        """``Σ |q|`` over the wells: what the wells move, whatever the direction."""
        return float(sum(abs(q) for q in self.rates.values()))


def equivalent_radius(kx: np.ndarray, ky: np.ndarray, dx: np.ndarray, dy: np.ndarray) -> np.ndarray:
    """Peaceman's (1983) equivalent radius r_o of cells Δx × Δy with permeabilities kx, ky (m).

    Examples
    --------
    >>> round(float(equivalent_radius(1.0, 1.0, 10.0, 10.0)), 4)   # 0.198 Δx (Peaceman 1978)
    1.9799
    """
    ratio = np.asarray(ky, dtype=np.float64) / np.asarray(kx, dtype=np.float64)
    root = np.sqrt(ratio)
    return 0.28 * np.sqrt(root * np.square(dx) + np.square(dy) / root) / (ratio**0.25 + ratio**-0.25)


def well_index(kx: np.ndarray, ky: np.ndarray, dx: np.ndarray, dy: np.ndarray, h: np.ndarray,
               radius: float, skin: float = 0.0) -> np.ndarray:  # fmt: skip
    """Peaceman's well index ``2π √(kx ky) h / (ln(r_o / r_w) + s)`` of cells, (unit of k) · m.

    Parameters
    ----------
    kx, ky : ndarray
        Permeabilities of the cells (any unit), positive.
    dx, dy, h : ndarray
        Cell width, height and completed thickness, m.
    radius : float
        Well radius r_w, m.
    skin : float
        Skin factor s.

    Examples
    --------
    >>> wi = well_index(100.0, 100.0, 10.0, 10.0, 2.0, radius=0.1)
    >>> round(float(wi), 2)   # 2π · 100 · 2 / ln(1.98 / 0.1)
    420.89
    """
    k = np.sqrt(np.asarray(kx, dtype=np.float64) * np.asarray(ky, dtype=np.float64))
    return 2 * np.pi * k * h / (np.log(equivalent_radius(kx, ky, dx, dy) / radius) + skin)


def column_of(grid: Grid, well: Well) -> tuple[int, int]:
    """The (row, column) of `grid` that holds the well's position.

    A position on an edge between two cells takes the cell after it (east, south).

    Raises
    ------
    InputError
        If the position lies outside the grid.
    """
    found = []
    for edges, value, axis in zip(grid.edges()[:2], (well.x, well.y), "xy"):
        low, high = min(edges[0], edges[-1]), max(edges[0], edges[-1])
        if not low <= value <= high:
            raise InputError(
                f"well {well.name}: {axis} = {value:g} lies outside the grid ({axis} from {low:g} to "
                f"{high:g}); give positions in the units of the raster's CRS"
            )
        ascending = edges if edges[-1] > edges[0] else -edges
        at = int(np.searchsorted(ascending, value if edges[-1] > edges[0] else -value, side="right")) - 1
        found.append(min(at, edges.size - 2))
    return found[1], found[0]


def completed_thickness(grid: Grid, layers: tuple[int, int] | None, fine: Grid | None = None) -> np.ndarray:
    """Completed thickness (m) in each layer of `grid`, shape (L,).

    Parameters
    ----------
    grid : Grid
        The grid whose layers are measured.
    layers : (int, int) or None
        First and last completed layer (1 = top) of `fine`; None: all of them.
    fine : Grid, optional
        The grid the layers are counted on (default `grid`); a coarse grid
        takes the depth interval those layers span.

    Examples
    --------
    >>> fine, coarse = Grid(dz=[1.0, 2.0, 3.0], dy=[1.0], dx=[1.0]), Grid(dz=[3.0, 3.0], dy=[1.0], dx=[1.0])
    >>> completed_thickness(coarse, (2, 2), fine).tolist()
    [2.0, 0.0]
    """
    fine = grid if fine is None else fine
    tops = np.concatenate([[0.0], np.cumsum(fine.dz)])
    first, last = (1, fine.dz.size) if layers is None else layers
    top, bottom = tops[first - 1], tops[last]
    edges = np.concatenate([[0.0], np.cumsum(grid.dz)])
    return np.clip(np.minimum(edges[1:], bottom) - np.maximum(edges[:-1], top), 0.0, None)


def connect(
    well: Well, grid: Grid, kx: np.ndarray, ky: np.ndarray, *, fine: Grid | None = None,
    rock: np.ndarray | None = None,
) -> Connections:
    """The cells of `grid` the well crosses and their Peaceman well indices.

    Parameters
    ----------
    well : Well
    grid : Grid
        The grid solved on (fine, or coarse with `fine`).
    kx, ky : ndarray of shape (L, M, N)
        Permeabilities along x and y (any unit; NaN inactive).
    fine : Grid, optional
        The grid the well's layers are counted on, when `grid` is coarse.
    rock : ndarray of bool, shape (L, M, N), optional
        False for cells pinched out (zero thickness, `upscale.geometry`): the
        well is not completed in them. With a geometry, `kx` and `ky` are the
        reference field's, whose thickness is ``grid.dz``: the well index
        comes out with the cell's true thickness.

    Raises
    ------
    InputError
        If the well lies outside the grid, is completed in an inactive cell or
        one with kx or ky = 0, or its radius is not below the equivalent radius.
    """
    row, column = column_of(grid, well)
    counted = (grid if fine is None else fine).shape[0]
    if well.layers is not None and well.layers[1] > counted:
        raise InputError(f"well {well.name}: layers {well.layers[0]}-{well.layers[1]} go below the grid's "
                         f"{counted} layer(s); count layers from 1 at the top")  # fmt: skip
    h = completed_thickness(grid, well.layers, fine)
    if rock is not None:
        h = np.where(rock[:, row, column], h, 0.0)
    layers = np.flatnonzero(h > 0)
    k_x, k_y = kx[layers, row, column], ky[layers, row, column]
    for layer, a, b in zip(layers, k_x, k_y):
        if not (np.isfinite(a) and np.isfinite(b) and a > 0 and b > 0):
            raise InputError(
                f"well {well.name} is completed in an inactive or impermeable cell (layer {layer + 1}, "
                f"row {row + 1}, column {column + 1}); move it or narrow its layers"
            )
    dx, dy = grid.dx[column], grid.dy[row]
    r_o = equivalent_radius(k_x, k_y, dx, dy)
    if np.any(np.log(r_o / well.radius) + well.skin <= 0):
        raise InputError(
            f"well {well.name}: radius {well.radius:g} m with skin {well.skin:g} gives no positive well "
            f"index in a cell {dx:g} m x {dy:g} m (equivalent radius {float(r_o.min()):.3g} m); "
            "check the radius (in m) and the skin"
        )
    index = well_index(k_x, k_y, dx, dy, h[layers], well.radius, well.skin)
    cells = np.ravel_multi_index(
        (layers, np.full_like(layers, row), np.full_like(layers, column)), grid.shape
    )
    return Connections(well, cells, index)


def refuse_rates_only(wells: tuple[Well, ...] | list[Well], outer_pressure: float | None) -> None:
    """Refuse wells that all fix their rate inside closed outer faces: no pressure is fixed anywhere.

    Raises
    ------
    InputError
        The problem would be singular (pressures defined up to a constant, and
        rates that must sum to 0).
    """
    if outer_pressure is None and all(w.control == "rate" for w in wells):
        raise InputError(
            "every well is driven by a rate and the outer faces are closed, so no pressure is fixed anywhere "
            "(a singular problem); give one well a pressure control, or an outer pressure"
        )


def refuse_shared_cells(connections: list[Connections]) -> None:
    """Refuse two wells in one cell of the grid (the fine grid: they would be one well).

    Raises
    ------
    InputError
        Naming the two wells.
    """
    owner: dict[int, str] = {}
    for c in connections:
        for cell in c.cells.tolist():
            if cell in owner:
                raise InputError(
                    f"wells {owner[cell]} and {c.well.name} share a fine cell; two wells need two cells "
                    "(move one, or give them different layers)"
                )
            owner[cell] = c.well.name


def well_flow(trans: Transmissibilities, connections: list[Connections], *,
              outer_pressure: float | None = None, faces: FixedFaces | None = None,
              solver: str = "auto", tolerance: float = 1e-10) -> WellFlow:  # fmt: skip
    """Solve the steady flow driven by the wells (module docstring) on one grid.

    Parameters
    ----------
    trans : Transmissibilities
        The grid's transmissibilities, (unit of k) · m.
    connections : list of Connections
        Each well's cells and well indices on this grid (`connect`).
    outer_pressure : float, optional
        Pressure held on the four side faces of the domain; None: closed.
    faces : (ndarray of int, ndarray of float, ndarray of float), optional
        Fixed-pressure outer faces given one by one, in place of `outer_pressure`:
        the flat index of the cell behind each face, the cell's half-cell t
        towards it ((unit of k) · m, positive) and the face's pressure.
    solver, tolerance
        As in `upscale.flow.steady.pressure_drop`.

    Returns
    -------
    WellFlow

    Raises
    ------
    InputError
        If a rate well reaches neither a pressure well nor a fixed-pressure
        face: its pressure would be undefined (a singular system).

    Examples
    --------
    >>> import numpy as np
    >>> from upscale.field import Field
    >>> from upscale.flow.transmissibility import transmissibilities
    >>> k = np.full((5, 5), 100.0)
    >>> field = Field.from_arrays(k, cell_size=(10.0, 10.0))
    >>> injector = Well("I", 5.0, -5.0, None, "rate", 50.0, 0.1)
    >>> producer = Well("P", 45.0, -45.0, None, "pressure", 0.0, 0.1)
    >>> wells = [connect(w, field.grid, k[None], k[None]) for w in (injector, producer)]
    >>> flow = well_flow(transmissibilities(field), wells)
    >>> round(flow.rates["P"], 9), flow.pressures["I"] > 0
    (-50.0, True)
    """
    n = int(np.prod(trans.shape))
    first, second, T = trans.connections
    fixed_cells, fixed_t, fixed_p = _outer_faces(trans, outer_pressure) if faces is None else faces
    outer = fixed_cells.size  # the outer faces come first among the fixed pressures
    rate_wells = [c for c in connections if c.well.control == "rate"]
    for c in connections:
        if c.well.control == "pressure":
            fixed_cells, fixed_t = np.append(fixed_cells, c.cells), np.append(fixed_t, c.index)
            fixed_p = np.append(fixed_p, np.full(c.cells.size, c.well.value))
    # a rate well is one more node, joined to its cells by its well indices
    nodes = n + len(rate_wells)
    node = [np.full(c.cells.size, n + w) for w, c in enumerate(rate_wells)]
    first = np.concatenate([first, *(c.cells for c in rate_wells)])
    second = np.concatenate([second, *node])
    T = np.concatenate([T, *(c.index for c in rate_wells)])
    labels = regions(nodes, first, second)
    keep = np.isin(labels, labels[fixed_cells])
    for w, c in enumerate(rate_wells):
        if not keep[n + w]:
            raise InputError(
                f"well {c.well.name} is driven by a rate and reaches no pressure well and no fixed-pressure "
                "outer face, so its pressure is undefined; give one well a pressure, or an outer pressure"
            )
    sources = np.zeros(nodes)
    sources[n:] = [c.well.value for c in rate_wells]
    p, info = _solve(keep, (first, second, T), (fixed_cells, fixed_t, fixed_p), sources, solver, tolerance)
    pressures = {c.well.name: c.well.value for c in connections}
    pressures.update({c.well.name: float(p[n + w]) for w, c in enumerate(rate_wells)})
    rates = {c.well.name: float(np.sum(c.index * (pressures[c.well.name] - p[c.cells]))) for c in connections}
    rates.update({c.well.name: c.well.value for c in rate_wells})
    boundary_rate = float(np.sum(fixed_t[:outer] * (p[fixed_cells[:outer]] - fixed_p[:outer])))
    pressure = p[:n].reshape(trans.shape)
    return WellFlow(rates, pressures, boundary_rate, pressure, int(keep.sum()), *info)


def _outer_faces(
    trans: Transmissibilities, pressure: float | None
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Cells behind the four side faces, their half-cell t towards the face, and its pressure."""
    if pressure is None:
        return np.zeros(0, np.int64), np.zeros(0), np.zeros(0)
    index = np.arange(int(np.prod(trans.shape))).reshape(trans.shape)
    cells, t = [], []
    for axis in (1, 2):
        for side, end in zip(trans.boundary[axis], (0, trans.shape[axis] - 1)):
            cells.append(np.take(index, [end], axis=axis).ravel())
            t.append(side.ravel())
    cells_, t_ = np.concatenate(cells), np.concatenate(t)
    return cells_[t_ > 0], t_[t_ > 0], np.full(int(np.sum(t_ > 0)), float(pressure))


def _solve(keep: np.ndarray, faces: tuple, fixed: tuple, sources: np.ndarray, solver: str,
           tolerance: float) -> tuple[np.ndarray, tuple[str, int, float]]:  # fmt: skip
    """Pressures of the kept nodes (NaN elsewhere) and how the solve went.

    The pressures are shifted and scaled so that the fixed ones span [0, 1]
    (or the rate wells move about one unit of pressure) before the solve:
    the solver's residual is a pressure, and its tolerance means the same
    whatever the unit. The problem is linear, so the scaling is undone exactly.
    """
    first, second, T = faces
    cells, t, values = fixed
    number = np.full(keep.size, -1)
    m = int(keep.sum())
    number[keep] = np.arange(m)
    inside = keep[first]
    i, j, T = number[first[inside]], number[second[inside]], T[inside]
    reference = float(values.min())
    diagonal = np.bincount(i, T, minlength=m) + np.bincount(j, T, minlength=m)
    diagonal += np.bincount(number[cells], t, minlength=m)
    q = sources[keep]
    scale = max(float(values.max()) - reference, float(np.max(np.abs(q) / diagonal, initial=0.0)))
    scale = scale if scale > 0 else 1.0
    rhs = np.bincount(number[cells], t * (values - reference) / scale, minlength=m) + q / scale
    A = sparse.coo_matrix(
        (np.concatenate([diagonal, -T, -T]),
         (np.concatenate([np.arange(m), i, j]), np.concatenate([np.arange(m), j, i]))),
        shape=(m, m),
    ).tocsr()  # fmt: skip
    x, info = make_solver(A, solver, tolerance).solve(rhs)
    p = np.full(keep.size, math.nan)
    p[keep] = reference + scale * x
    return p, (info.method, info.iterations, info.residual)
