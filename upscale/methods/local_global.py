"""Local–global upscaling: face transmissibilities iterated with coarse global flows.

Chen, Durlofsky, Gerritsen & Wen (2003), "A coupled local–global upscaling
approach for simulating flow in highly heterogeneous formations" (Advances
in Water Resources 26), replace the assumed boundary conditions of local
upscaling by ones taken from the coarse global flow, so that a channel that
connects beyond a block is seen by the block's local problem, without any
fine global solve:

1. Start from local transmissibilities: those of ``flow-transmissibility``
   (two-block solves with sealed sides, the same `border`).
2. Solve the coarse model under the global flows — the pressure drops the
   check imposes: p = 1 and p = 0 on the two outer faces across each flow
   axis, the other faces closed (`upscale.flow.steady.pressure_drop`).
3. For each coarse face, the extended region — the two blocks beside it and
   `border` cells around them, clipped at the domain — gets on its outer
   faces the coarse pressure interpolated there (below); the fine local
   problem gives the flux Q through the coarse face and the volume-averaged
   fine pressures of the two blocks, and ``T = Q / (p̄_I - p̄_J)``.
4. The flows are combined per face by least squares weighted by the
   pressure difference, ``T* = Σ Q Δp / Σ Δp²`` (the combination of Chen et
   al. 2003, from memory), and the face takes ``T = T_old (T* / T_old)^ω``;
   repeat from 2 until no face changes by more than `max_change`
   (relative), at most `max_iterations` times.

**Interpolation** (ours; Chen et al. interpolate the coarse pressures to the
boundary of the extended region, from memory): along each axis, linear in
the fine *resistance* ``s = Σ 2 / t`` accumulated along the fine line of
cells through the point, between nodes that sit at each block's mean s on
that line; tensor-product over the axes (bilinear on a map, trilinear in
3D), evaluated at the centre of each outer cell face of the region. In
steady flow along a line the pressure is linear in s and a block's mean
pressure is the pressure at its mean s, so layered fields get exactly the
fine pressure on the region's boundary, along and across the layers (with
interpolation linear in distance they got 37–44 % too much flow across
layers of σ(ln k) = 2, driven in through the sides). Along the flow axis
the domain's two fixed faces are nodes too, with their pressures 1 and 0;
along the closed axes the value is held beyond the outermost blocks' nodes.
An outer face of the region on the domain's own face takes the global
flow's condition: its fixed pressure on the inlet and outlet faces (which
the interpolation gives exactly), closed elsewhere.

**Sides**: with ``sides="pressure"`` (the default) every outer face of the
region holds the interpolated pressure, as Chen et al. do; with
``sides="closed"`` only its two ends across the coarse face do and its
sides are closed, as in the two-block solves: a field already coarse
(every block uniform) then keeps exactly the harmonic half-block values,
while with pressure sides it moves away from them towards the fine flow
(measured on a 6 x 5 blocky lognormal map, σ(ln k) = 1: check errors
-3.6 % / -1.9 % along x / y against -8.5 % / -11 % with the harmonic rule).

**Under-relaxation** (ours; common practice for fixed-point iterations):
taking T* directly, faces crossed obliquely by a channel flip between the
values the two flows ask for and the iteration does not settle (measured on
binary channel maps, 100:1: changes of 3 to 25 after 20 iterations). Each
face starts with ω = 1 (the new value as it is) and halves its ω whenever
its change turns back, so a face that oscillates settles geometrically
while one that moves steadily keeps its pace.

**Which flows inform a face**: a flow whose flux and pressure difference
have opposite signs (it would give a negative T), whose pressure difference
is below `NEGLIGIBLE`, or that leaves one end of the region closed (a
domain face that is closed in that flow) is left out of that face's sum
(ours). **Faces kept**: a face that no flow informs (or whose blocks have
no pressure in the coarse solve) keeps its previous iterate's value — the
local value at first. Chen et al. (2003) report negative values where the
coarse pressure difference is small and keep a transmissibility from the
local (or previous) calculation there (from
memory); such faces are counted (`Coupling.kept_faces`). The domain's outer
half transmissibilities keep their local two-block values, and faces
closed by the harmonic rule (touching an inactive block) stay closed.

**Efficiency.** A region's fine matrix with fixed boundary pressures does
not depend on their values, so the flux and the two block pressures are
linear functionals of the outer-face pressures, found once per region by
three solves of its factored matrix (`upscale.flow.extended`); composed with
the interpolation they become a sparse matrix over the coarse pressures,
and every iteration and every global flow costs one product with it and the
coarse solves. Regions clear of the first and last blocks on every axis
serve every flow; the others are solved once per flow.

Block values (kx, ky, kz.tif) are the flow-based sealed block values of
``flow`` with the given `bc` and `border`, as for ``flow-transmissibility``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace
from typing import Any

import numpy as np
from scipy import sparse

from ..errors import InputError
from ..field import AXES, Field
from ..flow import ConvergenceError, Transmissibilities, pressure_drop
from ..flow.extended import outer_faces, region_functionals
from ..flow.local import band_order
from .flow_based import _gather, _groups, _half_cells, _inputs, direct_properties

#: Default largest relative change of a face transmissibility between two iterations at convergence
#: (on the demo channel map 1e-2 and 1e-3 gave the same check errors to 4 digits, in 56 and 137 iterations).
MAX_CHANGE = 1e-2
#: Boundary conditions of the extended regions' sides (the faces along the coarse face): ``pressure``
#: interpolated there, as the ends, or ``closed``.
SIDES = ("pressure", "closed")
#: Default cap on the iterations.
MAX_ITERATIONS = 100
#: A pressure difference between two blocks below this fraction of the unit pressure drop of a global
#: flow says nothing about their face (common practice: a threshold well above rounding).
NEGLIGIBLE = 1e-9


@dataclass(frozen=True)
class Coupling:
    """How the local–global iteration went.

    Attributes
    ----------
    iterations : int
        Coarse global solves per flow (each followed by an update of the faces).
    change : float
        Largest relative change of a face transmissibility in the last iteration.
    kept_faces : int
        Faces that kept their previous value in the last iteration (negative
        or undefined combined value).
    """

    iterations: int
    change: float
    kept_faces: int


def local_global_properties(field: Field, cells: tuple[int, int, int], bc: str = "sealed", border: int = 0,
                            sides: str = "pressure", max_change: float = MAX_CHANGE,
                            max_iterations: int = MAX_ITERATIONS) -> dict[str, Any]:  # fmt: skip
    """The starting point of the iteration: block tensors and local face transmissibilities.

    Parameters
    ----------
    field, cells, bc, border
        As in `upscale.methods.flow_based.direct_properties`.
    sides : {'pressure', 'closed'}
        The extended regions' sides (their faces along the coarse face): the
        interpolated coarse pressure, as on their ends, or closed.
    max_change : float
        Largest relative change of a face transmissibility at convergence.
    max_iterations : int
        Iterations at most.

    Returns
    -------
    dict
        As `direct_properties`; `couple` iterates on the faces once the coarse model is built.
    """
    _check_options(sides, max_change, max_iterations)
    return direct_properties(field, cells, bc, border)


def _check_options(sides: str, max_change: float, max_iterations: int) -> None:
    if sides not in SIDES:
        raise InputError(f"`sides` must be one of {', '.join(SIDES)}, not {sides!r}")
    if not (isinstance(max_change, (int, float)) and math.isfinite(max_change) and max_change > 0):
        raise InputError(f"`max_change` must be a positive number such as 0.01, not {max_change!r}")
    whole = isinstance(max_iterations, (int, np.integer)) and not isinstance(max_iterations, bool)
    if not whole or max_iterations < 1:
        raise InputError(f"`max_iterations` must be a whole number of 1 or more, not {max_iterations!r}")


@dataclass(frozen=True)
class _Regions:
    """The extended regions of the faces between blocks, and their functionals per global flow.

    ``operators[f]`` (3R, C) and ``constants[f]`` (3R,) give, for the flow
    along array axis f, row ``3 r + k`` of region r: its flux (k = 0) and
    block pressures (k = 1, 2) from the coarse pressures (C, flat);
    ``through[f]`` (R,) says whether both its ends hold a pressure in that
    flow (with one end closed nothing can cross the face: the flow says
    nothing about it).
    """

    axis: np.ndarray  # (R,) axis across each face
    index: np.ndarray  # (R,) flat index of the face in `Transmissibilities.faces[axis]`
    operators: dict[int, sparse.csr_matrix]
    constants: dict[int, np.ndarray]
    through: dict[int, np.ndarray]


def couple(fine: Field, cells: tuple[int, int, int], trans: Transmissibilities,
           closed: tuple[np.ndarray, ...], *, bc: str, border: int, sides: str, max_change: float,
           max_iterations: int) -> tuple[tuple, Coupling]:  # fmt: skip
    """Iterate the face transmissibilities of a coarse model with its global flows.

    Parameters
    ----------
    fine : Field
        The fine field (read into memory).
    cells : (int, int, int)
        Cells per block (layers, rows, columns).
    trans : Transmissibilities
        The coarse model with the local transmissibilities to start from.
    closed : tuple of 3 ndarray of bool
        Faces laid out as ``trans.faces`` that stay closed (touching an inactive block).
    bc, border, sides, max_change, max_iterations
        As in `local_global_properties` (`bc` is used by the block values only).

    Returns
    -------
    faces : tuple of 3 ndarray
        The iterated face transmissibilities, laid out as ``trans.faces``.
    Coupling

    Raises
    ------
    ConvergenceError
        If a face still changes by more than `max_change` after `max_iterations`.
    """
    flows = [AXES[name] for name in fine.axes]
    regions = _regions(fine, cells, trans.shape, border, sides, flows)
    faces = [np.array(f, dtype=float) for f in trans.faces]
    free = ~_at_faces(closed, regions)
    change, weight, heading = np.inf, np.full(free.size, 1.0), np.zeros(free.size)
    for done in range(1, max_iterations + 1):
        old = _at_faces(faces, regions)
        found = _combined(replace(trans, faces=tuple(faces)), regions, flows)
        accepted = free & np.isfinite(found) & (found > 0)
        with np.errstate(divide="ignore", invalid="ignore"):
            step = np.where(accepted & (old > 0), np.log(found / old), 0.0)
        weight[np.sign(step) * heading < 0] /= 2  # a face that turns back is damped more
        heading = np.where(step != 0, np.sign(step), heading)
        new = np.where(old > 0, old * np.exp(weight * step), found)  # geometric under-relaxation
        with np.errstate(divide="ignore", invalid="ignore"):
            relative = np.abs(new - old) / old
        change = float(np.max(relative[accepted & (old > 0)], initial=0.0))
        for a in range(3):
            mine = accepted & (regions.axis == a)
            faces[a].ravel()[regions.index[mine]] = new[mine]
        if change < max_change:
            return tuple(faces), Coupling(done, change, int((free & ~accepted).sum()))
    raise ConvergenceError(
        f"local-global: face transmissibilities still changed by {change:.3g} after {max_iterations} "
        f"iterations (limit {max_change:g}); use the flow-transmissibility method, or from Python give "
        "coarsen a larger max_iterations or max_change"
    )


def _at_faces(values: tuple | list, regions: _Regions) -> np.ndarray:
    """The entries of face arrays laid out as ``Transmissibilities.faces``, in the regions' order."""
    return np.concatenate([values[a].ravel()[regions.index[regions.axis == a]] for a in range(3)])


