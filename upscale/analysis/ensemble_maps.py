"""Per-block spread of an ensemble's coarse permeabilities, and its representative realization.

Every realization of an ensemble is upscaled onto one coarse grid, so each
coarse block has one value per realization. Per block and permeability
(kx, ky, kz) this holds the 10th, 50th and 90th percentiles over the
realizations (`numpy.percentile`, linear; named by the reading of
`upscale.analysis.percentiles`) and the standard deviation of ln k.

Why ln k for the spread: permeability is skewed like a lognormal, so the
standard deviation of k itself is dominated by the few realizations with
the highest values, carries the unit and is not comparable between a tight
and a permeable block. The standard deviation of ln k is unitless, reads as
a relative spread (0.1 is about ±10 %, 1 is a factor of e) and matches the
log colour scale of the percentile maps (common practice for permeability).
It is the sample standard deviation (``ddof=1``: the realizations are a
sample of the possible fields).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .percentiles import PERCENTILES

#: How the standard deviation of ln k is defined, recorded beside the maps.
STD_LN_NOTE = ("sample standard deviation (ddof = 1) of ln k over the realizations in which the block is "
               "active; no value where fewer than two are, or where one has k = 0")  # fmt: skip


@dataclass(frozen=True, eq=False)
class BlockSpread:
    """One coarse permeability over the realizations, block by block.

    Attributes
    ----------
    percentiles : dict of int to ndarray of shape (L, M, N)
        Numpy's 10th, 50th and 90th percentiles (`PERCENTILES`) per block,
        in the permeability's unit; NaN where no realization has the block active.
    std_ln : ndarray of shape (L, M, N)
        Sample standard deviation of ln k per block (`STD_LN_NOTE`).
    count : ndarray of shape (L, M, N)
        Realizations in which the block is active.
    """

    percentiles: dict[int, np.ndarray]
    std_ln: np.ndarray
    count: np.ndarray


def block_spread(stack: np.ndarray) -> BlockSpread:
    """The spread of one coarse permeability per block over the realizations.

    Parameters
    ----------
    stack : ndarray of shape (R, L, M, N)
        The coarse values of R realizations; NaN marks an inactive block.

    Returns
    -------
    BlockSpread

    Examples
    --------
    >>> found = block_spread(np.array([1.0, 10.0, 100.0, np.nan]).reshape(4, 1, 1, 1))
    >>> median, std, count = found.percentiles[50][0, 0, 0], found.std_ln[0, 0, 0], found.count[0, 0, 0]
    >>> float(median), round(float(std), 4), int(count)
    (10.0, 2.3026, 3)
    """
    stack = np.asarray(stack, dtype=float)
    active = np.isfinite(stack)
    count = active.sum(axis=0)
    some = count > 0
    percentiles = {}
    for q in PERCENTILES:
        found = np.full(stack.shape[1:], np.nan)
        found[some] = np.nanpercentile(stack[:, some], q, axis=0)  # no block without a value: no warning
        percentiles[q] = found
    spread = (count >= 2) & ~((stack <= 0) & active).any(axis=0)
    logs = np.log(np.where(active & (stack > 0), stack, 1.0))  # 1.0: no log of a zero or NaN, never used
    std_ln = np.full(stack.shape[1:], np.nan)
    std_ln[spread] = np.nanstd(np.where(active, logs, np.nan)[:, spread], axis=0, ddof=1)
    return BlockSpread(percentiles, std_ln, count)


#: How the representative realization is chosen, recorded beside its name.
REPRESENTATIVE_RULE = ("the realization whose fine k_eff is nearest the median over the realizations on "
                       "every axis checked together: the smallest sum over the axes of "
                       "(ln k_fine - ln median)²; the first in order on a tie")  # fmt: skip


def representative(k_fine: dict[str, dict[str, float | None]]) -> str | None:
    """The realization whose fine k_eff is nearest the median over the realizations (`REPRESENTATIVE_RULE`).

    The fine model's k_eff belongs to the realization itself, not to the
    upscaling, so the choice does not depend on the method's error.

    Parameters
    ----------
    k_fine : dict of str to dict of str to (float or None)
        Per realization, in order, its fine k_eff per axis (``x``, ``y``,
        ``z``; other flows are ignored).

    Returns
    -------
    str or None
        None when no realization has a positive k_eff on every axis that any has.

    Examples
    --------
    >>> representative({"a": {"x": 1.0}, "b": {"x": 5.0}, "c": {"x": 100.0}})
    'b'
    >>> representative({"a": {"x": 1.0, "y": 20.0}, "b": {"x": 3.0, "y": 2.0}, "c": {"x": 2.0, "y": 9.0}})
    'c'
    """
    axes = sorted({a for values in k_fine.values() for a in values if a in ("x", "y", "z")})
    usable = {name: [values.get(a) for a in axes] for name, values in k_fine.items()}
    usable = {name: k for name, k in usable.items()
              if axes and all(v is not None and np.isfinite(v) and v > 0 for v in k)}  # fmt: skip
    if not usable:
        return None
    values = np.array(list(usable.values()), dtype=float)  # (realizations, axes)
    distance = ((np.log(values) - np.log(np.median(values, axis=0))) ** 2).sum(axis=1)
    return list(usable)[int(np.argmin(distance))]


def block_spreads(coarse: list[dict[str, np.ndarray]]) -> dict[str, BlockSpread]:
    """`block_spread` of every permeability the realizations share.

    Parameters
    ----------
    coarse : list of dict of str to ndarray of shape (L, M, N)
        Per realization, its coarse permeabilities by name (``kx``, ``ky``, ``kz``).

    Returns
    -------
    dict of str to BlockSpread
        In the order of the first realization's names.
    """
    names = [name for name in coarse[0] if all(name in c for c in coarse)]
    return {name: block_spread(np.stack([c[name] for c in coarse])) for name in names}
