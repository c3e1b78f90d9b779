"""Near-well upscaling: each coarse well connection factor from a local fine solve around the well.

Peaceman's index on a coarse block (`upscale.flow.wells.connect` with the
block's upscaled kx, ky) assumes a homogeneous block and radial flow out to
its equivalent radius; a well in a fine cell of low permeability, or in a
channel the block average washes out, sees something else. Near-well
upscaling measures the connection instead, on the fine grid (Ding 1995,
"Scaling-up in the vicinity of wells in heterogeneous field", SPE 29137;
Durlofsky, Milliken & Bernath 2000, "Scaleup in the near-well region",
SPE Journal 5(1) — both from memory; what follows is the formulation used
here, checked against the tests rather than against the papers' text):

1. the coarse model is solved with Peaceman coarse wells (the global solve);
2. for each well, a local fine problem on its region — the coarse blocks
   that hold it plus ``ring`` rings of neighbouring blocks (one by default),
   over the model's full thickness — with every fine well inside the region
   connected by its fine Peaceman index and held at the bottom-hole pressure
   ``p_w`` of the global solve (the given one for a pressure well), and the
   coarse pressures of the global solve imposed on the region's outer faces:
   interpolated linearly between coarse block centres (bilinear in x, y, and
   linear in z in 3D) to the centre of each fine outer face, which joins its
   cell by the cell's half-cell transmissibility, as the domain's fixed
   faces do. Inactive or unsolved blocks are left out of the interpolation
   (the weights of the others renormalised); a face with none is closed. A
   side of the region on the domain's own outer face keeps the check's
   condition there (closed, or the outer pressure);
3. the coarse connection factor of the well in each of its blocks is

       WI_c = q_b / (p_w − p̄_b),

   with q_b the local fine rate into the well's fine cells in block b and
   p̄_b the bulk-volume average of the local fine pressures of block b
   (its active cells) — the coarse block pressure is read as that average;
4. every coarse face between two blocks of the region takes, from the same
   local solve, ``T = Q / (p̄_I − p̄_J)``, with Q the summed fine flux across
   it (the mean where the regions of several wells share a face);
5. the coarse model is solved again with these factors and faces.

Step 4 is what makes step 3 work: the volume average p̄_b of a radial
pressure sits farther from the well than the five-point block pressure
(Peaceman's r_o ≈ 0.2 Δx), so factors from step 3 alone, next to faces
upscaled for linear flow, fall short — by 4.5 % on a homogeneous field where
Peaceman's own index is off by 0.5 %. Measured before choosing
(`tests/benchmarks/bench_wells.py`, docs/wells.md): the factors alone, the
faces of the well's blocks only, the whole region's faces, a second ring of
blocks, and one more round of global and local solves (local–global
style). The region's faces did best; the extra round and the second ring
changed the errors by a few tenths of a percent either way, and are not
used.

A factor that comes out undefined (no drawdown, p_w = p̄_b) or not positive
keeps Peaceman's value, and says so (``peaceman``). WI_c is in (unit of k) · m,
like Peaceman's index and the transmissibilities.
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass

import numpy as np

from ..field import Field, Grid
from ..flow import Transmissibilities, transmissibilities
from ..flow.wells import Connections, FixedFaces, WellFlow, well_flow

#: How the coarse well connection factors are set: near-well upscaling, or Peaceman's
#: formula on the coarse block (the value of ``--well-connection``).
CONNECTIONS = ("near-well", "peaceman")
#: Rings of neighbouring coarse blocks around a well's blocks in its local problem.
RING = 1


@dataclass(frozen=True, eq=False)
class CoarseWells:
    """The coarse wells and what set each factor.

    Attributes
    ----------
    connections : list of Connections
        Each well's coarse blocks and connection factors, (unit of k) · m.
    methods : list of tuple of str
        Per well, per connected block: ``near-well`` or ``peaceman``.
    faces : dict of (int, int, int, int) to float
        The coarse faces near-well upscaling set (step 4), T in (unit of k) · m,
        keyed by (array axis, layer, row, column of the block before the face).
    trans : Transmissibilities
        The coarse model solved with (its near-well faces replaced, if any).
    flow : WellFlow
        The coarse solve with these factors.
    """

    connections: list[Connections]
    methods: list[tuple[str, ...]]
    faces: dict[tuple[int, int, int, int], float]
    trans: Transmissibilities
    flow: WellFlow


def upscale_wells(fine: Field, trans: Transmissibilities, on_fine: list[Connections],
                  peaceman: list[Connections], *, connection: str = "near-well", ring: int = RING,
                  outer_pressure: float | None = None, solver: str = "auto",
                  tolerance: float = 1e-10) -> CoarseWells:  # fmt: skip
    """The coarse wells' connection factors (module docstring) and the coarse solve with them.

    Parameters
    ----------
    fine : Field
        The fine field the wells were placed on (the domain of the coarse grid).
    trans : Transmissibilities
        The coarse model, (unit of k) · m.
    on_fine : list of Connections
        Every well on the fine grid (`upscale.flow.wells.connect`).
    peaceman : list of Connections
        The same wells on the coarse grid with Peaceman's index, in the same order.
    connection : {'near-well', 'peaceman'}
        How the factors are set (`CONNECTIONS`).
    ring : int
        Rings of neighbouring blocks in each local problem.
    outer_pressure : float, optional
        Pressure on the domain's four side faces; None: closed.
    solver, tolerance
        As in `upscale.flow.wells.well_flow`.

    Returns
    -------
    CoarseWells

    Examples
    --------
    >>> from upscale import coarsen
    >>> from upscale.flow.wells import Well, connect
    >>> result = coarsen(np.full((24, 24), 100.0), "8x8", "arithmetic")
    >>> wells = [Well("I", 4.5, -4.5, None, "pressure", 1.0, 0.1),
    ...          Well("P", 19.5, -19.5, None, "pressure", 0.0, 0.1)]
    >>> k_f, k_c = np.asarray(result.fine.kx), np.asarray(result.coarse.kx)
    >>> on_fine = [connect(w, result.fine.grid, k_f, k_f) for w in wells]
    >>> on_coarse = [connect(w, result.coarse.grid, k_c, k_c) for w in wells]
    >>> found = upscale_wells(result.fine, result.transmissibilities(), on_fine, on_coarse)
    >>> found.methods
    [('near-well',), ('near-well',)]
    """
    flow = well_flow(trans, peaceman, outer_pressure=outer_pressure, solver=solver, tolerance=tolerance)
    if connection == "peaceman":
        return CoarseWells(peaceman, [("peaceman",) * c.cells.size for c in peaceman], {}, trans, flow)
    found = [_local_solve(fine, trans.grid, c, on_fine, flow, ring, outer_pressure, solver, tolerance)
             for c in peaceman]  # fmt: skip
    upscaled = [dataclasses.replace(c, index=np.where(np.isnan(f.index), c.index, f.index))
                for c, f in zip(peaceman, found)]  # fmt: skip
    faces = _mean_faces(found)
    model = with_faces(trans, faces)
    flow = well_flow(model, upscaled, outer_pressure=outer_pressure, solver=solver, tolerance=tolerance)
    methods = [tuple("peaceman" if np.isnan(v) else "near-well" for v in f.index) for f in found]
    return CoarseWells(upscaled, methods, faces, model, flow)


def _mean_faces(found: list[_Local]) -> dict[tuple[int, int, int, int], float]:
    """The near-well face values of every region, the mean where several regions set a face."""
    total: dict[tuple[int, int, int, int], list[float]] = {}
    for f in found:
        for key, value in f.faces.items():
            total.setdefault(key, []).append(value)
    return {key: float(np.mean(values)) for key, values in total.items()}


def with_faces(trans: Transmissibilities, faces: dict[tuple[int, int, int, int], float]
               ) -> Transmissibilities:  # fmt: skip
    """The coarse model with some face transmissibilities replaced.

    Parameters
    ----------
    trans : Transmissibilities
    faces : dict of (int, int, int, int) to float
        T in (unit of k) · m, keyed by (array axis, layer, row, column of the
        block before the face), as `CoarseWells.faces`.

    Returns
    -------
    Transmissibilities
        A new one; `trans` is left as it is.
    """
    if not faces:
        return trans
    replaced = [f.copy() for f in trans.faces]
    for (a, *at), value in faces.items():
        replaced[a][tuple(at)] = value
    return dataclasses.replace(trans, faces=tuple(replaced))


@dataclass(frozen=True, eq=False)
class _Local:
    """What one well's local solve gives: its factors, and face values of the coarse faces inside."""

    index: np.ndarray
    faces: dict[tuple[int, int, int, int], float]


