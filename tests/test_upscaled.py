"""Tests of the `upscale.coarsen` driver (`upscale.methods.coarsen`).

What is tested
--------------
* Layered 3D and 2D fields through the whole driver: kx, ky along the layers
  are the thickness-weighted arithmetic mean and kz across them the
  weighted harmonic mean for the exact methods (Bear 1972; Cardwell &
  Parsons 1945).
* A constant field is unchanged by every method, with edge blocks kept and
  (for the averages) inactive cells.
* Input checks: negative, infinite and zero values (per method), porosity
  above 1, no active cell, blocks larger than the grid, grids that do not
  divide with ``remainder='stop'``, a z block on a 2D map, unknown methods.
* Remainder policies: ``crop`` reports the dropped cells, ``keep`` gives
  smaller edge blocks whose true sizes appear in the coarse grid.
* ``min_active`` deactivates blocks by active bulk-volume fraction, and the
  lost pore volume is reported.
* Porosity by bulk volume conserves pore volume exactly.
* Scaling k -> c k scales every result by c (hypothesis); transposing a 2D
  field swaps the kx and ky results of the directional methods.
"""

from __future__ import annotations

import re

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

import upscale
from upscale import BlockSpec, Field, Grid, InputError, coarsen
from upscale.gallery.problems import Layers, uncorrelated_lognormal
from upscale.methods.registry import METHODS

# renormalization takes powers-of-two blocks only; it has its own tests (test_flow_based.py)
ANY_BLOCK = [n for n in METHODS if n != "renormalization"]

OPTIONS = {"power": {"exponent": 0.57}}
SETTINGS = settings(max_examples=50, deadline=None, database=None)


def _lognormal(shape, seed, sigma=1.5, nan_fraction=None):
    return uncorrelated_lognormal(shape, seed, mean_ln=2.0, sigma_ln=sigma, inactive=nan_fraction)


# --------------------------------------------------------------------------------------
# Exact answers through the driver
# --------------------------------------------------------------------------------------


@pytest.mark.parametrize("method", ["tubes", "slabs"])
def test_layered_3d_through_coarsen(method):
    # Bear 1972, Dynamics of Fluids in Porous Media; Cardwell & Parsons 1945, Average
    # permeabilities of heterogeneous oil sands: both bounds are exact for layers,
    # thickness-weighted arithmetic along them, weighted harmonic across.
    dz = np.array([0.5, 2.0, 1.0, 3.5, 0.25, 1.5])
    layer_k = np.array([120.0, 3.0, 45.0, 0.8, 600.0, 9.0])
    k = np.broadcast_to(layer_k[:, None, None], (6, 8, 9)).copy()
    result = coarsen(Field.from_arrays(k, dz=dz, cell_size=(20.0, 10.0)), "3x4x3", method)
    coarse = result.coarse
    assert coarse.shape == (2, 2, 3)
    for i, part in enumerate((slice(0, 3), slice(3, 6))):
        w, v = dz[part], layer_k[part]
        np.testing.assert_allclose(coarse.kx[i], np.sum(w * v) / w.sum(), rtol=1e-14)
        np.testing.assert_allclose(coarse.ky[i], np.sum(w * v) / w.sum(), rtol=1e-14)
        np.testing.assert_allclose(coarse.kz[i], w.sum() / np.sum(w / v), rtol=1e-14)
    np.testing.assert_allclose(coarse.grid.dz, [3.5, 5.25])
    np.testing.assert_allclose(coarse.grid.dx, 60.0)
    np.testing.assert_allclose(coarse.grid.dy, 40.0)


def test_layered_3d_averages_per_axis_are_axis_free():
    dz = np.array([1.0, 4.0])
    k = np.broadcast_to(np.array([10.0, 0.1])[:, None, None], (2, 2, 2)).copy()
    fine = Field.from_arrays(k, dz=dz)
    arithmetic = coarsen(fine, "2x2x2", "arithmetic").coarse
    harmonic = coarsen(fine, "2x2x2", "harmonic").coarse
    # Bear 1972: along the layers arithmetic (10*1 + 0.1*4)/5, across harmonic 5/(1/10 + 4/0.1)
    for prop in ("kx", "ky", "kz"):
        assert getattr(arithmetic, prop)[0, 0, 0] == pytest.approx(10.4 / 5.0, rel=1e-15)
        assert getattr(harmonic, prop)[0, 0, 0] == pytest.approx(5.0 / 40.1, rel=1e-15)


