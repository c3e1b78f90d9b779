"""Tests of the layer groupings `upscale.grid.layers`.

What is tested
--------------
* Parsing: ``2,2,4,8`` group sizes, ``auto:N`` and ``auto:P%``, and the
  refusals (sizes that do not add up, a zero group, a count above the layers).
* `group_costs` against the within-group sum of squares computed directly.
* `optimal_groups` is the optimum over every contiguous grouping: equal to
  brute force on small profiles (hypothesis), for both the loss and the
  barriers it merges with other layers.
* Barriers: a thin tight run between open layers is found, kept as its own
  group or at a group boundary for every count from 2 up, and a run at the
  bottom of the model is not a barrier.
* ``auto:P%`` returns the fewest groups that keep the share asked for.
"""

from __future__ import annotations

import itertools

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from upscale.errors import InputError
from upscale.grid.layers import (
    LayerRequest,
    barrier_runs,
    check_sizes,
    group_costs,
    group_edges,
    optimal_groups,
    parse_sizes,
)


def _direct_loss(weight, x, z, sizes):
    """Within-group weighted sum of squares of x and z, written out (definition in the module docstring)."""
    total = 0.0
    for a, b in itertools.pairwise(group_edges(sizes)):
        w = weight[a:b]
        if w.sum() > 0:
            for v in (x[a:b], z[a:b]):
                mean = np.sum(w * v) / w.sum()
                total += np.sum(w * (v - mean) ** 2)
    return total


def _compositions(layers, groups):
    """Every grouping of `layers` layers into `groups` contiguous groups."""
    for cuts in itertools.combinations(range(1, layers), groups - 1):
        edges = (0, *cuts, layers)
        yield tuple(b - a for a, b in itertools.pairwise(edges))


def _merged(sizes, runs):
    """Barrier runs sharing a group with other layers, once per such group (as the module docstring says)."""
    groups = [set(range(a, b)) for a, b in itertools.pairwise(group_edges(sizes))]
    barriers = [set(range(start, stop)) for start, stop in runs]
    return sum(1 for g in groups for b in barriers if g & b and not g <= b)


def test_parse_forms():
    assert parse_sizes("2,2,4,8") == (2, 2, 4, 8)
    assert parse_sizes(" 3 , 5 ") == (3, 5)
    assert parse_sizes("2,,4") is None and parse_sizes("auto:2") is None
    assert LayerRequest.parse("AUTO: 4") == LayerRequest(count=4)
    assert LayerRequest.parse("auto:95.5%") == LayerRequest(keep=0.955)
    assert str(LayerRequest(count=3)) == "auto:3" and str(LayerRequest(keep=0.9)) == "auto:90%"


@pytest.mark.parametrize(("text", "message"), [
    ("auto:0", "at least 1"),
    ("auto:0%", r"\(0, 100\] %"),
    ("auto:150%", r"\(0, 100\] %"),
])  # fmt: skip
def test_parse_refusals(text, message):
    with pytest.raises(InputError, match=message):
        LayerRequest.parse(text)


@pytest.mark.parametrize(("sizes", "message"), [
    ((2, 2, 4), "hold 8 fine layers but the model has 10"),
    ((2, 0, 8), "a group of 0 layers"),
])  # fmt: skip
def test_sizes_refusals(sizes, message):
    with pytest.raises(InputError, match=message):
        check_sizes(sizes, 10)


def test_more_groups_than_layers():
    with pytest.raises(InputError, match="5 coarse layers asked for but the model has 4 fine layers"):
        optimal_groups(np.ones(4), np.zeros(4), np.zeros(4), LayerRequest(count=5))


def test_costs_equal_the_sum_of_squares():
    rng = np.random.default_rng(19)
    weight, x, z = rng.uniform(0.5, 3.0, 7), rng.normal(size=7), rng.normal(size=7)
    cost = group_costs(weight, x, z)
    for a, b in itertools.combinations(range(8), 2):
        expected = _direct_loss(weight[a:], x[a:], z[a:], (b - a,))
        assert cost[a, b] == pytest.approx(expected, rel=1e-10, abs=1e-12)


