"""Tests of `upscale.flow.paths`: which faces of a local problem carry flow.

The reference is the network itself: Kirchhoff's laws solved densely
(numpy least squares) on small boxes with random inactive cells, every edge
given its own random conductance; an edge carries current when its current
is not rounding. For generic conductances that is exactly the edges on a
cycle with a net source (Bollobás 1998, *Modern Graph Theory*, ch. II).
(Conductances made from half-cell values are not generic: a cell between
its two fixed faces sits at their mean pressure whatever its k, so a row
of such cells passes nothing sideways. The graph test reports such faces as
carrying flow; it never reports a face that carries flow as dead.)
"""

from __future__ import annotations

import numpy as np
import pytest

from upscale.flow.local import LINEAR, PERIODIC, SEALED, band_order, block_tensors
from upscale.flow.paths import all_whole, live_faces


def _reference(t, shape, bc, axes, a, rng):
    """Currents of every inner and outer face, from a dense solve of the network (unit cells).

    The conductances are drawn anew for every edge; only which cells conduct comes from `t`.
    """
    n = t.shape[1]
    stride = (shape[1] * shape[2], shape[2], 1)
    rows, sources = [], []  # each edge: (i, j or -1, conductance, source)
    inner = np.full((3, n), -1)
    outer = np.full((2, 3, n), -1)
    for c in range(n):
        pos_a = (c // stride[a]) % shape[a]
        for b in range(3):
            if not axes[b] or t[b, c] <= 0:
                continue
            pos, last = (c // stride[b]) % shape[b], shape[b] - 1
            fixed = bc == LINEAR or (bc == SEALED and b == a)
            if fixed:
                for side in (0, 1):
                    if pos == (0, last)[side]:
                        level = (0.0 if side == 0 else -shape[a]) if b == a else -(pos_a + 0.5)
                        outer[side, b, c] = len(rows)
                        rows.append((c, -1, rng.uniform(1.0, 2.0)))
                        sources.append(level)
            if pos < last:
                m, drop = c + stride[b], 0.0
            elif bc == PERIODIC:
                m, drop = c - pos * stride[b], float(shape[a]) if b == a else 0.0
            else:
                continue
            if t[b, m] <= 0:
                continue
            inner[b, c] = len(rows)
            rows.append((c, m, rng.uniform(1.0, 2.0)))
            sources.append(drop)
    # unknowns: cell pressures; each edge's current is g (p_i - p_j + source) (p_j = the face's
    # fixed level for an outer face); Kirchhoff: the currents leaving every cell sum to zero
    A = np.zeros((n, n))
    rhs = np.zeros(n)
    for (i, j, g), s in zip(rows, sources):
        if j < 0:
            A[i, i] += g
            rhs[i] += g * s
        elif i != j:
            A[i, i] += g
            A[j, j] += g
            A[i, j] -= g
            A[j, i] -= g
            rhs[i] -= g * s
            rhs[j] += g * s
    p = np.linalg.lstsq(A, rhs, rcond=None)[0]
    current = np.array([g * ((p[i] - s) if j < 0 else (p[i] - p[j] + s)) if i != j else g * s
                        for (i, j, g), s in zip(rows, sources)])  # fmt: skip
    live = np.abs(current) > 1e-9 * max(np.abs(sources).max(initial=0.0), 1.0)  # g <= 2
    return inner, outer, live


def _boxes():
    rng = np.random.default_rng(20261202)
    for trial in range(240):
        ndim = 2 if trial % 3 else 3
        shape = (rng.integers(1, 4) if ndim == 3 else 1, rng.integers(1, 6), rng.integers(1, 6))
        n = int(np.prod(shape))
        active = rng.random(n) > rng.uniform(0.0, 0.5)
        t = np.where(active, rng.uniform(1.0, 2.0, (3, n)), 0.0)
        axes = np.array([ndim == 3, True, True])
        yield trial, t, np.array(shape), axes, rng.choice([SEALED, LINEAR, PERIODIC])


@pytest.mark.parametrize("trial, t, shape, axes, bc", list(_boxes()))
def test_live_faces_match_the_currents_of_the_network(trial, t, shape, axes, bc):
    for a in np.flatnonzero(axes):
        fixed = np.array([axes[b] and (bc == LINEAR or (bc == SEALED and b == a)) for b in range(3)])
        inner, outer = live_faces(t, shape, fixed, bc == PERIODIC, axes, a)
        edge_inner, edge_outer, live = _reference(t, tuple(shape), bc, axes, a,
                                                  np.random.default_rng(trial))  # fmt: skip
        live = np.append(live, False)  # index -1: no such face
        want_inner, want_outer = live[edge_inner], live[edge_outer]
        np.testing.assert_array_equal(inner, want_inner, err_msg=f"inner faces, gradient {a}")
        np.testing.assert_array_equal(outer, want_outer, err_msg=f"outer faces, gradient {a}")


def test_a_pocket_behind_one_face_carries_nothing():
    # 3 x 5 box (rows y, columns x), sealed along x; cells 12 and 13 of the bottom row hang
    # off cell 8 through one face: no current in the pocket or through that face.
    k = np.array([[1, 1, 1, 1, 1], [1, 1, 0, 1, 1], [0, 0, 1, 1, 0]], float)
    t = np.broadcast_to(k.ravel(), (3, 15)).copy()
    axes = np.array([False, True, True])
    inner, outer = live_faces(t, np.array([1, 3, 5]), np.array([False, False, True]), False, axes, 2)
    assert not inner[2, 12] and not inner[1, 8]  # the pocket's own face, the face joining it
    assert inner[2, :4].all() and inner[2, [5, 8]].all() and inner[1, [0, 1, 3, 4]].all()
    assert outer[0, 2, [0, 5]].all() and outer[1, 2, [4, 9]].all()
    assert outer.sum() == 4 and inner.sum() == 10


def test_a_box_with_every_cell_active_carries_flow_through_every_face():
    shape = np.array([2, 3, 4])
    t = np.ones((3, 24))
    axes = np.ones(3, bool)
    last = np.stack([np.indices(shape)[b].ravel() == shape[b] - 1 for b in range(3)])
    first = np.stack([np.indices(shape)[b].ravel() == 0 for b in range(3)])
    for bc in (SEALED, LINEAR, PERIODIC):
        fixed = np.array([bc == LINEAR or (bc == SEALED and b == 2) for b in range(3)])
        inner, outer = live_faces(t, shape, fixed, bc == PERIODIC, axes, 2)
        np.testing.assert_array_equal(inner, np.ones_like(last) if bc == PERIODIC else ~last)
        np.testing.assert_array_equal(outer, np.stack([first, last]) & fixed[None, :, None])


@pytest.mark.parametrize("bc", [SEALED, LINEAR, PERIODIC])
def test_whole_boxes_solved_without_the_graph_search_give_the_same_values(bc):
    # block_tensors leaves the graph search out (not even compiled) when every box is whole;
    # the same boxes solved beside a box with an inactive cell take the search: same bits.
    rng = np.random.default_rng(5)
    shape = np.array([1, 4, 5])
    n = int(shape.prod())
    axes = np.array([False, True, True])
    whole = rng.lognormal(0.0, 2.0, (6, 3, n))
    holed = whole[:1].copy()
    holed[0, :, 7] = 0.0
    assert all_whole(whole, shape, axes) and not all_whole(np.concatenate([whole, holed]), shape, axes)
    h = np.ones((7, 3, 5))
    lo, hi = np.zeros((7, 3), int), np.tile(shape, (7, 1))
    order, width = band_order(tuple(shape), bc == PERIODIC)
    alone = block_tensors(whole, h[:6], shape, lo[:6], hi[:6], order, width, bc, axes)
    mixed = block_tensors(np.concatenate([whole, holed]), h, shape, lo, hi, order, width, bc, axes)
    for got, want in zip(alone, mixed):
        np.testing.assert_array_equal(got, want[:6])
