"""Fields as labelled arrays: xarray Datasets with coordinates, units and a CRS.

The layout that `upscale.Field.to_xarray` writes and `upscale.Field.from_xarray`
reads back exactly:

* dimensions ``("layer", "y", "x")`` — layer 0 on top, row 0 the first raster
  row — or ``("y", "x")`` for a map of one layer without kz;
* coordinates ``x`` and ``y`` at cell centres (`upscale.field.Grid.centres`:
  in the CRS's units, or in m from the north-west corner without
  georeference), the cell sizes ``dx``, ``dy`` and ``dz`` in m (so uneven
  edge blocks and CRSs in feet survive the trip), and for a model ``layer``
  (0 on top) and ``z``, the cell-centre height above the top in m, negative
  downward — as in the NetCDF file of the coarse-grid package;
* variables ``kx``, ``ky``, ``kz``, ``porosity`` with ``units`` and
  ``long_name`` (and ``source``, ``source_sha256`` for properties read from
  files), NaN in inactive cells; for a field with a geometry
  (`upscale.geometry`) also ``top`` (y, x) and ``thickness``, in m, with
  ``dz`` the layers' reference thicknesses;
* the CRS and the geotransform in a ``spatial_ref`` grid-mapping variable as
  rioxarray writes them (``crs_wkt`` and the CF grid-mapping attributes;
  ``GeoTransform`` in GDAL's order), so ``ds.rio.crs`` and
  ``ds.rio.transform()`` work, and GDAL reads a NetCDF file of it.

Reading also takes what rioxarray opens: a DataArray of dimensions ``(y, x)``
or ``(band | layer | z, y, x)``, georeferenced by its grid mapping, its
nodata value (``_FillValue`` and the like, as ``da.rio.nodata`` finds it)
turned into NaN.

xarray and rioxarray are optional (the ``xarray`` extra) and imported on
first use only.
"""

from __future__ import annotations

import sys
from types import ModuleType
from typing import Any, NamedTuple

import numpy as np

from .errors import InputError
from .optional import require

#: Names accepted for the layer dimension of a DataArray or Dataset.
LAYER_DIMS = ("layer", "band", "z")
#: Long names of the properties a Dataset may hold.
LONG_NAMES = {"kx": "permeability along x (columns)", "ky": "permeability along y (rows)",
              "kz": "permeability along z (layers)", "porosity": "porosity"}  # fmt: skip
_METRES = {"units": "m"}


def _xarray() -> ModuleType:
    """xarray, with rioxarray's ``.rio`` accessor registered (the ``xarray`` extra).

    Raises
    ------
    MissingLibraryError
        One line naming the missing library and the extra that installs it.
    """
    xarray = require("xarray", "xarray")
    require("rioxarray", "xarray")  # registers the .rio accessor
    return xarray


def is_labelled(data: Any) -> bool:
    """Whether `data` is an xarray DataArray or Dataset (without importing xarray)."""
    xr = sys.modules.get("xarray")
    return xr is not None and isinstance(data, xr.DataArray | xr.Dataset)


