"""The coarse cell properties as a NetCDF file following the CF conventions (netCDF4).

Variables on (layer, row, column) with coordinate variables ``x`` and ``y``
(cell centres in the CRS's units) and ``z`` (cell-centre height above the
top of the model, negative downward; with coarse layers of unequal
thickness also ``z_bounds``, each layer's top and base, named by the ``bounds``
attribute of ``z``, CF §7.1 cell boundaries), a ``crs`` grid-mapping variable with
the CF attributes of the CRS (``grid_mapping_name`` and its parameters, and
``crs_wkt``; from pyproj) when there is a CRS, and the unit of every variable (Eaton et al., "NetCDF
Climate and Forecast (CF) Metadata Conventions", version 1.8: §4 coordinate
types, §5.6 grid mappings). A model with a geometry (`upscale.geometry`) also
has the variables ``top_elevation``, ``base_elevation`` and ``thickness`` on
(layer, row, column): every cell's own top and base elevation (positive up)
and thickness, in the package's length unit.
"""

from __future__ import annotations

import threading
from pathlib import Path
from typing import Any

import numpy as np

from ..field import Grid
from ..optional import require
from .geotiff import layer_depths
from .package import _centres
from .slabs import Values, slabs

#: The HDF5 library under netCDF4 is not thread-safe: one file at a time (ensembles
#: write several realizations from several threads).
_HDF5 = threading.Lock()

#: CF ``units`` strings (UDUNITS) of the package's unit names.
_UDUNITS = {"m": "m", "ft": "ft", "m²": "m2", "m/s": "m s-1", "m²/s": "m2 s-1", "mD": "millidarcy", "1": "1"}


def write_netcdf(path: Path, grid: Grid, properties: dict[str, tuple[Values, str, str]],
                 factors: dict[str, Any], attributes: dict[str, str],
                 surfaces: np.ndarray | None = None) -> None:  # fmt: skip
    """Write the coarse properties (in package units) on (layer, row, column).

    Parameters
    ----------
    path : Path
        Destination ``.nc`` file.
    grid : Grid
        The coarse grid (sizes in m).
    properties : dict of str to (Values, str, str)
        Per variable: its values in the package's units over a region (NaN =
        inactive; written slab by slab), its unit and long name.
    factors : dict
        From `upscale.units.unit_factors`.
    attributes : dict of str to str
        Global attributes (title, source, history...).
    surfaces : ndarray of shape (L + 1, M, N), optional
        Elevation of every layer's top and of the last base, m (positive up), of a
        model with a geometry (`upscale.geometry.Geometry.surfaces`); adds the
        cells' top and base elevations and thicknesses.
    """
    netCDF4 = require("netCDF4", "formats")
    length = factors["length"]
    length_unit = _UDUNITS.get(factors["length_unit"], factors["length_unit"])
    x, y, z = _centres(grid)
    with _HDF5, netCDF4.Dataset(path, "w", format="NETCDF4") as nc:
        nc.setncatts({"Conventions": "CF-1.8", **attributes})
        for name, size in zip(("layer", "row", "column"), grid.shape):
            nc.createDimension(name, size)
        if grid.crs is not None:
            crs = nc.createVariable("crs", "i4")
            pyproj = require("pyproj", "formats")
            crs.setncatts(pyproj.CRS.from_wkt(grid.crs.to_wkt()).to_cf())  # grid_mapping_name, crs_wkt...
        for name, dim, values, standard in (("x", "column", x, "projection_x_coordinate"),
                                            ("y", "row", y, "projection_y_coordinate")):  # fmt: skip
            var = nc.createVariable(name, "f8", (dim,))
            var[:] = values
            var.standard_name = standard
            var.units = crs_unit(grid)
            var.axis = name.upper()
        var = nc.createVariable("z", "f8", ("layer",))
        var[:] = z * length
        var.units = length_unit
        var.positive = "up"
        var.long_name = "cell-centre height above the top of the model"
        var.axis = "Z"
        if np.ptp(grid.dz) > 0:  # equal layers keep the file they always had (centres say it all)
            var.bounds = "z_bounds"
            nc.createDimension("nv", 2)
            bounds = nc.createVariable("z_bounds", "f8", ("layer", "nv"))
            depths = layer_depths(grid)
            bounds[:] = (0.0 - np.stack([depths[:-1], depths[1:]], axis=1)) * length  # 0.0 - : no -0
        for name, (values, unit, long_name) in properties.items():
            var = nc.createVariable(name, "f8", ("layer", "row", "column"), fill_value=np.nan,
                                    zlib=True)  # fmt: skip
            for region in slabs(grid.shape):
                var[region] = values(region)
            var.units = _UDUNITS.get(unit, unit)
            var.long_name = long_name
            if grid.crs is not None:
                var.grid_mapping = "crs"
            var.coordinates = "z y x"
        if surfaces is not None:
            _write_heights(nc, surfaces * length, length_unit, grid.crs is not None)


def _write_heights(nc: Any, surfaces: np.ndarray, unit: str, mapped: bool) -> None:
    """The cells' top and base elevations and thicknesses from `surfaces` (L + 1, M, N) in `unit`."""
    heights = {"top_elevation": (surfaces[:-1], "elevation of the cell's top"),
               "base_elevation": (surfaces[1:], "elevation of the cell's base"),
               "thickness": (surfaces[:-1] - surfaces[1:], "cell thickness")}  # fmt: skip
    for name, (values, long_name) in heights.items():
        var = nc.createVariable(name, "f8", ("layer", "row", "column"), fill_value=np.nan, zlib=True)
        var[:] = values
        var.units = unit
        var.long_name = long_name
        if name != "thickness":
            var.positive = "up"
        if mapped:
            var.grid_mapping = "crs"
        var.coordinates = "z y x"


def crs_unit(grid: Grid) -> str:
    """The linear unit of a grid's CRS as a UDUNITS string (m without a CRS)."""
    if grid.crs is None:
        return "m"
    unit = grid.crs.linear_units or "m"
    return {"metre": "m", "meter": "m", "foot": "ft", "US survey foot": "US_survey_foot"}.get(unit, unit)