def test_layered_2d_rows_as_layers_through_coarsen():
    # Bear 1972: equal rows as layers -> kx arithmetic, ky harmonic (both bounds exact).
    rows = Layers(np.array([10.0, 1000.0, 0.5, 30.0]), np.ones(4))
    for method in ("tubes", "slabs"):
        coarse = coarsen(Field.from_arrays(rows.rows(6)), "6x4", method).coarse
        assert coarse.kz is None
        assert coarse.kx[0, 0, 0] == pytest.approx(rows.along, rel=1e-14)
        assert coarse.ky[0, 0, 0] == pytest.approx(rows.across, rel=1e-14)


def test_docstring_example_and_result_record():
    fine = Field.from_arrays(np.array([[1.0, 1.0], [100.0, 100.0]]), cell_size=(10.0, 10.0))
    result = coarsen(fine, "2x2", "geometric")
    assert isinstance(result, upscale.Upscaled)
    assert result.coarse.kx[0, 0, 0] == pytest.approx(10.0, rel=1e-15)
    assert result.method == "geometric" and result.options == {}
    assert result.block == BlockSpec(2, 2)
    assert result.fine is fine and result.dropped_cells == 0
    assert result.lost_pore_volume == 0.0
    assert result.coarse.unit == "mD"
    np.testing.assert_array_equal(result.active_fraction, [[[1.0]]])
    assert set(result.fine_stats) == {"kx", "ky"}
    assert result.fine_stats["kx"].active == 4


def test_power_options_are_recorded():
    fine = Field.from_arrays(np.array([[1.0, 9.0]]))
    result = coarsen(fine, "2x1", "power", exponent=0.5)
    assert result.options == {"exponent": 0.5}
    assert result.coarse.kx[0, 0, 0] == pytest.approx(4.0, rel=1e-14)


# --------------------------------------------------------------------------------------
# Constant fields
# --------------------------------------------------------------------------------------


@pytest.mark.parametrize("name", ANY_BLOCK)
def test_constant_field_unchanged_with_edge_blocks(name):
    c = 123.5
    dz = np.array([0.5, 3.0, 1.0, 2.0, 0.1])
    k = np.full((5, 11, 13), c)
    active = ~np.isnan(_lognormal((5, 11, 13), 991_200_341, nan_fraction=0.25))
    impermeable = METHODS[name].directional or METHODS[name].local
    if not impermeable:  # the averages skip inactive cells
        k[~active] = np.nan
    spec = BlockSpec(5, 4, 2, remainder="keep")
    result = coarsen(Field.from_arrays(k, dz=dz), spec, name, **OPTIONS.get(name, {}))
    for prop in ("kx", "ky", "kz"):
        values = getattr(result.coarse, prop)
        assert values.shape == (3, 3, 3)
        ok = ~np.isnan(values)
        assert ok.all() or not impermeable
        np.testing.assert_allclose(values[ok], c, rtol=1e-13)


# --------------------------------------------------------------------------------------
# Refused input
# --------------------------------------------------------------------------------------


@pytest.mark.parametrize(
    "name, options",
    [
        ("arithmetic", {}),
        ("harmonic", {}),
        ("geometric", {}),
        ("power", {"exponent": 0.5}),
        ("power", {"exponent": -0.5}),
        ("tubes", {}),
        ("slabs", {}),
    ],
)
def test_negative_values_refused_with_count_and_first_cell(name, options):
    k = np.full((3, 4, 6), 10.0)
    k[1, 2, 3] = -1.0
    k[2, 0, 0] = -5.0
    k[1, 3, 0] = -0.5
    with pytest.raises(
        InputError,
        match=re.escape(
            "kx: 3 negative value(s), first at (band 2, row 2, column 3), "
            "(band 2, row 3, column 0), (band 3, row 0, column 0); "
            "permeability and porosity cannot be negative"
        ),
    ):
        coarsen(Field.from_arrays(k, dz=np.ones(3)), "2x2", name, **options)