def to_dataset(field: Any, *, extra: dict[str, tuple[Any, dict]] | None = None,
               faces: dict[str, tuple[Any, dict]] | None = None,
               attrs: dict[str, Any] | None = None) -> Any:  # fmt: skip
    """The Dataset of the module docstring.

    Parameters
    ----------
    field : upscale.Field
        Its properties (NumPy or dask arrays), grid, unit and sources; the
        layer dimension is kept unless it is a map of one layer.
    extra : dict of str to (array of shape (L, M, N), dict), optional
        More variables on the same grid, with their attributes.
    faces : dict of str to (array, dict), optional
        Values on the inner faces normal to each axis (``"x"``, ``"y"``, ``"z"``
        -> array of shape (L, M, N) with that axis one shorter, and its
        variable's attributes). Each becomes the variable ``t`` + axis on the
        dimension ``x_face``, ``y_face`` or ``z_face`` in place of ``x``, ``y``
        or ``layer``, whose coordinate is the faces' position (`Grid.edges`).
    attrs : dict, optional
        Attributes of the Dataset.

    Returns
    -------
    xarray.Dataset
    """
    xr = _xarray()
    grid, unit = field.grid, field.unit
    sources = {s.role: (s.path, s.sha256) for s in field.sources}
    layered = field.ndim == 3 or field.shape[0] > 1
    x, y, z = grid.centres()
    dims = ("layer", "y", "x") if layered else ("y", "x")
    coords: dict[str, Any] = {
        "x": ("x", x, {"axis": "X", "long_name": "x of the cell centre", **_METRES}),
        "y": ("y", y, {"axis": "Y", "long_name": "y of the cell centre", **_METRES}),
        "dx": ("x", grid.dx, {"long_name": "column width", **_METRES}),
        "dy": ("y", grid.dy, {"long_name": "row height", **_METRES}),
    }
    if layered:
        coords["layer"] = ("layer", np.arange(grid.shape[0]), {"long_name": "layer, 0 on top"})
        coords["z"] = ("layer", z, {"long_name": "cell-centre height above the top of the model",
                                    "positive": "up", **_METRES})  # fmt: skip
        coords["dz"] = ("layer", grid.dz, {"long_name": "layer thickness", **_METRES})
    else:
        coords["dz"] = ((), grid.dz[0], {"long_name": "thickness of the map", **_METRES})
    views: dict[int, Any] = {}  # an array shared by two properties stays shared

    def on_dims(array: Any) -> Any:
        return views.setdefault(id(array), array if layered else array[0])

    variables = {name: (dims, on_dims(array), _attributes(name, unit, sources.get(name)))
                 for name, array in field.properties().items()}  # fmt: skip
    variables.update({name: (dims, on_dims(array), a) for name, (array, a) in (extra or {}).items()})
    if field.geometry is not None:
        variables.update(geometry_variables(field.geometry, dims, on_dims))
    for axis, (values, a) in (faces or {}).items():
        face = f"{axis}_face"
        where = {"long_name": f"{axis} of the faces between neighbouring cells", **_METRES}
        coords[face] = (face, grid.edges()["xyz".index(axis)][1:-1], where)
        on_faces = tuple(face if d == {"z": "layer"}.get(axis, axis) else d for d in dims)
        variables[f"t{axis}"] = (on_faces, values if layered else values[0], a)
    ds = xr.Dataset(variables, coords=coords, attrs=attrs or {})
    if grid.transform is not None:
        ds = ds.rio.write_transform(grid.transform)
    if grid.crs is not None:
        ds = ds.rio.write_crs(grid.crs).rio.write_coordinate_system()
    return ds


#: The variables of a geometry (`upscale.geometry`), with their long names.
GEOMETRY = {"top": "elevation of the top of the model", "thickness": "cell thickness (0: pinched out)"}


def geometry_variables(geometry: Any, dims: tuple[str, ...], on_dims: Any) -> dict[str, tuple]:
    """The ``thickness`` variable of a geometry and, when it was given, ``top`` (y, x); m, positive up."""
    thickness = {"long_name": GEOMETRY["thickness"], **_METRES}
    found = {"thickness": (dims, on_dims(geometry.thickness), thickness)}
    if geometry.top_given:
        found["top"] = (("y", "x"), geometry.top, {"long_name": GEOMETRY["top"], "positive": "up", **_METRES})
    return found


def _attributes(name: str, unit: str, source: tuple[str, str] | None) -> dict[str, str]:
    attrs = {"units": "1" if name == "porosity" else unit, "long_name": LONG_NAMES[name]}
    if source is not None:
        attrs["source"], attrs["source_sha256"] = source
    return attrs


