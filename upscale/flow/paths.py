"""Which faces of a local flow problem can carry flow at all, decided from the graph alone.

A box of cells under a unit mean pressure gradient is a network of
conductances driven by sources: the fixed pressures on its outer faces
(joined here to one ground node, each face an edge from the ground carrying
its pressure as a source) and, under periodic conditions, the imposed drop
across each wrapped face along the gradient. For generic conductances, an
edge carries current exactly when it lies on a cycle whose sources do not
cancel; within a biconnected component either every edge lies on such a
cycle or none does, and bridges never carry current (Bollobás 1998,
*Modern Graph Theory*, ch. II: electrical networks; Tarjan 1972, "Depth-first
search and linear graph algorithms", for the components). So the faces that
cannot carry flow are found exactly, without looking at the pressures: in
dead ends, behind a single connection or across a periodic box no path
winds around, what a solve reports as flux is rounding, and the callers set
it to 0. (Conductances built from half-cell values are not always generic —
a cell between its two fixed faces sits at their mean pressure whatever its
k — so a face reported as carrying flow may still carry none; a face that
carries flow is never reported dead.)

The sources are compared as integers that order the face pressures like the
pressures themselves (``-x_a`` of the face along the gradient axis a), so
the test is exact.
"""

from __future__ import annotations

import numba as nb
import numpy as np

from .banded import EXACT_JIT