def _combined(trans: Transmissibilities, regions: _Regions, flows: list[int]) -> np.ndarray:
    """``Σ Q Δp / Σ Δp²`` of every face over the flows that inform it (NaN where none does)."""
    names = {a: name for name, a in AXES.items()}
    q, drop = np.zeros((2, len(flows), regions.axis.size))
    for n, f in enumerate(flows):
        pressure = pressure_drop(trans, names[f]).pressure.ravel()
        missing = np.isnan(pressure)
        operator = regions.operators[f]
        values = (operator @ np.where(missing, 0.0, pressure) + regions.constants[f]).reshape(-1, 3)
        touched = (abs(operator) @ missing.astype(float)).reshape(-1, 3).sum(axis=1) > 0
        q[n], drop[n] = values[:, 0], np.where(touched, np.nan, values[:, 1] - values[:, 2])
    with np.errstate(invalid="ignore"):
        informs = (q * drop > 0) & (np.abs(drop) > NEGLIGIBLE) & np.array([regions.through[f] for f in flows])
    num = np.where(informs, q * drop, 0.0).sum(axis=0)
    den = np.where(informs, drop * drop, 0.0).sum(axis=0)
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(den > 0, num / den, np.nan)


def _regions(fine: Field, cells: tuple[int, int, int], coarse: tuple[int, int, int], border: int, sides: str,
             flows: list[int]) -> _Regions:  # fmt: skip
    """Solve every extended region once (once per flow near the domain's faces) for its functionals."""
    arrays, opts = _inputs(fine)
    t, grid = _half_cells(tuple(np.asarray(x, dtype=float) for x in arrays), fine.grid.dz, opts["cell"])
    axes = np.array(opts["axes"])
    extent = np.array(fine.shape)
    starts = [np.arange(0, n, b) for n, b in zip(extent, cells)]
    lines = [_Lines.of(t[a], grid.sizes(a), a, starts[a]) if axes[a] else None for a in range(3)]
    first, mid, last, axis, index = _faces(starts, cells, extent, coarse, axes)
    origin, stop = np.maximum(first - border, 0), np.minimum(last + border, extent)
    on_domain = np.stack([origin == 0, stop == extent], axis=1)  # (R, 2, 3)
    # regions clear of the first and last blocks on every axis see the same pressures in every flow
    inner = [(origin[:, a] >= cells[a]) & (stop[:, a] <= starts[a][-1]) for a in np.flatnonzero(axes)]
    shared = np.all(inner, axis=0)
    operators, constants, through = {}, {}, {}
    for f in flows:
        # the interpolated pressure inside the domain, the flow's condition on its faces; closed sides: the
        # two ends across the face only
        ends = np.arange(len(first))
        fixed = ~on_domain if sides == "pressure" else np.zeros_like(on_domain)
        fixed[:, :, f] |= sides == "pressure"
        fixed[ends, :, axis] = ~on_domain[ends, :, axis] | (axis == f)[:, None]
        through[f] = fixed[ends, 0, axis] & fixed[ends, 1, axis]
        todo = np.ones(len(first), bool) if f == flows[0] else ~shared
        pieces: list[list[np.ndarray]] = [[], [], []]
        constant = np.zeros((len(first), 3))
        for d in np.flatnonzero(axes):
            chosen = np.flatnonzero(todo & (axis == d))
            for shape, group in _groups(origin[chosen], stop[chosen]):
                members = chosen[group]
                order, width = band_order(shape, False)
                boxes, h = _gather(t, grid, origin[members], shape)
                coefficients = region_functionals(
                    boxes, h, np.array(shape), first[members] - origin[members],
                    mid[members] - origin[members, d], last[members] - origin[members], int(d),
                    fixed[members], order, width, axes)  # fmt: skip
                _interpolate(coefficients, members, origin[members], shape, axes, lines, cells, f,
                             coarse, pieces, constant)  # fmt: skip
        rows, cols, values = (np.concatenate(p) if p else np.zeros(0, int) for p in pieces)
        operator = sparse.csr_matrix((values, (rows, cols)), shape=(3 * len(first), math.prod(coarse)))
        if f != flows[0]:
            operator = sparse.diags(np.repeat(shared, 3).astype(float)) @ operators[flows[0]] + operator
            constant[shared] = constants[flows[0]].reshape(-1, 3)[shared]
        operators[f], constants[f] = sparse.csr_matrix(operator), constant.ravel()
    return _Regions(axis, index, operators, constants, through)