class Parts(NamedTuple):
    """What a `Field` is made of, read from a Dataset or DataArray.

    ``geometry`` is ``(top, thickness, top_given)``, shapes (M, N) and (L, M, N), or None.
    """

    arrays: dict[str, Any]
    grid: dict[str, Any]
    unit: str
    sources: tuple[tuple[str, str, str], ...]
    geometry: tuple[Any, Any] | None = None


def from_labelled(data: Any, *, cell_size: tuple[float, float] | None, dz: Any,
                  unit: str | None) -> Parts:  # fmt: skip
    """Arrays of shape (L, M, N), grid, unit and sources of a Dataset or DataArray.

    See `upscale.Field.from_xarray` for the parameters.
    """
    xr = _xarray()
    if isinstance(data, xr.DataArray):
        variables = {"kx": data}
    elif isinstance(data, xr.Dataset):
        if "kx" not in data.data_vars:
            raise InputError(f"the Dataset has no kx variable (it has {', '.join(map(str, data.data_vars))})")
        variables = {name: data[name] for name in LONG_NAMES if name in data.data_vars}
    else:
        raise InputError(f"expected an xarray Dataset or DataArray, got {type(data).__name__}")
    arrays = _cubes(variables, _order(variables["kx"]))
    layers, rows, columns = arrays["kx"].shape
    arrays.setdefault("ky", arrays["kx"])
    if layers > 1 or "kz" in arrays:
        arrays.setdefault("kz", arrays["kx"])
    transform, crs = _georeference(data)
    given = None if cell_size is None else [float(v) for v in cell_size][::-1]
    sizes = _agree("cell_size", _own_cell_sizes(data, transform, crs), given)
    if sizes is None:
        raise InputError("the cell size is unknown (no dx/dy coordinates, projected georeference or "
                         "evenly spaced x/y coordinates); give `cell_size`=(dx, dy) in metres")  # fmt: skip
    dy, dx = sizes
    grid = {"dz": _thickness(data, dz, layers), "dy": np.broadcast_to(dy, rows),
            "dx": np.broadcast_to(dx, columns), "transform": transform, "crs": crs}  # fmt: skip
    sources = tuple((name, var.attrs["source"], var.attrs.get("source_sha256", ""))
                    for name, var in variables.items() if "source" in var.attrs)  # fmt: skip
    geometry = None
    if isinstance(data, xr.Dataset) and "thickness" in data.data_vars:
        thickness = _cubes({"thickness": data["thickness"]}, _order(variables["kx"]))["thickness"]
        top = np.asarray(data["top"].transpose("y", "x").values, float) if "top" in data.data_vars else None
        geometry = (np.zeros((rows, columns)) if top is None else top, thickness, top is not None)
    return Parts(arrays, grid, unit or variables["kx"].attrs.get("units") or "mD", sources, geometry)


def _order(kx: Any) -> tuple[str, ...]:
    """The dimensions of `kx` in array order: ``(y, x)`` or ``(LAYER, y, x)``."""
    lead = [d for d in kx.dims if d not in ("y", "x")]
    if "y" not in kx.dims or "x" not in kx.dims or len(lead) > 1 or (lead and lead[0] not in LAYER_DIMS):
        raise InputError(
            f"kx has dimensions {tuple(map(str, kx.dims))}; expected (y, x) or "
            f"({' | '.join(LAYER_DIMS)}, y, x)"
        )
    return (*lead, "y", "x")


def _cubes(variables: dict[str, Any], order: tuple[str, ...]) -> dict[str, Any]:
    """Each variable as an array of shape (L, M, N), its nodata value made NaN."""
    cubes: dict[int, Any] = {}  # one array under several names stays one
    named: dict[str, Any] = {}
    for name, var in variables.items():
        if set(var.dims) != set(order):
            raise InputError(f"{name} has dimensions {tuple(map(str, var.dims))}, kx has {order}")
        data = var.data  # a lazily loaded variable gives a new array at every access: take it once
        if id(data) not in cubes:
            values = data.transpose([var.dims.index(d) for d in order])
            nodata = var.rio.nodata
            if nodata is not None and not np.isnan(nodata):
                values = np.where(values == nodata, np.nan, values)
            cubes[id(data)] = values if len(order) == 3 else values[None]
        named[name] = (data, cubes[id(data)])  # the data is held, so its id is not reused
    return {name: cube for name, (_, cube) in named.items()}


