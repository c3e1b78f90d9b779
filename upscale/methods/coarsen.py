"""Stage 3: coarse block properties from a fine field by a chosen method.

`coarsen` is the one call that turns a fine `Field` into a coarse one. It
checks the block against the grid, applies the method to every property
(kx, ky, kz along their own axes; porosity by bulk volume), scans the fine
values for anything the method cannot take, and computes it all in a
single pass over the data — dask reads each chunk once.
"""

from __future__ import annotations

import json
import logging
import math
from collections.abc import Mapping
from dataclasses import KW_ONLY, dataclass, field, replace
from functools import cached_property
from typing import TYPE_CHECKING, Any

import numpy as np

from ..display import Row, as_html, as_text, cells, sizes
from ..errors import InputError
from ..field import AXES, AXIS_NAMES, PERMEABILITY, Field
from ..flow import AxisFlow, Transmissibilities, transmissibilities
from ..grid import BlockSpec
from ..parallel import apply_blocks, compute_together
from ..stats import ValueScan, scan_each, where
from . import averages, geometry
from .flow_based import TENSOR
from .local_global import Coupling
from .registry import Method, get_method, method_for_axes, run_kernel
from .zeros import ZeroOutcome, apply_zero_rule

if TYPE_CHECKING:
    import xarray

log = logging.getLogger(__name__)

#: Below this fraction of active cells a field is said to be almost all nodata (our
#: threshold: irregular domains in their bounding box leave far more than 1 % active).
SPARSE = 0.01


