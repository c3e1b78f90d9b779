"""Fields: permeability arrays on a Cartesian grid.

A `Field` holds the permeability along each axis (and optionally porosity)
as arrays of shape ``(L, M, N)`` — layer, row, column — whether it is a 2D
map (``L == 1``) or a 3D model. Layer 0 is the top layer, row 0 the first
raster row, column 0 the first raster column. The axes map to the usual
names in exactly one place, `AXES`: column -> x, row -> y, layer -> z.

Inactive cells (nodata in the input) hold NaN in every property array: they
have no volume and pass no flow. Arrays may be NumPy arrays or dask arrays;
the grid geometry is always small and in memory.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field
from functools import cached_property
from pathlib import PurePath
from typing import TYPE_CHECKING, Any

import numpy as np

from ._checks import check_positive_sizes
from .display import Row, as_html, as_text, cells, crs_name, sizes
from .errors import InputError
from .geometry import Geometry, reference_permeability
from .units import check_unit, unit_factor

if TYPE_CHECKING:
    import xarray

#: Axis name -> array axis in ``(L, M, N)`` order.
AXES: Mapping[str, int] = {"x": 2, "y": 1, "z": 0}
#: Axis name -> permeability property along it.
PERMEABILITY = {"x": "kx", "y": "ky", "z": "kz"}
#: Names of the array axes, in array order.
AXIS_NAMES = ("layers", "rows", "columns")


@dataclass(frozen=True, eq=False, repr=False)
class Grid:
    """Geometry of a Cartesian grid.

    Parameters
    ----------
    dz : ndarray of shape (L,)
        Layer thicknesses in m, top layer first.
    dy : ndarray of shape (M,)
        Row heights in m, first raster row first.
    dx : ndarray of shape (N,)
        Column widths in m.
    transform : affine.Affine or None
        Map from (column, row) of the regular lattice to map coordinates. For a
        coarse grid with smaller edge blocks the lattice has full-size blocks and
        the true edge sizes are in `dx`, `dy`.
    crs : rasterio.crs.CRS or None
        Coordinate reference system of the map coordinates.
    """

    dz: np.ndarray
    dy: np.ndarray
    dx: np.ndarray
    transform: Any = None
    crs: Any = None

    def __post_init__(self) -> None:
        for name in ("dz", "dy", "dx"):
            sizes = np.atleast_1d(np.asarray(getattr(self, name), dtype=np.float64))
            check_positive_sizes(sizes, name)
            sizes.setflags(write=False)
            object.__setattr__(self, name, sizes)

    @property
    def shape(self) -> tuple[int, int, int]:
        """Number of layers, rows and columns ``(L, M, N)``."""
        return (self.dz.size, self.dy.size, self.dx.size)

    def sizes(self, axis: int) -> np.ndarray:
        """Cell sizes in m along array `axis` (0 = layers, 1 = rows, 2 = columns)."""
        return (self.dz, self.dy, self.dx)[axis]

    @property
    def volume(self) -> float:
        """Total bulk volume in m³."""
        return float(self.dz.sum() * self.dy.sum() * self.dx.sum())

    def cell_volumes(self) -> np.ndarray:
        """Bulk volume of every cell in m³, shape ``(L, M, N)``."""
        return self.dz[:, None, None] * self.dy[None, :, None] * self.dx[None, None, :]

    def edges(self) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Cell-edge coordinates along x, y and z.

        Returns
        -------
        x : ndarray of shape (N + 1,)
            In the CRS's units through `transform`; without one, in m from the
            west edge.
        y : ndarray of shape (M + 1,)
            Likewise; without a transform, in m from the north edge, negative
            southward (row 0 on top).
        z : ndarray of shape (L + 1,)
            Height above the top of the model in m, negative downward.

        Notes
        -----
        The transform's lattice has cells of the largest size along each axis;
        a smaller last cell (an edge block kept by ``remainder='keep'``) takes
        its true share of a lattice cell, whatever the CRS's unit.

        Examples
        --------
        >>> from affine import Affine
        >>> grid = Grid(dz=[2.0], dy=[10.0, 10.0], dx=[20.0, 20.0, 5.0],
        ...             transform=Affine(20.0, 0.0, 1000.0, 0.0, -10.0, 500.0))
        >>> [v.tolist() for v in grid.edges()]
        [[1000.0, 1020.0, 1040.0, 1045.0], [500.0, 490.0, 480.0], [0.0, -2.0]]
        """
        z = 0.0 - _running(self.dz)  # 0.0 on top, not -0.0
        if self.transform is None:
            return _running(self.dx), 0.0 - _running(self.dy), z
        t = self.transform
        x = t.c + t.a * _running(self.dx / self.dx.max())
        return x, t.f + t.e * _running(self.dy / self.dy.max()), z

    def centres(self) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Cell-centre coordinates along x, y and z: the midpoints of `edges`.

        Returns
        -------
        x, y, z : ndarray of shapes (N,), (M,), (L,)
            In the units of `edges`.

        Examples
        --------
        >>> [v.tolist() for v in Grid(dz=[2.0], dy=[10.0], dx=[20.0, 5.0]).centres()]
        [[10.0, 22.5], [-5.0], [-1.0]]
        """
        return tuple((e[:-1] + e[1:]) / 2 for e in self.edges())  # type: ignore[return-value]

    def _rows(self) -> list[Row]:
        rows = [("cell size", ", ".join(sizes(n, getattr(self, n)) for n in ("dx", "dy", "dz")))]
        if self.transform is None and self.crs is None:
            return [*rows, ("georeference", "none")]
        t = self.transform
        where = "" if t is None else f", origin ({t.c:.10g}, {t.f:.10g})"
        return [*rows, ("georeference", crs_name(self.crs) + where)]

    def __repr__(self) -> str:
        return as_text(f"Grid: {cells(self.shape, AXIS_NAMES)}", self._rows())

    def _repr_html_(self) -> str:
        return as_html(f"Grid: {cells(self.shape, AXIS_NAMES)}", self._rows())


def _running(widths: np.ndarray) -> np.ndarray:
    """Ends of consecutive intervals of `widths` laid end to end from 0, shape (len + 1,)."""
    return np.concatenate([[0.0], np.cumsum(widths)])


@dataclass(frozen=True, eq=False)
class Source:
    """Provenance of one input: its role (``kx``, ``porosity``…), path and SHA-256.

    ``resampled``, for an input read onto the grid of the main one: the
    ``rule`` and the grid it came ``from`` (``crs``, ``transform``, ``shape``);
    None for an input on that grid.
    """

    role: str
    path: str
    sha256: str
    resampled: dict[str, Any] | None = None


@dataclass(frozen=True, eq=False, repr=False)
class Field:
    """Permeability (and porosity) on a Cartesian grid.

    Parameters
    ----------
    kx, ky : array of shape (L, M, N)
        Permeability along x (columns) and y (rows), in `unit`; NaN marks inactive cells.
    kz : array of shape (L, M, N) or None
        Permeability along z (layers); None for a 2D map.
    porosity : array of shape (L, M, N) or None
        Porosity as a fraction in [0, 1].
    grid : Grid
        Cell sizes and georeference.
    unit : str
        Unit of the permeabilities (see `upscale.units.UNITS`).
    sources : tuple of Source
        Where the arrays came from, for the run summary.
    geometry : Geometry or None
        Top surface and cell thicknesses of a model whose layers vary in
        thickness (`upscale.geometry`); then ``grid.dz`` holds each layer's
        reference thickness (`Geometry.layer_thickness`). None: every cell
        of a layer is ``grid.dz`` thick and the top is at 0 m.
    """

    kx: Any
    ky: Any
    kz: Any
    porosity: Any
    grid: Grid
    unit: str = "mD"
    sources: tuple[Source, ...] = field(default=())
    geometry: Geometry | None = None

    def __post_init__(self) -> None:
        check_unit(self.unit)
        for name, array in self.properties().items():
            if tuple(array.shape) != self.grid.shape:
                raise InputError(
                    f"{name} has shape {tuple(array.shape)} but the grid is {self.grid.shape} "
                    "(layers, rows, columns)"
                )
        if self.geometry is not None:
            self.geometry.check(self.grid.shape)

    def reference(self) -> Field:
        """The field on the flat grid with the same two-point flow (`upscale.geometry`).

        Without a geometry the field itself. Dask arrays stay lazy; kx and ky
        stay shared when they are. Made once per field: the local solves, the
        check and the wells all ask for it.
        """
        return self if self.geometry is None else self._reference

    @cached_property
    def _reference(self) -> Field:
        # a frozen dataclass still has a __dict__, where cached_property keeps the value
        w = self.geometry.ratio(self.grid.dz)
        kx, ky, kz = reference_permeability(self.kx, self.ky, self.kz, w, self.grid.dz)
        if self.ky is self.kx:
            ky = kx
        porosity = None if self.porosity is None else np.where(w == 0, 0.0, self.porosity * w)
        return Field(kx=kx, ky=ky, kz=kz, porosity=porosity, grid=self.grid, unit=self.unit,
                     sources=self.sources)  # fmt: skip

    def cell_volumes(self) -> Any:
        """Bulk volume of every cell, m³, shape (L, M, N): the true one with a geometry."""
        if self.geometry is None:
            return self.grid.cell_volumes()
        area = self.grid.dy[None, :, None] * self.grid.dx[None, None, :]
        return np.asarray(self.geometry.thickness, dtype=np.float64) * area

    @property
    def ndim(self) -> int:
        """2 for a map, 3 for a model with vertical permeability."""
        return 2 if self.kz is None else 3

    @property
    def shape(self) -> tuple[int, int, int]:
        """``(L, M, N)``: layers, rows, columns."""
        return self.grid.shape

    @property
    def axes(self) -> tuple[str, ...]:
        """The flow axes of this field: ``("x", "y")`` or ``("x", "y", "z")``."""
        return ("x", "y", "z")[: self.ndim]

    def properties(self) -> dict[str, Any]:
        """The property arrays present, by name (``kx``, ``ky``, ``kz``, ``porosity``)."""
        named = {"kx": self.kx, "ky": self.ky, "kz": self.kz, "porosity": self.porosity}
        return {name: array for name, array in named.items() if array is not None}

    def window(self, rows: slice, columns: slice) -> Field:
        """The field on a rectangle of rows and columns (all layers), georeferenced.

        Arrays shared between properties stay shared; dask arrays stay lazy.
        """
        from affine import Affine

        cut_rows = range(self.shape[1])[rows]
        cut_cols = range(self.shape[2])[columns]
        part = (slice(None), rows, columns)
        pieces = {id(a): a[part] for a in self.properties().values()}
        transform = self.grid.transform
        if transform is not None:
            transform = transform @ Affine.translation(cut_cols.start, cut_rows.start)
        grid = Grid(dz=self.grid.dz, dy=self.grid.dy[rows], dx=self.grid.dx[columns],
                    transform=transform, crs=self.grid.crs)  # fmt: skip

        def cut(array: Any) -> Any:
            return None if array is None else pieces[id(array)]

        geometry = None if self.geometry is None else self.geometry.window(rows, columns)
        return Field(kx=cut(self.kx), ky=cut(self.ky), kz=cut(self.kz), porosity=cut(self.porosity),
                     grid=grid, unit=self.unit, sources=self.sources, geometry=geometry)  # fmt: skip

    def leading(self, shape: tuple[int, int, int]) -> Field:
        """The field restricted to its first ``shape`` layers, rows and columns.

        Used to crop a grid to whole blocks. Arrays shared between properties
        stay shared.
        """
        shape = tuple(shape)
        if shape == self.shape:
            return self
        window = tuple(slice(0, n) for n in shape)
        cropped = {id(a): a[window] for a in self.properties().values()}
        grid = Grid(
            dz=self.grid.dz[: shape[0]],
            dy=self.grid.dy[: shape[1]],
            dx=self.grid.dx[: shape[2]],
            transform=self.grid.transform,
            crs=self.grid.crs,
        )
        def cut(array: Any) -> Any:
            return None if array is None else cropped[id(array)]

        return Field(
            kx=cut(self.kx),
            ky=cut(self.ky),
            kz=cut(self.kz),
            porosity=cut(self.porosity),
            grid=grid,
            unit=self.unit,
            sources=self.sources,
            geometry=None if self.geometry is None else self.geometry.leading(shape),
        )

    def in_unit(self, unit: str) -> Field:
        """The field with its permeabilities converted to `unit`, of the same kind as `self.unit`.

        Every average is linear-homogeneous, so upscaling the converted field
        gives the coarse values (and transmissibilities, in `unit` · m) in
        `unit`. Arrays shared between properties stay shared; dask arrays
        stay lazy; porosity is unchanged.

        Raises
        ------
        InputError
            If `unit` is a hydraulic conductivity and `self.unit` a
            permeability, or the other way round (`upscale.units.unit_factor`).

        Examples
        --------
        >>> f = Field.from_arrays(np.full((2, 2), 1000.0), cell_size=(1.0, 1.0)).in_unit("D")
        >>> f.unit, float(f.kx[0, 0, 0]), f.ky is f.kx
        ('D', 1.0, True)
        """
        factor = unit_factor(self.unit, unit)
        if factor == 1.0:
            return self
        permeabilities = {"kx": self.kx, "ky": self.ky, "kz": self.kz}
        scaled = {id(a): a * factor for a in permeabilities.values() if a is not None}
        converted = {name: None if a is None else scaled[id(a)] for name, a in permeabilities.items()}
        return Field(**converted, porosity=self.porosity, grid=self.grid, unit=unit, sources=self.sources,
                     geometry=self.geometry)

    @classmethod
    def from_arrays(
        cls,
        kx: Any,
        *,
        ky: Any = None,
        kz: Any = None,
        porosity: Any = None,
        cell_size: tuple[float, float] = (1.0, 1.0),
        dz: float | np.ndarray | None = None,
        unit: str = "mD",
        three_d: bool | None = None,
        geometry: Geometry | None = None,
    ) -> Field:
        """Build a field from in-memory or dask arrays.

        Parameters
        ----------
        kx : array of shape (M, N) or (L, M, N)
            Permeability along x in `unit`; NaN marks inactive cells.
        ky, kz, porosity : array, optional
            Same shape as `kx`. `ky` defaults to `kx`; `kz` defaults to `kx` for a
            3D field.
        cell_size : (float, float)
            Column width and row height in m.
        dz : float or array of shape (L,), optional
            Layer thickness(es) in m; required for a 3D field, 1 m for a map.
        unit : str
            Permeability unit.
        three_d : bool, optional
            Force a 3D (True) or 2D (False) field; by default 3D when `kx` has
            more than one layer.
        geometry : Geometry, optional
            A top surface and cell thicknesses (`upscale.geometry`), in place
            of `dz`: the layers' reference thicknesses come from it.

        Returns
        -------
        Field

        Examples
        --------
        >>> import numpy as np
        >>> f = Field.from_arrays(np.ones((4, 6)), cell_size=(25.0, 25.0))
        >>> f.shape, f.ndim
        ((1, 4, 6), 2)
        """
        arrays = {"kx": kx, "ky": ky, "kz": kz, "porosity": porosity}
        arrays = {k: _as_3d(v) for k, v in arrays.items() if v is not None}
        layers = arrays["kx"].shape[0]
        if three_d is None:
            three_d = layers > 1 or "kz" in arrays
        if geometry is not None:
            if dz is not None:
                raise InputError("give either `dz` or `geometry`, not both")
            dz = geometry.layer_thickness()
        if three_d:
            if dz is None:
                raise InputError("a 3D field needs the layer thickness dz in m")
            arrays.setdefault("kz", arrays["kx"])
        elif "kz" in arrays:
            raise InputError("kz was given for a 2D map; a map has no vertical permeability")
        arrays.setdefault("ky", arrays["kx"])
        arrays = share_inactive(arrays)
        layer_dz = np.broadcast_to(np.asarray(1.0 if dz is None else dz, float), (layers,))
        grid = Grid(
            dz=layer_dz,
            dy=np.full(arrays["kx"].shape[1], float(cell_size[1])),
            dx=np.full(arrays["kx"].shape[2], float(cell_size[0])),
        )
        return cls(
            kx=arrays["kx"],
            ky=arrays["ky"],
            kz=arrays.get("kz"),
            porosity=arrays.get("porosity"),
            grid=grid,
            unit=unit,
            geometry=geometry,
        )

    @classmethod
    def from_xarray(
        cls,
        data: xarray.Dataset | xarray.DataArray,
        *,
        cell_size: tuple[float, float] | None = None,
        dz: float | np.ndarray | None = None,
        unit: str | None = None,
    ) -> Field:
        """Build a field from an xarray Dataset or DataArray, georeference included.

        Parameters
        ----------
        data : xarray.Dataset or xarray.DataArray
            A Dataset with variables ``kx`` and optionally ``ky``, ``kz``,
            ``porosity`` (as `to_xarray` writes them), or one DataArray of
            permeability (as ``rioxarray.open_rasterio`` reads a raster: ky and,
            for several layers, kz equal to it). Dimensions ``(y, x)`` or
            ``(layer | band | z, y, x)``; the CRS and geotransform are read as
            rioxarray reads them, values equal to the nodata value
            (``_FillValue``...) become NaN. NumPy or dask values; dask stays lazy.
        cell_size : (float, float), optional
            Column width and row height in m, for data whose cell size is not
            known from ``dx``/``dy`` coordinates, a projected georeference or
            evenly spaced ``x``/``y`` coordinates in m.
        dz : float or array of shape (L,), optional
            Layer thickness(es) in m, for data without a ``dz`` coordinate;
            required for several layers, 1 m for a map.
        unit : str, optional
            Permeability unit; by default the ``units`` attribute of ``kx``, else mD.

        Returns
        -------
        Field
            A Dataset from `to_xarray` gives back the field it came from, exactly.

        Raises
        ------
        InputError
            If the dimensions are not those above, ``kx`` is missing, or a cell
            size is unknown or disagrees with the one given.
        MissingLibraryError
            If xarray or rioxarray is not installed (the ``xarray`` extra).
        """
        from .labelled import from_labelled

        parts = from_labelled(data, cell_size=cell_size, dz=dz, unit=unit)
        arrays = share_inactive(parts.arrays)
        geometry = None if parts.geometry is None else Geometry(*parts.geometry)
        return cls(kx=arrays["kx"], ky=arrays["ky"], kz=arrays.get("kz"), porosity=arrays.get("porosity"),
                   grid=Grid(**parts.grid), unit=parts.unit,
                   sources=tuple(Source(*s) for s in parts.sources), geometry=geometry)  # fmt: skip

    def to_xarray(self) -> xarray.Dataset:
        """The field as an xarray Dataset: labelled dimensions, coordinates, units and CRS.

        Returns
        -------
        xarray.Dataset
            Variables ``kx``, ``ky`` (``kz``, ``porosity`` when present) in the
            field's unit (porosity as a fraction), NaN in inactive cells, on
            dimensions ``(layer, y, x)`` — ``(y, x)`` for a one-layer map.
            Coordinates ``x``, ``y`` at cell centres (`Grid.centres`), the cell
            sizes ``dx``, ``dy``, ``dz`` in m, and for a model ``z`` (m, negative
            downward); the CRS and geotransform in a ``spatial_ref`` variable as
            rioxarray writes them, so ``ds.rio.crs`` and ``ds.rio.transform()``
            work. Dask arrays stay lazy. See `upscale.labelled`.

        Raises
        ------
        MissingLibraryError
            If xarray or rioxarray is not installed (the ``xarray`` extra).

        Examples
        --------
        >>> f = Field.from_arrays(np.array([[1.0, 2.0, 3.0]]), cell_size=(10.0, 5.0))
        >>> ds = f.to_xarray()
        >>> ds.kx.dims, ds.x.values.tolist(), ds.kx.attrs["units"]
        (('y', 'x'), [5.0, 15.0, 25.0], 'mD')
        >>> Field.from_xarray(ds).grid.dx.tolist()
        [10.0, 10.0, 10.0]
        """
        from .labelled import to_dataset

        return to_dataset(self)

    def _rows(self) -> tuple[str, list[Row]]:
        layered = self.ndim == 3 or self.shape[0] > 1
        shape = self.shape if layered else self.shape[1:]
        names = AXIS_NAMES if layered else AXIS_NAMES[1:]
        model = "3D model" if self.ndim == 3 else "2D map"
        title = f"Field: {model}, {cells(shape, names)}, k in {self.unit}"
        arrays = self.properties()
        lazy = any(type(a).__module__.partition(".")[0] == "dask" for a in arrays.values())
        kind = f"{'dask (lazy)' if lazy else 'NumPy'} arrays of {np.dtype(self.kx.dtype).name}"
        rows = [("properties", f"{', '.join(arrays)}: {kind}"), *self.grid._rows()]
        if self.geometry is not None:
            rows.append(("geometry", "a top surface and cell thicknesses (dz: each layer's reference)"))
        if self.sources:
            paths = dict.fromkeys(PurePath(s.path).name for s in self.sources)
            rows.append(("read from", ", ".join(paths)))
        return title, rows

    def __repr__(self) -> str:
        return as_text(*self._rows())

    def _repr_html_(self) -> str:
        return as_html(*self._rows())


def _as_3d(array: Any) -> Any:
    if array.ndim == 2:
        return array[None, :, :]
    if array.ndim != 3:
        raise InputError(f"expected a 2D or 3D array, got {array.ndim} dimensions")
    return array


def share_inactive(arrays: dict[str, Any]) -> dict[str, Any]:
    """Make every array NaN wherever any of them is NaN (a cell is active in all or none).

    Works on NumPy and dask arrays alike; arrays that are the same object stay shared.
    """
    distinct = list({id(a): a for a in arrays.values()}.values())
    if len(distinct) == 1:
        return dict(arrays)
    inactive = np.isnan(distinct[0])
    for array in distinct[1:]:
        inactive = inactive | np.isnan(array)
    masked = {id(a): np.where(inactive, np.nan, a) for a in distinct}
    return {name: masked[id(a)] for name, a in arrays.items()}
