"""The run summary: inputs, parameters, grids, statistics, the check — everything to trace a result.

`build_summary` describes a run as a `RunSummary`; the command line and the
report read its attributes, `upscale.export.write_result` writes its
``to_dict()`` as ``summary.json``.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np

from ..caution import CAUTION
from ..methods.coarsen import Upscaled
from ..methods.registry import find_method, method_record
from ..stats import scan_values
from .anisotropy import tensor_summary
from .geometry import GeometryRecord, geometry_record, transmissivities
from .records import (
    AxisResult,
    GridLikeRecord,
    GridRecord,
    Leaf,
    Provenance,
    ZeroKRecord,
    grid_record,
    jsonable,
    provenance,
)


@dataclass(frozen=True)
class MethodUsed(Leaf):
    """The method of a run: its ``name``, its ``options`` and, for a method per axis, ``per_axis``.

    ``per_axis`` (axis letter -> method name, `upscale.methods.registry.per_axis`)
    is None, and left out of the JSON object, for one method on every axis.
    """

    name: str
    options: dict[str, Any]
    per_axis: dict[str, str] | None = None

    def to_dict(self) -> dict[str, Any]:
        """The record as the JSON object it is written as (`method_record`)."""
        return method_record(self.name, self.options)

    @classmethod
    def from_dict(cls, data: dict[str, Any]) -> MethodUsed:
        """The record of a JSON object written by `to_dict`."""
        return cls(data["name"], data["options"], data.get("per_axis"))


@dataclass(frozen=True)
class ActiveCounts:
    """What is active on each grid, and what the run dropped.

    Attributes
    ----------
    fine_cells : int
        Active fine cells.
    coarse_blocks, coarse_blocks_inactive : int
        Active and inactive coarse blocks.
    dropped_cells : int
        Fine cells cropped beyond the last whole block.
    lost_pore_volume_m3 : float
        Pore volume of the active cells the blocks made inactive hold (m³).
    zero_k : ZeroKRecord
        What the zero-k rule did.
    coarse_pore_volume_m3 : float or None
        Pore volume of the coarse grid (m³); None without porosity.
    """

    fine_cells: int
    coarse_blocks: int
    coarse_blocks_inactive: int
    dropped_cells: int
    lost_pore_volume_m3: float
    zero_k: ZeroKRecord
    coarse_pore_volume_m3: float | None = None

    def to_dict(self) -> dict[str, Any]:
        """The ``active`` object of ``summary.json``."""
        found = {"fine_cells": self.fine_cells, "coarse_blocks": self.coarse_blocks,
                 "coarse_blocks_inactive": self.coarse_blocks_inactive,
                 "dropped_cells": self.dropped_cells, "lost_pore_volume_m3": self.lost_pore_volume_m3,
                 "zero_k": self.zero_k.to_dict()}  # fmt: skip
        if self.coarse_pore_volume_m3 is not None:
            found["coarse_pore_volume_m3"] = self.coarse_pore_volume_m3
        return found

    @classmethod
    def from_dict(cls, data: dict[str, Any]) -> ActiveCounts:
        """The ``active`` object of ``summary.json``."""
        return cls(data["fine_cells"], data["coarse_blocks"], data["coarse_blocks_inactive"],
                   data["dropped_cells"], data["lost_pore_volume_m3"], ZeroKRecord.from_dict(data["zero_k"]),
                   data.get("coarse_pore_volume_m3"))  # fmt: skip


@dataclass(frozen=True)
class PropertyStats(Leaf):
    """Statistics of one property over a grid's cells (the property's unit; None where undefined).

    Attributes
    ----------
    cells, active : int
        All cells, and those with a value.
    min, max, mean, geometric_mean : float or None
    log10_std : float or None
        Standard deviation of log10 of the positive values.
    """

    cells: int
    active: int
    min: float | None
    max: float | None
    mean: float | None
    geometric_mean: float | None
    log10_std: float | None


@dataclass(frozen=True)
class Statistics:
    """Per property (``kx``, ``ky``, ``kz``, ``porosity``), its statistics on the `fine` and `coarse` grid."""

    fine: dict[str, PropertyStats]
    coarse: dict[str, PropertyStats]

    def to_dict(self) -> dict[str, Any]:
        """The ``statistics`` object of ``summary.json``."""
        return {grid: {name: s.to_dict() for name, s in getattr(self, grid).items()}
                for grid in ("fine", "coarse")}  # fmt: skip

    @classmethod
    def from_dict(cls, data: dict[str, Any]) -> Statistics:
        """The ``statistics`` object of ``summary.json``."""
        fine, coarse = ({name: PropertyStats.from_dict(s) for name, s in data[grid].items()}
                        for grid in ("fine", "coarse"))  # fmt: skip
        return cls(fine, coarse)


@dataclass(frozen=True)
class WindowSpread(Leaf):
    """The check errors of the windows along one axis: ``min``, ``median``, ``max``, ``mean`` (fractions)."""

    min: float
    median: float
    max: float
    mean: float
    windows: int


@dataclass(frozen=True)
class WindowCheck:
    """The check on one window: its fine ``rows`` and ``columns`` (zero-based, end excluded) and per axis."""

    rows: list[int]
    columns: list[int]
    check: dict[str, AxisResult]

    def to_dict(self) -> dict[str, Any]:
        """A window of ``check.windows`` in ``summary.json``."""
        return {"rows": self.rows, "columns": self.columns,
                "check": {a: c.to_dict() for a, c in self.check.items()}}  # fmt: skip

    @classmethod
    def from_dict(cls, data: dict[str, Any]) -> WindowCheck:
        """A window of ``check.windows`` in ``summary.json``."""
        checks = {a: AxisResult.from_dict(c) for a, c in data["check"].items()}
        return cls(data["rows"], data["columns"], checks)


@dataclass(frozen=True)
class FlowCheck:
    """The fine-versus-coarse flow check of a run: per axis, or why the whole model was not solved.

    Attributes
    ----------
    axes : dict of str to AxisResult
        Per axis (empty when skipped).
    skipped : str or None
        Why the whole fine model was not solved (past the check limit).
    windows : tuple of WindowCheck, or None
        The check on windows of whole blocks, done instead.
    spread : dict of str to (WindowSpread or None), or None
        Per axis, the spread of the windows' errors.
    rule : str or None
        How the windows were chosen.
    """

    axes: dict[str, AxisResult]
    skipped: str | None = None
    windows: tuple[WindowCheck, ...] | None = None
    spread: dict[str, WindowSpread | None] | None = None
    rule: str | None = None

    def to_dict(self) -> dict[str, Any]:
        """The ``check`` object of ``summary.json``."""
        if self.skipped is None:
            return {a: c.to_dict() for a, c in self.axes.items()}
        found: dict[str, Any] = {"skipped": self.skipped}
        if self.windows is not None:
            found["windows"] = [w.to_dict() for w in self.windows]
            found["spread"] = {a: None if s is None else s.to_dict() for a, s in (self.spread or {}).items()}
            found["rule"] = self.rule
        return found

    @classmethod
    def from_dict(cls, data: dict[str, Any]) -> FlowCheck:
        """The ``check`` object of ``summary.json`` (not null)."""
        if "skipped" not in data:
            return cls({a: AxisResult.from_dict(c) for a, c in data.items()})
        if "windows" not in data:
            return cls({}, data["skipped"])
        return cls({}, data["skipped"], tuple(WindowCheck.from_dict(w) for w in data["windows"]),
                   {a: None if s is None else WindowSpread.from_dict(s) for a, s in data["spread"].items()},
                   data["rule"])  # fmt: skip


@dataclass(frozen=True)
class TensorSummary:
    """Anisotropy and off-diagonal terms of a full-tensor result over the active blocks.

    Attributes
    ----------
    blocks : int
        Active blocks summarised (0: the other attributes are None).
    anisotropy_median, anisotropy_max : float or None
        λmax/λmin of the symmetric part of the block tensors.
    blocks_not_positive : int or None
        Blocks with λmin <= 0 (left out of the ratios).
    off_diagonal_max, off_diagonal_p95 : float or None
        Largest relative off-diagonal term per block: maximum and 95th percentile.
    blocks_above_warning : int or None
        Blocks past the warning's threshold.
    warning : str or None
        A sentence when the off-diagonal terms matter.
    blocks_without_path : dict of str to int, or None
        Per axis, active blocks with no flowing path along it.
    """

    blocks: int
    anisotropy_median: float | None = None
    anisotropy_max: float | None = None
    blocks_not_positive: int | None = None
    off_diagonal_max: float | None = None
    off_diagonal_p95: float | None = None
    blocks_above_warning: int | None = None
    warning: str | None = None
    blocks_without_path: dict[str, int] | None = None

    def to_dict(self) -> dict[str, Any]:
        """The ``tensor`` object of ``summary.json`` (``blocks`` alone when there are none)."""
        if not self.blocks:
            return {"blocks": self.blocks}
        return {name: getattr(self, name) for name in self.__dataclass_fields__}

    @classmethod
    def from_dict(cls, data: dict[str, Any]) -> TensorSummary:
        """The ``tensor`` object of ``summary.json``."""
        return cls(**data)


#: The ``rule`` of ``summary.json``'s ``transmissibility``, by the ``faces`` of the method.
FACE_RULES = {None: "harmonic half-block", "flow": "two-block flow solves",
              "global": "fits to the fine global flows",
              "local-global": "two-block flow solves iterated with coarse global flows (local-global)",
              }  # fmt: skip


@dataclass(frozen=True)
class FaceRule(Leaf):
    """How the coarse transmissibilities were found (``rule``) and ``replaced_faces``: undefined ones.

    A local–global run adds ``iterations``, ``last_change`` (the largest
    relative change of a face in the last iteration) and ``kept_faces``
    (faces that kept their previous value: negative or undefined), see
    `upscale.methods.local_global`; the keys are left out otherwise.
    """

    rule: str
    replaced_faces: int
    iterations: int | None = None
    last_change: float | None = None
    kept_faces: int | None = None

    def to_dict(self) -> dict[str, Any]:
        """The ``transmissibility`` object of ``summary.json``."""
        return {name: value for name, value in super().to_dict().items() if value is not None}

    @classmethod
    def from_dict(cls, data: dict[str, Any]) -> FaceRule:
        """The ``transmissibility`` object of ``summary.json``."""
        return cls(**{name: data.get(name) for name in cls.__dataclass_fields__})


@dataclass(frozen=True)
class RunSummary:
    """Everything to trace a run: the content of ``summary.json``.

    Attributes
    ----------
    provenance : Provenance
        Tool, versions, command, inputs, read options.
    unit : str
        Permeability unit of the field.
    method : MethodUsed
    block : dict
        The block partition (`upscale.BlockSpec.summary`).
    dimensions : int
        2 or 3.
    fine, coarse : GridRecord
        The two grids.
    active : ActiveCounts
        Active cells and blocks, dropped cells, pore volumes.
    statistics : Statistics
        Per property on each grid.
    check : FlowCheck or None
        None when the check was not run.
    files : tuple of str
        The files written beside ``summary.json``.
    timings_s : dict of str to float
        Seconds per step.
    caution : str
        The caution every output carries.
    tensor : TensorSummary or None
        Anisotropy of a flow-based (local) method's tensors.
    transmissibility : FaceRule or None
        The rule of a flow-based (local) method's coarse faces.
    well_check : dict or None
        The well-driven check (`upscale.check.wells.WellCheck.summary`, with the
        wells file), JSON-ready; None when no wells were given.
    layers : dict or None
        How automatic layers were chosen (`upscale.analysis.layers.LayerChoice.summary`);
        None when the block's layers were not automatic.
    grid_like : GridLikeRecord or None
        The template raster whose cells are the blocks (``--grid-like``); None without one.
    geometry : GeometryRecord or None
        The model's geometry (`upscale.analysis.geometry`); None for a flat model.
    """

    provenance: Provenance
    unit: str
    method: MethodUsed
    block: dict[str, Any]
    dimensions: int
    fine: GridRecord
    coarse: GridRecord
    active: ActiveCounts
    statistics: Statistics
    check: FlowCheck | None
    files: tuple[str, ...]
    timings_s: dict[str, float]
    caution: str
    tensor: TensorSummary | None = None
    transmissibility: FaceRule | None = None
    well_check: dict[str, Any] | None = None
    layers: dict[str, Any] | None = None
    grid_like: GridLikeRecord | None = None
    geometry: GeometryRecord | None = None

    def to_dict(self) -> dict[str, Any]:
        """The content of ``summary.json``, key for key."""
        found = {**self.provenance.to_dict(), "unit": self.unit, "method": self.method.to_dict(),
                 "block": self.block, "dimensions": self.dimensions, "fine": self.fine.to_dict(),
                 "coarse": self.coarse.to_dict(), "active": self.active.to_dict(),
                 "statistics": self.statistics.to_dict(),
                 "check": None if self.check is None else self.check.to_dict(), "files": list(self.files),
                 "timings_s": self.timings_s, "caution": self.caution}  # fmt: skip
        if self.tensor is not None:
            found["tensor"] = self.tensor.to_dict()
        if self.transmissibility is not None:
            found["transmissibility"] = self.transmissibility.to_dict()
        if self.well_check is not None:
            found["well_check"] = self.well_check
        if self.layers is not None:
            found["layers"] = self.layers
        if self.grid_like is not None:
            found["grid_like"] = self.grid_like.to_dict()
        if self.geometry is not None:
            found["geometry"] = self.geometry.to_dict()
        return found

    @classmethod
    def from_dict(cls, data: dict[str, Any]) -> RunSummary:
        """The record of a ``summary.json``'s content."""
        check, tensor, faces = data["check"], data.get("tensor"), data.get("transmissibility")
        grid_like, shape = data.get("grid_like"), data.get("geometry")
        return cls(Provenance.from_dict(data), data["unit"], MethodUsed.from_dict(data["method"]),
                   data["block"], data["dimensions"], GridRecord.from_dict(data["fine"]),
                   GridRecord.from_dict(data["coarse"]), ActiveCounts.from_dict(data["active"]),
                   Statistics.from_dict(data["statistics"]),
                   None if check is None else FlowCheck.from_dict(check), tuple(data["files"]),
                   data["timings_s"], data["caution"],
                   None if tensor is None else TensorSummary.from_dict(tensor),
                   None if faces is None else FaceRule.from_dict(faces), data.get("well_check"),
                   data.get("layers"),
                   None if grid_like is None else GridLikeRecord.from_dict(grid_like),
                   None if shape is None else GeometryRecord.from_dict(shape))  # fmt: skip