def _local_solve(fine: Field, coarse: Grid, well: Connections, on_fine: list[Connections], flow: WellFlow,
                 ring: int, outer_pressure: float | None, solver: str,
                 tolerance: float) -> _Local:  # fmt: skip
    """One well's local fine solve (module docstring, steps 2 to 4).

    Returns its WI_c in each of its coarse blocks (NaN where undefined or not
    positive) and ``T = Q / (p̄_I − p̄_J)`` of the coarse faces inside its region.
    """
    owner = [_owner(fine.grid.sizes(a), coarse.sizes(a)) for a in range(3)]
    _, rows, columns = np.unravel_index(well.cells, coarse.shape)
    box = [_fine_span(owner[a], int(np.min(c)) - ring, int(np.max(c)) + ring)
           for a, c in ((1, rows), (2, columns))]  # fmt: skip
    part = fine.window(*box)
    local = transmissibilities(part)
    faces = _region_faces(local, fine.grid, coarse, box, flow.pressure, outer_pressure)
    inside = [_local(c, fine.shape, box, flow.pressures[c.well.name]) for c in on_fine]
    wells = [c for c in inside if c is not None]
    found = well_flow(local, wells, faces=faces, solver=solver, tolerance=tolerance)
    own = next(c for c in wells if c.well.name == well.well.name)
    # the coarse block of every local fine cell, numbered 0, 1, ... in the region
    ids = np.ravel_multi_index(np.meshgrid(owner[0], owner[1][box[0]], owner[2][box[1]], indexing="ij"),
                               coarse.shape)  # fmt: skip
    blocks, number = np.unique(ids, return_inverse=True)
    number = number.reshape(ids.shape)
    mean = _block_means(found.pressure, part.cell_volumes(), number, blocks.size)
    rates = own.index * (own.well.value - found.pressure.ravel()[own.cells])
    q = np.bincount(number.ravel()[own.cells], rates, minlength=blocks.size)
    mine = np.searchsorted(blocks, well.cells)
    with np.errstate(divide="ignore", invalid="ignore"):
        index = q[mine] / (own.well.value - mean[mine])
    return _Local(np.where(np.isfinite(index) & (index > 0), index, np.nan),
                  _face_values(local, found.pressure, number, mean, (blocks, coarse.shape)))


