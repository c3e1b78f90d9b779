"""Tests of the block partition `upscale.grid.BlockSpec`.

What is tested
--------------
* `BlockSpec.parse`: the ``NXxNY`` and ``NXxNYxNZ`` forms (x first, stored in
  array order), whitespace and case, and refusal of bad syntax and sizes.
* Validation of the remainder policy and of ``min_active``.
* `check`: blocks larger than the grid, a z size on a 2D map, grids that do
  not divide with ``remainder='stop'``.
* `used_shape`, `coarse_shape` and `edges` under every remainder policy,
  property-based with hypothesis: edges start at 0, end at the used cells and
  leave no gap.
* `coarse_grid`: block sizes are the sums of the fine sizes (edge blocks
  keep their true size), the transform is scaled by the block, the CRS kept.
* Groupings of the layers (issue 19): ``NXxNYxS1,S2,...`` and ``auto:N`` /
  ``auto:P%`` parse, print back and round-trip through `summary`; `edges`,
  `coarse_shape` and `coarse_grid` give the true coarse thicknesses; a
  uniform grouping written out (``2,2,2``) is the same partition as ``NZ``;
  every bad grouping is refused in one line (sizes that do not add up, a
  zero or negative group, a grouping or ``auto`` on a 2D map, more coarse
  layers than fine ones); remainder policies leave grouped layers whole.
"""

from __future__ import annotations

import numpy as np
import pytest
from affine import Affine
from hypothesis import given, settings
from hypothesis import strategies as st

from upscale import BlockSpec as PublicBlockSpec
from upscale.errors import InputError
from upscale.field import Grid
from upscale.grid import BlockSpec
from upscale.grid.blocks import REMAINDER_POLICIES

SETTINGS = settings(max_examples=100, deadline=None, database=None)


# --------------------------------------------------------------------------------------
# parse
# --------------------------------------------------------------------------------------


@pytest.mark.parametrize(
    "text, cells",
    [
        ("8x4", (1, 4, 8)),
        ("8x8x2", (2, 8, 8)),
        ("1x1", (1, 1, 1)),
        ("16x3x5", (5, 3, 16)),
        (" 8 x 4 ", (1, 4, 8)),
        ("8X4", (1, 4, 8)),
        ("8X4x2", (2, 4, 8)),
        ("\t12x 7 X3\n", (3, 7, 12)),
        ("008x04", (1, 4, 8)),
    ],
)
def test_parse_valid_forms(text, cells):
    spec = BlockSpec.parse(text)
    assert spec.cells == cells
    assert (spec.nz, spec.ny, spec.nx) == cells
    assert spec.remainder == "stop" and spec.min_active == 0.0


def test_parse_passes_policies_and_public_name():
    assert PublicBlockSpec is BlockSpec
    spec = BlockSpec.parse("4x2", remainder="keep", min_active=0.25)
    assert spec == BlockSpec(4, 2, 1, remainder="keep", min_active=0.25)


@pytest.mark.parametrize("text", ["8x8", "8x4x2", "1x1", "3x5x7"])
def test_str_round_trip(text):
    assert str(BlockSpec.parse(text)) == text
    assert BlockSpec.parse(str(BlockSpec.parse(text))) == BlockSpec.parse(text)


def test_str_drops_single_layer():
    assert str(BlockSpec.parse("8x4x1")) == "8x4"


@pytest.mark.parametrize(
    "text", ["8", "8x", "x8", "8x4x2x1", "8*4", "8,4", "8 4", "a x b", "8.5x4", "-8x4", "", "8xx4"]
)
def test_parse_bad_syntax(text):
    with pytest.raises(InputError, match=r"is not of the form NXxNY or NXxNYxNZ"):
        BlockSpec.parse(text)


@pytest.mark.parametrize("text, name", [("0x4", "nx"), ("4x0", "ny"), ("4x4x0", "nz")])
def test_parse_zero_size(text, name):
    with pytest.raises(InputError, match=rf"block: {name} must be a whole number >= 1, got 0"):
        BlockSpec.parse(text)