def build_summary(
    result: Upscaled,
    *,
    files: list[str],
    command: list[str] | None = None,
    timings: dict[str, float] | None = None,
    check: dict[str, Any] | None = None,
    read: dict[str, Any] | None = None,
    wells: dict[str, Any] | None = None,
    layers: dict[str, Any] | None = None,
    grid_like: GridLikeRecord | None = None,
) -> RunSummary:
    """Describe a run.

    Parameters
    ----------
    result : Upscaled
        The run's result.
    files : list of str
        Names of the files written beside the summary.
    command : list of str, optional
        The command line that produced the run.
    timings : dict, optional
        Seconds spent per step.
    check : dict, optional
        The fine-versus-coarse flow check: per axis ``AxisCheck.summary()``, or
        ``{"skipped": reason}`` (with the windows checked instead, if any).
    read : dict, optional
        The options the fine field was read with (unit, scale, nodata, dz,
        cell size, kv/kh), so the run can be checked again later.
    wells : dict, optional
        The well-driven check (`upscale.check.wells.WellCheck.summary`).
    layers : dict, optional
        How automatic layers were chosen (`upscale.analysis.layers.LayerChoice.summary`).
    grid_like : GridLikeRecord, optional
        The template raster whose cells are the blocks.

    Returns
    -------
    RunSummary
    """
    fine, coarse = result.fine, result.coarse
    tensor, faces = None, None
    if find_method(result.method).local:
        tensor = TensorSummary.from_dict(jsonable(tensor_summary(coarse, result.tensor, result.zeros)))
        faces = _face_rule(result)
    return RunSummary(
        provenance(fine, command, read), fine.unit,
        MethodUsed.from_dict(jsonable(method_record(result.method, result.options))),
        jsonable(result.block.summary()), fine.ndim, grid_record(fine.grid), grid_record(coarse.grid),
        _active(result), _statistics(result), None if check is None else FlowCheck.from_dict(jsonable(check)),
        tuple(files), jsonable(timings or {}), CAUTION, tensor, faces,
        None if wells is None else jsonable(wells), None if layers is None else jsonable(layers), grid_like,
        _geometry(result, read),
    )  # fmt: skip