@dataclass(frozen=True, eq=False, repr=False)
class Upscaled:
    """A fine field, its coarse counterpart and how one was made from the other.

    Made by `coarsen`. Every attribute after `coarse` is given by keyword.

    Attributes
    ----------
    fine : Field
        The fine field as used (cropped to whole blocks with ``remainder='crop'``).
    coarse : Field
        Coarse properties on the coarse grid; NaN marks inactive blocks.
    method : str
        Method name, or the text of a method per axis such as
        ``xy=arithmetic,z=harmonic`` (`upscale.methods.registry.per_axis`).
    options : dict
        The method's options (e.g. ``{'exponent': 0.5}``).
    block : BlockSpec
        The block partition.
    active_fraction : ndarray of shape (L', M', N')
        Active fraction of each block's bulk volume.
    fine_stats : dict of str to ValueScan
        Statistics of each fine property.
    dropped_cells : int
        Fine cells dropped by cropping.
    lost_pore_volume : float
        Pore volume (m³) of blocks made inactive by ``min_active``; 0 without porosity.
    zeros : ZeroOutcome
        What the block partition's zero-k rule did to blocks with k = 0 along
        some axis (`upscale.methods.zeros`): made inactive, floored or kept.
    tensor : dict of str to ndarray
        Off-diagonal permeability terms (``kxy`` ... , unit of k) of full-tensor
        methods: ``kxy`` is the flux along x per unit gradient along y.
    faces : tuple of 3 ndarray or None
        Coarse face transmissibilities upscaled directly, in (unit of k) · m,
        laid out as `upscale.flow.Transmissibilities.faces`.
    boundary : tuple of 3 (ndarray, ndarray) or None
        With `faces`: the half transmissibilities of the first and last blocks
        to the domain's outer faces, laid out as
        `upscale.flow.Transmissibilities.boundary`.
    replaced_faces : int
        Faces between active blocks whose direct value was undefined (no
        pressure drop between the two blocks; for ``global``, also a fit
        that is not positive) and that took the harmonic half-block value
        instead.
    direct_faces : tuple of 3 ndarray of bool or None
        With `faces`: True for the inner faces whose transmissibility is the
        method's own (laid out as `faces`), False for those of the harmonic
        half-block rule.
    coupling : Coupling or None
        How the local–global iteration of the faces went (``local-global``
        only; `upscale.methods.local_global`).
    """

    fine: Field
    coarse: Field
    _: KW_ONLY
    method: str
    options: dict
    block: BlockSpec
    active_fraction: np.ndarray
    fine_stats: dict[str, ValueScan] = field(default_factory=dict)
    dropped_cells: int = 0
    lost_pore_volume: float = 0.0
    zeros: ZeroOutcome = field(default_factory=lambda: ZeroOutcome("keep"))
    tensor: dict[str, np.ndarray] = field(default_factory=dict)
    faces: tuple[np.ndarray, np.ndarray, np.ndarray] | None = None
    boundary: tuple[tuple[np.ndarray, np.ndarray], ...] | None = None
    replaced_faces: int = 0
    direct_faces: tuple[np.ndarray, np.ndarray, np.ndarray] | None = None
    coupling: Coupling | None = None

    def transmissibilities(self) -> Transmissibilities:
        """Coarse transmissibilities, in (unit of k) · m.

        Upscaled directly when the method made them; otherwise by the harmonic
        half-block rule from the block permeabilities. Computed once: the
        check, the windows and the package all use them.
        """
        return self._transmissibilities

    @cached_property
    def _transmissibilities(self) -> Transmissibilities:
        # a frozen dataclass still has a __dict__, where cached_property keeps the value
        known = transmissibilities(self.coarse)
        if self.faces is not None:
            known = replace(known, faces=self.faces, boundary=self.boundary)
        return known

    def to_xarray(self) -> xarray.Dataset:
        """The coarse field as an xarray Dataset, with its transmissibilities and how it was made.

        Returns
        -------
        xarray.Dataset
            What `Field.to_xarray` gives for `coarse` (``Field.from_xarray``
            reads it back): ``kx``, ``ky`` (``kz``, ``porosity``) on
            ``(layer, y, x)`` or ``(y, x)`` with their coordinates and CRS;
            the variables ``active_fraction`` (active fraction of each block's
            bulk volume), the off-diagonal tensor terms (``kxy``..., unit of k)
            of full-tensor methods, and the coarse transmissibilities
            (`transmissibilities`) between neighbouring blocks ``tx``, ``ty``
            (``tz``) in (unit of k) · m on the dimensions ``x_face``,
            ``y_face``, ``z_face`` (the faces' x, y or height); the attributes
            ``method``, ``options`` (JSON), ``block``, ``remainder``,
            ``min_active``, ``zero_k``, ``zero_k_outcome``, ``fine_shape``,
            ``dropped_cells`` and ``lost_pore_volume_m3``.

        Raises
        ------
        MissingLibraryError
            If xarray or rioxarray is not installed (the ``xarray`` extra).

        Examples
        --------
        >>> fine = Field.from_arrays(np.array([[1.0, 4.0], [1.0, 4.0]]), cell_size=(5.0, 5.0))
        >>> ds = coarsen(fine, "1x2", "arithmetic").to_xarray()
        >>> ds.kx.values.tolist(), ds.tx.dims, ds.tx.values.tolist(), ds.attrs["block"]
        ([[1.0, 4.0]], ('y', 'x_face'), [[3.2]], '1x2')
        """
        from ..labelled import to_dataset

        coarse, unit = self.coarse, self.coarse.unit
        extra = {"active_fraction": (self.active_fraction, {
            "units": "1", "long_name": "active fraction of the block's bulk volume"})}  # fmt: skip
        extra.update({name: (values, {"units": unit, "long_name": f"permeability tensor term: flux along "
                                      f"{name[1]} per unit pressure gradient along {name[2]}"})
                      for name, values in self.tensor.items()})  # fmt: skip
        how = "upscaled directly" if self.faces is not None else "harmonic half-block rule"
        faces = {axis: (self.transmissibilities().faces[AXES[axis]], {
            "units": f"{unit}·m", "long_name": f"transmissibility between neighbouring blocks along {axis}",
            "method": how}) for axis in coarse.axes}  # fmt: skip
        spec = self.block.summary()
        attrs = {"method": self.method, "options": json.dumps(self.options), "block": str(self.block),
                 "remainder": spec["remainder"], "min_active": spec["min_active"], "zero_k": spec["zero_k"],
                 "zero_k_outcome": self.zeros.line(unit) or "no block with k = 0",
                 "fine_shape": list(self.fine.shape), "dropped_cells": self.dropped_cells,
                 "lost_pore_volume_m3": self.lost_pore_volume}  # fmt: skip
        return to_dataset(coarse, extra=extra, faces=faces, attrs=attrs)

    def _rows(self) -> tuple[str, list[Row]]:
        options = "".join(f", {k}={v:.4g}" if isinstance(v, float) else f", {k}={v}"
                          for k, v in self.options.items())  # fmt: skip
        coarse, unit = self.coarse, self.coarse.unit
        title = f"Upscaled: {self.method}{options}, {self.block} blocks, k in {unit}"
        kx = coarse.kx[~np.isnan(coarse.kx)]
        dropped = f", {self.dropped_cells} dropped ({self.block.remainder})" if self.dropped_cells else ""
        rows = [
            ("fine", cells(self.fine.shape, AXIS_NAMES) + dropped),
            ("coarse", cells(coarse.shape, AXIS_NAMES) + ": "
             + ", ".join(sizes(n, getattr(coarse.grid, n)) for n in ("dx", "dy", "dz"))),
            ("active", f"{kx.size} of {math.prod(coarse.shape)} blocks"),
            ("coarse kx", f"mean {kx.mean():.4g} {unit}, {kx.min():.4g} to {kx.max():.4g}" if kx.size
             else "no active block"),
            ("properties", ", ".join([*coarse.properties(), *self.tensor])),
        ]
        if self.zeros.line(unit):
            rows.append(("zero k", f"{self.block.zero_k}: {self.zeros.line(unit)}"))
        if self.faces is not None:
            rows.append(("faces", "upscaled directly" + (f", {self.replaced_faces} by the harmonic rule"
                                                         if self.replaced_faces else "")))  # fmt: skip
        return title, rows

    def __repr__(self) -> str:
        return as_text(*self._rows())

    def _repr_html_(self) -> str:
        return as_html(*self._rows())


