"""Whether a body of high permeability joins opposite faces of a field, and what it means for blocks.

Definitions (``docs/methods.md``, "Connected high-k bodies"):

* **High-k cells**: along each axis, the active cells whose permeability
  along that axis exceeds its geometric mean over the cells with k > 0. For
  a lognormal field that is the median, half the cells; for two facies, the
  better one whatever its share; the rule has no unit, so ``kz = r kx``
  marks the same cells as kx.
* **Bodies**: high-k cells joined through shared faces (4 neighbours in 2D,
  6 in 3D), the faces through which the two-point scheme passes flow; a
  corner passes none. Labelled by `skimage.measure.label` (``connectivity=1``).
* A body **spans** an axis when it holds cells of the first and of the last
  slice of the field across that axis (the inlet and outlet faces of the
  flow check). Its **cross-section** is its cells divided by the field's
  cells along the axis: its mean width in 2D, its mean area in 3D, in cells.

An uncorrelated field spans when its share of high-k cells passes the site
percolation threshold, 0.593 on a square lattice and 0.312 on a cubic one
(Stauffer & Aharony 1994, "Introduction to Percolation Theory", Table 2):
half the cells high is below it in 2D and above it in 3D. A spanning body
narrower than the blocks, and winding (not a layer nor a straight channel
along the axis, which block averages capture exactly), is what local
methods handle worst: each block mixes it with the rock beside it, and the
coarse model may lose the path the fine one has (`struggle`).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np

from ..field import AXES, PERMEABILITY, Field
from ..grid import BlockSpec

#: Fine cells labelled at most by default (the flow check's default limit: a field it solves whole).
MAX_CELLS = 20_000_000
#: Relative margin above the geometric mean for a cell to be high: the mean's rounding
#: (a few 1e-14 for 20 million cells) must not make every cell of a uniform field high.
ROUNDING = 1e-9
#: Least ratio of the geometric means of the high-k and the other cells for a warning (our
#: rule): an uncorrelated lognormal field of ln-k deviation 1 has 4.9 and often spans on a
#: small grid, a sand-and-shale field has hundreds.
CONTRAST = 10.0
#: What the high-k cells are, as the outputs say it.
HIGH_K = "cells with k above its geometric mean, joined through faces"


@dataclass(frozen=True)
class Span:
    """The high-k bodies of a field along one axis.

    Attributes
    ----------
    axis : {'x', 'y', 'z'}
    cut : float
        The geometric mean of k along `axis` above which a cell is high (unit
        of k; NaN when no cell has k > 0).
    high_fraction : float
        Share of the active cells that are high.
    bodies : int
        Number of bodies spanning the axis.
    spanning_fraction : float
        Share of the high-k cells that belong to a spanning body (0 when none is high).
    cross_section : float or None
        Cells in a cross-section of the largest spanning body, on average;
        None when no body spans.
    contrast : float
        Geometric mean of the high-k cells over that of the other cells with
        k > 0 (1 when either set is empty).
    straight : bool
        Whether the largest spanning body holds the same cells in every slice
        across `axis`: a layer or a straight channel along it, which a block
        average along `axis` captures exactly (False when none spans).
    """

    axis: str
    cut: float
    high_fraction: float
    bodies: int
    spanning_fraction: float
    cross_section: float | None
    contrast: float = 1.0
    straight: bool = False

    @property
    def spans(self) -> bool:
        """Whether some high-k body joins the two faces across `axis`."""
        return self.bodies > 0

    def summary(self) -> dict[str, Any]:
        """The span as plain data (``upscale info --json``)."""
        return {"cut": self.cut, "high_fraction": self.high_fraction, "spans": self.spans,
                "spanning_bodies": self.bodies, "spanning_fraction": self.spanning_fraction,
                "cross_section_cells": self.cross_section, "contrast": self.contrast,
                "straight": self.straight}  # fmt: skip


def span(k: np.ndarray, axis: str) -> Span:
    """The high-k bodies of `k` that span `axis`.

    Parameters
    ----------
    k : ndarray of shape (L, M, N)
        Permeability along `axis` (NaN = inactive).
    axis : {'x', 'y', 'z'}

    Returns
    -------
    Span

    Examples
    --------
    >>> k = np.ones((1, 4, 6))
    >>> k[0, 1] = 100.0                       # one row of sand along x
    >>> along, across = span(k, "x"), span(k, "y")
    >>> along.spans, along.spanning_fraction, along.cross_section, along.straight, across.spans
    (True, 1.0, 1.0, True, False)
    """
    return spans(k, [axis])[axis]


def spans(k: Any, axes: list[str]) -> dict[str, Span]:
    """The high-k bodies of `k` that span each of `axes`, labelled once for all of them.

    Parameters
    ----------
    k : array of shape (L, M, N)
        Permeability along each of `axes` (NaN = inactive; a dask array is computed once).
    axes : list of {'x', 'y', 'z'}

    Returns
    -------
    dict of str to Span
        By axis, as `span` finds it.

    Examples
    --------
    >>> k = np.ones((1, 4, 6))
    >>> k[0, 1] = 100.0
    >>> {axis: s.spans for axis, s in spans(k, ["x", "y"]).items()}
    {'x': True, 'y': False}
    """
    from skimage.measure import label

    # a damaged raster's signalling NaNs flag their cast; NaN all the same
    with np.errstate(invalid="ignore"):
        k = np.asarray(k, dtype=np.float64)
    positive = np.isfinite(k) & (k > 0)
    cut = float(np.exp(np.log(k[positive]).mean())) if positive.any() else math.nan
    high = positive & (k > cut * (1.0 + ROUNDING))
    low = positive & ~high
    contrast = 1.0
    if high.any() and low.any():
        contrast = float(np.exp(np.log(k[high]).mean() - np.log(k[low]).mean()))
    labels = label(high, connectivity=1)
    count = int(high.sum())
    high_fraction = count / max(1, int((~np.isnan(k)).sum()))
    found = {}
    for axis in axes:
        a = AXES[axis]
        ends = np.intersect1d(np.unique(labels.take(0, axis=a)), np.unique(labels.take(-1, axis=a)))
        spanning = ends[ends > 0]
        sizes = np.bincount(labels.ravel())[spanning]
        straight = False
        if spanning.size:
            largest = labels == spanning[np.argmax(sizes)]
            straight = int(sizes.max()) == int(largest.any(axis=a).sum()) * k.shape[a]
        found[axis] = Span(axis=axis, cut=cut, high_fraction=high_fraction, bodies=int(spanning.size),
                           spanning_fraction=int(sizes.sum()) / count if count else 0.0,
                           cross_section=float(sizes.max()) / k.shape[a] if spanning.size else None,
                           contrast=contrast, straight=straight)  # fmt: skip
    return found


def connectivity(fine: Field, max_cells: int = MAX_CELLS, *,
                 read: dict[str, np.ndarray] | None = None) -> dict[str, Span] | None:  # fmt: skip
    """The spans of `fine` along each of its axes; None past `max_cells` cells.

    Each property is read whole (one byte and eight for the labels per cell
    besides it), once: ky or kz that is kx itself (the default when a
    field gives kx only) is read and labelled with it; ky or kz that is a
    multiple of kx marks the same cells.

    Parameters
    ----------
    fine : Field
    max_cells : int
        Largest field labelled.
    read : dict of str to ndarray, optional
        The arrays of `connectivity_arrays`, already computed (with other
        reads of the same field); by default they are read here.

    Examples
    --------
    >>> fine = Field.from_arrays(np.array([[1.0, 1.0, 1.0], [9.0, 9.0, 9.0]]), cell_size=(1.0, 1.0))
    >>> {axis: s.spans for axis, s in connectivity(fine).items()}
    {'x': True, 'y': False}
    """
    if math.prod(fine.shape) > max_cells:
        return None
    arrays = {**connectivity_arrays(fine, max_cells), **(read or {})}
    along: dict[int, tuple[Any, list[str]]] = {}  # by the identity of the array
    for axis in fine.axes:
        name = PERMEABILITY[axis]
        along.setdefault(id(getattr(fine, name)), (arrays.get(name), []))[1].append(axis)  # first name: read
    found = {}
    for k, axes in along.values():
        found.update(spans(k, axes))
    return {axis: found[axis] for axis in fine.axes}


def connectivity_arrays(fine: Field, max_cells: int = MAX_CELLS) -> dict[str, Any]:
    """The permeability arrays `connectivity` reads whole, each once, by the first property holding it.

    Empty past `max_cells` cells. Lazy (dask) arrays stay lazy: computed
    together with the other results of the same field, its chunks are read
    once (`upscale.analysis.describe`).

    Examples
    --------
    >>> fine = Field.from_arrays(np.ones((2, 3)), cell_size=(1.0, 1.0))
    >>> list(connectivity_arrays(fine)), connectivity_arrays(fine, max_cells=5)
    (['kx'], {})
    """
    if math.prod(fine.shape) > max_cells:
        return {}
    found: dict[str, Any] = {}
    for axis in fine.axes:
        k = getattr(fine, PERMEABILITY[axis])
        if all(k is not other for other in found.values()):
            found[PERMEABILITY[axis]] = k
    return found


def struggle(spans: dict[str, Span] | None, block: BlockSpec) -> str | None:
    """The warning when a winding high-k body spans the field thinner than the blocks, else None.

    The largest body spanning an axis is compared with a block's cross-section
    across that axis, in fine cells. A straight one (a layer, or a channel
    along the axis) is left out: block averages along it are exact; so is a
    body less than `CONTRAST` times as permeable as the rest, which a block
    average does not lose.

    Examples
    --------
    >>> k = np.ones((1, 16, 32))
    >>> k[0, 5:7, :16] = k[0, 6:8, 16:] = 50.0   # a channel two cells wide along x, one step down
    >>> struggle({"x": span(k, "x")}, BlockSpec(8, 8))[:68]
    'local methods will struggle: a connected high-k body spans the field'
    >>> struggle({"x": span(k, "x")}, BlockSpec(8, 2)) is None
    True
    >>> k[0, 5, 16:], k[0, 7, 16:] = 50.0, 1.0    # straight again: a layer, averaged exactly along it
    >>> struggle({"x": span(k, "x")}, BlockSpec(8, 8)) is None
    True
    """
    thin = []
    for axis, s in (spans or {}).items():
        # a grouping of the layers counts its mean coarse layer
        across = math.prod(n if isinstance(n, int) else float(np.mean(n))
                           for i, n in enumerate(block.cells) if i != AXES[axis])  # fmt: skip
        wide = s.cross_section is None or s.cross_section >= across
        if not (wide or s.straight or s.contrast < CONTRAST):
            thin.append(f"along {axis} ({s.cross_section:.3g} fine cells in its cross-section on average, "
                        f"{across} in a block's)")  # fmt: skip
    if not thin:
        return None
    return ("local methods will struggle: a connected high-k body spans the field " + " and ".join(thin)
            + "; each block mixes it with the rock beside it, so the coarse model may lose its flow path "
            "— look at the check errors, or try a border or the flow-transmissibility method")  # fmt: skip
