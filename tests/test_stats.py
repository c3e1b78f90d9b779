"""Tests of the value scan `upscale.stats.scan_values`.

What is tested
--------------
* Counts of active, negative, zero and infinite cells, and the first few
  offending cells as ``(layer, row, column)`` in C order, on NumPy arrays.
* The summary statistics against NumPy, over the cells the docstrings name:
  min, max, total and mean over finite non-negative values; geometric mean
  and std of log10 over positive finite values.
* On dask arrays the per-chunk scans merge to the NumPy result: counts and
  first locations equal, sums equal to rounding, for several chunkings.
* float32 input, an all-inactive array, and `ValueScan.merge`.
* Values that often mark cells without data (`upscale.stats.SENTINELS`),
  held as float64 or float32: counted per value apart from other negatives,
  with their first cells, equal on NumPy and dask arrays; large values that
  are no sentinel are not flagged.
"""

from __future__ import annotations

import math
import warnings

import dask
import dask.array as da
import numpy as np
import pytest

from upscale.stats import FIRST, KINDS, SENTINELS, ValueScan, scan_values


def _bad_field(seed, shape=(4, 13, 17), dtype=np.float64):
    rng = np.random.default_rng(seed)
    k = np.exp(rng.normal(1.0, 2.0, shape))
    u = rng.random(shape)
    k[u < 0.15] = np.nan
    k[(u >= 0.15) & (u < 0.18)] = 0.0
    k[(u >= 0.18) & (u < 0.20)] = -rng.uniform(0.1, 5.0, ((u >= 0.18) & (u < 0.20)).sum())
    k[(u >= 0.20) & (u < 0.21)] = np.inf
    k[(u >= 0.21) & (u < 0.215)] = -np.inf
    return k.astype(dtype)


def _firsts(mask):
    return tuple(tuple(int(i) for i in p) for p in np.argwhere(mask)[:FIRST])


def test_counts_and_first_cells_by_hand():
    k = np.array(
        [
            [[1.0, -2.0, np.nan], [0.0, 4.0, np.inf]],
            [[-1.0, 0.0, -np.inf], [-3.0, -4.0, 8.0]],
        ]
    )
    s = scan_values(k)
    assert (s.cells, s.active, s.negative, s.zero, s.infinite) == (12, 11, 4, 2, 2)
    assert s.first_negative == ((0, 0, 1), (1, 0, 0), (1, 1, 0))  # only the first three
    assert s.first_zero == ((0, 1, 0), (1, 0, 1))
    assert s.first_infinite == ((0, 1, 2), (1, 0, 2))
    # min, max and total over the finite, non-negative values 1, 0, 4, 0, 8
    assert s.minimum == 0.0 and s.maximum == 8.0
    assert s.total == 13.0
    assert s.mean == pytest.approx(13.0 / 5.0, rel=1e-15)
    assert s.positive == 3.0
    assert s.log_sum == pytest.approx(math.log(32.0), rel=1e-15)
    assert s.geometric_mean == pytest.approx(32.0 ** (1 / 3), rel=1e-14)


@pytest.mark.parametrize("dtype", [np.float64, np.float32])
def test_numpy_scan_against_numpy(dtype):
    k = _bad_field(718_520_934, dtype=dtype)
    wide = k.astype(np.float64)
    s = scan_values(k)
    active = ~np.isnan(wide)
    finite = np.isfinite(wide)
    positive = finite & (wide > 0)
    valid = finite & (wide >= 0)
    assert s.cells == k.size
    assert s.active == active.sum()
    assert s.negative == (wide < 0).sum() - (wide == -np.inf).sum()
    assert s.zero == (wide == 0).sum()
    assert s.infinite == np.isinf(wide).sum()
    assert s.first_negative == _firsts(finite & (wide < 0))
    assert s.first_zero == _firsts(wide == 0)
    assert s.first_infinite == _firsts(np.isinf(wide))
    assert len(s.first_negative) == FIRST
    assert s.minimum == 0.0  # the field holds zeros
    assert s.maximum == wide[valid].max()
    assert s.total == pytest.approx(wide[valid].sum(), rel=1e-12)
    assert s.positive == positive.sum()
    logs = np.log(wide[positive])
    assert s.log_sum == pytest.approx(logs.sum(), rel=1e-12)
    assert s.log_square_sum == pytest.approx(np.sum(logs**2), rel=1e-12)
    assert s.mean == pytest.approx(wide[valid].mean(), rel=1e-12)
    assert s.geometric_mean == pytest.approx(np.exp(logs.mean()), rel=1e-12)
    assert s.log10_std == pytest.approx(np.log10(wide[positive]).std(), rel=1e-10)
    summary = s.summary()
    assert summary["cells"] == k.size and summary["active"] == active.sum()
    assert summary["min"] == s.minimum and summary["geometric_mean"] == s.geometric_mean