def test_constructor_refuses_fractional_sizes_bad_policy_and_fraction():
    with pytest.raises(InputError, match=r"nx must be a whole number >= 1, got 2.5"):
        BlockSpec(2.5, 2)
    with pytest.raises(InputError, match=r"remainder must be one of stop, crop, keep, got 'pad'"):
        BlockSpec(2, 2, remainder="pad")
    with pytest.raises(InputError, match=r"min_active must be a fraction in \[0, 1\], got 1.5"):
        BlockSpec(2, 2, min_active=1.5)
    with pytest.raises(InputError, match=r"min_active"):
        BlockSpec.parse("2x2", min_active=-0.1)


# --------------------------------------------------------------------------------------
# check
# --------------------------------------------------------------------------------------


def test_check_block_larger_than_grid():
    with pytest.raises(
        InputError, match=r"block 8x2 is larger than the grid along x \(columns\): 8 > 6"
    ):
        BlockSpec.parse("8x2").check((1, 10, 6), 2)
    with pytest.raises(InputError, match=r"along y \(rows\): 12 > 10"):
        BlockSpec.parse("2x12", remainder="keep").check((1, 10, 6), 2)
    with pytest.raises(InputError, match=r"along z \(layers\): 4 > 3"):
        BlockSpec.parse("2x2x4", remainder="crop").check((3, 10, 6), 3)


def test_check_z_block_on_a_map():
    with pytest.raises(InputError, match=r"block 2x2x2 has a z size but the field is a 2D map"):
        BlockSpec.parse("2x2x2").check((2, 4, 4), 2)
    BlockSpec.parse("2x2x2").check((2, 4, 4), 3)


def test_check_stop_lists_every_odd_axis():
    spec = BlockSpec.parse("4x3x2")
    with pytest.raises(InputError) as info:
        spec.check((5, 9, 10), 3)
    message = str(info.value)
    assert "the grid does not divide into whole 4x3x2 blocks" in message
    assert "z (layers): 5 cells = 2 blocks + 1" in message
    assert "x (columns): 10 cells = 2 blocks + 2" in message
    assert "y (rows)" not in message
    assert "crop or keep" in message
    for policy in ("crop", "keep"):
        BlockSpec(4, 3, 2, remainder=policy).check((5, 9, 10), 3)


# --------------------------------------------------------------------------------------
# shapes and edges
# --------------------------------------------------------------------------------------


def test_shapes_by_policy():
    shape = (5, 9, 10)
    assert BlockSpec(4, 3, 2, remainder="crop").used_shape(shape) == (4, 9, 8)
    assert BlockSpec(4, 3, 2, remainder="crop").coarse_shape(shape) == (2, 3, 2)
    assert BlockSpec(4, 3, 2, remainder="keep").used_shape(shape) == shape
    assert BlockSpec(4, 3, 2, remainder="keep").coarse_shape(shape) == (3, 3, 3)
    assert BlockSpec(5, 3, 5).coarse_shape((5, 9, 10)) == (1, 3, 2)


def test_edges_examples():
    keep = BlockSpec(4, 3, 2, remainder="keep")
    crop = BlockSpec(4, 3, 2, remainder="crop")
    assert keep.edges(10, 2).tolist() == [0, 4, 8, 10]
    assert crop.edges(10, 2).tolist() == [0, 4, 8]
    assert keep.edges(9, 1).tolist() == [0, 3, 6, 9]
    assert crop.edges(9, 1).tolist() == [0, 3, 6, 9]
    assert keep.edges(5, 0).tolist() == [0, 2, 4, 5]


@SETTINGS
@given(
    n=st.integers(1, 500),
    b=st.integers(1, 64),
    axis=st.integers(0, 2),
    policy=st.sampled_from(REMAINDER_POLICIES),
)
def test_edges_cover_the_used_cells_without_gaps(n, b, axis, policy):
    b = min(b, n)
    size = [1, 1, 1]
    size[2 - axis] = b  # (nx, ny, nz) order
    spec = BlockSpec(*size, remainder=policy)
    edges = spec.edges(n, axis)
    used = spec.used_shape((n, n, n))[axis]
    assert edges[0] == 0 and edges[-1] == used
    steps = np.diff(edges)
    assert np.all(steps >= 1) and np.all(steps <= b)
    assert np.all(steps[:-1] == b)  # only the last block may be smaller
    assert len(edges) - 1 == spec.coarse_shape((n, n, n))[axis]
    if policy == "crop":
        assert used == n - n % b and np.all(steps == b)
    else:
        assert used == n and steps.sum() == n


