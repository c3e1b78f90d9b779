"""One pass over a property array: counts of bad values and summary statistics.

`scan_values` accumulates the statistics a run summary reports in one
compiled pass per chunk, and finds negative, zero and infinite values and
values that often mark cells without data (`SENTINELS`) with the first few
locations, so an error can name the cells (a second, exact pass runs only
over chunks that hold values below zero, zero, infinite or equal to a
positive marker). On dask arrays it returns a lazy result that
shares the chunk reads of any other computation it is computed together
with.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numba as nb
import numpy as np

from ._elementary import JIT, as_int, ln
from .parallel import is_dask

#: How many offending cells an error message names.
FIRST = 3

_FLOAT32_MAX = float(np.finfo(np.float32).max)  # 3.4028234663852886e38
#: Values that often mark cells without data in rasters written without a nodata tag (common
#: practice: defaults of GIS, geostatistics and simulation-grid exports; ±3.4028235e38 is the
#: largest float32, the default nodata of some GIS for float rasters). A cell matches one when it
#: equals it as a float64, or as the float32 nearest to it (what a float32 raster holds).
SENTINELS = (-9999.0, -999.0, -99999.0, 9999.0, 1e30, -1e30, 3.4e38, -3.4e38, _FLOAT32_MAX, -_FLOAT32_MAX)
#: The kinds of value a scan counts with their first cells, each cell in one kind: negative
#: (not a sentinel), zero, infinite, then each of `SENTINELS`.
KINDS = ("negative", "zero", "infinite", *SENTINELS)
_NEGATIVE, _ZERO, _INFINITE = 0, 1, 2
_MARKERS = np.array([SENTINELS, np.float32(SENTINELS)], dtype=np.float64)  # (2, S): exact, float32
#: Positive values below this are plain values: no positive sentinel is smaller.
_LARGE = float(_MARKERS[_MARKERS > 0].min())


@nb.njit(**JIT)
def _value_sums(k, sums, bounds):
    """Add the counts and sums over all cells of `k` to `sums` and `bounds`.

    Parameters
    ----------
    k : ndarray of float64, shape (L, M, N)
        Values; NaN marks inactive cells.
    sums : ndarray of shape (6,)
        Running active cells, valid cells (finite and >= 0), positive finite
        cells, the sum of valid values, and the sums of ln k and (ln k)² over
        positive ones (zeros before the first part).
    bounds : ndarray of int64, shape (2,)
        Running smallest and largest valid value as float64 bit patterns
        (non-negative floats order like them; start from those of inf and 0).
    """
    active, valid, positive, total, log_sum, log_square = sums[0], sums[1], sums[2], sums[3], sums[4], sums[5]
    none = as_int(np.inf)
    low, high = bounds[0], bounds[1]
    L, M, N = k.shape
    for layer in range(L):
        for i in range(M):
            row = k[layer, i]
            # separate loops: each stays simple enough for the vectoriser
            for j in range(N):
                v = row[j]
                ok = (v >= 0.0) & (v < np.inf)
                active += np.float64(v == v)  # a bool -> float conversion vectorises
                valid += np.float64(ok)  # where a select between constants does not
                total += v if ok else 0.0
            for j in range(N):
                v = row[j]
                good = (v > 0.0) & (v < np.inf)
                lv = ln(v if good else 1.0)
                positive += np.float64(good)
                log_sum += lv
                log_square += lv * lv
            for j in range(N):
                # non-negative floats order like their bit patterns: integer min/max vectorise
                v = row[j]
                good = (v > 0.0) & (v < np.inf)
                zero = v == 0.0
                low = min(low, as_int(v) if good else (0 if zero else none))
                high = max(high, as_int(v) if good else 0)
    # one element at a time: a slice assignment compiles numba's error formatting (0.6 s)
    sums[0], sums[1], sums[2], sums[3], sums[4], sums[5] = active, valid, positive, total, log_sum, log_square
    bounds[0], bounds[1] = low, high


#: Cells per part of a chunk given to `_value_sums`: a float32 chunk is widened to float64 a part at a
#: time (the scan then compiles for float64 alone, and never holds a float64 copy of a whole chunk).
_PART = 1 << 16


def _scan_sums(chunk: np.ndarray) -> tuple[np.ndarray, float, float]:
    """`_value_sums` over a whole chunk, fed in parts of whole rows.

    Returns the sums, and the smallest and largest valid value.
    """
    sums = np.zeros(6)
    bounds = np.array([np.float64(np.inf), np.float64(0.0)]).view(np.int64)
    rows = max(1, _PART // max(chunk.shape[2], 1))
    for layer in range(chunk.shape[0]):
        for i in range(0, chunk.shape[1], rows):
            with np.errstate(invalid="ignore"):  # a signalling NaN of the raster becomes a quiet one
                part = np.asarray(chunk[layer : layer + 1, i : i + rows], dtype=np.float64)
            _value_sums(part, sums, bounds)
    low, high = bounds.view(np.float64)
    return sums, float(low), float(high)


def _holds_marker(chunk: np.ndarray) -> bool:
    """Whether a value of `chunk` as large as `_LARGE` equals one of `SENTINELS` (exact or float32)."""
    large = chunk[chunk >= _LARGE]
    return bool(large.size) and bool(np.isin(large.astype(np.float64), _MARKERS).any())


@nb.njit(nogil=True, cache=True)
def _locate_bad(k):
    # exact counts and first flat indices of each of KINDS
    counts = np.zeros(3 + _MARKERS.shape[1], np.int64)
    firsts = np.full((counts.size, FIRST), -1, np.int64)
    flat = k.ravel()
    for idx in range(flat.size):
        v = np.float64(flat[idx])
        if v > 0.0 and v < _LARGE or v != v:
            continue
        kind = -1
        for j in range(_MARKERS.shape[1]):
            if v == _MARKERS[0, j] or v == _MARKERS[1, j]:
                kind = 3 + j
        if kind < 0:
            if v > 0.0 and v < np.inf:
                continue  # a large value, but no marker
            kind = _INFINITE if math.isinf(v) else (_NEGATIVE if v < 0.0 else _ZERO)
        if counts[kind] < FIRST:
            firsts[kind, counts[kind]] = idx
        counts[kind] += 1
    return counts, firsts


@dataclass(frozen=True)
class ValueScan:
    """What one pass found in a property array.

    Attributes
    ----------
    cells : int
        All cells, active or not.
    active : int
        Cells holding a value (not NaN).
    counts : tuple of int
        Active cells of each of `KINDS`: negative but no sentinel, zero,
        infinite, then each sentinel value.
    firsts : tuple of tuple of (int, int, int)
        The first few cells of each kind as ``(layer, row, column)``.
    minimum, maximum, total : float
        Over finite, non-negative active values (negative ones are errors).
    positive, log_sum, log_square_sum : float
        Count of positive finite values and the sums of ln k and (ln k)² over them.
    """

    cells: int
    active: int
    counts: tuple
    firsts: tuple
    minimum: float
    maximum: float
    total: float
    positive: float
    log_sum: float
    log_square_sum: float

    @classmethod
    def from_chunk(cls, chunk: np.ndarray, offset: tuple[int, int, int], shape: tuple) -> ValueScan:
        """Scan one chunk whose first cell sits at `offset` in an array of `shape`."""
        chunk = np.ascontiguousarray(chunk)
        sums, low, high = _scan_sums(chunk)
        active, valid, positive = (int(x) for x in sums[:3])
        counts, firsts = np.zeros(len(KINDS), np.int64), np.full((len(KINDS), FIRST), -1, np.int64)
        suspect = valid and high >= _LARGE and _holds_marker(chunk)
        if valid < active or positive < valid or suspect:  # rare: an exact pass
            counts, firsts = _locate_bad(chunk)

        def places(row: np.ndarray) -> tuple:
            local = [np.unravel_index(i, chunk.shape) for i in row if i >= 0]
            return tuple(tuple(int(a + o) for a, o in zip(p, offset)) for p in local)

        return cls(
            int(chunk.size), active, tuple(int(c) for c in counts), tuple(places(row) for row in firsts),
            low if valid else math.inf, high if valid else -math.inf,
            float(sums[3]), float(positive), float(sums[4]), float(sums[5]),
        )  # fmt: skip

    def merge(self, other: ValueScan) -> ValueScan:
        """Combine the scans of two disjoint parts of an array."""
        return ValueScan(
            self.cells + other.cells,
            self.active + other.active,
            tuple(a + b for a, b in zip(self.counts, other.counts)),
            tuple(_first(a, b) for a, b in zip(self.firsts, other.firsts)),
            min(self.minimum, other.minimum),
            max(self.maximum, other.maximum),
            self.total + other.total,
            self.positive + other.positive,
            self.log_sum + other.log_sum,
            self.log_square_sum + other.log_square_sum,
        )

    @property
    def negative(self) -> int:
        """Active cells with a negative finite value, sentinels such as -9999 included."""
        return sum(self.counts[i] for i in _NEGATIVE_KINDS)

    @property
    def first_negative(self) -> tuple:
        """The first few negative finite cells as ``(layer, row, column)``."""
        return _first(*(self.firsts[i] for i in _NEGATIVE_KINDS))

    @property
    def zero(self) -> int:
        """Active cells holding zero."""
        return self.counts[_ZERO]

    @property
    def first_zero(self) -> tuple:
        """The first few zero cells as ``(layer, row, column)``."""
        return self.firsts[_ZERO]

    @property
    def infinite(self) -> int:
        """Active cells holding +inf or -inf."""
        return self.counts[_INFINITE]

    @property
    def first_infinite(self) -> tuple:
        """The first few infinite cells as ``(layer, row, column)``."""
        return self.firsts[_INFINITE]

    def suspects(self) -> list[tuple[str, float | None, int, tuple]]:
        """Every kind of value found that may be no data: sentinels, most frequent first, then the rest.

        Returns
        -------
        list of (kind, value, count, first)
            `kind` is ``"sentinel"`` (with its `value`), ``"negative"`` (negative
            values that are no sentinel), ``"zero"`` or ``"infinite"`` (`value`
            None); `count` cells, the first few of them as ``(layer, row, column)``.

        Examples
        --------
        >>> scan_values(np.array([[[5.0, -9999.0, 0.0, -9999.0]]])).suspects()
        [('sentinel', -9999.0, 2, ((0, 0, 1), (0, 0, 3))), ('zero', None, 1, ((0, 0, 2),))]
        """
        found = []
        for i, count in enumerate(self.counts):
            if count:
                kind, value = (KINDS[i], None) if i < 3 else ("sentinel", KINDS[i])
                found.append((kind, value, count, self.firsts[i]))
        return sorted(found, key=lambda s: (s[0] != "sentinel", -s[2] if s[0] == "sentinel" else 0))

    @property
    def mean(self) -> float:
        """Arithmetic mean of the finite, non-negative active values."""
        valid = self.active - self.infinite - self.negative
        return self.total / valid if valid else math.nan

    @property
    def geometric_mean(self) -> float:
        """Geometric mean of the positive finite values."""
        return math.exp(self.log_sum / self.positive) if self.positive else math.nan

    @property
    def log10_std(self) -> float:
        """Standard deviation of log10 of the positive finite values."""
        if not self.positive:
            return math.nan
        mean = self.log_sum / self.positive
        variance = max(self.log_square_sum / self.positive - mean * mean, 0.0)
        return math.sqrt(variance) / math.log(10.0)

    def summary(self) -> dict[str, float | int]:
        """The statistics a report shows, as plain numbers."""
        return {
            "cells": self.cells,
            "active": self.active,
            "min": self.minimum if self.active else math.nan,
            "max": self.maximum if self.active else math.nan,
            "mean": self.mean,
            "geometric_mean": self.geometric_mean,
            "log10_std": self.log10_std,
        }


#: Indices into `KINDS` of the negative values: plain ones and the negative sentinels.
_NEGATIVE_KINDS = (_NEGATIVE, *(3 + i for i, v in enumerate(SENTINELS) if v < 0))


def _first(*places: tuple) -> tuple:
    """The first `FIRST` cells, in C order, of several lists of first cells."""
    return tuple(sorted(sum(places, ()))[:FIRST])


def where(cells: tuple) -> str:
    """Cells as (band from 1, row and column from 0, as GDAL's pixel offsets).

    Examples
    --------
    >>> where(((0, 2, 5), (1, 0, 0)))
    '(band 1, row 2, column 5), (band 2, row 0, column 0)'
    """
    return ", ".join(f"(band {c[0] + 1}, row {c[1]}, column {c[2]})" for c in cells)


def _merge_all(scans: list[ValueScan]) -> ValueScan:
    total = scans[0]
    for scan in scans[1:]:
        total = total.merge(scan)
    return total


def scan_each(arrays: dict[str, Any]) -> dict[str, Any]:
    """`scan_values` of every array of `arrays`, an array held under several names scanned once.

    A field's ``ky`` (and ``kz``) is its ``kx`` unless given: one pass serves them all.

    Examples
    --------
    >>> import numpy as np
    >>> k = np.ones((1, 2, 2))
    >>> scans = scan_each({"kx": k, "ky": k})
    >>> scans["kx"] is scans["ky"]
    True
    """
    done: dict[int, Any] = {}
    for array in arrays.values():
        if id(array) not in done:
            done[id(array)] = scan_values(array)
    return {name: done[id(array)] for name, array in arrays.items()}


def scan_values(array: Any) -> Any:
    """Scan a property array of shape (L, M, N).

    Returns
    -------
    ValueScan or dask.delayed.Delayed
        A `ValueScan` for a NumPy array; a lazy one for a dask array (compute
        it together with other results to read every chunk once).

    Examples
    --------
    >>> import numpy as np
    >>> s = scan_values(np.array([[[1.0, -2.0, np.nan, 100.0]]]))
    >>> s.active, s.negative, s.first_negative, round(s.geometric_mean, 6)
    (3, 1, ((0, 0, 1),), 10.0)
    """
    shape = tuple(array.shape)
    if not is_dask(array):
        return ValueScan.from_chunk(np.asarray(array), (0, 0, 0), shape)
    import dask

    starts = [np.concatenate([[0], np.cumsum(c)[:-1]]) for c in array.chunks]
    parts = []
    for index, chunk in np.ndenumerate(array.to_delayed(optimize_graph=False)):
        offset = tuple(int(starts[a][i]) for a, i in enumerate(index))
        parts.append(dask.delayed(ValueScan.from_chunk)(chunk, offset, shape))
    return dask.delayed(_merge_all)(parts)