def test_negative_values_refused_in_ky_and_porosity():
    k = np.full((4, 4), 10.0)
    ky = k.copy()
    ky[3, 1] = -2.0
    message = "ky: 1 negative value(s), first at (band 1, row 3, column 1)"
    with pytest.raises(InputError, match=re.escape(message)):
        coarsen(Field.from_arrays(k, ky=ky), "2x2", "arithmetic")
    phi = np.full((4, 4), 0.2)
    phi[0, 2] = -0.1
    message = "porosity: 1 negative value(s), first at (band 1, row 0, column 2)"
    with pytest.raises(InputError, match=re.escape(message)):
        coarsen(Field.from_arrays(k, porosity=phi), "2x2", "arithmetic")


@pytest.mark.parametrize(
    "name, value",
    [(name, value) for name in METHODS for value in (np.inf, -np.inf)],
)
def test_infinite_values_refused(name, value):
    k = np.full((4, 4), 10.0)
    k[2, 1] = value
    with pytest.raises(
        InputError,
        match=re.escape(
            "kx: 1 infinite value(s), first at (band 1, row 2, column 1); mark them as nodata"
        ),
    ):
        coarsen(Field.from_arrays(k), "2x2", name, **OPTIONS.get(name, {}))


def test_infinite_block_refused_by_power_with_negative_exponent():
    k = np.full((4, 4), 10.0)
    k[2:, 2:] = np.inf
    with pytest.raises(InputError, match=r"4 infinite value\(s\)"):
        coarsen(Field.from_arrays(k), "2x2", "power", exponent=-0.5)


@pytest.mark.parametrize(
    "name, options",
    [
        ("harmonic", {}),
        ("geometric", {}),
        ("power", {"exponent": -0.5}),
        ("power", {"exponent": 0.0}),
    ],
)
def test_zeros_refused_where_they_decide_the_average(name, options):
    k = np.full((2, 4, 4), 10.0)
    k[1, 3, 2] = 0.0
    with pytest.raises(
        InputError,
        match=re.escape(
            f"kx: 1 zero permeability value(s), first at (band 2, row 3, column 2); the {name} "
            "average of a block with a zero is zero"
        ),
    ):
        coarsen(Field.from_arrays(k, dz=np.ones(2)), "2x2", name, **options)


@pytest.mark.parametrize(
    "name, options, want",
    [
        ("arithmetic", {}, 7.5),
        ("tubes", {}, 5.0),  # one tube of two is cut
        ("slabs", {}, 20.0 / 3.0),  # slabs 5 and 10 in series
        ("power", {"exponent": 0.5}, 5.625),  # ((0 + 3 sqrt 10) / 4)**2
    ],
)
def test_zeros_accepted_where_they_are_meaningful(name, options, want):
    k = np.array([[0.0, 10.0], [10.0, 10.0]])
    result = coarsen(Field.from_arrays(k), "2x2", name, **options)
    assert result.coarse.kx[0, 0, 0] == pytest.approx(want, rel=1e-14)
    assert result.fine_stats["kx"].zero == 1


def test_zero_porosity_is_fine_but_above_one_is_refused():
    k = np.full((4, 4), 10.0)
    phi = np.full((4, 4), 0.2)
    phi[0, 0] = 0.0
    assert coarsen(Field.from_arrays(k, porosity=phi), "2x2", "harmonic").coarse.porosity[
        0, 0, 0
    ] == pytest.approx(0.15, rel=1e-14)
    phi[3, 3] = 1.5
    message = "porosity: porosity up to 1.5; porosity is a fraction in [0, 1]"
    with pytest.raises(InputError, match=re.escape(message)):
        coarsen(Field.from_arrays(k, porosity=phi), "2x2", "arithmetic")


@pytest.mark.parametrize("name", list(METHODS))
def test_all_nan_field_refused(name):
    k = np.full((4, 4), np.nan)
    message = "kx: no active cell (every cell is nodata or NaN)"
    with pytest.raises(InputError, match=re.escape(message)):
        coarsen(Field.from_arrays(k), "2x2", name, **OPTIONS.get(name, {}))