def _block_means(pressure: np.ndarray, volume: np.ndarray, number: np.ndarray, count: int) -> np.ndarray:
    """Bulk-volume average of the solved fine pressures of each block (NaN for a block with none)."""
    solved = np.isfinite(pressure)
    total = np.bincount(number[solved], pressure[solved] * volume[solved], minlength=count)
    weight = np.bincount(number[solved], volume[solved], minlength=count)
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(weight > 0, total / weight, np.nan)


def _face_values(local: Transmissibilities, pressure: np.ndarray, number: np.ndarray, mean: np.ndarray,
                 coarse: tuple[np.ndarray, tuple[int, int, int]]
                 ) -> dict[tuple[int, int, int, int], float]:  # fmt: skip
    """``T = Q / (p̄_I − p̄_J)`` of the coarse faces inside a region, where it came out positive.

    Parameters
    ----------
    local : Transmissibilities
        The region's fine grid.
    pressure : ndarray of shape (L, m, n)
        The local fine pressures.
    number : ndarray of shape (L, m, n)
        Each fine cell's block, numbered 0, 1, ... in the region.
    mean : ndarray of shape (b,)
        Each block's mean local pressure (`_block_means`).
    coarse : (ndarray of int, (int, int, int))
        The coarse flat id of each numbered block, and the coarse grid's shape.

    Returns
    -------
    dict
        Keyed by (array axis, layer, row, column of the block before the face).
    """
    blocks, shape = coarse
    found = {}
    for a in range(3):
        n = pressure.shape[a]
        if n < 2:
            continue
        lo, hi = np.arange(n - 1), np.arange(1, n)
        first, second = np.take(number, lo, axis=a), np.take(number, hi, axis=a)
        crossing = first != second
        flux = local.faces[a] * (np.take(pressure, lo, axis=a) - np.take(pressure, hi, axis=a))
        flux = np.where(np.isfinite(flux), flux, 0.0)[crossing]
        pairs, which = np.unique(np.stack([first[crossing], second[crossing]]), axis=1, return_inverse=True)
        Q = np.bincount(which.ravel(), flux, minlength=pairs.shape[1])
        with np.errstate(divide="ignore", invalid="ignore"):
            T = Q / (mean[pairs[0]] - mean[pairs[1]])
        for key, value in zip(zip(*np.unravel_index(blocks[pairs[0]], shape)), T):
            if np.isfinite(value) and value > 0:
                found[(a, *(int(v) for v in key))] = float(value)
    return found