def _faces(starts: list[np.ndarray], cells: tuple[int, int, int], extent: np.ndarray,
           coarse: tuple[int, int, int], axes: np.ndarray) -> tuple[np.ndarray, ...]:  # fmt: skip
    """The faces between blocks, axis by axis.

    Returns the first cell (R, 3), the first cell of the second block along
    the axis (R,), the end cell (R, 3), the axis (R,) and the flat index in
    ``Transmissibilities.faces[axis]``.
    """
    firsts, mids, lasts, normal, index = [], [], [], [], []
    for d in np.flatnonzero(axes):
        shape = list(coarse)
        shape[d] -= 1
        before = np.indices(shape).reshape(3, -1).T  # the first block of each face
        after = before + np.eye(3, dtype=int)[d]
        firsts.append(np.stack([starts[a][before[:, a]] for a in range(3)], axis=1))
        second = np.stack([starts[a][after[:, a]] for a in range(3)], axis=1)
        mids.append(second[:, d])
        lasts.append(np.minimum(second + np.array(cells), extent))
        normal.append(np.full(len(before), d))
        index.append(np.arange(len(before)))
    return tuple(np.concatenate(x) for x in (firsts, mids, lasts, normal, index))


@dataclass(frozen=True)
class _Lines:
    """Resistance along the fine lines of one axis b, the coordinate the interpolation runs in.

    Along a line of cells the resistance from the domain's first face is
    ``s = Σ 2 / t`` over the cells passed (t the half-cell transmissibility;
    m / ((unit of k) · m²) up to the line's constant cross-section). In
    steady flow along the line the pressure is linear in s, and the mean
    pressure of a block is the pressure at the block's mean s.

    Attributes: ``faces`` s at each cell face (the field's shape, axis b one
    longer), ``centres`` s at each cell centre, ``blocks`` the mean s of each
    block's cells on each line (axis b one entry per block).
    """

    faces: np.ndarray
    centres: np.ndarray
    blocks: np.ndarray

    @classmethod
    def of(cls, t: np.ndarray, sizes: np.ndarray, b: int, starts: np.ndarray) -> _Lines:
        """The lines along `b` of half-cell transmissibilities `t` (L, M, N), cell sizes `sizes` (m)."""
        floor = 1e-12 * max(float(t.max()), np.finfo(float).tiny)  # a closed cell: a very large resistance
        cell = 2.0 / np.maximum(t, floor)
        shape = list(t.shape)
        shape[b] = 1
        faces = np.concatenate([np.zeros(shape), np.cumsum(cell, axis=b)], axis=b)
        centres = np.take(faces, np.arange(t.shape[b]), axis=b) + cell / 2
        h = np.expand_dims(sizes, [a for a in range(3) if a != b])
        weights = np.add.reduceat(np.broadcast_to(h, t.shape), starts, axis=b)
        blocks = np.add.reduceat(centres * h, starts, axis=b) / weights
        return cls(faces, centres, blocks)

    def at(self, array: np.ndarray, cells: np.ndarray, b: int, index: np.ndarray) -> np.ndarray:
        """``array`` on the line of each fine cell ``cells`` (..., 3), at `index` along b."""
        where = [cells[..., 0], cells[..., 1], cells[..., 2]]
        where[b] = index
        return array[tuple(where)]