profiles = st.integers(2, 8).flatmap(lambda n: st.tuples(
    st.lists(st.sampled_from([0.0, 0.5, 1.0, 2.0]), min_size=n, max_size=n),
    st.lists(st.floats(-3, 3), min_size=n, max_size=n),
    st.lists(st.sampled_from([5.0, 4.0, -6.0, 0.0]), min_size=n, max_size=n),
    st.integers(1, n),
))  # fmt: skip


@settings(max_examples=150, deadline=None)
@given(profiles)
def test_dynamic_programme_is_the_brute_force_optimum(profile):
    # the optimal partition of a sequence (Fisher 1958, "On grouping for maximum homogeneity"):
    # the DP must reach the least (merged barriers, loss) over every contiguous grouping
    (weight, x, z), count = (np.array(v) for v in profile[:3]), profile[3]
    found = optimal_groups(weight, x, z, LayerRequest(count=count))
    assert len(found.sizes) == count and sum(found.sizes) == weight.size
    runs = barrier_runs(weight, z)
    total = _direct_loss(weight, x, z, (weight.size,))
    best = min((_merged(s, runs), _direct_loss(weight, x, z, s)) for s in _compositions(weight.size, count))
    assert found.merged == best[0] == _merged(found.sizes, runs)
    assert found.loss * total == pytest.approx(best[1], rel=1e-9, abs=1e-9)
    # the count it names as enough to keep every barrier apart is the least that merges none
    apart = next(c for c in range(1, weight.size + 1) if any(_merged(s, runs) == 0 for s in
                                                             _compositions(weight.size, c)))  # fmt: skip
    assert found.apart == apart


def _shale_profile(layers=16, shale=6):
    """Sand layers of 100-200 mD with one 0.01 mD layer, kz = 0.1 kx (ln values)."""
    kx = np.linspace(100.0, 200.0, layers)
    kx[shale] = 0.01
    return np.ones(layers), np.log(kx), np.log(0.1 * kx)


@pytest.mark.parametrize("count", range(2, 9))
def test_a_shale_gets_a_coarse_layer_of_its_own(count):
    weight, x, z = _shale_profile()
    assert barrier_runs(weight, z) == [(6, 7)]
    found = optimal_groups(weight, x, z, LayerRequest(count=count))
    edges = group_edges(found.sizes)
    if count == 2:  # two groups cannot keep an inner layer apart: the shale then bounds one of them
        assert found.merged == 1 and (6 in edges or 7 in edges)
    else:
        assert found.merged == 0 and 6 in edges and 7 in edges


def test_tight_runs_at_the_top_and_base_are_barriers():
    z = np.log([0.01, 100.0, 0.01, 100.0, 100.0, 100.0, 100.0, 0.01, 0.01])
    assert barrier_runs(np.ones(9), z) == [(0, 1), (2, 3), (7, 9)]
    # a layer without active cells neither ends a run nor is one
    weight = np.array([1.0, 1.0, 0.0, 1.0, 1.0, 1.0, 1.0])
    assert barrier_runs(weight, np.log([100.0, 0.01, 5.0, 0.01, 100.0, 100.0, 100.0])) == [(1, 4)]


def test_share_kept_gives_the_fewest_groups():
    rng = np.random.default_rng(7)
    weight, x = np.ones(12), np.cumsum(rng.normal(size=12))
    z = x - 2.0
    found = optimal_groups(weight, x, z, LayerRequest(keep=0.9))
    assert found.loss <= 0.1 + 1e-12
    fewer = optimal_groups(weight, x, z, LayerRequest(count=len(found.sizes) - 1))
    assert fewer.loss > 0.1


def test_every_layer_its_own_group_loses_nothing():
    weight, x, z = _shale_profile(8, 3)
    assert optimal_groups(weight, x, z, LayerRequest(count=8)).loss == 0.0
    assert optimal_groups(weight, x, z, LayerRequest(count=1)).loss == pytest.approx(1.0)