def _geometry(result: Upscaled, read: dict[str, Any] | None) -> GeometryRecord | None:
    record = geometry_record(result.fine, result.coarse, read)
    return None if record is None else GeometryRecord.from_dict(jsonable(record.to_dict()))


def _face_rule(result: Upscaled) -> FaceRule:
    """How a local method's coarse faces were found."""
    rule = FACE_RULES[find_method(result.method).faces]
    coupling = result.coupling
    if coupling is None:
        return FaceRule(rule, jsonable(result.replaced_faces))
    return FaceRule(rule, jsonable(result.replaced_faces), coupling.iterations, jsonable(coupling.change),
                    coupling.kept_faces)  # fmt: skip


def _active(result: Upscaled) -> ActiveCounts:
    coarse = result.coarse
    active_blocks = int(np.isfinite(coarse.kx).sum())
    pore = None
    if result.fine.porosity is not None:
        pore = jsonable(float(np.nansum(coarse.porosity * coarse.cell_volumes())))
    zeros = ZeroKRecord.from_dict(jsonable(result.zeros.summary()))
    return ActiveCounts(jsonable(result.fine_stats["kx"].active), active_blocks,
                        int(coarse.kx.size - active_blocks), jsonable(result.dropped_cells),
                        jsonable(result.lost_pore_volume), zeros, pore)  # fmt: skip


def _statistics(result: Upscaled) -> Statistics:
    """Per property on each grid; with `transmissivities`, theirs too."""
    def described(values: Any) -> PropertyStats:
        return PropertyStats.from_dict(jsonable(scan_values(values).summary()))

    fine = {name: PropertyStats.from_dict(jsonable(scan.summary()))
            for name, scan in result.fine_stats.items()}  # fmt: skip
    fine.update({name: described(values) for name, values in (transmissivities(result.fine) or {}).items()})
    coarse = {**result.coarse.properties(), **(transmissivities(result.coarse) or {})}
    if "transmissivity_y" in coarse and "transmissivity_y" not in fine:  # ky is kx on the fine grid
        fine["transmissivity_y"] = fine["transmissivity"]
    return Statistics(fine, {name: described(values) for name, values in coarse.items()})