def _linear(lines: _Lines, cells: np.ndarray, face: np.ndarray | None, b: int, block: int,
            ends: bool) -> tuple[np.ndarray, ...]:  # fmt: skip
    """Interpolation along b, linear in the resistance s: node indices and weights of both nodes.

    `cells` (..., 3) are the fine cells of the points; `face` (...) the face
    along b a point lies on (None: the cell centres). Nodes are the blocks'
    mean s on the point's line; with `ends`, the domain's faces are nodes
    too, numbered -1 and the block count; otherwise the value is held beyond
    the outermost blocks.
    """
    count = lines.blocks.shape[b]
    s = (lines.at(lines.centres, cells, b, cells[..., b]) if face is None
         else lines.at(lines.faces, cells, b, face))  # fmt: skip
    own = cells[..., b] // block
    lower = np.where(s < lines.at(lines.blocks, cells, b, own), own - 1, own)
    upper = lower + 1
    if not ends:
        lower, upper = np.clip(lower, 0, count - 1), np.clip(upper, 0, count - 1)

    def node(k: np.ndarray) -> np.ndarray:
        inside = lines.at(lines.blocks, cells, b, np.clip(k, 0, count - 1))
        last = lines.at(lines.faces, cells, b, np.full(k.shape, lines.faces.shape[b] - 1))
        return np.where(k < 0, 0.0, np.where(k >= count, last, inside))

    s0, s1 = node(lower), node(upper)
    with np.errstate(divide="ignore", invalid="ignore"):
        w = np.where(s1 > s0, np.clip((s - s0) / (s1 - s0), 0.0, 1.0), 0.0)
    return lower, upper, 1.0 - w, w