def coarsen(
    field: Field | Any,
    block: BlockSpec | str,
    method: str | Mapping[str, str] = "geometric",
    *,
    cell_size: tuple[float, float] | None = None,
    dz: float | np.ndarray | None = None,
    unit: str | None = None,
    flows: dict[str, AxisFlow] | None = None,
    **options: Any,
) -> Upscaled:
    """Upscale every property of `field` to coarse blocks.

    Parameters
    ----------
    field : Field, ndarray, dask array, xarray.DataArray or xarray.Dataset
        The fine field. An array of shape (M, N) (a map) or (L, M, N) (layers,
        rows, columns) is permeability along every axis (NaN: inactive), as
        `Field.from_arrays`, on cells of `cell_size` and `dz`. An xarray object
        (dimensions ``(y, x)`` or ``(layer | band | z, y, x)``) brings its
        georeference, cell sizes and nodata, as `Field.from_xarray`.
    block : BlockSpec or str
        The block partition, or its text form such as ``"8x8"``.
    method : str or mapping
        A name from `upscale.METHODS`, or a method per axis: a text such as
        ``"xy=arithmetic,z=harmonic"`` or a mapping such as ``{"xy":
        "arithmetic", "z": "harmonic"}``, naming every axis of the field.
        Each axis's coarse permeability is then the one its method gives
        alone; the options go to the methods that take them. Methods that
        upscale transmissibilities directly (flow-transmissibility, global,
        local-global) serve every axis or none, and flow serves some axes
        with ``bc='sealed'`` only (`upscale.methods.registry.find_method`).
    cell_size : (float, float), optional
        Column width and row height in m of an array `field` (default 1 m by
        1 m), or of an xarray one that does not carry them.
    dz : float or array of shape (L,), optional
        Layer thickness(es) in m of an array `field` (default 1 m), or of an
        xarray one that does not carry them (1 m for a map).
    unit : str, optional
        Permeability unit of an array (default mD) or xarray `field` (default:
        its ``units`` attribute, else mD).
    flows : dict of str to AxisFlow, optional
        The fine model's pressure-drop solves along its axes
        (`upscale.check.fine_solves` of the field as upscaled, i.e. cropped),
        for a method that fits them (``global``); without them it solves
        them itself. Other methods ignore them.
    **options
        The method's options, e.g. ``exponent=0.5`` for ``power``.

    Returns
    -------
    Upscaled
        Coarse properties as NumPy arrays, with the statistics of the fine ones.

    Raises
    ------
    InputError
        If the block does not fit the grid, a value cannot be averaged by the
        method (negative, infinite, or zero where the method needs > 0), or no
        cell is active.

    Examples
    --------
    >>> import numpy as np
    >>> fine = Field.from_arrays(np.array([[1.0, 1.0], [100.0, 100.0]]), cell_size=(10.0, 10.0))
    >>> coarsen(fine, "2x2", "geometric").coarse.kx
    array([[[10.]]])

    A NumPy array is kx (= ky) on cells of 1 m unless `cell_size` says otherwise:

    >>> coarsen(np.array([[1.0, 1.0], [100.0, 100.0]]), "2x2", cell_size=(10.0, 10.0)).coarse.kx
    array([[[10.]]])

    A method per axis: arithmetic along the rows of 1 and 100, harmonic across them:

    >>> layered = coarsen(fine, "2x2", {"x": "arithmetic", "y": "harmonic"})
    >>> layered.method, layered.coarse.kx.item(), round(layered.coarse.ky.item(), 4)
    ('x=arithmetic,y=harmonic', 50.5, 1.9802)
    """
    field = as_field(field, cell_size=cell_size, dz=dz, unit=unit)
    spec = BlockSpec.parse(block) if isinstance(block, str) else block
    if isinstance(method, Mapping):
        method = ",".join(f"{axes}={name}" for axes, name in method.items())
    chosen, options = get_method(method_for_axes(method, field.axes), options)
    spec.check(field.shape, field.ndim)
    for name in ("dx", "dy"):
        sizes = getattr(field.grid, name)
        if np.any(sizes != sizes[0]):
            raise InputError(f"the fine grid's {name} must be uniform (every raster's is)")
    fine = field.leading(spec.used_shape(field.shape))
    dz, cells = fine.grid.dz, spec.cells

    given = {"flows": flows} if chosen.global_flows else {}
    lazy = run_kernel(chosen, fine, cells, **given, **options)
    if fine.geometry is not None:
        lazy["_ratio"] = geometry.block_ratio(fine, cells)
        if fine.porosity is not None:
            lazy["porosity"] = geometry.porosity_mean(fine, cells, lazy["_ratio"])
        lazy["_active"] = geometry.active_volume(fine, cells)
    else:
        if fine.porosity is not None:
            lazy["porosity"] = apply_blocks(averages.bulk_mean, fine.porosity, dz, cells)
        lazy["_active"] = apply_blocks(averages.active_volume, fine.kx, dz, cells)
    scans = scan_each(fine.properties())

    done = compute_together({**lazy, **{f"_scan_{k}": v for k, v in scans.items()}})
    scans = {name: done.pop(f"_scan_{name}") for name in scans}
    computed = done
    _check_values(scans, chosen, options, fine)

    coarse_grid = spec.coarse_grid(fine.grid)
    ratio = computed.pop("_ratio", None)
    shape = None if ratio is None else geometry.coarse_geometry(fine, cells, coarse_grid.dz, ratio)
    volumes = coarse_grid.cell_volumes() if shape is None else coarse_grid.cell_volumes() * ratio
    # active volume came in units of (cell area x m); the two are summed in different
    # orders, so the comparison below allows for rounding
    cell_area = fine.grid.dx[0] * fine.grid.dy[0]
    with np.errstate(divide="ignore", invalid="ignore"):
        fraction = np.nan_to_num(np.clip(computed.pop("_active") * cell_area / volumes, 0.0, 1.0))
    inactive = (fraction == 0) | (fraction < spec.min_active * (1 - 1e-12))
    pore = computed["porosity"] * volumes if "porosity" in computed else None
    lost = float(np.nansum(pore[inactive])) if pore is not None else 0.0
    tensor = _tensor_terms(computed.pop("tensor"), fine.ndim, computed) if "tensor" in computed else {}
    faces = computed.pop("faces", None)
    regions = computed.pop("regions", None)
    names = [PERMEABILITY[a] for a in fine.axes]
    floored, inactive, zeros = apply_zero_rule(spec, {name: computed[name] for name in names}, inactive, pore)
    computed.update(floored)
    for values in (*computed.values(), *tensor.values()):
        values[inactive] = np.nan

    coarse = Field(
        kx=computed["kx"],
        ky=computed["ky"],
        kz=computed.get("kz"),
        porosity=computed.get("porosity"),
        grid=coarse_grid,
        unit=field.unit,
        sources=field.sources,
        geometry=shape,
    )
    replaced, boundary, direct, coupling = 0, None, None, None
    if faces is not None:
        harmonic = transmissibilities(coarse)
        faces, boundary, replaced, direct = _direct_faces(faces, harmonic, fine.ndim)
        if chosen.couple is not None:
            local = replace(harmonic, faces=faces, boundary=boundary)
            closed = tuple(f == 0 for f in harmonic.faces)
            faces, coupling = chosen.couple(regions, local, closed, **options)
    dropped = math.prod(field.shape) - math.prod(fine.shape)
    return Upscaled(fine, coarse, method=chosen.name, options=options, block=spec, active_fraction=fraction,
                    fine_stats=scans, dropped_cells=dropped, lost_pore_volume=lost, zeros=zeros,
                    tensor=tensor, faces=faces, boundary=boundary, replaced_faces=replaced,
                    direct_faces=direct, coupling=coupling)  # fmt: skip


