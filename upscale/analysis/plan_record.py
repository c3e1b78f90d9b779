"""The record of a plan — the content of ``plan.json`` as typed, frozen objects.

`plan_record` turns a `upscale.analysis.plan.Plan` (which holds the fields and
solves) into a `PlanRecord` (numbers only); the terminal, the report and
`upscale.export.plan` read its attributes, and ``to_dict()`` is the file.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

from ..caution import CAUTION
from ..grid import BlockSpec
from .compare import Candidate
from .layers import LayerChoice
from .plan import Plan, block_cells
from .records import GridRecord, Leaf, Provenance, axis_results, grid_record, jsonable, provenance

#: What a plan compares with the largest error accepted, recorded beside it.
MEASURE = "largest |rel_error| over the checked flows"
#: The same with wells: their total rate's error counts too.
MEASURE_WELLS = "largest |rel_error| over the checked flows and the wells' total rate"


@dataclass(frozen=True)
class BlockRecord(Leaf):
    """One block size of a plan.

    Attributes
    ----------
    name : str
        As on the command line, x first: ``8x8``, ``8x8x2``, ``8x8x2,2,4``,
        or ``8x8xauto:3 (= 8x8x1,4,3)`` with the grouping chosen (`upscale.BlockSpec.label`).
    x, y : int
        Fine cells per block along x and y.
    z : int or list of int
        Fine layers per block, or of each coarse layer (top down) when they are grouped.
    cells : int or float
        Fine cells per block: the coarsening factor (with grouped layers, the
        mean over the coarse layers; `upscale.analysis.plan.block_cells`).
    coarse_shape : dict of str to int
        ``layers``, ``rows`` and ``columns`` of the coarse grid.
    layers : dict or None
        How automatic layers were chosen (`upscale.analysis.layers.LayerChoice.summary`);
        None (and absent from the file) when they were not automatic.
    """

    name: str
    x: int
    y: int
    z: int | list[int]
    cells: int | float
    coarse_shape: dict[str, int]
    layers: dict[str, Any] | None = None

    OPTIONAL = ("layers",)

    @property
    def short(self) -> str:
        """The name without the grouping an automatic request chose: ``8x8xauto:3``, for tight labels."""
        return self.name.split(" (= ")[0]


@dataclass(frozen=True)
class BlockCheck(Leaf):
    """One method at one block size.

    Attributes
    ----------
    block : str
        The block's name (`BlockRecord.name`).
    largest_error : float or None
        Largest ``|rel_error|`` over the checked flows (a fraction); None
        when the method did not run or an error is undefined.
    meets : bool
        Whether `largest_error` is within the plan's ``max_error``.
    rel_error : dict of str to (float or None), or None
        Per checked flow, ``(k_coarse - k_fine) / k_fine``; None when the method did not run.
    error : str or None
        Why the method could not run at this block.
    seconds : float
        Time to upscale and solve the coarse checks (s), without compiling kernels.
    """

    block: str
    largest_error: float | None
    meets: bool
    rel_error: dict[str, float | None] | None
    error: str | None
    seconds: float


@dataclass(frozen=True)
class MethodPlan:
    """One method over every block size of a plan.

    Attributes
    ----------
    name : str
        Label in tables and figures, e.g. ``flow (periodic)``.
    method : str
        Method name (a key of `upscale.METHODS`).
    parameters : dict
        The method's options.
    blocks : tuple of BlockCheck
        Finest first.
    coarsest : str or None
        The coarsest block within ``max_error``; None when no block is.
    finer_all_meet : bool
        Whether every block finer than `coarsest` is within ``max_error``
        too (False when `coarsest` is None).
    """

    name: str
    method: str
    parameters: dict[str, Any]
    blocks: tuple[BlockCheck, ...]
    coarsest: str | None
    finer_all_meet: bool

    def to_dict(self) -> dict[str, Any]:
        """The method's object in ``plan.json``."""
        return {"name": self.name, "method": self.method, "parameters": self.parameters,
                "blocks": [b.to_dict() for b in self.blocks], "coarsest": self.coarsest,
                "finer_all_meet": self.finer_all_meet}  # fmt: skip

    @classmethod
    def from_dict(cls, data: dict[str, Any]) -> MethodPlan:
        """A method's object of ``plan.json``."""
        return cls(data["name"], data["method"], data["parameters"],
                   tuple(BlockCheck.from_dict(b) for b in data["blocks"]), data["coarsest"],
                   data["finer_all_meet"])  # fmt: skip


