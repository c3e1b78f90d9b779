"""Shared looks of the figures: colour maps, the log scale and its ends, how no value is drawn.

Colour maps are perceptually uniform and readable with colour-vision
deficiencies: cividis for permeability (Nuñez, Anderton & Renslow 2018,
"Optimizing colormaps with consideration for color vision deficiency"),
viridis for pressure, and the diverging ColorBrewer PuOr (Harrower & Brewer
2003) for signed mismatches. Lines and bars use the Okabe–Ito palette
(Okabe & Ito 2008, "Color Universal Design").
"""

from __future__ import annotations

import numpy as np
from matplotlib.axes import Axes
from matplotlib.colors import Colormap, LogNorm, Normalize
from matplotlib.figure import Figure
from matplotlib.patches import Patch

from .layout import LABEL

PERMEABILITY_MAP = "cividis"
PRESSURE_MAP = "viridis"
MISMATCH_MAP = "PuOr"
#: Spread over realizations (standard deviation of ln k): magma, perceptually uniform like cividis but
#: of other hues, so a spread map is not read on the permeability maps' scale beside it.
SPREAD_MAP = "magma"
#: Okabe–Ito colours (black excluded), then repeated with other line styles.
PALETTE = ("#0072B2", "#E69F00", "#009E73", "#D55E00", "#CC79A7", "#56B4E9", "#F0E442")
LINESTYLES = ("-", "--", "-.", ":")
#: Cells with no value (inactive) show the panel's background through: grey hatching on white, a
#: pattern that no colour of cividis, viridis or PuOr can be taken for (PuOr's centre is near-white,
#: cividis passes through grey). Values beyond a colour scale take its end colours instead.
MISSING_HATCH = "////"
MISSING_LINE = "#737373"
MISSING_LABEL = "no value (inactive)"


def style_of(i: int) -> dict:
    """Colour and line style of the i-th series."""
    return {"color": PALETTE[i % len(PALETTE)], "linestyle": LINESTYLES[(i // len(PALETTE)) % 4]}


def log_norm(*arrays: np.ndarray) -> LogNorm:
    """One log colour scale for all arrays: their positive finite values, 0.5th to 99.5th percentile.

    Values outside it are drawn in the end colours of the scale (`extend_of`).

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


def on_log_scale(values: np.ndarray) -> np.ndarray:
    """`values` to draw on a log scale: zero (a value, not a missing one) becomes the smallest float.

    It then takes the lowest colour of the scale, with the colour bar's
    lower triangle (`extend_of`); NaN stays NaN (no value).

    Examples
    --------
    >>> on_log_scale(np.array([0.0, 2.0, np.nan])).tolist()[1:], bool(on_log_scale(np.zeros(1))[0] > 0)
    ([2.0, nan], True)
    """
    values = np.asarray(values, dtype=float)
    return np.where(values <= 0, np.finfo(float).tiny, values)


def extend_of(norm: Normalize, *arrays: np.ndarray) -> str:
    """Which ends of the colour bar get a triangle: the sides where some finite value lies beyond `norm`.

    Examples
    --------
    >>> extend_of(LogNorm(1.0, 10.0), np.array([0.0, 5.0]), np.array([np.nan, 12.0]))
    'both'
    >>> extend_of(LogNorm(1.0, 10.0), np.array([1.0, 10.0]))
    'neither'
    """
    values = np.concatenate([np.asarray(a, dtype=float).ravel() for a in arrays])
    values = values[np.isfinite(values)]
    low, high = bool((values < norm.vmin).any()), bool((values > norm.vmax).any())
    return {(False, False): "neither", (True, False): "min", (False, True): "max"}.get((low, high), "both")


def with_missing(cmap: str) -> Colormap:
    """A copy of a colour map for panels drawn over `missing_background`.

    No value is transparent, so the hatched background shows; values below
    or above the scale take the end colours.
    """
    from matplotlib import colormaps

    base = colormaps[cmap]
    return base.with_extremes(bad=(0.0, 0.0, 0.0, 0.0), under=base(0.0), over=base(1.0))


def missing_background(ax: Axes) -> None:
    """Hatch the background of `ax`: where no cell is drawn, there is no value."""
    ax.patch.set_hatch(MISSING_HATCH)
    ax.patch.set_edgecolor(MISSING_LINE)  # the hatch's colour; the background has no outline


def missing_key(figure: Figure, label: str = MISSING_LABEL) -> None:
    """A legend entry below the panels saying what the hatching means (`label`)."""
    key = Patch(facecolor="white", edgecolor=MISSING_LINE, hatch=MISSING_HATCH, label=label)
    figure.legend(handles=[key], loc="outside lower left", fontsize=LABEL, frameon=False)