def as_field(data: Any, *, cell_size: tuple[float, float] | None = None, dz: Any = None,
             unit: str | None = None) -> Field:  # fmt: skip
    """`data` as a `Field`: a field as it is, an array or xarray object with its cell sizes.

    Parameters are those of `coarsen`.

    Raises
    ------
    InputError
        For cell sizes or a unit given with a `Field` (it has its own), or
        anything else than the kinds `coarsen` takes.
    """
    from ..labelled import is_labelled

    if isinstance(data, Field):
        named = {"cell_size": cell_size, "dz": dz, "unit": unit}
        given = [f"`{name}`" for name, value in named.items() if value is not None]
        if given:
            raise InputError(f"{', '.join(given)} describe an array; a Field has its own grid and unit")
        return data
    if is_labelled(data):
        return Field.from_xarray(data, cell_size=cell_size, dz=dz, unit=unit)
    if not hasattr(data, "ndim") or not hasattr(data, "dtype"):
        raise InputError("`field` must be a Field, a NumPy or dask array, or an xarray DataArray or "
                         f"Dataset, got {type(data).__name__}")  # fmt: skip
    if data.ndim not in (2, 3):
        raise InputError(f"an array `field` must have 2 (rows, columns) or 3 (layers, rows, columns) "
                         f"dimensions, got {data.ndim}")  # fmt: skip
    return Field.from_arrays(data, cell_size=cell_size or (1.0, 1.0), dz=1.0 if dz is None else dz,
                             unit=unit or "mD")  # fmt: skip


