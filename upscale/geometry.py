"""Cell geometry of a model whose top and layer thicknesses vary from place to place.

A flat model has one thickness per layer (`upscale.field.Grid.dz`). The
models practitioners bring have a top surface that undulates and layers that
thin and pinch out. `Geometry` holds, for every column of the raster, the
elevation of the model's top (m, positive up) and, for every cell, its
thickness (m).

How flow sees it (common practice for layered grids on vertical pillars):

* Cells stand on the raster's columns. A lateral face between two cells has,
  on each side, the area of that cell's own side (its thickness times the
  cell width) at a horizontal distance of half a cell; a vertical face has
  the cell's plan area at half its thickness. The dip of the layers is
  neglected, so a lateral transmissibility is too large by about
  ``1 / cos²θ`` where the layers dip by θ: 1 % at 5.7°. `steepest_dip`
  measures θ so a run can say so.
* The reference field. Scaling each cell's permeabilities by its thickness
  ratio ``w = thickness / dz`` (dz the layer's reference thickness) — kx and
  ky times w, kz divided by w, porosity times w — gives a field on the flat
  grid with exactly the same half-cell transmissibilities and pore volumes.
  Every two-point flow computation of the tool (local, global, the check,
  wells) therefore runs unchanged on the reference field
  (`upscale.field.Field.reference`).
* Pinch-outs. A cell of zero thickness is pinched out: it holds no pore
  volume and passes no lateral flow, and the cells above and below it
  connect through it as if it were absent, by the harmonic combination of
  their two half-cell transmissibilities, whatever its own permeability
  (even nodata). Numerically, its vertical resistance is a millionth
  (`PASS_THROUGH`) of the least vertical half-cell resistance of the active
  cells of its column, so a connection across m pinched cells is within
  at most m × 10⁻⁶ of that ideal. Pinched cells of a column with no active
  cell of positive thickness stay inactive.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np

from .errors import InputError

#: A pinched-out cell's vertical half-cell transmissibility over the largest of its column.
PASS_THROUGH = 1e6

#: Dip (degrees) above which neglecting it errs by more than 1 % in a lateral transmissibility:
#: 1 / cos²θ = 1.01 at θ = 5.7°.
DIP_LIMIT = float(np.degrees(np.arccos(1 / np.sqrt(1.01))))


@dataclass(frozen=True, eq=False)
class Geometry:
    """Top surface and cell thicknesses of a model.

    Parameters
    ----------
    top : ndarray of shape (M, N)
        Elevation of the top of the first layer in each column, m (positive up).
    thickness : array of shape (L, M, N)
        Thickness of every cell in m, >= 0; 0 is pinched out (module docstring).
        NumPy or dask.
    top_given : bool
        False when only thicknesses were given and `top` is 0 m by default: the
        elevations are then relative to an unknown top, and the dip unknown.
    """

    top: np.ndarray
    thickness: Any
    top_given: bool = True

    @classmethod
    def from_surfaces(cls, surfaces: np.ndarray) -> Geometry:
        """Geometry from the elevations of every layer's top and of the last layer's base.

        Parameters
        ----------
        surfaces : ndarray of shape (L + 1, M, N)
            Elevations in m, positive up, top surface first.

        Raises
        ------
        InputError
            If a surface lies above the one before it.

        Examples
        --------
        >>> g = Geometry.from_surfaces(np.array([[[10.0]], [[7.0]], [[7.0]], [[2.0]]]))
        >>> g.thickness.ravel().tolist(), g.top.tolist()
        ([3.0, 0.0, 5.0], [[10.0]])
        """
        surfaces = np.asarray(surfaces, dtype=np.float64)
        thickness = surfaces[:-1] - surfaces[1:]
        crossing = np.flatnonzero((thickness < 0).any(axis=(1, 2)))
        if crossing.size:
            first = int(crossing[0])
            raise InputError(
                f"surface {first + 2} lies above surface {first + 1} in "
                f"{int((thickness[first] < 0).sum())} cells; surfaces go from the top down"
            )
        return cls(top=surfaces[0], thickness=thickness)

    def __post_init__(self) -> None:
        if isinstance(self.thickness, np.ndarray):  # a lazy one is checked once, where it is read
            self.check_values()

    def check_values(self) -> None:
        """Refuse a thickness that is negative or not a number (reads a lazy array once).

        Raises
        ------
        InputError
            Naming how many cells are bad.
        """
        bad = int(np.count_nonzero(~(np.asarray(self.thickness) >= 0)))
        if bad:
            raise InputError(f"{bad} cell thickness(es) are negative or not a number; thickness is >= 0 m")

    def check(self, shape: tuple[int, int, int]) -> None:
        """Refuse a geometry that does not fit a grid of `shape` (layers, rows, columns).

        Raises
        ------
        InputError
            If the shapes differ.
        """
        if tuple(self.thickness.shape) != tuple(shape) or tuple(self.top.shape) != tuple(shape[1:]):
            raise InputError(
                f"the thickness has shape {tuple(self.thickness.shape)} and the top "
                f"{tuple(self.top.shape)} but the grid is {tuple(shape)} (layers, rows, columns)"
            )

    def layer_thickness(self) -> np.ndarray:
        """Reference thickness of each layer: its mean over cells of positive thickness, m.

        A layer pinched out everywhere takes the mean of the others' (its
        cells pass vertical flow only, whatever it is).

        Raises
        ------
        InputError
            If every cell has zero thickness.

        Examples
        --------
        >>> Geometry(np.zeros((1, 2)), np.array([[[1.0, 3.0]], [[0.0, 0.0]], [[0.0, 4.0]]])).layer_thickness()
        array([2., 3., 4.])
        """
        thickness = np.asarray(self.thickness, dtype=np.float64)
        positive = thickness > 0
        count = positive.sum(axis=(1, 2))
        if not count.any():
            raise InputError("every cell has zero thickness; a model needs some rock")
        sums = np.where(positive, thickness, 0.0).sum(axis=(1, 2))
        means = sums / np.maximum(count, 1)
        return np.where(count > 0, means, means[count > 0].mean())

    def ratio(self, dz: np.ndarray) -> Any:
        """Thickness ratio ``w = thickness / dz`` of every cell (dask stays lazy)."""
        return self.thickness / np.asarray(dz, dtype=np.float64)[:, None, None]

    def surfaces(self) -> np.ndarray:
        """Elevations of every layer's top and of the last layer's base, shape (L + 1, M, N), m."""
        below = np.cumsum(np.asarray(self.thickness, dtype=np.float64), axis=0)
        return np.concatenate([self.top[None], self.top[None] - below])

    def describe(self, dx: float, dy: float) -> dict[str, Any]:
        """What a practitioner checks first: ranges, pinched-out cells and the steepest dip.

        Parameters
        ----------
        dx, dy : float
            Column width and row height in m.

        Returns
        -------
        dict
            ``top_m`` and ``thickness_m`` (``min``, ``max``), ``pinched_cells``,
            ``cells``, ``steepest_dip_deg`` (None when the top was not given)
            and ``dip_limit_deg`` (`DIP_LIMIT`).

        Examples
        --------
        >>> g = Geometry(np.array([[10.0, 9.0]]), np.array([[[2.0, 0.0]], [[1.0, 1.0]]]))
        >>> d = g.describe(1.0, 1.0)
        >>> d["thickness_m"], d["pinched_cells"], round(d["steepest_dip_deg"], 1)
        ({'min': 0.0, 'max': 2.0}, 1, 45.0)
        """
        thickness = np.asarray(self.thickness, dtype=np.float64)
        top = self.top[np.isfinite(self.top)]
        return {
            "top_m": ({"min": float(top.min()), "max": float(top.max())}
                      if top.size and self.top_given else None),
            "thickness_m": {"min": float(thickness.min()), "max": float(thickness.max())},
            "pinched_cells": int(np.count_nonzero(thickness == 0)),
            "cells": int(thickness.size),
            "steepest_dip_deg": steepest_dip(self.surfaces(), dx, dy) if self.top_given else None,
            "dip_limit_deg": DIP_LIMIT,
        }

    def window(self, rows: slice, columns: slice) -> Geometry:
        """The geometry of a rectangle of rows and columns (all layers)."""
        return Geometry(self.top[rows, columns], self.thickness[:, rows, columns], self.top_given)

    def leading(self, shape: tuple[int, int, int]) -> Geometry:
        """The geometry of the first ``shape`` layers, rows and columns."""
        return Geometry(self.top[: shape[1], : shape[2]], self.thickness[: shape[0], : shape[1], : shape[2]],
                        self.top_given)  # fmt: skip


def steepest_dip(surfaces: np.ndarray, dx: float, dy: float) -> float:
    """Steepest dip between the cell centres of lateral neighbours, in degrees.

    Pairs with a pinched-out cell (which passes no lateral flow) and NaN
    columns are left out.

    Parameters
    ----------
    surfaces : ndarray of shape (L + 1, M, N)
        As `Geometry.surfaces`.
    dx, dy : float
        Column width and row height in m.

    Examples
    --------
    >>> s = np.array([[[0.0, -1.0, 5.0]], [[-2.0, -3.0, 5.0]]])   # a slope of 1 m over 1 m, then a pinch
    >>> round(steepest_dip(s, 1.0, 1.0), 6)
    45.0
    """
    centres = 0.5 * (surfaces[:-1] + surfaces[1:])
    rock = (surfaces[:-1] - surfaces[1:]) > 0
    steepest = 0.0
    for axis, size in ((2, dx), (1, dy)):
        if centres.shape[axis] > 1:
            n = centres.shape[axis]
            both = np.take(rock, range(n - 1), axis) & np.take(rock, range(1, n), axis)
            rise = np.where(both, np.abs(np.diff(centres, axis=axis)), np.nan)
            if np.any(np.isfinite(rise)):
                steepest = max(steepest, float(np.nanmax(rise)) / size)
    return float(np.degrees(np.arctan(steepest)))


def reference_permeability(kx: Any, ky: Any, kz: Any, w: Any, dz: np.ndarray) -> tuple[Any, Any, Any]:
    """kx, ky and kz of the reference field (module docstring); dask stays lazy.

    Parameters
    ----------
    kx, ky : array of shape (L, M, N)
        Permeabilities along x and y; NaN inactive.
    kz : array of shape (L, M, N) or None
        Permeability along z; None for a map.
    w : array of shape (L, M, N)
        Thickness ratios (`Geometry.ratio`).
    dz : ndarray of shape (L,)
        Reference layer thicknesses in m.

    Returns
    -------
    (kx', ky', kz')
        Pinched cells get kx' = ky' = 0 and the pass-through kz' where their
        column has an active cell of positive thickness, NaN otherwise. In a
        map (kz None) a cell of zero thickness is inactive.
    """
    pinched = w == 0
    if kz is None:
        return tuple(np.where(pinched, np.nan, k * w) for k in (kx, ky)) + (None,)
    kz_ref = np.where(pinched, np.nan, kz / np.where(pinched, 1.0, w))
    per_length = kz_ref / np.asarray(dz, dtype=np.float64)[:, None, None]
    column = np.nanmax(np.where(np.isnan(per_length), -np.inf, per_length), axis=0)
    passing = pinched & (column > 0)[None]
    through = PASS_THROUGH * column[None] * np.asarray(dz, dtype=np.float64)[:, None, None]
    lateral = [np.where(passing, 0.0, np.where(pinched, np.nan, k * w)) for k in (kx, ky)]
    return lateral[0], lateral[1], np.where(passing, through, kz_ref)