def test_minimum_of_positive_values_and_ln_accuracy():
    rng = np.random.default_rng(930_441_286)
    k = 10.0 ** rng.uniform(-30, 30, (3, 50, 70))
    k[rng.random(k.shape) < 0.1] = np.nan
    s = scan_values(k)
    assert s.minimum == np.nanmin(k) and s.maximum == np.nanmax(k)
    logs = np.log(k[~np.isnan(k)])
    # |ln k| up to 69: compare with the sum of |ln k| as the scale of rounding errors
    assert s.log_sum == pytest.approx(logs.sum(), abs=1e-14 * np.abs(logs).sum())
    assert s.log_square_sum == pytest.approx(np.sum(logs**2), rel=1e-13)
    assert s.log10_std == pytest.approx(np.log10(k[~np.isnan(k)]).std(), rel=1e-12)


def test_negative_only_array_has_no_statistics():
    s = scan_values(np.array([[[-1.0, -2.0, np.nan]]]))
    assert (s.active, s.negative) == (2, 2)
    assert s.minimum == math.inf and s.maximum == -math.inf
    assert math.isnan(s.mean) and math.isnan(s.geometric_mean)


def test_all_inactive_array():
    s = scan_values(np.full((2, 3, 4), np.nan))
    assert (s.cells, s.active, s.negative, s.zero, s.infinite) == (24, 0, 0, 0, 0)
    assert s.first_negative == s.first_zero == s.first_infinite == ()
    assert math.isnan(s.mean) and math.isnan(s.geometric_mean) and math.isnan(s.log10_std)
    summary = s.summary()
    assert math.isnan(summary["min"]) and math.isnan(summary["max"])


@pytest.mark.parametrize(
    "chunks", [(1, 5, 6), (2, 13, 4), (4, 1, 17), (3, 7, 9), (4, 13, 17)]
)
@pytest.mark.parametrize("dtype", [np.float64, np.float32])
def test_dask_scan_merges_to_the_numpy_scan(chunks, dtype):
    k = _bad_field(402_187_665, dtype=dtype)
    want = scan_values(k)
    lazy = scan_values(da.from_array(k, chunks=chunks))
    assert not isinstance(lazy, ValueScan)
    got = dask.compute(lazy)[0]
    assert isinstance(got, ValueScan)
    for name in ("cells", "active", "negative", "zero", "infinite", "positive"):
        assert getattr(got, name) == getattr(want, name), name
    for name in ("first_negative", "first_zero", "first_infinite"):
        assert getattr(got, name) == getattr(want, name), name
    assert got.minimum == want.minimum and got.maximum == want.maximum
    for name in ("total", "log_sum", "log_square_sum"):
        assert getattr(got, name) == pytest.approx(getattr(want, name), rel=1e-12), name


def test_merge_of_two_halves_equals_the_whole():
    k = _bad_field(166_230_958)
    whole = scan_values(k)
    top = ValueScan.from_chunk(k[:, :6], (0, 0, 0), k.shape)
    bottom = ValueScan.from_chunk(k[:, 6:], (0, 6, 0), k.shape)
    merged = bottom.merge(top)  # the order of merging does not matter
    assert merged.first_negative == whole.first_negative
    assert merged.first_zero == whole.first_zero
    assert merged.first_infinite == whole.first_infinite
    assert (merged.cells, merged.active, merged.negative, merged.zero, merged.infinite) == (
        whole.cells, whole.active, whole.negative, whole.zero, whole.infinite,
    )  # fmt: skip
    assert merged.log_sum == pytest.approx(whole.log_sum, rel=1e-12)


def test_first_cells_offset_by_the_chunk_position():
    chunk = np.array([[[1.0, -1.0], [0.0, 2.0]]])
    s = ValueScan.from_chunk(chunk, (3, 10, 20), (8, 40, 40))
    assert s.first_negative == ((3, 10, 21),)
    assert s.first_zero == ((3, 11, 20),)


