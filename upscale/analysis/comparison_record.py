"""The record of a comparison — the content of ``compare.json`` as typed, frozen objects.

`comparison_record` turns a `upscale.analysis.compare.Comparison` (which
holds the fields and solves) into a `ComparisonRecord` (numbers only); the
report, the command line and the ensemble ranking read its attributes, and
`upscale.export.comparison` writes its ``to_dict()``.
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass
from typing import Any

import numpy as np

from ..caution import CAUTION
from ..field import PERMEABILITY
from ..methods.registry import find_method
from .compare import Comparison, Entry
from .records import (
    AxisResult,
    GridLikeRecord,
    GridRecord,
    Provenance,
    ZeroKRecord,
    axis_results,
    grid_record,
    jsonable,
    largest_error,  # fmt: skip
    provenance,
)

#: How a comparison ranks its methods, recorded beside the ranking.
RANKING = "largest |rel_error| over the axes and the held-out corner flow, smallest first"
#: How the methods are ranked when wells were given.
RANKING_WELLS = ("largest |rel_error| over the axes, the held-out corner flow and the wells' total rate, "
                 "smallest first")  # fmt: skip


@dataclass(frozen=True)
class MethodRecord:
    """One method of a comparison, as recorded.

    Attributes
    ----------
    name : str
        Label in tables and figures, e.g. ``flow (periodic)``.
    method : str
        Method name (a key of `upscale.METHODS`), or a method per axis
        (``per_axis`` of `ComparisonRecord`).
    parameters : dict
        The method's options.
    rank : int or None
        1 for the smallest largest error; None when the method failed.
    error : str or None
        Why the method could not run on this field.
    seconds : float
        Time to upscale and solve the coarse checks (s), without compiling kernels.
    compile_seconds : float
        Time spent compiling kernels on their first use meanwhile (s).
    coarse_mean : dict of str to float, or None
        Per permeability, the mean over the active blocks (the field's unit).
    check : dict of str to AxisResult, or None
        The flow check per axis, then per held-out flow (``corner``).
    zero_k : ZeroKRecord or None
        What the zero-k rule did.
    well_check : dict or None
        With wells: the well check of this method (`upscale.check.wells.WellCheck.summary`).
    """

    name: str
    method: str
    parameters: dict[str, Any]
    rank: int | None
    error: str | None
    seconds: float
    compile_seconds: float
    coarse_mean: dict[str, float | None] | None
    check: dict[str, AxisResult] | None
    zero_k: ZeroKRecord | None
    well_check: dict[str, Any] | None = None

    @property
    def bound(self) -> str | None:
        """``lower`` or ``upper`` when the method is one of the bounds of k, else None."""
        return find_method(self.method).bound

    def largest_error(self, axes: str) -> float | None:
        """Largest ``|rel_error|`` over `axes` and the held-out flows (None when failed or undefined)."""
        if self.error is not None or not self.check:
            return None
        found = largest_error(self.check, axes)
        if found is None or self.well_check is None:
            return found
        wells = self.well_check["total_rate"]["rel_error"]
        return None if wells is None or not math.isfinite(wells) else max(found, abs(wells))

    def to_dict(self) -> dict[str, Any]:
        """The method's object in ``compare.json``."""
        found = {f.name: getattr(self, f.name) for f in dataclasses.fields(self)}
        found["check"] = None if self.check is None else {a: c.to_dict() for a, c in self.check.items()}
        found["zero_k"] = None if self.zero_k is None else self.zero_k.to_dict()
        if self.well_check is None:  # absent without wells, as before them
            del found["well_check"]
        return found

    @classmethod
    def from_dict(cls, data: dict[str, Any]) -> MethodRecord:
        """A method's object of ``compare.json``."""
        check, zeros = data["check"], data["zero_k"]
        return cls(data["name"], data["method"], data["parameters"], data["rank"], data["error"],
                   data["seconds"], data["compile_seconds"], data["coarse_mean"],
                   None if check is None else {a: AxisResult.from_dict(c) for a, c in check.items()},
                   None if zeros is None else ZeroKRecord.from_dict(zeros),
                   data.get("well_check"))  # fmt: skip


@dataclass(frozen=True)
class ComparisonRecord:
    """Methods compared on one field: the content of ``compare.json``.

    Attributes
    ----------
    provenance : Provenance
        Tool, versions, command, inputs, read options.
    unit : str
        Permeability unit of the field.
    block : dict
        The block partition (`upscale.BlockSpec.summary`).
    dimensions : int
        2 or 3.
    fine : GridRecord
        The fine grid as compared (cropped to whole blocks when asked).
    ranking : str
        How the methods are ranked (`RANKING`).
    methods : tuple of MethodRecord
        In rank order; failed methods last.
    best : str or None
        Label of the top method (None when every method failed).
    best_along : dict of str to (str or None)
        Per axis, the label of the method with the smallest ``|rel_error|``.
    caution : str
        The caution every output carries.
    files : tuple of str
        The files written beside ``compare.json`` (empty until written).
    layers : dict or None
        How the block's automatic layers were chosen
        (`upscale.analysis.layers.LayerChoice.summary`); None (and absent
        from the file) when they were not automatic.
    per_axis : MethodRecord or None
        The best method per axis (`upscale.analysis.compare.with_per_axis`),
        checked but not ranked; None (and absent from the file) when not sought.
    per_axis_command : str or None
        The ``upscale run`` command line that upscales the field with it,
        written in the file as ``per_axis``'s ``command``.
    grid_like : GridLikeRecord or None
        The template raster whose cells are the blocks (``--grid-like``); None
        (and absent from the file) without one.
    """

    provenance: Provenance
    unit: str
    block: dict[str, Any]
    dimensions: int
    fine: GridRecord
    ranking: str
    methods: tuple[MethodRecord, ...]
    best: str | None
    best_along: dict[str, str | None]
    caution: str
    files: tuple[str, ...] = ()
    layers: dict[str, Any] | None = None
    per_axis: MethodRecord | None = None
    per_axis_command: str | None = None
    grid_like: GridLikeRecord | None = None

    @property
    def axes(self) -> str:
        """The flow axes, e.g. ``"xy"``."""
        return "xyz"[: self.dimensions]

    def method(self, name: str) -> MethodRecord:
        """The method labelled `name`."""
        return next(m for m in self.methods if m.name == name)

    def to_dict(self) -> dict[str, Any]:
        """The content of ``compare.json``, key for key."""
        layers = {} if self.layers is None else {"layers": self.layers}
        if self.grid_like is not None:
            layers["grid_like"] = self.grid_like.to_dict()
        per_axis = {} if self.per_axis is None else {
            "per_axis": {**self.per_axis.to_dict(), "command": self.per_axis_command}}  # fmt: skip
        return {**self.provenance.to_dict(), "unit": self.unit, "block": self.block, **layers,
                "dimensions": self.dimensions, "fine": self.fine.to_dict(), "ranking": self.ranking,
                "methods": [m.to_dict() for m in self.methods], "best": self.best,
                "best_along": self.best_along, **per_axis, "caution": self.caution,
                "files": list(self.files)}  # fmt: skip

    @classmethod
    def from_dict(cls, data: dict[str, Any]) -> ComparisonRecord:
        """The record of a ``compare.json``'s content."""
        return cls(Provenance.from_dict(data), data["unit"], data["block"], data["dimensions"],
                   GridRecord.from_dict(data["fine"]), data["ranking"],
                   tuple(MethodRecord.from_dict(m) for m in data["methods"]), data["best"],
                   data["best_along"], data["caution"], tuple(data.get("files", ())),
                   data.get("layers"), *_per_axis(data.get("per_axis")),
                   None if "grid_like" not in data
                   else GridLikeRecord.from_dict(data["grid_like"]))  # fmt: skip


def _per_axis(data: dict[str, Any] | None) -> tuple[MethodRecord | None, str | None]:
    return (None, None) if data is None else (MethodRecord.from_dict(data), data["command"])


def comparison_record(comparison: Comparison, *, command: list[str] | None = None,
                      read: dict[str, Any] | None = None,
                      per_axis_command: str | None = None,
                      grid_like: GridLikeRecord | None = None) -> ComparisonRecord:  # fmt: skip
    """The record of a comparison, as ``compare.json`` holds it.

    Parameters
    ----------
    comparison : Comparison
        From `upscale.analysis.compare.compare_methods`.
    command : list of str, optional
        The command line that produced it.
    read : dict, optional
        The options the fine field was read with.
    per_axis_command : str, optional
        The command line of the best method per axis, when it was sought.
    grid_like : GridLikeRecord, optional
        The template raster whose cells are the blocks.
    """
    fine = comparison.fine
    return ComparisonRecord(
        provenance(fine, command, read), fine.unit, jsonable(comparison.block.summary()), fine.ndim,
        grid_record(fine.grid), RANKING if comparison.wells is None else RANKING_WELLS,
        tuple(_method(e, fine.axes) for e in comparison.entries),
        _label(comparison.best), {axis: _label(comparison.best_along(axis)) for axis in fine.axes}, CAUTION,
        layers=None if comparison.layers is None else jsonable(comparison.layers.summary()),
        per_axis=None if comparison.per_axis is None else _method(comparison.per_axis, fine.axes),
        per_axis_command=per_axis_command, grid_like=grid_like,
    )  # fmt: skip


def _method(entry: Entry, axes: tuple[str, ...]) -> MethodRecord:
    means, check, zeros = None, None, None
    if entry.result is not None:
        coarse = entry.result.coarse
        means = jsonable({PERMEABILITY[a]: float(np.nanmean(getattr(coarse, PERMEABILITY[a]))) for a in axes})
        check = axis_results(entry.checks)
        zeros = ZeroKRecord.from_dict(jsonable(entry.result.zeros.summary()))
    candidate = entry.candidate
    wells = None if entry.wells is None else jsonable(entry.wells.summary())
    return MethodRecord(candidate.label, candidate.method, jsonable(candidate.options), entry.rank,
                        entry.error, jsonable(entry.seconds), jsonable(entry.compiling), means, check,
                        zeros, wells)  # fmt: skip


def _label(entry: Entry | None) -> str | None:
    return entry.candidate.label if entry is not None else None
