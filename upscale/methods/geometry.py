"""How the methods honour a model's geometry (`upscale.geometry`).

* The averages (arithmetic, harmonic, geometric, power) and porosity weight
  every cell by its true bulk volume (`weighted`, `porosity_mean`). The
  compiled block sums weigh cells by their layer's reference thickness dz,
  so each weighted sum is written as one of them on values scaled by the
  thickness ratio w, over another of them on w itself: the layer weights
  cancel and ``v_i = w_i dz_i × cell area`` remains.
* Every other method upscales the reference field, whose two-point flow is
  that of the true model, and its coarse values are turned back with the
  block's thickness ratio ``r = T / T0`` (true over reference thickness;
  `block_ratio`) by `to_true`: lateral terms (kxx, kxy, kyy…) are divided by
  r, kzz multiplied, the mixed lateral–vertical ones are unchanged (only z is
  stretched), transmissibilities are physical and unchanged.
* The coarse model has a geometry of its own: each block's thickness is its
  true bulk volume over its plan area (so bulk and pore volumes are kept
  exactly), and the top of each coarse column is the mean of the fine tops
  under it (`coarse_geometry`).
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

import numpy as np

from ..field import Field
from ..geometry import Geometry
from ..grid.blocks import Size
from ..parallel import apply_blocks
from . import averages
from .flow_based import TENSOR


def _masked(k: Any, w: Any) -> Any:
    """The ratios `w` where `k` is active, NaN elsewhere."""
    return np.where(np.isnan(k), np.nan, w)


def _mean_ratio(k: Any, w: Any, dz: np.ndarray, cells: tuple[Size, int, int]) -> Any:
    """Σ dz w / Σ dz over the active cells of each block."""
    return apply_blocks(averages.arithmetic_mean, _masked(k, w), dz, cells)


def _divided(k: Any, w: Any, zero: float) -> Any:
    """The quotient `k` / `w` where w > 0, `zero` where w == 0 (NaN where `k` is NaN)."""
    safe = np.where(w > 0, w, 1.0)
    return np.where(np.isnan(k), np.nan, np.where(w > 0, k / safe, zero))


def weighted(rule: Callable[..., Any], k: Any, w: Any, dz: np.ndarray, cells: tuple[Size, int, int],
             axis: int, **options: Any) -> Any:  # fmt: skip
    """An average of `upscale.methods.averages` of each block, cells weighted by true volume.

    Parameters
    ----------
    rule : callable
        `averages.arithmetic_mean`, `harmonic_mean`, `geometric_mean` or `power_mean`.
    k : array of shape (L, M, N)
        Permeability (NaN inactive); NumPy or dask.
    w : array of shape (L, M, N)
        Thickness ratios (`upscale.geometry.Geometry.ratio`).
    dz : ndarray of shape (L,)
        Reference layer thicknesses in m.
    cells : (Size, int, int)
        Cells per block.
    axis : int
        Flow axis (unused by the averages).
    **options
        ``exponent`` for `power_mean`.

    Returns
    -------
    array of shape (L', M', N')
        Lazy for dask input.

    Examples
    --------
    Two cells of 1 and 4 mD, 3 m and 1 m thick, in one layer of reference
    thickness 2 m: the true-volume means are (3 + 4) / 4 and 4 / (3 + 1/4).

    >>> k, w = np.array([[[1.0, 4.0]]]), np.array([[[1.5, 0.5]]])
    >>> [float(weighted(r, k, w, np.array([2.0]), (1, 1, 2), 2).item())
    ...  for r in (averages.arithmetic_mean, averages.harmonic_mean)]
    [1.75, 1.2307692307692308]
    """
    share = _mean_ratio(k, w, dz, cells)
    if rule is averages.arithmetic_mean:
        return apply_blocks(rule, k * w, dz, cells) / share
    if rule is averages.harmonic_mean:
        return apply_blocks(rule, _divided(k, w, np.inf), dz, cells) * share
    exponent = options.get("exponent", 0.0)
    if rule is averages.geometric_mean or exponent == 0:
        logs = np.where(np.isnan(k), np.nan, w * np.log(np.where(k > 0, k, 1.0)))
        return np.exp(apply_blocks(averages.arithmetic_mean, logs, dz, cells) / share)
    scaled = np.where(w > 0, k * np.where(w > 0, w, 1.0) ** (1.0 / exponent),
                      np.where(np.isnan(k), np.nan, 0.0 if exponent > 0 else np.inf))  # fmt: skip
    return apply_blocks(rule, scaled, dz, cells, exponent=exponent) / share ** (1.0 / exponent)


#: The rules `weighted` serves.
WEIGHTED = (averages.arithmetic_mean, averages.harmonic_mean, averages.geometric_mean, averages.power_mean)


def block_ratio(field: Field, cells: tuple[Size, int, int]) -> Any:
    """Thickness ratio ``r = T / T0`` of every block (true over reference bulk volume)."""
    return apply_blocks(averages.bulk_mean, field.geometry.ratio(field.grid.dz), field.grid.dz, cells)


def porosity_mean(field: Field, cells: tuple[Size, int, int], ratio: Any) -> Any:
    """Porosity of every block by true bulk volume: block pore volume over block bulk volume."""
    w = field.geometry.ratio(field.grid.dz)
    pore = apply_blocks(averages.bulk_mean, np.where(w > 0, field.porosity * w, 0.0), field.grid.dz, cells)
    return _ratio(pore, ratio)


def active_volume(field: Field, cells: tuple[Size, int, int]) -> Any:
    """True active volume of every block, in units of (cell area × m)."""
    w = field.geometry.ratio(field.grid.dz)
    dz = field.grid.dz
    return apply_blocks(averages.active_volume, field.kx, dz, cells) * _mean_ratio(field.kx, w, dz, cells)


def _ratio(top: Any, bottom: Any) -> Any:
    return np.where(bottom > 0, top / np.where(bottom > 0, bottom, 1.0), np.nan)


def to_true(lazy: dict[str, Any], ratio: Any) -> dict[str, Any]:
    """Coarse values of a method run on the reference field, turned back to the true geometry.

    Blocks of zero thickness get NaN.
    """
    factors = {"kx": -1, "ky": -1, "kz": 1}
    done = {}
    for name, values in lazy.items():
        if name in factors:
            done[name] = _scaled(values, ratio, factors[name])
        elif name == "tensor":
            powers = [_power(term) for term in TENSOR]
            done[name] = np.stack([_scaled(values[i], ratio, p) for i, p in enumerate(powers)])
        else:
            done[name] = values
    return done


def _power(term: str) -> int:
    """-1 for a lateral term (kxx, kxy…), 1 for kzz, 0 for the mixed ones."""
    vertical = term[1:].count("z")
    return {0: -1, 1: 0, 2: 1}[vertical]


def _scaled(values: Any, ratio: Any, power: int) -> Any:
    if power == 1:
        return np.where(ratio > 0, values * ratio, np.nan)
    if power == -1:
        return _ratio(values, ratio)
    return np.where(ratio > 0, values, np.nan)


def coarse_geometry(field: Field, cells: tuple[Size, int, int], coarse_dz: np.ndarray,
                    ratio: np.ndarray) -> Geometry:  # fmt: skip
    """Geometry of the coarse model: thickness ``r × T0`` and the mean fine top of each column."""
    top = apply_blocks(averages.bulk_mean, field.geometry.top[None], np.ones(1), (1, *cells[1:]))
    thickness = np.asarray(ratio) * coarse_dz[:, None, None]
    return Geometry(np.asarray(top)[0], thickness, field.geometry.top_given)