def _tensor_terms(tensor: np.ndarray, ndim: int, computed: dict[str, Any]) -> dict[str, np.ndarray]:
    """Put the diagonal of a (9, L', M', N') tensor into `computed`; return the other terms."""
    names = dict(zip(TENSOR, tensor))
    computed["kx"], computed["ky"] = names["kxx"], names["kyy"]
    if ndim == 3:
        computed["kz"] = names["kzz"]
    axes = "xyz"[:ndim]
    off = {f"k{b}{a}": names[f"k{b}{a}"] for b in axes for a in axes if a != b}
    return {k: np.array(v) for k, v in off.items() if np.any(v != 0)}


def _direct_faces(
    direct: np.ndarray, harmonic: Transmissibilities, ndim: int
) -> tuple[tuple, tuple, int, tuple]:
    """Face and outer-face transmissibilities from a method's per-block values (``faces``).

    Undefined ones take the harmonic value; faces touching an inactive block are
    closed. A map keeps the harmonic (empty) z faces. Also returns the number
    replaced and, per axis, which inner faces kept the method's value.
    """
    replaced = 0

    def merge(values: np.ndarray, rule: np.ndarray) -> np.ndarray:
        nonlocal replaced
        undefined = ~np.isfinite(values)
        closed = rule == 0
        replaced += int((undefined & ~closed).sum())
        return np.where(undefined | closed, rule, values)

    faces, boundary, kept = [], [], []
    for a, rule in enumerate(harmonic.faces):
        if a == 0 and ndim == 2:
            faces.append(rule)
            boundary.append(harmonic.boundary[0])
            kept.append(np.zeros(rule.shape, bool))
            continue
        n = direct.shape[a + 1]
        inner = np.take(direct[a], np.arange(1, n), axis=a)
        kept.append(np.isfinite(inner) & (rule != 0))
        faces.append(merge(inner, rule))
        first, last = harmonic.boundary[a]
        boundary.append((merge(np.take(direct[a], [0], axis=a), first),
                         merge(np.take(direct[3 + a], [n - 1], axis=a), last)))  # fmt: skip
    return tuple(faces), tuple(boundary), replaced, tuple(kept)


