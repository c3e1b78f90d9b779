"""What a run's geometry was (`upscale.geometry`): the summary's ``geometry`` record, and transmissivity.

* `geometry_record` says what gave the geometry, how many fine cells are
  pinched out, how steeply the layers dip, and the fine and coarse bulk
  volumes (equal: coarse blocks keep the fine bulk volume). Lateral
  transmissibilities neglect the dip and are too large by ``1 / cos²θ − 1``
  (`upscale.geometry`); past `upscale.geometry.DIP_LIMIT` (5.7°), 1 %, the
  record carries a caution the run prints.
* `transmissivities`: a map of hydraulic conductivity K with a thickness b
  is an aquifer model, whose quantity is the transmissivity ``T = K b``
  (Theis 1935, "The relation between the lowering of the piezometric surface
  and the rate and duration of discharge of a well using ground-water
  storage"), in m²/s or m²/day. A permeability has none: transmissivity is
  a quantity of hydrogeology, of the water's conductivity, not of the rock's
  permeability.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np

from ..field import Field
from ..geometry import DIP_LIMIT
from ..io.geometry import GEOMETRY_ROLES
from ..units import UNITS
from .records import Leaf


@dataclass(frozen=True)
class GeometryRecord(Leaf):
    """The ``geometry`` object of ``summary.json`` (docs/outputs.md).

    Attributes
    ----------
    given : str
        What gave the geometry: ``surfaces``, ``top and thickness``,
        ``thickness`` (top at 0 m) or ``top and dz``.
    top, thickness, surfaces : str or float or None
        Each geometry input: a raster's path as given, a value in m, or None.
    pinched_out_cells : int
        Fine cells of zero thickness.
    steepest_dip_deg : float or None
        Steepest dip between the centres of lateral neighbours of the fine model
        that are not pinched out, degrees (`upscale.geometry.steepest_dip`); None
        when only thicknesses were given: the top is then put at 0 m, which says
        nothing of the dip.
    fine_bulk_volume_m3, coarse_bulk_volume_m3 : float
        Bulk volume of every cell, active or not.
    caution : str or None
        A sentence when the dip passes `upscale.geometry.DIP_LIMIT`.
    transmissivity_unit : str or None
        Unit of the coarse transmissivity (`transmissivities`); None when none was written.
    """

    OPTIONAL = ("transmissivity_unit",)

    given: str
    top: str | float | None
    thickness: str | float | None
    surfaces: str | None
    pinched_out_cells: int
    steepest_dip_deg: float | None
    fine_bulk_volume_m3: float
    coarse_bulk_volume_m3: float
    caution: str | None = None
    transmissivity_unit: str | None = None


def dip_caution(dip: float | None) -> str | None:
    """The caution for layers dipping by `dip` degrees, None up to `upscale.geometry.DIP_LIMIT`.

    Examples
    --------
    >>> dip_caution(3.0) is None
    True
    >>> text = dip_caution(10.0)
    >>> text.startswith("the layers dip by up to 10.0°"), "up to 3.1 % too large" in text
    (True, True)
    """
    if dip is None or dip <= DIP_LIMIT:
        return None
    excess = 1.0 / math.cos(math.radians(dip)) ** 2 - 1.0
    return (f"the layers dip by up to {dip:.1f}°; the lateral transmissibilities neglect the dip and are "
            f"up to {excess * 100:.1f} % too large there (1 % at {DIP_LIMIT:.1f}°)")  # fmt: skip


def _inputs(fine: Field, read: dict[str, Any] | None) -> dict[str, str | float | None]:
    """Each geometry input: the path of its raster, its value, or None."""
    paths = {source.role: source.path for source in fine.sources}
    values = read or {}
    return {role: paths.get(role, values.get(role)) for role in GEOMETRY_ROLES}


def _given(inputs: dict[str, str | float | None]) -> str:
    if inputs["surfaces"] is not None:
        return "surfaces"
    if inputs["thickness"] is not None:
        return "thickness" if inputs["top"] is None else "top and thickness"
    return "top and dz"


def geometry_record(fine: Field, coarse: Field, read: dict[str, Any] | None = None) -> GeometryRecord | None:
    """The ``geometry`` record of a run on `fine` (cropped as upscaled) to `coarse`; None for a flat model.

    Parameters
    ----------
    fine, coarse : Field
        The run's fields; `coarse` carries the coarse geometry.
    read : dict, optional
        The recorded read options (values of ``top`` and ``thickness`` given as numbers).
    """
    if fine.geometry is None:
        return None
    inputs = _inputs(fine, read)
    given = _given(inputs)
    described = fine.geometry.describe(float(fine.grid.dx[0]), float(fine.grid.dy[0]))
    dip = described["steepest_dip_deg"]
    found = transmissivities(coarse)
    return GeometryRecord(
        given, inputs["top"], inputs["thickness"], inputs["surfaces"],
        described["pinched_cells"], dip, float(np.asarray(fine.cell_volumes()).sum()),
        float(np.asarray(coarse.cell_volumes()).sum()), dip_caution(dip),
        None if found is None else transmissivity_unit(coarse.unit),
    )  # fmt: skip


def transmissivity_unit(unit: str) -> str:
    """The unit of K × thickness for a conductivity `unit`.

    Examples
    --------
    >>> transmissivity_unit("m/day")
    'm²/day'
    """
    return "m²/" + unit.split("/")[1]


def transmissivities(field: Field) -> dict[str, np.ndarray] | None:
    """Transmissivity ``T = K b`` of every cell of a conductivity map with a thickness, else None.

    Parameters
    ----------
    field : Field
        A map (one layer) of hydraulic conductivity in m/s or m/day, with a geometry.

    Returns
    -------
    dict of str to ndarray of shape (1, M, N), or None
        ``transmissivity``: kx × thickness, in `transmissivity_unit`; and
        ``transmissivity_y``, ky × thickness, when ky differs from kx.

    Examples
    --------
    >>> from upscale.geometry import Geometry
    >>> K = np.array([[[1.0, 2.0]]])
    >>> aquifer = Field(K, K, None, None, Field.from_arrays(K[0]).grid, "m/day",
    ...                 geometry=Geometry(np.zeros((1, 2)), np.array([[[10.0, 5.0]]])))
    >>> transmissivities(aquifer)["transmissivity"].tolist()
    [[[10.0, 10.0]]]
    """
    if field.ndim != 2 or field.geometry is None or UNITS[field.unit][0] != "conductivity":
        return None
    thickness = np.asarray(field.geometry.thickness, dtype=np.float64)
    kx, ky = (np.asarray(k, dtype=np.float64) for k in (field.kx, field.ky))
    found = {"transmissivity": kx * thickness}
    if field.ky is not field.kx and not np.array_equal(kx, ky, equal_nan=True):
        found["transmissivity_y"] = ky * thickness
    return found