def _owner(fine: np.ndarray, coarse: np.ndarray) -> np.ndarray:
    """The coarse cell holding each fine cell along one axis (both grids start at the same edge)."""
    centres = np.cumsum(fine) - fine / 2
    return np.searchsorted(np.cumsum(coarse)[:-1], centres, side="right")


def _fine_span(owner: np.ndarray, first: int, last: int) -> slice:
    """The fine cells of coarse cells `first` to `last` (clipped to the grid) along one axis."""
    held = np.flatnonzero((owner >= first) & (owner <= last))
    return slice(int(held[0]), int(held[-1]) + 1)


def _local(c: Connections, shape: tuple[int, int, int], box: list[slice], p_w: float) -> Connections | None:
    """A fine well renumbered into the region `box` (rows, columns) and held at `p_w`; None if outside."""
    layer, row, column = np.unravel_index(c.cells, shape)
    rows, columns = box
    if not (rows.start <= row[0] < rows.stop and columns.start <= column[0] < columns.stop):
        return None
    local = (rows.stop - rows.start, columns.stop - columns.start)
    cells = np.ravel_multi_index((layer, row - rows.start, column - columns.start), (shape[0], *local))
    return Connections(dataclasses.replace(c.well, control="pressure", value=float(p_w)), cells, c.index)


def _region_faces(local: Transmissibilities, fine: Grid, coarse: Grid, box: list[slice],
                  pressure: np.ndarray, outer_pressure: float | None) -> FixedFaces:  # fmt: skip
    """The region's four side faces: coarse pressures interpolated onto them, or the domain's condition."""
    shape = local.shape
    index = np.arange(int(np.prod(shape))).reshape(shape)
    depth = _centres(fine.dz)
    cells, t, values = [], [], []
    for axis, span in ((1, box[0]), (2, box[1])):
        other = 3 - axis
        other_span = box[1] if axis == 1 else box[0]
        edges = np.concatenate([[0.0], np.cumsum(fine.sizes(axis))])
        across = _centres(fine.sizes(other))[other_span]
        for half, end, at in zip(local.boundary[axis], (0, shape[axis] - 1), (span.start, span.stop)):
            behind = np.take(index, [end], axis=axis).ravel()
            half = half.ravel()
            if at in (0, fine.shape[axis]):  # the domain's own outer face
                face = np.full(behind.size, np.nan if outer_pressure is None else float(outer_pressure))
            else:
                z, w = np.meshgrid(depth, across, indexing="ij")
                points = [z.ravel(), *((w.ravel(), np.full(w.size, edges[at])) if axis == 2
                                       else (np.full(w.size, edges[at]), w.ravel()))]  # fmt: skip
                face = _interpolate(coarse, pressure, points)
            keep = (half > 0) & np.isfinite(face)
            cells.append(behind[keep])
            t.append(half[keep])
            values.append(face[keep])
    return np.concatenate(cells), np.concatenate(t), np.concatenate(values)


def _centres(sizes: np.ndarray) -> np.ndarray:
    """Cell centres along one axis, in m from the grid's first edge."""
    return np.cumsum(sizes) - sizes / 2


def _interpolate(grid: Grid, values: np.ndarray, points: list[np.ndarray]) -> np.ndarray:
    """Values at block centres interpolated (multilinear) to points (z, y, x in m from the first edges).

    NaN values are left out and the weights of the others renormalised; NaN where all are.
    Beyond the outermost centres the end value holds.
    """
    lows, highs, weights = [], [], []
    for axis, at in enumerate(points):
        centres = _centres(grid.sizes(axis))
        low = np.clip(np.searchsorted(centres, at, side="right") - 1, 0, centres.size - 1)
        high = np.minimum(low + 1, centres.size - 1)
        gap = centres[high] - centres[low]
        with np.errstate(divide="ignore", invalid="ignore"):
            w = np.where(gap > 0, np.clip((at - centres[low]) / gap, 0.0, 1.0), 0.0)
        lows.append(low)
        highs.append(high)
        weights.append(w)
    total = np.zeros(points[0].size)
    weight = np.zeros(points[0].size)
    for corner in np.ndindex(2, 2, 2):
        at = tuple(h if c else lo for c, lo, h in zip(corner, lows, highs))
        w = np.prod([wt if c else 1 - wt for c, wt in zip(corner, weights)], axis=0)
        v = values[at]
        known = np.isfinite(v) & (w > 0)
        total += np.where(known, w * np.where(known, v, 0.0), 0.0)
        weight += np.where(known, w, 0.0)
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(weight > 0, total / weight, np.nan)