# --- values that often mark cells without data ---------------------------------------------------


def _marked_field(seed, dtype):
    """`_bad_field` with cells holding some of the sentinels, and large values that are none."""
    k = _bad_field(seed).astype(np.float64)
    rng = np.random.default_rng(seed + 1)
    u = rng.random(k.shape)
    k[u < 0.04] = -9999.0
    k[(u >= 0.04) & (u < 0.06)] = 1e30
    k[(u >= 0.06) & (u < 0.07)] = -3.4e38
    k[(u >= 0.07) & (u < 0.08)] = float(np.finfo(np.float32).max)
    k[(u >= 0.08) & (u < 0.10)] = 12_000.5  # large, but no sentinel
    return k.astype(dtype)


@pytest.mark.parametrize("dtype", [np.float64, np.float32])
def test_sentinels_are_counted_apart_from_other_negatives(dtype):
    k = _marked_field(205_774_318, dtype)
    wide = k.astype(np.float64)
    s = scan_values(k)

    def held(value):  # as a float64, or as the float32 nearest to it (common practice)
        return (wide == value) | (wide == np.float64(np.float32(value)))

    sentinel = np.zeros(k.shape, bool)
    for value in SENTINELS:
        assert s.counts[KINDS.index(value)] == held(value).sum(), value
        assert s.firsts[KINDS.index(value)] == _firsts(held(value)), value
        sentinel |= held(value)
    assert held(-9999.0).sum() > 0 and held(1e30).sum() > 0 and held(-3.4e38).sum() > 0
    other = np.isfinite(wide) & (wide < 0) & ~sentinel
    assert s.counts[0] == other.sum() > 0 and s.firsts[0] == _firsts(other)
    # the counts run refuses by are those of every negative cell, sentinels included
    assert s.negative == (np.isfinite(wide) & (wide < 0)).sum()
    assert s.first_negative == _firsts(np.isfinite(wide) & (wide < 0))
    kinds = [kind for kind, *_ in s.suspects()]
    assert kinds == ["sentinel"] * 4 + ["negative", "zero", "infinite"]
    counts = [count for _, _, count, _ in s.suspects()[:4]]
    assert counts == sorted(counts, reverse=True)


@pytest.mark.parametrize("chunks", [(1, 5, 6), (3, 7, 9)])
@pytest.mark.parametrize("dtype", [np.float64, np.float32])
def test_dask_scan_of_sentinels_merges_to_the_numpy_scan(chunks, dtype):
    k = _marked_field(839_102_447, dtype)
    want = scan_values(k)
    got = dask.compute(scan_values(da.from_array(k, chunks=chunks)))[0]
    assert (got.counts, got.firsts) == (want.counts, want.firsts)


def test_large_values_that_are_no_sentinel_are_not_flagged():
    k = np.array([[[9998.0, 9999.5, 1.0e29, 3.0e38, 12.0]]])
    assert scan_values(k).suspects() == []


@pytest.mark.parametrize("dtype", [np.float64, np.float32])
def test_a_positive_sentinel_alone_is_found(dtype):
    # no negative, zero or infinite value: the exact pass runs because a large value is a marker
    k = np.array([[[2.0, 9999.0, 5.0e4, 1e30]], [[3.0, 4.0, 3.4e38, 7.0]]], dtype=dtype)
    s = scan_values(k)
    assert s.counts[KINDS.index(9999.0)] == 1 and s.firsts[KINDS.index(9999.0)] == ((0, 0, 1),)
    assert s.counts[KINDS.index(1e30)] == 1 and s.counts[KINDS.index(3.4e38)] == 1
    assert sum(s.counts) == 3


def test_a_signalling_nan_is_an_inactive_cell_without_a_warning():
    # float32 NaN with the quiet bit clear (0x7f800001), as a damaged raster can hold: widening it
    # to float64 raises the invalid flag (IEEE 754); the scan counts it as inactive, silently
    k = np.array([[[1.0, 2.0, 0.0, 4.0]]], dtype=np.float32)
    k.view(np.uint32)[0, 0, 2] = 0x7F800001
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        s = scan_values(k)
    assert s.active == 3 and s.cells == 4