def test_block_larger_than_grid_refused():
    message = "block 8x2 is larger than the grid along x (columns): 8 > 6"
    with pytest.raises(InputError, match=re.escape(message)):
        coarsen(Field.from_arrays(np.ones((4, 6))), "8x2", "arithmetic")
    with pytest.raises(InputError, match=re.escape("along z (layers): 3 > 2")):
        coarsen(Field.from_arrays(np.ones((2, 4, 6)), dz=1.0), "2x2x3", "arithmetic")


def test_non_dividing_grid_refused_with_stop():
    with pytest.raises(
        InputError,
        match=re.escape(
            "the grid does not divide into whole 4x4 blocks (x (columns): 10 cells = 2 blocks + 2)"
        ),
    ):
        coarsen(Field.from_arrays(np.ones((8, 10))), "4x4", "arithmetic")


def test_three_part_block_on_a_map_refused():
    message = r"block 2x2x2 has a z size but the field is a 2D map; use NXxNY"
    with pytest.raises(InputError, match=message):
        coarsen(Field.from_arrays(np.ones((4, 4))), "2x2x2", "arithmetic")


def test_unknown_method_and_bad_block_text_refused():
    fine = Field.from_arrays(np.ones((4, 4)))
    with pytest.raises(InputError, match=r"unknown method 'mean'"):
        coarsen(fine, "2x2", "mean")
    with pytest.raises(InputError, match=r"is not of the form NXxNY"):
        coarsen(fine, "2by2", "arithmetic")
    with pytest.raises(InputError, match=r"needs `exponent`"):
        coarsen(fine, "2x2", "power")


# --------------------------------------------------------------------------------------
# Remainder policies
# --------------------------------------------------------------------------------------


def test_crop_reports_dropped_cells_and_uses_the_rest():
    k = _lognormal((3, 10, 11), 640_113_872)
    fine = Field.from_arrays(k, dz=np.array([1.0, 2.0, 3.0]), cell_size=(5.0, 5.0))
    result = coarsen(fine, BlockSpec(4, 4, 2, remainder="crop"), "arithmetic")
    assert result.dropped_cells == 3 * 10 * 11 - 2 * 8 * 8
    assert result.fine.shape == (2, 8, 8)
    assert result.coarse.shape == (1, 2, 2)
    np.testing.assert_array_equal(result.fine.kx, k[:2, :8, :8])
    w = np.array([1.0, 2.0])[:, None, None]
    want = np.sum(w * k[:2, :4, 4:8]) / (3.0 * 16)
    assert result.coarse.kx[0, 0, 1] == pytest.approx(want, rel=1e-13)


def test_keep_gives_smaller_edge_blocks_with_true_sizes():
    k = _lognormal((3, 10, 11), 210_558_903)
    dz = np.array([1.0, 2.0, 3.0])
    fine = Field.from_arrays(k, dz=dz, cell_size=(5.0, 7.0))
    result = coarsen(fine, BlockSpec(4, 4, 2, remainder="keep"), "arithmetic")
    assert result.dropped_cells == 0
    assert result.coarse.shape == (2, 3, 3)
    np.testing.assert_allclose(result.coarse.grid.dx, [20.0, 20.0, 15.0])
    np.testing.assert_allclose(result.coarse.grid.dy, [28.0, 28.0, 14.0])
    np.testing.assert_allclose(result.coarse.grid.dz, [3.0, 3.0])
    np.testing.assert_array_equal(result.active_fraction, np.ones((2, 3, 3)))
    # the corner edge block: 1 layer x 2 rows x 3 columns
    assert result.coarse.kx[1, 2, 2] == pytest.approx(k[2, 8:, 8:].mean(), rel=1e-14)
    # an edge block in x only, 2 layers of different dz
    w = dz[:2, None, None]
    assert result.coarse.kx[0, 1, 2] == pytest.approx(
        np.sum(w * k[:2, 4:8, 8:]) / (3.0 * 12), rel=1e-14
    )


def test_keep_and_crop_agree_on_whole_blocks():
    k = _lognormal((1, 13, 17), 865_301_224, nan_fraction=0.1)
    fine = Field.from_arrays(k)
    for name in ANY_BLOCK:
        options = OPTIONS.get(name, {})
        # zeros kept: the floor of the zero-k rule is taken over the whole coarse model
        keep = coarsen(fine, BlockSpec(5, 4, remainder="keep", zero_k="keep"), name, **options).coarse
        crop = coarsen(fine, BlockSpec(5, 4, remainder="crop", zero_k="keep"), name, **options).coarse
        assert keep.shape == (1, 4, 4) and crop.shape == (1, 3, 3)
        np.testing.assert_array_equal(keep.kx[:, :3, :3], crop.kx)
        np.testing.assert_array_equal(keep.ky[:, :3, :3], crop.ky)