@nb.njit(inline="always", **EXACT_JIT)
def next_cell(c, b, shape, periodic):
    """Position of cell `c` along `b`, and its next cell along b (-1 if none).

    Under periodic conditions the next cell of the last one is the first
    (itself when the box is one cell long).
    """
    s = (shape[1] * shape[2], shape[2], 1)[b]
    pos = (c // s) % shape[b]
    if pos < shape[b] - 1:
        return pos, c + s
    return pos, c - pos * s if periodic else -1


@nb.njit(inline="always", **EXACT_JIT)
def _face_level(pos_a, b, side, a, extent_a):
    """An integer ordering like the fixed pressure -x_a of an outer face normal to b."""
    if b == a:
        return 0 if side == 0 else -2 * extent_a
    return -(2 * pos_a + 1)  # the face's centre lies at the cell centre along a


@nb.njit(**EXACT_JIT)
def _edges(t, shape, fixed, periodic, axes, a):
    """The box's graph: edge ends, sources and the edge of every cell face.

    Node ``n`` is the ground. Returns (u, v, source, count, inner, outer,
    looped) with ``inner[b, c]`` the edge from cell c to its next cell
    along b (or its periodic image), ``outer[s, b, c]`` the edge of its
    fixed face on side s (-1 when absent) and ``looped[b, c]`` a cell that
    is its own periodic image along b.
    """
    n = t.shape[1]
    stride = (shape[1] * shape[2], shape[2], 1)
    size = 9 * n
    u = np.empty(size, np.int64)
    v = np.empty(size, np.int64)
    source = np.empty(size, np.int64)
    inner = np.full((3, n), -1, np.int64)
    outer = np.full((2, 3, n), -1, np.int64)
    looped = np.zeros((3, n), np.bool_)
    count = 0
    for c in range(n):
        pos_a = (c // stride[a]) % shape[a]
        for b in range(3):
            if not axes[b] or t[b, c] <= 0.0:
                continue
            pos, m = next_cell(c, b, shape, periodic)
            last = shape[b] - 1
            if fixed[b]:
                for side in range(2):
                    if pos == (0, last)[side]:
                        u[count], v[count] = n, c
                        source[count] = _face_level(pos_a, b, side, a, shape[a])
                        outer[side, b, c] = count
                        count += 1
            if m < 0 or t[b, m] <= 0.0:
                continue
            drop = 1 if pos == last and b == a else 0  # the imposed drop across the wrap
            if m == c:
                looped[b, c] = drop != 0
                continue
            u[count], v[count], source[count] = c, m, drop
            inner[b, c] = count
            count += 1
    return u, v, source, count, inner, outer, looped


@nb.njit(**EXACT_JIT)
def _charged_edges(u, v, source, count, nodes):
    """Flag the edges of biconnected components holding a cycle with a net source."""
    degree = np.zeros(nodes + 1, np.int64)
    for e in range(count):
        degree[u[e] + 1] += 1
        degree[v[e] + 1] += 1
    start = np.cumsum(degree)
    adjacent = np.empty(2 * count, np.int64)
    fill = start[:-1].copy()
    for e in range(count):
        adjacent[fill[u[e]]] = e
        fill[u[e]] += 1
        adjacent[fill[v[e]]] = e
        fill[v[e]] += 1
    found = np.full(nodes, -1, np.int64)
    low = np.empty(nodes, np.int64)
    level = np.zeros(nodes, np.int64)
    via = np.full(nodes, -1, np.int64)
    cursor = start[:-1].copy()
    stack = np.empty(nodes, np.int64)
    edges = np.empty(count, np.int64)
    live = np.zeros(count, np.bool_)
    clock = 0
    top = 0
    for r in range(nodes):
        root = (r + nodes - 1) % nodes  # the ground first
        if found[root] >= 0:
            continue
        found[root] = low[root] = clock
        clock += 1
        stack[0] = root
        depth = 1
        while depth > 0:
            x = stack[depth - 1]
            if cursor[x] < start[x + 1]:
                e = adjacent[cursor[x]]
                cursor[x] += 1
                if e == via[x]:
                    continue
                y = v[e] if u[e] == x else u[e]
                if found[y] < 0:
                    via[y] = e
                    found[y] = low[y] = clock
                    clock += 1
                    level[y] = level[x] + (source[e] if u[e] == x else -source[e])
                    edges[top] = e
                    top += 1
                    stack[depth] = y
                    depth += 1
                elif found[y] < found[x]:
                    edges[top] = e
                    top += 1
                    low[x] = min(low[x], found[y])
                continue
            depth -= 1
            e = via[x]
            if e < 0:
                continue
            w = v[e] if u[e] == x else u[e]
            low[w] = min(low[w], low[x])
            if low[x] >= found[w]:  # w separates the component of e from the rest
                end = top
                charged = False
                while True:
                    top -= 1
                    f = edges[top]
                    charged |= level[u[f]] + source[f] != level[v[f]]
                    if f == e:
                        break
                for i in range(top, end):
                    live[edges[i]] = charged
    return live


def all_whole(t: np.ndarray, shape: np.ndarray, axes: np.ndarray) -> bool:
    """Whether every box of `t` (shape (P, 3, n)) is whole in the sense of `_whole`.

    Then `every_face` answers for `live_faces`, and the kernels that solve
    them need not compile the graph search (about 2.4 s of a first use).
    """
    flow = np.flatnonzero(axes)
    return bool(np.all(np.asarray(shape)[flow] >= 2) and not np.any(t[:, flow] <= 0.0))


@nb.njit(inline="always", **EXACT_JIT)
def _whole(t, shape, axes):
    """Whether every cell conducts along every flow axis, at least two cells long.

    Such a box with its ground is biconnected (a grid of two or more cells
    along each axis is) and holds a cycle with a net source (through both
    fixed faces, or around the box), so every face carries flow.
    """
    for b in range(3):
        if axes[b]:
            if shape[b] < 2:
                return False
            for c in range(t.shape[1]):
                if t[b, c] <= 0.0:
                    return False
    return True


@nb.njit(inline="always", **EXACT_JIT)
def every_face(shape, fixed, periodic, axes):
    """`live_faces` of a box whose every face carries flow: the faces it has."""
    n = shape[0] * shape[1] * shape[2]
    inner = np.zeros((3, n), np.bool_)
    outer = np.zeros((2, 3, n), np.bool_)
    for b in range(3):
        if not axes[b]:
            continue
        s = (shape[1] * shape[2], shape[2], 1)[b]
        for c in range(n):
            pos = (c // s) % shape[b]
            inner[b, c] = periodic or pos < shape[b] - 1
            outer[0, b, c] = fixed[b] and pos == 0
            outer[1, b, c] = fixed[b] and pos == shape[b] - 1
    return inner, outer


@nb.njit(**EXACT_JIT)
def live_faces(t, shape, fixed, periodic, axes, a):
    """Faces of a box that carry flow under a unit gradient along `a`.

    Parameters
    ----------
    t : ndarray of shape (3, n)
        Half-cell transmissibilities along z, y, x (0 for inactive cells),
        cells in lexicographic order.
    shape : ndarray of int, shape (3,)
        Cells along z, y, x.
    fixed : ndarray of bool, shape (3,)
        Axes whose two outer faces have fixed pressures.
    periodic : bool
        Whether opposite outer faces are joined (the others than `fixed`).
    axes : ndarray of bool, shape (3,)
        Flow axes.
    a : int
        Axis of the imposed gradient.

    Returns
    -------
    inner : ndarray of bool, shape (3, n)
        ``inner[b, c]``: the face between cell c and its next cell along b
        (its periodic image for the last) can carry flow.
    outer : ndarray of bool, shape (2, 3, n)
        ``outer[s, b, c]``: the fixed outer face of cell c on side s along b
        (0 first, 1 last) can carry flow.
    """
    n = t.shape[1]
    if _whole(t, shape, axes):
        return every_face(shape, fixed, periodic, axes)
    u, v, source, count, inner_edge, outer_edge, looped = _edges(t, shape, fixed, periodic, axes, a)
    live = _charged_edges(u, v, source, count, n + 1)
    inner = looped.copy()
    outer = np.zeros((2, 3, n), np.bool_)
    for b in range(3):
        for c in range(n):
            if inner_edge[b, c] >= 0:
                inner[b, c] = live[inner_edge[b, c]]
            for side in range(2):
                if outer_edge[side, b, c] >= 0:
                    outer[side, b, c] = live[outer_edge[side, b, c]]
    return inner, outer