def _agree(what: str, own: Any, given: Any) -> Any:
    """The data's own sizes (a sequence of arrays in m), else those given; refused if both differ."""
    if given is None or own is None:
        return own if given is None else given
    if not all(np.allclose(a, b, rtol=1e-9, atol=0) for a, b in zip(own, given)):
        raise InputError(f"`{what}` disagrees with the data's own; leave it out")
    return own


def _own_cell_sizes(data: Any, transform: Any, crs: Any) -> tuple[Any, Any] | None:
    """Row heights and column widths (m) the data carries; None without any.

    From dx/dy coordinates, a projected transform, or evenly spaced x/y
    coordinates taken as metres.
    """
    if "dx" in data.coords and "dy" in data.coords:
        return np.asarray(data.coords["dy"].values, float), np.asarray(data.coords["dx"].values, float)
    if transform is not None:
        if transform.b != 0 or transform.d != 0:
            raise InputError(f"the georeference is rotated or sheared (geotransform "
                             f"{tuple(transform)[:6]}); resample it onto a north-up grid first")  # fmt: skip
        if crs is not None and crs.is_geographic:
            raise InputError(f"the data is in a geographic CRS ({crs.to_string()}), its cells are in "
                             "degrees; reproject it (da.rio.reproject) or give `cell_size`=(dx, dy) in "
                             "metres")  # fmt: skip
        metres = crs.linear_units_factor[1] if crs is not None else 1.0
        return abs(transform.e) * metres, abs(transform.a) * metres
    steps = (_spacing(data, "y"), _spacing(data, "x"))
    return None if None in steps else steps


def _spacing(data: Any, name: str) -> float | None:
    """The even spacing of coordinate `name`; None without two values of it."""
    if name not in data.coords or data.coords[name].size < 2:
        return None
    step = np.diff(np.asarray(data.coords[name].values, float))
    if not np.allclose(step, step[0], rtol=1e-9, atol=0):
        raise InputError(f"the {name} coordinates are not evenly spaced; a raster's cells are uniform")
    return abs(float(step[0]))


def _georeference(data: Any) -> tuple[Any, Any]:
    """The affine transform and rasterio CRS of the grid mapping; (None, None) without one."""
    crs = data.rio.crs
    mapping = data.rio.grid_mapping
    gdal = data.coords[mapping].attrs.get("GeoTransform") if mapping in data.coords else None
    if gdal is not None:
        from affine import Affine

        # read as written: rio.transform() rebuilds it from the coordinates, which rounds
        return Affine.from_gdal(*(float(v) for v in gdal.split())), crs
    if crs is None:
        return None, None
    return data.rio.transform(), crs


def _thickness(data: Any, given: Any, layers: int) -> np.ndarray:
    """Layer thicknesses in m, shape (L,): the dz coordinate or `given`; 1 m for one layer."""
    own = np.asarray(data.coords["dz"].values, float) if "dz" in data.coords else None
    if given is not None:
        given = np.atleast_1d(np.asarray(given, float))
        if given.size not in (1, layers):
            raise InputError(f"`dz` has {given.size} values but the data has {layers} layers")
    found = _agree("dz", None if own is None else [own], None if given is None else [given])
    if found is None:
        if layers > 1:
            raise InputError(f"{layers} layers make a 3D model; give the layer thickness `dz` in m "
                             "(one value, or one per layer)")  # fmt: skip
        return np.ones(1)
    return np.broadcast_to(found[0], (layers,))