def refuse_bad_values(fine: Field) -> None:
    """Refuse a field with no active cell, or infinite or negative values, or porosity above 1."""
    scans = compute_together(scan_each(fine.properties()))
    _check_values(scans, None, {}, fine)


def _check_values(scans: dict[str, ValueScan], method: Method | None, options: dict, fine: Field) -> None:
    sources = {s.role: s.path for s in fine.sources}
    for name, scan in scans.items():
        label = f"{name} ({sources[name]})" if name in sources else name
        if scan.active == 0:
            raise InputError(f"{label}: no active cell (every cell is nodata or NaN)")
        if name == "kx" and scan.active < SPARSE * scan.cells:
            log.warning("%s: only %d of %d cells (%.2g %%) hold a value; check the nodata value "
                        "(upscale info) and the file", label, scan.active, scan.cells,
                        100 * scan.active / scan.cells)  # fmt: skip
        if scan.infinite:
            raise InputError(
                f"{label}: {scan.infinite} infinite value(s), first at {where(scan.first_infinite)}; "
                "mark them as nodata"
            )
        if scan.negative:
            raise InputError(
                f"{label}: {scan.negative} negative value(s), first at {where(scan.first_negative)}; "
                "permeability and porosity cannot be negative — fix the input or mark them as nodata"
            )
        if name == "porosity":
            if scan.maximum > 1:
                raise InputError(
                    f"{label}: porosity up to {scan.maximum:g}; porosity is a fraction in [0, 1]"
                )
        elif scan.zero and method is not None and not method.takes_zeros(options):
            raise InputError(
                f"{label}: {scan.zero} zero permeability value(s), first at "
                f"{where(scan.first_zero)}; the {method.name} average of a block with a zero is "
                "zero whatever the other cells hold — mark them as nodata, or use arithmetic, "
                "tubes, slabs or power with an exponent > 0"
            )
