"""Shared looks of the figures: colour maps, log scale, extents, labels.

Colour maps are perceptually uniform and readable with colour-vision
deficiencies: cividis for permeability (Nuñez, Anderton & Renslow 2018,
"Optimizing colormaps with consideration for color vision deficiency"),
viridis for pressure, and the diverging ColorBrewer PuOr (Harrower & Brewer
2003) for signed mismatches. Lines and bars use the Okabe–Ito palette
(Okabe & Ito 2008, "Color Universal Design").
"""

from __future__ import annotations

import numpy as np
from matplotlib.colors import LogNorm

from ..field import Grid

PERMEABILITY_MAP = "cividis"
PRESSURE_MAP = "viridis"
MISMATCH_MAP = "PuOr"
#: Okabe–Ito colours (black excluded), then repeated with other line styles.
PALETTE = ("#0072B2", "#E69F00", "#009E73", "#D55E00", "#CC79A7", "#56B4E9", "#F0E442")
LINESTYLES = ("-", "--", "-.", ":")
#: Colour of cells with no value (inactive, or zero on a log scale).
MISSING = "#d9d9d9"


def style_of(i: int) -> dict:
    """Colour and line style of the i-th series."""
    return {"color": PALETTE[i % len(PALETTE)], "linestyle": LINESTYLES[(i // len(PALETTE)) % 4]}


def log_norm(*arrays: np.ndarray) -> LogNorm:
    """One log colour scale for all arrays: their positive finite values, 0.5th to 99.5th percentile.

    Examples
    --------
    >>> norm = log_norm(np.array([1.0, 10.0, 100.0]), np.array([np.nan, 0.0, 50.0]))
    >>> round(norm.vmin, 2), round(norm.vmax, 1)
    (1.14, 99.2)
    """
    values = np.concatenate([np.asarray(a, dtype=float).ravel() for a in arrays])
    values = values[np.isfinite(values) & (values > 0)]
    if values.size == 0:
        return LogNorm(1.0, 10.0)
    low, high = np.percentile(values, [0.5, 99.5])
    return LogNorm(low, max(high, low * 1.0001))


def plan_extent(grid: Grid) -> tuple[float, float, float, float]:
    """(left, right, bottom, top) in map units of a north-up grid; metres from the origin without one."""
    width, height = float(grid.dx.sum()), float(grid.dy.sum())
    if grid.transform is None:
        return (0.0, width, -height, 0.0)
    x0, y0 = grid.transform.c, grid.transform.f
    return (x0, x0 + width, y0 - height, y0)


def section_extent(grid: Grid) -> tuple[float, float, float, float]:
    """(left, right, bottom, top) of a vertical x–z section: x as in the plan, depth below the top in m."""
    left, right, _, _ = plan_extent(grid)
    return (left, right, -float(grid.dz.sum()), 0.0)


def with_missing(cmap: str):
    """A copy of a colour map that draws missing values in `MISSING`."""
    from matplotlib import colormaps

    return colormaps[cmap].with_extremes(bad=MISSING, under=MISSING)