def _interpolate(coefficients: np.ndarray, members: np.ndarray, origin: np.ndarray, shape: tuple,
                 axes: np.ndarray, lines: list[_Lines | None], cells: tuple[int, int, int], f: int,
                 coarse: tuple[int, int, int], pieces: list[list[np.ndarray]],
                 constant: np.ndarray) -> None:  # fmt: skip
    """Compose the outer-face coefficients (P, 3, F) of regions `members` with the interpolation.

    Appends rows, columns and values of the operator over the coarse
    pressures to `pieces`, and adds the part from the fixed domain faces of
    the flow along `f` (pressure 1 at the first, 0 at the last) to `constant`.
    """
    cell, normal, side = outer_faces(shape, axes)
    fine = origin[:, None, :] + np.stack(np.unravel_index(cell, shape), axis=1)[None]  # (P, F, 3)
    nodes = []
    for b in range(3):
        if lines[b] is None:  # no flow axis: one node
            zero = np.zeros(fine.shape[:2], int)
            nodes.append(((zero, np.ones(zero.shape)), (zero, np.zeros(zero.shape))))
            continue
        on = (normal == b)[None, :]
        face = np.where(on, fine[..., b] + side[None, :], 0)
        along = _linear(lines[b], fine, None, b, cells[b], b == f)
        across = _linear(lines[b], fine, face, b, cells[b], b == f)
        i0, i1, w0, w1 = (np.where(on, x, y) for x, y in zip(across, along))
        nodes.append(((i0, w0), (i1, w1)))
    rows = 3 * members[:, None] + np.zeros(len(cell), int)[None, :]
    for combo in np.ndindex(2, 2, 2):
        ids = [nodes[b][combo[b]][0] for b in range(3)]
        weight = nodes[0][combo[0]][1] * nodes[1][combo[1]][1] * nodes[2][combo[2]][1]
        virtual = (ids[f] < 0) | (ids[f] >= coarse[f])
        inlet = (ids[f] < 0).astype(float)
        ids = [np.where(virtual, 0, i) for i in ids]
        flat = (ids[0] * coarse[1] + ids[1]) * coarse[2] + ids[2]
        for k in range(3):
            c = coefficients[:, k, :] * weight
            constant[members, k] += np.where(virtual, c * inlet, 0.0).sum(axis=1)
            keep = ~virtual & (c != 0)
            pieces[0].append((rows + k)[keep])
            pieces[1].append(flat[keep])
            pieces[2].append(c[keep])