# --------------------------------------------------------------------------------------
# coarse grid
# --------------------------------------------------------------------------------------


def _grid(shape, seed, transform=None, crs=None):
    rng = np.random.default_rng(seed)
    return Grid(
        dz=rng.uniform(0.5, 3.0, shape[0]),
        dy=rng.uniform(5.0, 20.0, shape[1]),
        dx=rng.uniform(5.0, 20.0, shape[2]),
        transform=transform,
        crs=crs,
    )


@pytest.mark.parametrize("policy", REMAINDER_POLICIES)
def test_coarse_grid_sizes_sum_to_fine_sizes(policy):
    fine = _grid((6, 12, 15), 482_910_377)  # divides (2, 3, 5) evenly
    coarse = BlockSpec(5, 3, 2, remainder=policy).coarse_grid(fine)
    assert coarse.shape == (3, 4, 3)
    for axis, b in zip(range(3), (2, 3, 5)):
        want = fine.sizes(axis).reshape(-1, b).sum(axis=1)
        np.testing.assert_allclose(coarse.sizes(axis), want, rtol=1e-15)
    assert coarse.volume == pytest.approx(fine.volume, rel=1e-14)


def test_coarse_grid_keep_has_true_edge_sizes():
    fine = _grid((5, 11, 13), 119_384_206)
    coarse = BlockSpec(5, 4, 2, remainder="keep").coarse_grid(fine)
    assert coarse.shape == (3, 3, 3)
    dx, dy = fine.dx, fine.dy
    np.testing.assert_allclose(coarse.dx, [dx[:5].sum(), dx[5:10].sum(), dx[10:].sum()])
    np.testing.assert_allclose(coarse.dy, [dy[:4].sum(), dy[4:8].sum(), dy[8:].sum()])
    np.testing.assert_allclose(coarse.dz, [fine.dz[:2].sum(), fine.dz[2:4].sum(), fine.dz[4]])
    assert coarse.volume == pytest.approx(fine.volume, rel=1e-14)


def test_coarse_grid_crop_drops_the_remainder():
    fine = _grid((5, 11, 13), 775_203_118)
    coarse = BlockSpec(5, 4, 2, remainder="crop").coarse_grid(fine)
    assert coarse.shape == (2, 2, 2)
    assert coarse.dx.sum() == pytest.approx(fine.dx[:10].sum(), rel=1e-15)
    assert coarse.dy.sum() == pytest.approx(fine.dy[:8].sum(), rel=1e-15)
    assert coarse.dz.sum() == pytest.approx(fine.dz[:4].sum(), rel=1e-15)


def test_coarse_transform_is_scaled_by_the_block():
    transform = Affine(10.0, 0.0, 31_000.0, 0.0, -10.0, 87_000.0)
    fine = Grid(dz=np.ones(1), dy=np.full(12, 10.0), dx=np.full(20, 10.0), transform=transform,
                crs="EPSG:32633")
    coarse = BlockSpec(4, 3).coarse_grid(fine)
    assert coarse.transform == Affine(40.0, 0.0, 31_000.0, 0.0, -30.0, 87_000.0)
    assert coarse.crs == "EPSG:32633"
    # coarse pixel (1, 2) starts where fine pixel (4, 6) starts
    assert coarse.transform @ (1, 2) == transform @ (4, 6)
    assert BlockSpec(4, 3).coarse_grid(_grid((1, 12, 20), 228_404_517)).transform is None


# --------------------------------------------------------------------------------------
# groupings of the layers (issue 19)
# --------------------------------------------------------------------------------------


