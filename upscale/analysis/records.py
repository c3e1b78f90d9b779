"""The pieces every result record shares: provenance, grids, one axis of the flow check, spreads.

The result model of the tool is a set of frozen dataclasses — `RunSummary`
(``summary.json``), `ComparisonRecord` (``compare.json``), `EnsembleSummary`
and `EnsembleRanking` (``ensemble.json`` of a run and of a comparison) —
built from these pieces. Each record
holds JSON-ready values (an undefined number is None, never NaN) in the
order its file lists them: ``to_dict()`` gives the file's content key for key,
``from_dict()`` reads it back. Writing the files stays in `upscale.export`.
"""

from __future__ import annotations

import dataclasses
import math
import os
import platform
from dataclasses import dataclass
from importlib import metadata
from pathlib import Path
from typing import Any, TypeVar

import numpy as np

from ..check.axis import HELD_OUT, AxisCheck
from ..field import Field, Grid
from ..grid.template import Snap, Template
from .percentiles import PERCENTILES, key

_DEPENDENCIES = ("numpy", "scipy", "dask", "rasterio", "numba", "pyamg", "scikit-image", "matplotlib",
                 "pyarrow", "netCDF4", "pyproj", "pyevtk")

_Leaf = TypeVar("_Leaf", bound="Leaf")


def versions() -> dict[str, str]:
    """Versions of the tool, Python and the libraries that shape the numbers and the files."""
    found = {"upscale": _version("upscale"), "python": platform.python_version()}
    found.update({name: _version(name) for name in _DEPENDENCIES})
    return found


def _version(name: str) -> str:
    try:
        return metadata.version(name)
    except metadata.PackageNotFoundError:
        return "not installed"


def working_folder(command: list[str] | None) -> str | None:
    """The absolute folder a recorded `command` runs in (its relative paths start there); None without one.

    Recorded beside ``command`` in ``summary.json``, ``compare.json`` and
    ``ensemble.json``, and shown as ``cd FOLDER && COMMAND`` in the report.
    The tool never changes its working folder, so it is the one the command
    was started in.
    """
    return os.getcwd() if command else None