# --------------------------------------------------------------------------------------
# Activity and pore volume
# --------------------------------------------------------------------------------------


def _activity_field():
    k = np.full((4, 4), 10.0)
    k[0, 0] = np.nan  # block (0, 0): 3 of 4 active
    k[0, 2:] = np.nan  # block (0, 1): 2 of 4
    k[2, 0] = k[2, 1] = k[3, 0] = np.nan  # block (1, 0): 1 of 4
    k[2:, 2:] = np.nan  # block (1, 1): none
    phi = np.where(np.isnan(k), np.nan, 0.2)
    return Field.from_arrays(k, porosity=phi, cell_size=(3.0, 2.0))


def test_active_fraction_and_default_activity():
    result = coarsen(_activity_field(), "2x2", "geometric")
    np.testing.assert_array_equal(result.active_fraction[0], [[0.75, 0.5], [0.25, 0.0]])
    kx = result.coarse.kx[0]
    assert np.isnan(kx[1, 1]) and np.isnan(result.coarse.porosity[0, 1, 1])
    np.testing.assert_allclose(kx[[0, 0, 1], [0, 1, 0]], 10.0, rtol=1e-14)
    np.testing.assert_allclose(result.coarse.porosity[0, 0], [0.15, 0.1], rtol=1e-14)
    assert result.lost_pore_volume == 0.0


@pytest.mark.parametrize("name", list(METHODS))
def test_min_active_deactivates_blocks(name):
    spec = BlockSpec(2, 2, min_active=0.5)
    result = coarsen(_activity_field(), spec, name, **OPTIONS.get(name, {}))
    for prop in ("kx", "ky", "porosity"):
        values = getattr(result.coarse, prop)[0]
        np.testing.assert_array_equal(np.isnan(values), [[False, False], [True, True]])
    # the one active cell of block (1, 0): porosity 0.2 of 3 m x 2 m x 1 m
    assert result.lost_pore_volume == pytest.approx(0.2 * 6.0, rel=1e-14)


def test_min_active_weighs_layers_by_thickness():
    k = np.array([[[np.nan]], [[5.0]]])  # top layer (1 m) inactive, bottom (3 m) active
    fine = Field.from_arrays(k, dz=np.array([1.0, 3.0]))
    assert coarsen(fine, BlockSpec(1, 1, 2, min_active=0.75), "arithmetic").coarse.kx[
        0, 0, 0
    ] == pytest.approx(5.0, rel=1e-15)
    dropped = coarsen(fine, BlockSpec(1, 1, 2, min_active=0.76), "arithmetic")
    assert np.isnan(dropped.coarse.kx[0, 0, 0])


def test_min_active_one_keeps_fully_active_blocks():
    # ten layers of 0.1 m, every cell active: every block is whole, none may be dropped
    fine = Field.from_arrays(np.ones((10, 3, 3)), dz=0.1)
    result = coarsen(fine, BlockSpec(1, 1, 10, min_active=1.0), "arithmetic")
    assert not np.isnan(result.coarse.kx).any()


@pytest.mark.parametrize(
    "spec",
    [
        BlockSpec(4, 3, 2, remainder="keep"),
        BlockSpec(4, 3, 2, remainder="crop"),
        BlockSpec(5, 5, 3, remainder="keep"),
        BlockSpec(1, 1, 1),
        BlockSpec(13, 11, 5, remainder="stop"),
    ],
    ids=str,
)
def test_porosity_by_bulk_volume_conserves_pore_volume(spec):
    rng = np.random.default_rng(503_877_126)
    shape = (5, 11, 13)
    k = _lognormal(shape, 503_877_127, nan_fraction=0.2)
    k[:, :3, :4] = np.nan  # whole inactive blocks
    phi = rng.uniform(0.01, 0.4, shape)
    dz = rng.uniform(0.3, 4.0, shape[0])
    fine = Field.from_arrays(k, porosity=phi, dz=dz, cell_size=(25.0, 12.5))
    result = coarsen(fine, spec, "geometric")
    used = result.fine
    fine_pore = np.nansum(used.porosity * used.grid.cell_volumes())
    coarse_pore = np.nansum(result.coarse.porosity * result.coarse.grid.cell_volumes())
    assert coarse_pore == pytest.approx(fine_pore, rel=1e-12)
    if spec.remainder != "crop":
        every = np.where(np.isnan(k), 0.0, phi) * fine.grid.cell_volumes()
        assert fine_pore == pytest.approx(every.sum(), rel=1e-14)
    assert result.coarse.grid.volume == pytest.approx(used.grid.volume, rel=1e-13)


