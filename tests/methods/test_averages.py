"""Tests of the block averages in `upscale.methods.averages` and their kernels.

What is tested
--------------
* The compiled kernels `upscale.methods._kernels.block_sums` and
  `block_log_sums` against plain NumPy references built on
  `skimage.measure.block_reduce`: random data with NaN cells, sub-blocks that
  do not divide the shape, float32 input, very large blocks (the
  renormalisation paths of the log kernel) and values spanning 1e-30..1e30.
* Layered media with unequal layer thicknesses: flow along the layers gives
  the thickness-weighted arithmetic mean, across them the weighted harmonic
  mean (Bear 1972).
* The AM-GM-HM ordering for every block and the monotonicity of the power
  mean in its exponent, property-based with hypothesis.
* The power average at ω = 1, -1 and ω -> 0 (Journel, Deutsch & Desbarats 1986).
* Nodata handling: NaN cells are skipped, a block without an active cell is
  NaN, `bulk_mean` counts inactive cells as zero, `active_volume` sums dz.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from skimage.measure import block_reduce

from upscale.gallery.problems import Layers, uncorrelated_lognormal
from upscale.methods import _kernels as kern
from upscale.methods.averages import (
    active_volume,
    arithmetic_mean,
    bulk_mean,
    geometric_mean,
    harmonic_mean,
    power_mean,
)

SETTINGS = settings(max_examples=60, deadline=None, database=None)


# --------------------------------------------------------------------------------------
# NumPy references
# --------------------------------------------------------------------------------------


def reference_sums(k, wz, sub, mode, skip):
    """``sum(w * f(k))`` and ``sum(w)`` per sub-block, the slow obvious way."""
    k = np.asarray(k, dtype=np.float64)
    active = ~np.isnan(k)
    with np.errstate(divide="ignore"):
        if mode == kern.LINEAR:
            f = np.where(active, k, 0.0)
        elif mode == kern.RECIPROCAL:
            f = np.where(active, 1.0 / k, 0.0 if skip else np.inf)
    w = np.broadcast_to(np.asarray(wz, float)[:, None, None], k.shape)
    w = w * active if skip else w
    S = block_reduce(w * f, sub, func=np.sum, cval=0.0)
    W = block_reduce(w, sub, func=np.sum, cval=0.0)
    return S, W


def reference_log_sums(k, wz, sub):
    """``sum(w * ln k)`` and ``sum(w)`` over the active cells of each sub-block."""
    k = np.asarray(k, dtype=np.float64)
    active = ~np.isnan(k)
    w = np.asarray(wz, float)[:, None, None] * active
    with np.errstate(invalid="ignore"):
        logk = np.where(active, np.log(np.where(active, k, 1.0)), 0.0)
    return block_reduce(w * logk, sub, func=np.sum, cval=0.0), block_reduce(w, sub, func=np.sum)


def weighted_block_reference(k, dz, block, average):
    """Per-block weighted average of the active cells, one block at a time."""
    L, M, N = k.shape
    bz, by, bx = block
    out = np.full((-(-L // bz), -(-M // by), -(-N // bx)), np.nan)
    for index in np.ndindex(out.shape):
        window = tuple(slice(i * b, (i + 1) * b) for i, b in zip(index, block))
        values = k[window]
        weights = np.broadcast_to(dz[window[0]][:, None, None], values.shape)
        ok = ~np.isnan(values)
        if ok.any():
            out[index] = average(values[ok].astype(np.float64), weights[ok])
    return out


def am(v, w):
    return np.sum(w * v) / np.sum(w)


def hm(v, w):
    return np.sum(w) / np.sum(w / v)


def gm(v, w):
    return np.exp(np.sum(w * np.log(v)) / np.sum(w))


def random_field(seed, shape, sigma=1.5, nan_fraction=0.15, dtype=np.float64):
    rng = np.random.default_rng(seed)
    k = uncorrelated_lognormal(shape, rng, mean_ln=2.0, sigma_ln=sigma, inactive=nan_fraction)
    dz = rng.uniform(0.2, 5.0, shape[0])
    return k.astype(dtype), dz


# --------------------------------------------------------------------------------------
# Kernels
# --------------------------------------------------------------------------------------


SUBS = [(1, 1, 1), (2, 3, 4), (3, 5, 7), (1, 17, 1), (4, 1, 19), (5, 17, 19), (2, 16, 6)]


@pytest.mark.parametrize("mode", [kern.LINEAR, kern.RECIPROCAL])
@pytest.mark.parametrize("skip", [True, False])
@pytest.mark.parametrize("sub", SUBS)
def test_block_sums_match_block_reduce(mode, skip, sub):
    k, dz = random_field(739_114_203, (5, 17, 19))
    S, W = kern.block_sums(k, dz, sub, mode, skip)
    S_ref, W_ref = reference_sums(k, dz, sub, mode, skip)
    assert S.shape == S_ref.shape == W.shape
    np.testing.assert_allclose(W, W_ref, rtol=1e-13)
    np.testing.assert_allclose(S, S_ref, rtol=1e-12)


@pytest.mark.parametrize("sub", SUBS)
def test_block_counts_are_the_weights_of_block_sums(sub):
    k, dz = random_field(739_114_203, (5, 17, 19))
    W = kern.block_counts(k, dz, sub)
    np.testing.assert_allclose(W, reference_sums(k, dz, sub, kern.LINEAR, True)[1], rtol=1e-13)
    assert np.array_equal(W, kern.block_sums(k, dz, sub, kern.LINEAR, True)[1])  # the same additions


@pytest.mark.parametrize("sub", [(1, 1, 1), (1, 17, 1), (1, 1, 19), (1, 16, 6), (1, 5, 7), (1, 17, 19)])
@pytest.mark.parametrize("dtype", [np.float32, np.float64])
def test_active_volume_of_one_layer_blocks_is_the_kernels_to_the_bit(sub, dtype):
    # NumPy since issue 18 for blocks one layer thick (the kernel is no longer compiled for a map);
    # the same bits as the compiled block_counts: one exact count times dz per block
    k, dz = random_field(739_114_203, (5, 17, 19), dtype=dtype)
    dz = dz * np.pi  # weights whose products round
    assert np.array_equal(active_volume(k, dz, sub), kern.block_counts(k, dz, sub))


@pytest.mark.parametrize("mode", [kern.LINEAR, kern.RECIPROCAL])
def test_block_sums_float32_reads_each_value_as_float64(mode):
    # The kernel promotes every float32 value to float64 before summing, so the
    # sums of a float32 raster equal those of its exact float64 copy, bit for bit.
    k, dz = random_field(551_902_877, (3, 13, 22), dtype=np.float32)
    for skip in (True, False):
        got = kern.block_sums(k, dz, (2, 4, 5), mode, skip)
        wide = kern.block_sums(k.astype(np.float64), dz, (2, 4, 5), mode, skip)
        assert got[0].dtype == np.float64
        assert np.array_equal(got[0], wide[0]) and np.array_equal(got[1], wide[1])
        S_ref, _ = reference_sums(k, dz, (2, 4, 5), mode, skip)
        np.testing.assert_allclose(got[0], S_ref, rtol=1e-12)


def test_block_sums_inactive_cell_is_impermeable_in_series_only_without_skip():
    k = np.array([[[2.0, np.nan, 4.0]]])
    dz = np.array([3.0])
    S, W = kern.block_sums(k, dz, (1, 1, 3), kern.RECIPROCAL, False)
    assert S[0, 0, 0] == np.inf and W[0, 0, 0] == 9.0
    S, W = kern.block_sums(k, dz, (1, 1, 3), kern.RECIPROCAL, True)
    assert S[0, 0, 0] == pytest.approx(3.0 * (0.5 + 0.25), rel=1e-15)
    assert W[0, 0, 0] == 6.0
    S, W = kern.block_sums(k, dz, (1, 1, 3), kern.LINEAR, False)
    assert S[0, 0, 0] == 18.0 and W[0, 0, 0] == 9.0


@pytest.mark.parametrize("sub", [(1, 1, 1), (2, 3, 4), (3, 7, 5), (5, 16, 21), (1, 1, 21)])
@pytest.mark.parametrize("dtype", [np.float64, np.float32])
def test_block_log_sums_match_numpy_log(sub, dtype):
    rng = np.random.default_rng(618_204_991)
    shape = (5, 16, 21)
    k = 10.0 ** rng.uniform(-30, 30, shape)  # inside the normal range of float32 too
    k[rng.random(shape) < 0.2] = np.nan
    k = k.astype(dtype)
    dz = rng.uniform(0.3, 4.0, shape[0])
    S, W = kern.block_log_sums(k, dz, sub)
    S_ref, W_ref = reference_log_sums(k, dz, sub)
    np.testing.assert_allclose(W, W_ref, rtol=1e-13)
    # absolute scale: the sum of |w ln k| in the block (ln k reaches +-69)
    scale = block_reduce(
        np.abs(np.nan_to_num(np.log(k.astype(np.float64)))) * dz[:, None, None],
        sub,
        func=np.sum,
    )
    np.testing.assert_allclose(S, S_ref, rtol=0, atol=1e-13 * scale.max() + 1e-300)
    assert np.all(np.abs(S - S_ref) <= 1e-13 * scale + 1e-12)


def test_block_log_sums_extreme_values_exact_powers_of_two():
    # ln(2**e) sums are exact multiples of ln 2: an easy exact reference.
    rng = np.random.default_rng(300_117_529)
    e = rng.integers(-99, 100, (2, 9, 10))
    k = np.ldexp(1.0, e)
    S, W = kern.block_log_sums(k, np.ones(2), (2, 9, 10))
    assert W[0, 0, 0] == 180.0
    assert S[0, 0, 0] == pytest.approx(e.sum() * math.log(2.0), rel=1e-14, abs=1e-12)


@pytest.mark.parametrize("sub", [(1, 1100, 1), (1, 1, 2000), (1, 1100, 2000)])
def test_block_log_sums_large_block_renormalises_rows_and_columns(sub):
    # Every mantissa is 1.999: a running product over the 1100 rows of a column
    # would pass 2**1024 after ~1025 rows, and a product over the 2000 columns of
    # one row too, unless the kernel renormalises (every 512 rows) and folds the
    # columns in groups (of 512). Sub-blocks (1, 1100, 1) exercise the first,
    # (1, 1, 2000) the second, (1, 1100, 2000) both.
    rng = np.random.default_rng(872_340_156)
    shape = (1, 1100, 2000)
    k = np.ldexp(1.999, rng.integers(-60, 61, shape))
    k[rng.random(shape) < 0.01] = np.nan
    S, W = kern.block_log_sums(k, np.array([2.5]), sub)
    S_ref, W_ref = reference_log_sums(k, np.array([2.5]), sub)
    assert np.isfinite(S).all()
    np.testing.assert_allclose(W, W_ref, rtol=1e-14)
    # scale of the errors: sum of |w ln k| <= 2.5 * 42 * cells
    np.testing.assert_allclose(S, S_ref, rtol=0, atol=1e-14 * 2.5 * 42.0 * math.prod(sub))


def test_block_log_sums_large_block_random_magnitudes():
    # A block of 1 x 1 x 2000 cells over 600 rows, values 1e-30..1e30.
    rng = np.random.default_rng(440_918_637)
    shape = (1, 600, 2000)
    k = 10.0 ** rng.uniform(-30, 30, shape)
    k[rng.random(shape) < 0.05] = np.nan
    for sub in [(1, 1, 2000), (1, 600, 2000), (1, 600, 1)]:
        S, W = kern.block_log_sums(k, np.array([0.7]), sub)
        S_ref, W_ref = reference_log_sums(k, np.array([0.7]), sub)
        np.testing.assert_allclose(W, W_ref, rtol=1e-13)
        # errors of the reference and the kernel both scale with sum |ln k| ~ 35 per cell
        atol = 1e-13 * 0.7 * 35.0 * math.prod(sub)
        np.testing.assert_allclose(S, S_ref, rtol=0, atol=atol)


# --------------------------------------------------------------------------------------
# Averages against per-block references, nodata
# --------------------------------------------------------------------------------------


@pytest.mark.parametrize(
    "function, average",
    [(arithmetic_mean, am), (harmonic_mean, hm), (geometric_mean, gm)],
    ids=["arithmetic", "harmonic", "geometric"],
)
@pytest.mark.parametrize("block", [(2, 3, 4), (1, 1, 5), (3, 11, 13)])
def test_averages_skip_inactive_cells(function, average, block):
    k, dz = random_field(207_553_918, (3, 11, 13), nan_fraction=0.3)
    k[:2, :3, :4] = np.nan  # a whole inactive block (for block (2, 3, 4))
    got = function(k, dz, block)
    want = weighted_block_reference(k, dz, block, average)
    assert np.array_equal(np.isnan(got), np.isnan(want))
    np.testing.assert_allclose(got, want, rtol=1e-12)
    if block == (2, 3, 4):
        assert np.isnan(got[0, 0, 0])


def test_average_of_active_cells_only_by_hand():
    k = np.array([[[1.0, np.nan], [4.0, np.nan]]])
    dz = np.array([2.0])
    assert arithmetic_mean(k, dz, (1, 2, 2))[0, 0, 0] == pytest.approx(2.5, rel=1e-15)
    assert harmonic_mean(k, dz, (1, 2, 2))[0, 0, 0] == pytest.approx(1.6, rel=1e-15)
    assert geometric_mean(k, dz, (1, 2, 2))[0, 0, 0] == pytest.approx(2.0, rel=1e-15)
    assert power_mean(k, dz, (1, 2, 2), exponent=0.5)[0, 0, 0] == pytest.approx(2.25, rel=1e-14)


@pytest.mark.parametrize("function", [arithmetic_mean, harmonic_mean, geometric_mean])
def test_block_without_active_cell_is_nan(function):
    k = np.full((2, 4, 4), np.nan)
    k[:, :2, :2] = 3.0
    got = function(k, np.array([1.0, 2.0]), (2, 2, 2))
    assert got.shape == (1, 2, 2)
    assert got[0, 0, 0] == pytest.approx(3.0, rel=1e-14)
    assert np.isnan(got[0, 0, 1]) and np.isnan(got[0, 1, 0]) and np.isnan(got[0, 1, 1])
    power = power_mean(k, np.array([1.0, 2.0]), (2, 2, 2), exponent=0.3)
    assert np.isnan(power[0, 1, 1])


def test_bulk_mean_of_inactive_block_is_zero_not_nan():
    # porosity by bulk volume: no active cell, no pore volume (coarsen marks the block inactive)
    k = np.full((1, 2, 4), np.nan)
    k[0, :, :2] = 0.25
    assert np.array_equal(bulk_mean(k, np.ones(1), (1, 2, 2)), [[[0.25, 0.0]]])


def test_bulk_mean_counts_inactive_cells_as_zero_by_volume():
    phi = np.array([[[0.2, np.nan]], [[0.3, 0.1]]])
    dz = np.array([1.0, 3.0])
    # (1*0.2 + 0 + 3*0.3 + 3*0.1) / (1 + 1 + 3 + 3)
    assert bulk_mean(phi, dz, (2, 1, 2))[0, 0, 0] == pytest.approx(1.4 / 8.0, rel=1e-15)


def test_active_volume_sums_dz_of_active_cells():
    k, dz = random_field(915_372_640, (4, 6, 7), nan_fraction=0.4)
    got = active_volume(k, dz, (3, 4, 5))
    want = block_reduce((~np.isnan(k)) * dz[:, None, None], (3, 4, 5), func=np.sum)
    np.testing.assert_allclose(got, want, rtol=1e-14)


def test_harmonic_of_two_equal_values_is_that_value():
    # common practice: the harmonic mean of equal values is that value
    for v in (1e-20, 0.37, 250.0, 3e15):
        got = harmonic_mean(np.array([[[v, v]]]), np.array([1.7]), (1, 1, 2))[0, 0, 0]
        assert got == pytest.approx(v, rel=1e-15)


def test_harmonic_mean_with_a_zero_cell_is_zero():
    assert harmonic_mean(np.array([[[0.0, 5.0]]]), np.ones(1), (1, 1, 2))[0, 0, 0] == 0.0


# --------------------------------------------------------------------------------------
# Layered media (Bear 1972)
# --------------------------------------------------------------------------------------


#: Four layers of unequal thickness (m) and their permeabilities.
LAYERS = Layers(np.array([120.0, 3.0, 45.0, 0.8]), np.array([0.5, 2.0, 1.0, 3.5]))


def test_layered_3d_unequal_thickness_arithmetic_along_harmonic_across():
    # Bear 1972, Dynamics of Fluids in Porous Media: flow parallel to layers ->
    # thickness-weighted arithmetic mean; flow normal to layers -> weighted harmonic.
    k, dz, layer_k = LAYERS.stack(3, 5), LAYERS.thickness, LAYERS.k
    along, across = LAYERS.along, LAYERS.across
    assert along == pytest.approx((60.0 + 6.0 + 45.0 + 2.8) / 7.0, rel=1e-15)
    block = (4, 3, 5)
    np.testing.assert_allclose(arithmetic_mean(k, dz, block, axis=2), along, rtol=1e-14)
    np.testing.assert_allclose(arithmetic_mean(k, dz, block, axis=1), along, rtol=1e-14)
    np.testing.assert_allclose(harmonic_mean(k, dz, block, axis=0), across, rtol=1e-14)
    # the unweighted means differ: the weights matter in this test
    assert abs(layer_k.mean() - along) > 1.0
    assert abs(len(layer_k) / np.sum(1.0 / layer_k) - across) > 0.1


def test_layered_2d_rows_as_layers():
    # Bear 1972: rows of equal height as layers; along x arithmetic, along y harmonic.
    rows = Layers(np.array([10.0, 1000.0, 0.5, 30.0, 7.0]), np.ones(5))
    k, dz = rows.rows(6)[None], np.ones(1)
    assert arithmetic_mean(k, dz, (1, 5, 6))[0, 0, 0] == pytest.approx(rows.along, rel=1e-14)
    assert harmonic_mean(k, dz, (1, 5, 6))[0, 0, 0] == pytest.approx(rows.across, rel=1e-14)


# --------------------------------------------------------------------------------------
# Power average (Journel, Deutsch & Desbarats 1986)
# --------------------------------------------------------------------------------------


def test_power_mean_at_one_is_arithmetic_and_at_minus_one_is_harmonic():
    # Journel, Deutsch & Desbarats 1986, Power averaging for block effective permeability:
    # ω = 1 arithmetic, ω = -1 harmonic (computed here through exp/log, not the kernels' modes).
    k, dz = random_field(163_488_902, (3, 12, 15), sigma=2.0)
    for block in [(1, 4, 5), (3, 5, 4), (2, 12, 15)]:
        np.testing.assert_allclose(
            power_mean(k, dz, block, exponent=1.0), arithmetic_mean(k, dz, block), rtol=1e-13
        )
        np.testing.assert_allclose(
            power_mean(k, dz, block, exponent=-1.0), harmonic_mean(k, dz, block), rtol=1e-13
        )


def test_power_mean_at_zero_is_geometric_exactly():
    k, dz = random_field(290_645_117, (2, 9, 9))
    assert np.array_equal(
        power_mean(k, dz, (2, 3, 3), exponent=0), geometric_mean(k, dz, (2, 3, 3)), equal_nan=True
    )


def test_power_mean_tends_to_geometric_as_exponent_shrinks():
    # Journel, Deutsch & Desbarats 1986: the limit ω -> 0 is the geometric mean.
    # The gap is ~ ω var(ln k) / 2 relative, so it shrinks with ω.
    k, dz = random_field(771_020_348, (2, 10, 10), sigma=1.0, nan_fraction=0.1)
    geo = geometric_mean(k, dz, (2, 5, 5))
    errors = []
    for omega in (1e-2, 1e-4, 1e-6):
        errors.append(np.max(np.abs(power_mean(k, dz, (2, 5, 5), exponent=omega) / geo - 1.0)))
    assert errors[0] > 10 * errors[1] > 100 * errors[2]
    assert errors[0] < 0.05
    assert errors[2] < 1e-5


# --------------------------------------------------------------------------------------
# Property-based orderings
# --------------------------------------------------------------------------------------


@st.composite
def fields(draw, nan=True):
    L = draw(st.integers(1, 4))
    M = draw(st.integers(1, 12))
    N = draw(st.integers(1, 12))
    block = (draw(st.integers(1, L)), draw(st.integers(1, M)), draw(st.integers(1, N)))
    seed = draw(st.integers(10**9, 10**12))
    sigma = draw(st.sampled_from([0.0, 0.3, 1.5, 4.0]))
    nan_fraction = draw(st.sampled_from([0.0, 0.2, 0.7])) if nan else 0.0
    rng = np.random.default_rng(seed)
    k = np.exp(rng.normal(1.0, sigma, (L, M, N)))
    k[rng.random(k.shape) < nan_fraction] = np.nan
    dz = rng.uniform(0.05, 20.0, L)
    return k, dz, block


def _le(a, b, rel=1e-12):
    ok = ~np.isnan(a)
    assert np.array_equal(ok, ~np.isnan(b))
    assert np.all(a[ok] <= b[ok] * (1 + rel))


@SETTINGS
@given(fields())
def test_harmonic_le_geometric_le_arithmetic(data):
    # common practice (AM-GM-HM inequality, Hardy, Littlewood & Pólya 1934, Inequalities)
    k, dz, block = data
    h = harmonic_mean(k, dz, block)
    g = geometric_mean(k, dz, block)
    a = arithmetic_mean(k, dz, block)
    _le(h, g)
    _le(g, a)


EXPONENTS = [-3.0, -1.0, -0.5, -0.1, 0.0, 0.1, 0.57, 1.0, 2.0, 3.0]


@SETTINGS
@given(fields(), st.integers(0, len(EXPONENTS) - 1), st.integers(0, len(EXPONENTS) - 1))
def test_power_mean_is_monotone_in_exponent(data, i, j):
    # Hardy, Littlewood & Pólya 1934, Inequalities: the power mean is nondecreasing in ω.
    k, dz, block = data
    lo, hi = sorted((EXPONENTS[i], EXPONENTS[j]))
    _le(power_mean(k, dz, block, exponent=lo), power_mean(k, dz, block, exponent=hi), rel=1e-11)


@SETTINGS
@given(fields(), st.floats(1e-3, 1e3))
def test_averages_of_constant_fields_are_the_constant(data, c):
    k, dz, block = data
    k = np.where(np.isnan(k), np.nan, c)
    for function in (arithmetic_mean, harmonic_mean, geometric_mean):
        got = function(k, dz, block)
        ok = ~np.isnan(got)
        np.testing.assert_allclose(got[ok], c, rtol=1e-13)
    np.testing.assert_allclose(
        np.nan_to_num(power_mean(k, dz, block, exponent=0.4), nan=c), c, rtol=1e-12
    )