def jsonable(value: Any) -> Any:
    """Plain JSON data: NaN and infinities become null, NumPy scalars Python numbers."""
    if isinstance(value, dict):
        return {str(k): jsonable(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [jsonable(v) for v in value]
    if isinstance(value, (np.floating, float)):
        return float(value) if math.isfinite(value) else None
    if isinstance(value, np.integer):
        return int(value)
    return value


class Leaf:
    """A record whose fields are plain JSON values, named as the keys of its JSON object.

    The fields named in `OPTIONAL` are left out of the object when None, and
    read back as None when absent (keys added after files were written).
    """

    OPTIONAL: tuple[str, ...] = ()

    def to_dict(self) -> dict[str, Any]:
        """The record as the JSON object it is written as (keys in field order)."""
        found = dataclasses.asdict(self)  # type: ignore[call-overload]
        return {k: v for k, v in found.items() if not (v is None and k in self.OPTIONAL)}

    @classmethod
    def from_dict(cls: type[_Leaf], data: dict[str, Any]) -> _Leaf:
        """The record of a JSON object written by `to_dict`."""
        return cls(**{f.name: data.get(f.name) if f.name in cls.OPTIONAL else data[f.name]
                      for f in dataclasses.fields(cls)})  # type: ignore[arg-type]  # fmt: skip


@dataclass(frozen=True)
class GridRecord(Leaf):
    """A grid as recorded: shape, cell sizes, CRS and transform.

    Attributes
    ----------
    shape : dict of str to int
        ``layers``, ``rows`` and ``columns``.
    dx_m, dy_m : float or dict of str to float
        Cell size along x and y (m): one number on a regular axis, else the
        ``regular`` size and the ``last`` (edge) block's.
    dz_m : list of float
        Layer thicknesses (m), top first.
    crs : str or None
        The coordinate reference system as text.
    transform : list of float or None
        The first six coefficients of the affine transform (a, b, c, d, e, f).
    """

    shape: dict[str, int]
    dx_m: float | dict[str, float]
    dy_m: float | dict[str, float]
    dz_m: list[float]
    crs: str | None
    transform: list[float] | None


def grid_record(grid: Grid) -> GridRecord:
    """A grid as recorded in the result files."""
    layers, rows, cols = grid.shape
    return GridRecord(
        shape={"layers": layers, "rows": rows, "columns": cols},
        dx_m=_sizes(grid.dx),
        dy_m=_sizes(grid.dy),
        dz_m=grid.dz.tolist(),
        crs=grid.crs.to_string() if grid.crs is not None else None,
        transform=list(grid.transform)[:6] if grid.transform is not None else None,
    )


def _sizes(sizes: np.ndarray) -> dict[str, float] | float:
    # a regular axis is one number; otherwise the full size and the edge block's size
    if np.all(sizes == sizes[0]):
        return float(sizes[0])
    return {"regular": float(sizes[0]), "last": float(sizes[-1])}


@dataclass(frozen=True)
class InputRecord(Leaf):
    """One input file: its ``role`` (kx, ky, kz, porosity), the path as given, resolved, and its SHA-256.

    ``resampled`` (`upscale.field.Source`) is written only for an input
    resampled onto the main grid.
    """

    OPTIONAL = ("resampled",)

    role: str
    path: str
    resolved: str
    sha256: str | None
    resampled: dict[str, Any] | None = None


@dataclass(frozen=True)
class GridLikeRecord(Leaf):
    """The template raster whose cells are the coarse blocks (``--grid-like``), and where they lie.

    Attributes
    ----------
    path, resolved : str
        The template as given, and its absolute path.
    sha256 : str
        Of the template's bytes.
    rows, columns : list of int
        The fine rows and columns under whole template cells, zero-based with
        the end excluded: the first of each is the offset, in fine cells, of
        coarse block (0, 0) from the field's origin.
    template_rows, template_columns : list of int
        The template cells the coarse blocks are (zero-based, end excluded).
    """

    path: str
    resolved: str
    sha256: str
    rows: list[int]
    columns: list[int]
    template_rows: list[int]
    template_columns: list[int]

    def window(self, fine: Field) -> Field:
        """`fine` cut to the rows and columns under the template's whole cells (`upscale.Field.window`)."""
        return fine.window(slice(*self.rows), slice(*self.columns))


def grid_like_record(template: Template, snap: Snap) -> GridLikeRecord:
    """The record of the blocks `snap` made of the cells of `template`."""
    return GridLikeRecord(template.path, str(Path(template.path).resolve()), template.sha256,
                          list(snap.rows), list(snap.columns), list(snap.template_rows),
                          list(snap.template_columns))  # fmt: skip


@dataclass(frozen=True)
class Provenance:
    """Where a result comes from: the first keys of every result file.

    Attributes
    ----------
    tool : str
        ``upscale``.
    versions : dict of str to str
        Of the tool, Python and the libraries (`versions`).
    command : list of str or None
        The command line that produced the result.
    working_folder : str or None
        The folder the command ran in (`working_folder`).
    inputs : tuple of InputRecord
        The fine inputs.
    read : dict or None
        The options the fine field was read with (unit, scale, nodata, dz,
        cell size, kv/kh), so the result can be checked again later.
    """

    tool: str
    versions: dict[str, str]
    command: list[str] | None
    working_folder: str | None
    inputs: tuple[InputRecord, ...]
    read: dict[str, Any] | None

    def to_dict(self) -> dict[str, Any]:
        """The provenance keys, in the order the files list them."""
        return {"tool": self.tool, "versions": self.versions, "command": self.command,
                "working_folder": self.working_folder, "inputs": [i.to_dict() for i in self.inputs],
                "read": self.read}  # fmt: skip

    @classmethod
    def from_dict(cls, data: dict[str, Any]) -> Provenance:
        """The provenance of a result file's content (its other keys are ignored)."""
        return cls(data["tool"], data["versions"], data["command"], data["working_folder"],
                   tuple(InputRecord.from_dict(i) for i in data["inputs"]), data["read"])  # fmt: skip


def provenance(fine: Field, command: list[str] | None, read: dict[str, Any] | None) -> Provenance:
    """The provenance of a result on `fine`, from `command` run here with the `read` options."""
    inputs = tuple(InputRecord(s.role, s.path, str(Path(s.path).resolve()), s.sha256, s.resampled)
                   for s in fine.sources)
    return Provenance("upscale", versions(), command, working_folder(command), inputs, jsonable(read))


@dataclass(frozen=True)
class SolveRecord(Leaf):
    """One pressure-drop solve of the flow check.

    Attributes
    ----------
    k_eff : float or None
        Effective permeability along the axis (the field's unit); None when undefined.
    inflow, outflow : float or None
        Total flow rate in and out (m³/s per unit pressure drop and viscosity).
    mass_balance : float or None
        ``|inflow + outflow|`` relative to the inflow.
    connected : bool
        Whether a flowing path joins the two fixed-pressure faces.
    unknowns : int
        Cells solved for.
    isolated_cells : int
        Active cells with no path to a fixed-pressure face (left out).
    solver : str
        ``amg``, ``cg`` or ``direct``.
    iterations : int
        Iterations of an iterative solver (0 for a direct one).
    residual : float or None
        Final relative residual.
    """

    k_eff: float | None
    inflow: float | None
    outflow: float | None
    mass_balance: float | None
    connected: bool
    unknowns: int
    isolated_cells: int
    solver: str
    iterations: int
    residual: float | None


@dataclass(frozen=True)
class AxisResult:
    """The flow check along one axis, or of a held-out flow: the same flow on the fine and the coarse model.

    Attributes
    ----------
    k_fine, k_coarse : float or None
        Effective permeability of each model (the field's unit); for a
        held-out flow, its rate over the rate of k = 1 on the same grid
        (`upscale.flow.corner`).
    rel_error : float or None
        ``(k_coarse - k_fine) / k_fine`` (a fraction); None when the fine model passes nothing.
    fine, coarse : SolveRecord
        The two solves.
    """

    k_fine: float | None
    k_coarse: float | None
    rel_error: float | None
    fine: SolveRecord
    coarse: SolveRecord

    def to_dict(self) -> dict[str, Any]:
        """As ``AxisCheck.summary()`` writes it."""
        return dataclasses.asdict(self)

    @classmethod
    def from_dict(cls, data: dict[str, Any]) -> AxisResult:
        """The check of one axis as written in ``summary.json`` or ``compare.json``."""
        return cls(data["k_fine"], data["k_coarse"], data["rel_error"],
                   SolveRecord.from_dict(data["fine"]), SolveRecord.from_dict(data["coarse"]))  # fmt: skip


def axis_results(checks: dict[str, AxisCheck]) -> dict[str, AxisResult]:
    """`AxisResult` per flow (axes, then held-out) from the ``AxisCheck``s of `upscale.check.check_flow`."""
    return {axis: AxisResult.from_dict(jsonable(c.summary())) for axis, c in checks.items()}


def check_flows(axes: str, checks: dict[str, Any]) -> tuple[str, ...]:
    """The axes, then the held-out flows `checks` holds (none in a check recorded before them)."""
    return (*axes, *(h for h in HELD_OUT if h in checks))


def largest_error(checks: dict[str, AxisResult], axes: str) -> float | None:
    """Largest ``|rel_error|`` over `axes` and the held-out flows the check holds.

    None when one is undefined (no flow in the fine model). A check recorded
    before the held-out flows existed is ranked on its axes alone.
    """
    errors = [checks[a].rel_error for a in check_flows(axes, checks)]
    return None if any(e is None or not math.isfinite(e) for e in errors) else max(abs(e) for e in errors)


@dataclass(frozen=True)
class ZeroKRecord(Leaf):
    """What the zero-k rule did (`upscale.methods.zeros.ZeroOutcome`).

    Attributes
    ----------
    rule : str
        ``auto``, ``inactive``, ``floor`` or ``keep``.
    blocks_made_inactive : int
    pore_volume_removed_m3 : float
        Pore volume of the blocks made inactive (m³).
    blocks_floored : dict of str to int
        Per permeability, blocks raised to the floor.
    floor : dict of str to float
        Per permeability, the floor (the field's unit).
    blocks_left_at_zero : dict of str to int
        Per permeability, active blocks left at k = 0 (rule ``keep``).
    """

    rule: str
    blocks_made_inactive: int
    pore_volume_removed_m3: float
    blocks_floored: dict[str, int]
    floor: dict[str, float]
    blocks_left_at_zero: dict[str, int]


@dataclass(frozen=True)
class Spread:
    """Percentiles and range of a quantity over realizations.

    Attributes
    ----------
    q10, q50, q90 : float
        The 10th, 50th and 90th percentiles (`numpy.percentile`, linear; non-exceedance:
        10 % of the values lie below `q10`), in the quantity's unit. How they are named
        depends on the reading (`upscale.analysis.percentiles`).
    mean, min, max : float
    count : int
        How many finite values.
    """

    q10: float
    q50: float
    q90: float
    mean: float
    min: float
    max: float
    count: int

    def percentile(self, q: int) -> float:
        """Numpy's `q`-th percentile, `q` in `upscale.analysis.percentiles.PERCENTILES`."""
        return {10: self.q10, 50: self.q50, 90: self.q90}[q]

    def to_dict(self, convention: str = "nonexceedance") -> dict[str, Any]:
        """The JSON object: the percentiles under the keys of `convention` (``p10_nonexceed`` ...), the range.

        Examples
        --------
        >>> list(Spread(1.0, 2.0, 3.0, 2.0, 0.5, 3.5, 4).to_dict("exceedance"))[:3]
        ['p90_exceed', 'p50_exceed', 'p10_exceed']
        """
        named = {key(q, convention): self.percentile(q) for q in PERCENTILES}
        return {**named, "mean": self.mean, "min": self.min, "max": self.max, "count": self.count}

    @classmethod
    def from_dict(cls, data: dict[str, Any], convention: str = "nonexceedance") -> Spread:
        """The spread of a JSON object written by `to_dict` in `convention`."""
        return cls(*(data[key(q, convention)] for q in PERCENTILES), data["mean"], data["min"], data["max"],
                   data["count"])  # fmt: skip
