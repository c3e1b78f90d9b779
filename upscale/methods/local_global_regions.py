"""The extended regions of local–global upscaling, solved chunk by chunk.

For every face between two blocks, the extended region — the two blocks and
`border` cells around them, clipped at the domain — is solved once, and its
face flux and two block pressures become rows of a sparse operator over the
coarse pressures (`upscale.methods.local_global` iterates with it). A region
needs the fine cells of its own blocks and border, and the interpolation of
the coarse pressures on its outer faces needs the blocks around those: so a
chunk with a border of ``(2 + ceil(border / block))`` blocks holds all it
needs for the faces before its own blocks, and the fine field is never held
whole (`upscale.parallel.map_regions`). Only the operator, a few dozen
entries per face, comes back from each chunk.

**Interpolation** (ours; Chen et al. 2003 interpolate the coarse pressures
to the boundary of the extended region, from memory): along each axis,
linear in the fine *resistance* ``s = Σ 2 / t`` accumulated along the fine
line of cells through the point, between nodes that sit at each block's
mean s on that line; tensor-product over the axes (bilinear on a map,
trilinear in 3D), evaluated at the centre of each outer cell face of the
region. In steady flow along a line the pressure is linear in s and a
block's mean pressure is the pressure at its mean s, so layered fields get
exactly the fine pressure on the region's boundary, along and across the
layers (with interpolation linear in distance they got 37–44 % too much
flow across layers of σ(ln k) = 2, driven in through the sides). Along the
flow axis the domain's two fixed faces are nodes too, with their pressures 1
and 0; along the closed axes the value is held beyond the outermost blocks'
nodes. Only differences of s between a point and the blocks beside it
matter, so s is accumulated from each block's first face: every quantity is
computed from one block's cells, and the result is bit for bit the same
whatever the chunking. A cell that does not conduct along the line (t = 0)
counts as `CLOSED` times the resistance of the most conductive half cell of
its block (a barrier to the interpolation); in a block with no conducting
cell at all (inactive: no coarse pressure, so no flow it takes part in
informs a face) every half cell counts as t = 1.

**Sides**: with ``sides="pressure"`` every outer face of the region holds the
interpolated pressure; with ``sides="closed"`` only its two ends across the
coarse face do. An outer face of the region on the domain's own face takes
the global flow's condition: its fixed pressure on the inlet and outlet
faces (which the interpolation gives exactly), closed elsewhere.

**Efficiency.** A region's matrix does not depend on the boundary pressures,
so its face flux and block pressures are linear functionals of them, found
by three solves of its factored matrix (`upscale.flow.extended`); composed
with the interpolation they are the rows of the operator. Regions clear of
the first and last blocks on every axis see the same conditions in every
flow and are solved once; the others once per flow.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np
from scipy import sparse

from ..field import Field
from ..flow.extended import outer_faces, region_functionals
from ..flow.local import band_order
from ..parallel import map_regions
from .flow_based import _blocks, _gather, _groups, _half_cells, _inputs

#: Resistance of a cell that does not conduct along a line, in units of the resistance of the most conductive
#: half cell of its block (a barrier for the interpolation; common practice: a value far above any contrast).
CLOSED = 1e12


@dataclass(frozen=True)
class Regions:
    """The extended regions of the faces between blocks, and their functionals per global flow.

    ``operators[f]`` (3R, C) and ``constants[f]`` (3R,) give, for the flow
    along array axis f, row ``3 r + k`` of region r: its flux (k = 0) and
    block pressures (k = 1, 2) from the coarse pressures (C, flat);
    ``through[f]`` (R,) says whether both its ends hold a pressure in that
    flow (with one end closed nothing can cross the face: the flow says
    nothing about it). Regions are numbered axis by axis, then by the first
    block of their face in C order.
    """

    axis: np.ndarray  # (R,) axis across each face
    index: np.ndarray  # (R,) flat index of the face in `Transmissibilities.faces[axis]`
    operators: dict[int, sparse.csr_matrix]
    constants: dict[int, np.ndarray]
    through: dict[int, np.ndarray]


def lazy_regions(field: Field, cells: tuple[int, int, int], border: int, sides: str) -> Any:
    """The regions' functionals of every chunk: a lazy list for dask input (`assemble` joins them).

    Parameters
    ----------
    field : Field
        The fine field, cropped to its blocks.
    cells : (int, int, int)
        Cells per block (layers, rows, columns).
    border : int
        Fine cells of rock around the two blocks of each region.
    sides : {'pressure', 'closed'}
        The regions' sides, as in `upscale.methods.local_global.local_global_properties`.
    """
    arrays, opts = _inputs(field)
    axes = opts["axes"]
    depth = tuple((2 + math.ceil(border / b)) * b if axes[a] else 0 for a, b in enumerate(cells))
    flows = tuple(a for a in range(3) if axes[a])
    return map_regions(regions_chunk, arrays, field.grid.dz, cells, depth, extent=field.shape,
                       border=border, sides=sides, flows=flows, **opts)  # fmt: skip


def assemble(chunks: list[dict], coarse: tuple[int, int, int], flows: list[int]) -> Regions:
    """Join the chunks' operator rows (`regions_chunk`) into one `Regions`."""
    axis, index = [], []
    for d in flows:
        count = math.prod(coarse) // coarse[d] * (coarse[d] - 1)
        axis.append(np.full(count, d))
        index.append(np.arange(count))
    axis, index = np.concatenate(axis), np.concatenate(index)
    size = axis.size
    operators, constants, through = {}, {}, {}
    for f in flows:
        rows, cols, values = (np.concatenate([c["operator"][f][i] for c in chunks]) for i in range(3))
        operators[f] = sparse.csr_matrix((values, (rows, cols)), shape=(3 * size, math.prod(coarse)))
        constants[f] = np.zeros((size, 3))
        through[f] = np.zeros(size, bool)
        for c in chunks:
            constants[f][c["region"]] = c["constant"][f]
            through[f][c["region"]] = c["through"][f]
        constants[f] = constants[f].ravel()
    return Regions(axis, index, operators, constants, through)