@dataclass(frozen=True)
class PlanRecord:
    """Methods at several block sizes on one field: the content of ``plan.json``.

    Attributes
    ----------
    provenance : Provenance
        Tool, versions, command, inputs, read options.
    unit : str
        Permeability unit of the field.
    dimensions : int
        2 or 3.
    fine : GridRecord
        The fine grid as checked.
    rules : dict
        The block rules every block size shares: ``remainder``, ``min_active``, ``zero_k``.
    blocks : tuple of BlockRecord
        Finest first.
    max_error : float
        Largest check error accepted (a fraction: 0.05 is 5 %).
    measure : str
        What is compared with `max_error` (`MEASURE`).
    fine_k_eff : dict of str to (float or None)
        Per axis flow, the effective permeability of the fine model (the
        field's unit), solved once and shared by every block and method (the
        corner flow's depends on the block: see each comparison).
    methods : tuple of MethodPlan
        In the order given.
    caution : str
        The caution every output carries.
    files : tuple of str
        The files written beside ``plan.json`` (empty until written).
    """

    provenance: Provenance
    unit: str
    dimensions: int
    fine: GridRecord
    rules: dict[str, Any]
    blocks: tuple[BlockRecord, ...]
    max_error: float
    measure: str
    fine_k_eff: dict[str, float | None]
    methods: tuple[MethodPlan, ...]
    caution: str
    files: tuple[str, ...] = ()

    def to_dict(self) -> dict[str, Any]:
        """The content of ``plan.json``, key for key."""
        return {**self.provenance.to_dict(), "unit": self.unit, "dimensions": self.dimensions,
                "fine": self.fine.to_dict(), "rules": self.rules,
                "blocks": [b.to_dict() for b in self.blocks], "max_error": self.max_error,
                "measure": self.measure, "fine_k_eff": self.fine_k_eff,
                "methods": [m.to_dict() for m in self.methods], "caution": self.caution,
                "files": list(self.files)}  # fmt: skip

    @classmethod
    def from_dict(cls, data: dict[str, Any]) -> PlanRecord:
        """The record of a ``plan.json``'s content."""
        return cls(Provenance.from_dict(data), data["unit"], data["dimensions"],
                   GridRecord.from_dict(data["fine"]), data["rules"],
                   tuple(BlockRecord.from_dict(b) for b in data["blocks"]), data["max_error"],
                   data["measure"], data["fine_k_eff"],
                   tuple(MethodPlan.from_dict(m) for m in data["methods"]), data["caution"],
                   tuple(data.get("files", ())))  # fmt: skip


def plan_record(plan: Plan, *, command: list[str] | None = None,
                read: dict[str, Any] | None = None) -> PlanRecord:  # fmt: skip
    """The record of a plan, as ``plan.json`` holds it.

    Parameters
    ----------
    plan : Plan
        From `upscale.analysis.plan.plan_blocks`.
    command : list of str, optional
        The command line that produced it.
    read : dict, optional
        The options the fine field was read with.
    """
    fine = plan.fine
    first = plan.blocks[0].summary()
    rules = {key: first[key] for key in ("remainder", "min_active", "zero_k")}
    blocks = tuple(_block(b, fine.shape, c.layers) for b, c in zip(plan.blocks, plan.comparisons))
    return PlanRecord(
        provenance(fine, command, read), fine.unit, fine.ndim, grid_record(fine.grid), jsonable(rules),
        blocks, plan.max_error, MEASURE if plan.wells is None else MEASURE_WELLS,
        jsonable({k: f.k_eff for k, f in plan.fine_flows.items()}),
        tuple(_method(plan, c) for c in plan.candidates), CAUTION,
    )  # fmt: skip


def _block(block: BlockSpec, shape: tuple[int, int, int], choice: LayerChoice | None) -> BlockRecord:
    layers, rows, columns = block.coarse_shape(shape)
    z = block.nz if block.groups is None else list(block.groups)
    return BlockRecord(block.label, block.nx, block.ny, z, block_cells(block, shape),
                       {"layers": layers, "rows": rows, "columns": columns},
                       None if choice is None else jsonable(choice.summary()))  # fmt: skip


def _method(plan: Plan, candidate: Candidate) -> MethodPlan:
    checks = []
    for block, entry, ok in zip(plan.blocks, plan.entries(candidate), plan.meets(candidate)):
        errors = None if entry.error else {k: r.rel_error for k, r in axis_results(entry.checks).items()}
        if errors is not None and entry.wells is not None:
            errors["wells"] = entry.wells.rel_error
        checks.append(BlockCheck(block.label, jsonable(entry.worst_error), ok, errors, entry.error,
                                 jsonable(entry.seconds)))  # fmt: skip
    coarsest = plan.coarsest(candidate)
    name = None if coarsest is None else coarsest.label
    return MethodPlan(candidate.label, candidate.method, jsonable(candidate.options), tuple(checks), name,
                      plan.finer_all_meet(candidate))  # fmt: skip
