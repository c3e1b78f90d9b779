"""One pass over a property array: counts of bad values and summary statistics.

`scan_values` accumulates the statistics a run summary reports in one
compiled pass per chunk, and finds negative, zero and infinite values with
the first few locations, so an error can name the cells (a second, exact
pass runs only over chunks that hold such values). On dask arrays it
returns a lazy result that shares the chunk reads of any other computation
it is computed together with.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numba as nb
import numpy as np

from ._elementary import JIT, as_float, as_int, ln
from .parallel import is_dask

#: How many offending cells an error message names.
FIRST = 3


@nb.njit(**JIT)
def _value_sums(k):
    """Counts and sums over all cells of `k` for the statistics of a property.

    Parameters
    ----------
    k : ndarray of shape (L, M, N)
        Values; NaN marks inactive cells.

    Returns
    -------
    sums : ndarray of shape (6,)
        Active cells, valid cells (finite and >= 0), positive finite cells, the
        sum of valid values, and the sums of ln k and (ln k)² over positive ones.
    low, high : float
        Smallest and largest valid value (inf and -inf when there is none).
    """
    active = 0.0
    valid = 0.0
    positive = 0.0
    total = 0.0
    log_sum = 0.0
    log_square = 0.0
    none = as_int(np.inf)
    low = none
    high = as_int(0.0)
    L, M, N = k.shape
    for layer in range(L):
        for i in range(M):
            row = k[layer, i]
            # separate loops: each stays simple enough for the vectoriser
            for j in range(N):
                v = np.float64(row[j])
                ok = (v >= 0.0) & (v < np.inf)
                active += np.float64(v == v)  # a bool -> float conversion vectorises
                valid += np.float64(ok)  # where a select between constants does not
                total += v if ok else 0.0
            for j in range(N):
                v = np.float64(row[j])
                good = (v > 0.0) & (v < np.inf)
                lv = ln(v if good else 1.0)
                positive += np.float64(good)
                log_sum += lv
                log_square += lv * lv
            for j in range(N):
                # non-negative floats order like their bit patterns: integer min/max vectorise
                v = np.float64(row[j])
                good = (v > 0.0) & (v < np.inf)
                zero = v == 0.0
                low = min(low, as_int(v) if good else (0 if zero else none))
                high = max(high, as_int(v) if good else 0)
    sums = np.array([active, valid, positive, total, log_sum, log_square])
    return sums, as_float(low), as_float(high)


@nb.njit(nogil=True, cache=True)
def _locate_bad(k):
    # exact counts and first flat indices of negative, zero and infinite values
    counts = np.zeros(3, np.int64)
    firsts = np.full((3, FIRST), -1, np.int64)
    flat = k.ravel()
    for idx in range(flat.size):
        v = np.float64(flat[idx])
        if v > 0.0 and v < np.inf or v != v:
            continue
        kind = 2 if math.isinf(v) else (0 if v < 0.0 else 1)
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
    negative, zero, infinite : int
        Active cells with a negative, zero or infinite value.
    first_negative, first_zero, first_infinite : tuple of (int, int, int)
        The first few such cells as ``(layer, row, column)``.
    minimum, maximum, total : float
        Over finite, non-negative active values (negative ones are errors).
    positive, log_sum, log_square_sum : float
        Count of positive finite values and the sums of ln k and (ln k)² over them.
    """

    cells: int
    active: int
    negative: int
    zero: int
    infinite: int
    first_negative: tuple
    first_zero: tuple
    first_infinite: tuple
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
        sums, low, high = _value_sums(chunk)
        active, valid, positive = (int(x) for x in sums[:3])
        bad = (np.zeros(3, np.int64), np.full((3, FIRST), -1, np.int64))
        if valid < active or positive < valid:  # rare: find the offending cells exactly
            bad = _locate_bad(chunk)
        counts, firsts = bad

        def places(row: np.ndarray) -> tuple:
            local = [np.unravel_index(i, chunk.shape) for i in row if i >= 0]
            return tuple(tuple(int(a + o) for a, o in zip(p, offset)) for p in local)

        return cls(
            int(chunk.size), active, int(counts[0]), int(counts[1]), int(counts[2]),
            places(firsts[0]), places(firsts[1]), places(firsts[2]),
            low if valid else math.inf, high if valid else -math.inf,
            float(sums[3]), float(positive), float(sums[4]), float(sums[5]),
        )  # fmt: skip

    def merge(self, other: ValueScan) -> ValueScan:
        """Combine the scans of two disjoint parts of an array."""

        def first(a: tuple, b: tuple) -> tuple:
            return tuple(sorted(a + b)[:FIRST])

        return ValueScan(
            self.cells + other.cells,
            self.active + other.active,
            self.negative + other.negative,
            self.zero + other.zero,
            self.infinite + other.infinite,
            first(self.first_negative, other.first_negative),
            first(self.first_zero, other.first_zero),
            first(self.first_infinite, other.first_infinite),
            min(self.minimum, other.minimum),
            max(self.maximum, other.maximum),
            self.total + other.total,
            self.positive + other.positive,
            self.log_sum + other.log_sum,
            self.log_square_sum + other.log_square_sum,
        )

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


def _merge_all(scans: list[ValueScan]) -> ValueScan:
    total = scans[0]
    for scan in scans[1:]:
        total = total.merge(scan)
    return total


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