def test_lost_pore_volume_adds_up():
    rng = np.random.default_rng(781_004_539)
    k = _lognormal((3, 12, 12), 781_004_540, nan_fraction=0.45)
    phi = rng.uniform(0.05, 0.3, k.shape)
    fine = Field.from_arrays(k, porosity=phi, dz=np.array([1.0, 0.5, 2.0]), cell_size=(10, 10))
    result = coarsen(fine, BlockSpec(3, 3, 3, min_active=0.6), "arithmetic")
    assert np.isnan(result.coarse.kx).any() and not np.isnan(result.coarse.kx).all()
    kept = np.nansum(result.coarse.porosity * result.coarse.grid.cell_volumes())
    total = np.nansum(result.fine.porosity * result.fine.grid.cell_volumes())
    assert result.lost_pore_volume > 0
    assert kept + result.lost_pore_volume == pytest.approx(total, rel=1e-12)


# --------------------------------------------------------------------------------------
# Invariances
# --------------------------------------------------------------------------------------


@SETTINGS
@given(
    name=st.sampled_from(ANY_BLOCK),
    c=st.floats(1e-4, 1e4),
    seed=st.integers(10**9, 10**12),
    omega=st.sampled_from([-1.5, -0.3, 0.25, 0.57, 2.0]),
)
def test_scaling_k_scales_the_results(name, c, seed, omega):
    # every method is linear-homogeneous in k (common practice)
    k = _lognormal((2, 9, 10), seed, nan_fraction=0.15)
    options = {"exponent": omega} if name == "power" else {}
    spec = BlockSpec(3, 4, 2, remainder="keep")
    base = coarsen(Field.from_arrays(k, dz=np.array([0.7, 2.0])), spec, name, **options).coarse
    scaled = coarsen(
        Field.from_arrays(c * k, dz=np.array([0.7, 2.0])), spec, name, **options
    ).coarse
    for prop in ("kx", "ky", "kz"):
        a, b = getattr(base, prop), getattr(scaled, prop)
        assert np.array_equal(np.isnan(a), np.isnan(b))
        np.testing.assert_allclose(b, c * a, rtol=1e-12)


@pytest.mark.parametrize("name", ["tubes", "slabs"])
def test_transposing_a_map_swaps_kx_and_ky(name):
    k = _lognormal((14, 9), 377_905_216, sigma=2.0, nan_fraction=0.1)
    original = coarsen(Field.from_arrays(k), BlockSpec(3, 4, remainder="keep"), name).coarse
    flipped = coarsen(Field.from_arrays(k.T.copy()), BlockSpec(4, 3, remainder="keep"), name).coarse
    np.testing.assert_allclose(flipped.ky, original.kx.transpose(0, 2, 1), rtol=1e-13)
    np.testing.assert_allclose(flipped.kx, original.ky.transpose(0, 2, 1), rtol=1e-13)
    # and the directions really differ on this field
    assert np.nanmax(np.abs(original.kx / original.ky - 1.0)) > 0.05


def test_fine_grid_with_unequal_columns_is_refused():
    # the block kernels weight cells by layer thickness only; a fine grid with unequal
    # column widths (possible only through the Python API) must not be averaged silently
    k = np.ones((1, 2, 4))
    grid = Grid(dz=np.ones(1), dy=np.ones(2), dx=np.array([1.0, 2.0, 1.0, 1.0]))
    field = Field(kx=k, ky=k, kz=None, porosity=None, grid=grid)
    with pytest.raises(InputError, match="dx must be uniform"):
        coarsen(field, "2x2", "arithmetic")