def regions_chunk(kz: np.ndarray, ky: np.ndarray, kx: np.ndarray, *, dz: np.ndarray,
                  core: tuple[tuple[int, int], ...], block: tuple[int, int, int],
                  offset: tuple[int, int, int], extent: tuple[int, int, int], cell: tuple[float, float],
                  axes: tuple[bool, bool, bool], border: int, sides: str,
                  flows: tuple[int, ...]) -> dict:  # fmt: skip
    """Operator rows of the regions of the faces before the chunk's own blocks.

    Parameters
    ----------
    kz, ky, kx, dz, core, block, cell, axes
        As in `upscale.methods.flow_based.block_tensor_chunk`; the chunk holds
        ``2 + ceil(border / block)`` blocks of its neighbours on each side of
        its own cells along every flow axis (fewer at the domain's edges).
    offset : (int, int, int)
        First cell of the chunk in the whole field.
    extent : (int, int, int)
        Cells of the whole field.
    border, sides
        As in `lazy_regions`.
    flows : tuple of int
        The global flows (their array axes).

    Returns
    -------
    dict
        ``region`` (P,) the regions' numbers (`Regions`); per flow f,
        ``operator[f]`` the rows, columns and values of their entries (one
        per row and column), ``constant[f]`` (P, 3) and ``through[f]`` (P,).
    """
    t, grid = _half_cells((kz, ky, kx), dz, cell)
    axes_ = np.array(axes)
    cells, offset_, extent_ = np.array(block), np.array(offset), np.array(extent)
    coarse = tuple(int(c) for c in -(-extent_ // cells))
    window = _Window.of(t, grid, offset_, coarse, block, axes)
    mesh, ends, _ = _blocks(core, block)
    first, mid, last, region = [], [], [], []
    for d in flows:  # the face before each own block that has one
        keep = mesh[:, d] + offset_[d] >= cells[d]
        second = mesh[keep]
        first.append(second - np.eye(3, dtype=int)[d] * cells[d])
        mid.append(second[:, d])
        last.append(ends[keep])
        shape = list(coarse)
        shape[d] -= 1
        base = sum(math.prod(coarse) // coarse[e] * (coarse[e] - 1) for e in flows if e < d)
        region.append(base + np.ravel_multi_index(tuple(((first[-1] + offset_) // cells).T), shape))
    axis = np.concatenate([np.full(len(m), d) for d, m in zip(flows, mid)])
    first, mid, last, region = (np.concatenate(x) for x in (first, mid, last, region))
    origin = np.maximum(first + offset_ - border, 0) - offset_
    stop = np.minimum(last + offset_ + border, extent_) - offset_
    on_domain = np.stack([origin + offset_ == 0, stop + offset_ == extent_], axis=1)  # (P, 2, 3)
    # regions clear of the first and last blocks on every axis see the same pressures in every flow
    inner = [(origin[:, a] + offset_[a] >= cells[a]) & (stop[:, a] + offset_[a] <= (coarse[a] - 1) * cells[a])
             for a in flows]  # fmt: skip
    shared = np.all(inner, axis=0)
    out: dict = {"region": region, "operator": {}, "constant": {}, "through": {}}
    operators = {}
    ends_ = np.arange(len(first))
    for f in flows:
        # the interpolated pressure inside the domain, the flow's condition on its faces; closed sides: the
        # two ends across the face only
        fixed = ~on_domain if sides == "pressure" else np.zeros_like(on_domain)
        fixed[:, :, f] |= sides == "pressure"
        fixed[ends_, :, axis] = ~on_domain[ends_, :, axis] | (axis == f)[:, None]
        out["through"][f] = fixed[ends_, 0, axis] & fixed[ends_, 1, axis]
        todo = np.ones(len(first), bool) if f == flows[0] else ~shared
        pieces: list[list[np.ndarray]] = [[], [], []]
        constant = np.zeros((len(first), 3))
        for d in flows:
            chosen = np.flatnonzero(todo & (axis == d))
            for shape, group in _groups(origin[chosen], stop[chosen]):
                members = chosen[group]
                order, width = band_order(shape, False)
                boxes, h = _gather(t, grid, origin[members], shape)
                coefficients = region_functionals(
                    boxes, h, np.array(shape), first[members] - origin[members],
                    mid[members] - origin[members, d], last[members] - origin[members], int(d),
                    fixed[members], order, width, axes_)  # fmt: skip
                constant[members] += window.compose(coefficients, 3 * members, origin[members], shape, axes_,
                                                    f, pieces)  # fmt: skip
        operators[f] = _summed(pieces, len(first), math.prod(coarse))
        if f != flows[0]:  # the first flow's rows of the shared regions
            operators[f] += sparse.diags(np.repeat(shared, 3).astype(float)) @ operators[flows[0]]
            constant[shared] = out["constant"][flows[0]][shared]
        entries = operators[f].tocoo()
        rows = 3 * region[entries.row // 3] + entries.row % 3
        out["operator"][f] = (rows, entries.col.astype(np.int64), entries.data)
        out["constant"][f] = constant
    return out


def _summed(pieces: list[list[np.ndarray]], regions: int, coarse: int) -> sparse.csr_matrix:
    """The chunk's operator (3 `regions`, `coarse`) from its entries, repeated ones summed.

    A row's entries come from one region in the same order whatever the
    chunking, so their sums, and the whole operator, are bit for bit the same.
    """
    rows, cols, values = (np.concatenate(p) if p else np.zeros(0, int) for p in pieces)
    return sparse.csr_matrix((values, (rows, cols)), shape=(3 * regions, coarse))


@dataclass(frozen=True)
class _Lines:
    """Resistance along the fine lines of one axis b of a chunk, from each block's first face.

    Along a line of cells the resistance is ``s = Σ 2 / t`` over the cells
    passed (t the half-cell transmissibility; m / ((unit of k) · m²) up to
    the line's constant cross-section). In steady flow along the line the
    pressure is linear in s, and the mean pressure of a block is the
    pressure at the block's mean s.

    Attributes: ``start`` s at each cell's first face along b and ``cell``
    its resistance (the chunk's shape); ``total`` s at each block's last
    face and ``mean`` the mean s of its cell centres weighted by their size,
    on each line (axis b one entry per block).
    """

    start: np.ndarray
    cell: np.ndarray
    total: np.ndarray
    mean: np.ndarray

    @classmethod
    def of(cls, t: np.ndarray, strongest: np.ndarray, sizes: np.ndarray, b: int, block: int) -> _Lines:
        """The lines along `b` of half-cell transmissibilities `t` (L, M, N).

        `strongest` is the largest half-cell transmissibility of each cell's
        block, `sizes` the cell sizes along b (m), `block` the cells per block along b.
        """
        n = t.shape[b]
        cell = 2.0 / np.where(strongest > 0, np.maximum(t, strongest / CLOSED), 1.0)
        start, total, mean = np.empty_like(cell), [], []
        h = np.expand_dims(sizes, [a for a in range(3) if a != b])
        for e0 in range(0, n, block):
            index = [slice(None)] * 3
            index[b] = slice(e0, min(e0 + block, n))
            part = cell[tuple(index)]
            inclusive = np.cumsum(part, axis=b)
            start[tuple(index)] = inclusive - part
            weights = np.broadcast_to(h[tuple(index)], part.shape)
            centres = inclusive - part / 2
            total.append(np.take(inclusive, [-1], axis=b))
            mean.append(np.sum(centres * weights, axis=b, keepdims=True) / weights.sum(axis=b, keepdims=True))
        return cls(start, cell, np.concatenate(total, axis=b), np.concatenate(mean, axis=b))


def _strongest(t: list[np.ndarray], block: tuple[int, int, int]) -> np.ndarray:
    """The largest half-cell transmissibility of each block (any axis), spread over its cells."""
    largest = np.maximum(np.maximum(t[0], t[1]), t[2])
    for a, b in enumerate(block):
        starts = np.arange(0, largest.shape[a], b)
        counts = np.diff(np.r_[starts, largest.shape[a]])
        largest = np.repeat(np.maximum.reduceat(largest, starts, axis=a), counts, axis=a)
    return largest


@dataclass(frozen=True)
class _Window:
    """A chunk's lines, and where its blocks sit among the domain's.

    ``first`` is the domain's block index of the chunk's first block along
    z, y, x, ``coarse`` the domain's block counts, ``block`` the cells per block.
    """

    first: np.ndarray
    coarse: tuple[int, int, int]
    block: tuple[int, int, int]
    lines: list[_Lines | None]

    @classmethod
    def of(cls, t: list[np.ndarray], grid: Any, offset: np.ndarray, coarse: tuple[int, int, int],
           block: tuple[int, int, int], axes: tuple[bool, bool, bool]) -> _Window:  # fmt: skip
        strongest = _strongest(t, block)
        lines = [_Lines.of(t[b], strongest, grid.sizes(b), b, block[b]) if axes[b] else None
                 for b in range(3)]  # fmt: skip
        return cls(offset // np.array(block), coarse, block, lines)

    def _linear(self, points: np.ndarray, side: np.ndarray | None, b: int,
                ends: bool) -> tuple[np.ndarray, ...]:  # fmt: skip
        """Interpolation along b, linear in s: the two nodes (blocks of the domain) and their weights.

        `points` (..., 3) are chunk cells; `side` (...) the face of the cell
        along b each point lies on (0 first, 1 last; None: the centres).
        With `ends`, the domain's faces are nodes too, numbered -1 and the
        block count; otherwise the value is held beyond the outermost blocks.
        """
        lines, count = self.lines[b], self.coarse[b]
        own = points[..., b] // self.block[b]

        def at(array: np.ndarray, index: np.ndarray) -> np.ndarray:
            where = [points[..., 0], points[..., 1], points[..., 2]]
            where[b] = index
            return array[tuple(where)]

        s = at(lines.start, points[..., b]) + at(lines.cell, points[..., b]) * (0.5 if side is None else side)
        g = own + self.first[b]
        mean = at(lines.mean, own)
        below = s < mean
        before = np.maximum(own - 1, 0)
        after = np.minimum(own + 1, lines.mean.shape[b] - 1)
        # from the node before to the block's first face; the domain's first face is the node itself (s = 0)
        gap = np.where(g > 0, at(lines.total, before) - at(lines.mean, before), 0.0)
        ahead = np.where(g < count - 1, at(lines.mean, after), 0.0)  # the domain's last face: the block's end
        span = np.where(below, gap + mean, at(lines.total, own) - mean + ahead)
        ds = np.where(below, gap + s, s - mean)
        lower = np.where(below, g - 1, g)
        upper = lower + 1
        if not ends:
            lower, upper = np.clip(lower, 0, count - 1), np.clip(upper, 0, count - 1)
        with np.errstate(divide="ignore", invalid="ignore"):
            w = np.where((upper != lower) & (span > 0), np.clip(ds / span, 0.0, 1.0), 0.0)
        return lower, upper, 1.0 - w, w

    def compose(self, coefficients: np.ndarray, rows: np.ndarray, origin: np.ndarray, shape: tuple,
                axes: np.ndarray, f: int, pieces: list[list[np.ndarray]]) -> np.ndarray:  # fmt: skip
        """Compose the outer-face coefficients (P, 3, F) of regions at `origin` (P, 3) with the interpolation.

        Appends rows (``rows + k``), columns and values of the operator over
        the coarse pressures to `pieces`; returns the part (P, 3) from the
        fixed domain faces of the flow along `f` (pressure 1 at the first, 0 at the last).
        """
        cell, normal, side = outer_faces(shape, axes)
        points = origin[:, None, :] + np.stack(np.unravel_index(cell, shape), axis=1)[None]  # (P, F, 3)
        nodes = []
        for b in range(3):
            if self.lines[b] is None:  # no flow axis: one node
                zero = np.zeros(points.shape[:2], int)
                nodes.append(((zero, np.ones(zero.shape)), (zero, np.zeros(zero.shape))))
                continue
            on = (normal == b)[None, :]
            along = self._linear(points, None, b, b == f)
            across = self._linear(points, np.broadcast_to(side, points.shape[:2]), b, b == f)
            i0, i1, w0, w1 = (np.where(on, x, y) for x, y in zip(across, along))
            nodes.append(((i0, w0), (i1, w1)))
        # the nodes of a region lie in a small box of blocks: sum its entries there, region by region
        flowing = np.array([lines is not None for lines in self.lines])
        low, high = origin // self.block, (origin + np.array(shape) - 1) // self.block
        base = np.where(flowing, low + self.first - 1, 0).T  # a node before the region's first block
        extent = np.where(flowing, 3 + np.max(high - low, axis=0, initial=0), 1).tolist()
        box = math.prod(extent)
        constant = np.zeros((len(origin), 3))
        bins, weights = [], []
        for combo in np.ndindex(2, 2, 2):
            ids = [nodes[b][combo[b]][0] for b in range(3)]
            weight = nodes[0][combo[0]][1] * nodes[1][combo[1]][1] * nodes[2][combo[2]][1]
            virtual = (ids[f] < 0) | (ids[f] >= self.coarse[f])
            inlet = (ids[f] < 0).astype(float)
            local = [np.where(virtual, 0, ids[b] - base[b][:, None]) for b in range(3)]
            at = (local[0] * extent[1] + local[1]) * extent[2] + local[2]
            for k in range(3):
                c = coefficients[:, k, :] * weight
                constant[:, k] += np.where(virtual, c * inlet, 0.0).sum(axis=1)
                keep = ~virtual & (c != 0)
                bins.append(((np.arange(len(origin))[:, None] * 3 + k) * box + at)[keep])
                weights.append(c[keep])
        summed = np.bincount(np.concatenate(bins), np.concatenate(weights), minlength=len(origin) * 3 * box)
        region, k, at = np.unravel_index(np.flatnonzero(summed), (len(origin), 3, box))
        local = np.unravel_index(at, extent)
        ids = [base[b][region] + local[b] for b in range(3)]
        pieces[0].append(rows[region] + k)
        pieces[1].append((ids[0] * self.coarse[1] + ids[1]) * self.coarse[2] + ids[2])
        pieces[2].append(summed[summed != 0])
        return constant