@pytest.mark.parametrize("text", ["8x8x2,2,4,8", "4x2x1,3", "8x8xauto:4", "8x8xauto:90%"])
def test_grouping_parses_prints_back_and_round_trips_through_the_summary(text):
    spec = BlockSpec.parse(text)
    assert str(spec) == text and BlockSpec.parse(str(spec)) == spec
    assert BlockSpec.from_summary(spec.summary()) == spec


def test_grouping_summary_records_the_sizes_and_the_request():
    assert BlockSpec.parse("8x8x2,2,4,8").summary()["z"] == [2, 2, 4, 8]
    auto = BlockSpec.parse("8x8xauto:4")
    assert auto.summary()["layers"] == "auto:4"
    chosen = auto.resolved((1, 3, 4, 8))
    assert chosen.summary()["z"] == [1, 3, 4, 8] and chosen.summary()["layers"] == "auto:4"
    assert BlockSpec.from_summary(chosen.summary()) == chosen
    assert BlockSpec.parse("8x8x2").summary()["z"] == 2  # a uniform NZ is recorded as before


def test_grouping_edges_shape_and_true_thicknesses():
    spec = BlockSpec.parse("2x2x1,3,2")
    assert spec.cells == ((1, 3, 2), 2, 2)
    assert spec.edges(6, 0).tolist() == [0, 1, 4, 6]
    assert spec.coarse_shape((6, 4, 4)) == (3, 2, 2)
    dz = np.array([1.0, 0.5, 2.0, 3.0, 0.25, 4.0])
    grid = Grid(dz=dz, dy=np.ones(4), dx=np.ones(4))
    np.testing.assert_array_equal(spec.coarse_grid(grid).dz, [1.0, 5.5, 4.25])


def test_uniform_grouping_written_out_is_the_same_partition_as_nz():
    grid = Grid(dz=np.arange(1.0, 7.0), dy=np.ones(4), dx=np.ones(4))
    uniform, written = BlockSpec.parse("2x2x2"), BlockSpec.parse("2x2x2,2,2")
    assert np.array_equal(uniform.edges(6, 0), written.edges(6, 0))
    assert np.array_equal(uniform.coarse_grid(grid).dz, written.coarse_grid(grid).dz)


@pytest.mark.parametrize("remainder", REMAINDER_POLICIES[1:])
def test_remainder_policies_leave_grouped_layers_whole(remainder):
    spec = BlockSpec.parse("4x4x1,2", remainder=remainder)
    spec.check((3, 10, 10), 3)  # 10 is no multiple of 4: x and y follow the policy
    assert spec.used_shape((3, 10, 10))[0] == 3 and spec.coarse_shape((3, 10, 10))[0] == 2


@pytest.mark.parametrize("text, shape, ndim, message", [
    ("8x8x2,2", (5, 8, 8), 3, r"^the layer groups 2,2 hold 4 fine layers but the model has 5; they must"),
    ("8x8x2,0,3", (5, 8, 8), 3, r"^the layer groups 2,0,3 hold a group of 0 layers; every group needs"),
    ("8x8x2,-1,4", (5, 8, 8), 3, r"^the layer groups 2,-1,4 hold a group of -1 layers"),
    ("8x8x2,2", (1, 8, 8), 2, r"^block 8x8x2,2 has a grouping of the layers but the field is a 2D map"),
    ("8x8xauto:2", (1, 8, 8), 2, r"^block 8x8xauto:2 has a grouping of the layers but the field is a 2D map"),
    ("8x8xauto:9", (5, 8, 8), 3, r"^block 8x8xauto:9: 9 coarse layers asked for but the model has 5 fine"),
    ("8x8xauto:0", (5, 8, 8), 3, r"^automatic layers 'auto:0': the number of coarse layers must be"),
])  # fmt: skip
def test_bad_groupings_are_refused_in_one_line(text, shape, ndim, message):
    with pytest.raises(InputError, match=message) as caught:
        BlockSpec.parse(text).check(shape, ndim)
    assert "\n" not in str(caught.value)


def test_automatic_layers_must_be_chosen_before_the_blocks_are_used():
    with pytest.raises(InputError, match=r"the automatic layers are chosen from the field first"):
        BlockSpec.parse("8x8xauto:3").cells  # noqa: B018
