"""Stage 6: how coarse a field can go — every method at every block size, against one fine solve.

`plan_blocks` compares the methods (`upscale.analysis.compare.compare_methods`)
at each listed block size. The fine model does not change with the block, so
its solves are done once and every block size and method is checked against
them. For each method, the plan names the coarsest block whose largest check
error over the checked flows (`Entry.worst_error`; with wells, their total
rate too) is within the largest error accepted, or says that none is. The
wells' fine solve does not change with the block either, and is shared the
same way.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass

from ..check.wells import FineWells
from ..errors import InputError
from ..field import Field
from ..flow import AxisFlow
from ..grid import BlockSpec
from ..steps import Say, silent
from .compare import Candidate, Comparison, Entry, compare_methods, progress_line, shared_fine_solves
from .layers import LayerChoice, resolve_layers


@dataclass(frozen=True, eq=False)
class Plan:
    """Every candidate at every block size, checked against one set of fine solves.

    Attributes
    ----------
    fine : Field
        The fine field as checked (cropped to whole blocks when asked).
    blocks : tuple of BlockSpec
        Finest first.
    comparisons : tuple of Comparison
        One per block, in the order of `blocks`; all share `fine_flows`.
    max_error : float
        Largest check error accepted (a fraction: 0.05 is 5 %).
    fine_flows : dict of str to AxisFlow
        The fine solves, one per checked flow.
    candidates : list of Candidate
        The methods, in the order given.
    wells : FineWells or None
        The wells' fine solve shared by every block, when the plan is also checked by wells.
    """

    fine: Field
    blocks: tuple[BlockSpec, ...]
    comparisons: tuple[Comparison, ...]
    max_error: float
    fine_flows: dict[str, AxisFlow]
    candidates: list[Candidate]
    wells: FineWells | None = None

    def entries(self, candidate: Candidate) -> list[Entry]:
        """The outcome of `candidate` at each block, finest first."""
        return [next(e for e in c.entries if e.candidate == candidate) for c in self.comparisons]

    def errors(self, candidate: Candidate) -> list[float]:
        """Largest check error of `candidate` at each block (a fraction; inf where it did not run)."""
        return [e.worst_error for e in self.entries(candidate)]

    def meets(self, candidate: Candidate) -> list[bool]:
        """Whether `candidate` is within `max_error` at each block."""
        return [meets(error, self.max_error) for error in self.errors(candidate)]

    @property
    def cells(self) -> list[float]:
        """Fine cells per block of each block (`block_cells`): how coarse each is."""
        return [block_cells(block, self.fine.shape) for block in self.blocks]

    def coarsest(self, candidate: Candidate) -> BlockSpec | None:
        """The coarsest block at which `candidate` is within `max_error`, or None (`coarsest_passing`)."""
        index = coarsest_passing(self.meets(candidate), self.cells, self.errors(candidate))
        return None if index is None else self.blocks[index]

    def finer_all_meet(self, candidate: Candidate) -> bool:
        """Whether every block finer than the coarsest within `max_error` is within too (`finer_all_pass`)."""
        return finer_all_pass(self.meets(candidate), self.cells, self.errors(candidate))


def block_cells(block: BlockSpec, shape: tuple[int, int, int]) -> float:
    """Fine cells per block: the coarsening factor; with grouped layers, the mean over the coarse layers.

    Examples
    --------
    >>> shape = (8, 16, 16)
    >>> block_cells(BlockSpec.parse("4x4x2"), shape), block_cells(BlockSpec.parse("4x4x1,3,2,2"), shape)
    (32, 32.0)
    """
    if block.groups is None:
        return block.nx * block.ny * block.nz
    return block.nx * block.ny * shape[0] / len(block.groups)


def coarsest_passing(passes: list[bool], cells: list[float], errors: list[float]) -> int | None:
    """Index of the coarsest block that passes (blocks finest first), or None.

    Between blocks as coarse as one another, the one with the smaller error
    (then the first listed).

    Parameters
    ----------
    passes : list of bool
        Whether each block passes.
    cells : list of float
        Fine cells per block of each (`block_cells`).
    errors : list of float
        The largest check error at each block.

    Examples
    --------
    >>> coarsest_passing([True, False, True, False], [4, 16, 64, 256], [0.01, 0.1, 0.02, 0.2])
    2
    >>> coarsest_passing([True, True, True], [4, 16, 16], [0.01, 0.04, 0.02])
    2
    >>> coarsest_passing([False], [4], [1.0]) is None
    True
    """
    ran = [i for i, ok in enumerate(passes) if ok]
    return min(ran, key=lambda i: (-cells[i], errors[i], i), default=None)


def finer_all_pass(passes: list[bool], cells: list[float], errors: list[float]) -> bool:
    """Whether some block passes and every block finer than the coarsest that passes does too.

    When not, the error does not grow steadily with the block for this
    method on this field: the coarsest passing block may owe its small error
    to errors that cancel. A block as coarse as that one (the same number
    of coarse cells, other layer boundaries) is not finer.

    Examples
    --------
    >>> finer_all_pass([True, True, False], [4, 16, 64], [0.01, 0.02, 0.1])
    True
    >>> finer_all_pass([True, False, True], [4, 16, 64], [0.01, 0.1, 0.02]), finer_all_pass([False], [4], [1])
    (False, False)
    >>> finer_all_pass([True, False, True], [4, 16, 16], [0.01, 0.4, 0.02])   # 16 and 16: side by side
    True
    """
    last = coarsest_passing(passes, cells, errors)
    return last is not None and all(ok for ok, c in zip(passes, cells) if c < cells[last])


def meets(error: float, max_error: float) -> bool:
    """Whether a largest check error (a fraction) is within `max_error`; an unknown one is not.

    Examples
    --------
    >>> meets(0.05, 0.05), meets(0.0501, 0.05), meets(float("inf"), 0.05)
    (True, False, False)
    """
    return math.isfinite(error) and error <= max_error * (1 + 1e-12)


def check_max_error(max_error: float) -> None:
    """Refuse a largest error accepted that is not a fraction strictly between 0 and 1."""
    if not (isinstance(max_error, (int, float)) and 0 < max_error < 1):
        raise InputError(f"`max_error` must be more than 0 and less than 1 (a fraction: 0.05 is 5 %), "
                         f"got {max_error!r}")  # fmt: skip


def check_blocks(blocks: list[BlockSpec], shape: tuple[int, int, int], ndim: int) -> None:
    """Refuse, before any work, a block list a plan cannot check against one fine model.

    Parameters
    ----------
    blocks : list of BlockSpec
        Finest first: each block must hold more fine cells (`block_cells`)
        than the one before, or as many when the two differ only in their
        layer boundaries (``8x8x4`` beside ``8x8xauto:5`` on 20 layers:
        uniform and automatic grouping side by side). Automatic layers must
        be chosen first (`upscale.analysis.layers.resolve_layers`).
    shape : (int, int, int)
        The fine grid ``(L, M, N)``.
    ndim : int
        2 for a map, 3 for a 3D model.

    Raises
    ------
    InputError
        No block; a block that does not fit the grid (`BlockSpec.check`); a
        block that holds fewer cells than the one before it, or as many but
        not as the same coarse cells with other layer boundaries; blocks
        that crop the grid to different extents (``remainder='crop'``).

    Examples
    --------
    >>> check_blocks([BlockSpec(8, 8), BlockSpec(4, 4)], (1, 64, 64), 2)  # doctest: +ELLIPSIS
    Traceback (most recent call last):
    ...
    upscale.errors.InputError: the blocks must grow ..., but 4x4 (16 cells) follows 8x8 (64 cells); ...
    """
    if not blocks:
        raise InputError("a plan needs at least one block, e.g. `blocks=4x4,8x8,16x16`")
    for block in blocks:
        block.check(shape, ndim)
    for finer, coarser in zip(blocks, blocks[1:]):
        many, few = block_cells(coarser, shape), block_cells(finer, shape)
        if many < few or (many == few and not _side_by_side(finer, coarser, shape)):
            raise InputError(
                f"the blocks must grow from the finest to the coarsest (in fine cells per block), but "
                f"{coarser} ({many:g} cells) follows {finer} ({few:g} cells); list them finest first, e.g. "
                "4x4,8x8,16x16"
            )
    used = {block.used_shape(shape) for block in blocks}
    if len(used) > 1:
        extents = ", ".join(f"{b} keeps {_extent(b.used_shape(shape), ndim)}" for b in blocks)
        raise InputError(
            f"the blocks crop the grid to different extents ({extents}), but a plan checks every block "
            "against one fine model; choose blocks that divide one another, or `remainder=keep`"
        )


def _side_by_side(one: BlockSpec, other: BlockSpec, shape: tuple[int, int, int]) -> bool:
    """Whether two blocks make the same coarse cells but for their layer boundaries (one grouped at least)."""
    grouped = (one.groups or other.groups) is not None
    return ((one.nx, one.ny) == (other.nx, other.ny) and grouped and one.cells != other.cells
            and one.coarse_shape(shape) == other.coarse_shape(shape))  # fmt: skip


def _extent(shape: tuple[int, int, int], ndim: int) -> str:
    layers, rows, columns = shape
    return f"{columns} x {rows}" + (f" x {layers}" if ndim == 3 else "") + " cells"


def plan_blocks(
    field: Field,
    blocks: list[BlockSpec],
    chosen: list[Candidate],
    *,
    max_error: float = 0.05,
    solver: str = "auto",
    tolerance: float = 1e-10,
    report: Callable[[str], None] | None = None,
    say: Say = silent,
    wells: FineWells | None = None,
    layers: list[LayerChoice | None] | None = None,
) -> Plan:
    """Check every candidate at every block size against one fine solve, and find the coarsest that passes.

    Parameters
    ----------
    field : Field
        The fine field.
    blocks : list of BlockSpec
        Block sizes, finest first (see `check_blocks`); automatic layers are
        chosen from `field` first, once each (`upscale.analysis.layers.resolve_layers`).
    chosen : list of Candidate
        From `upscale.analysis.compare.candidates`.
    max_error : float
        Largest check error accepted, a fraction in (0, 1): 0.05 is 5 %.
    solver, tolerance
        Linear solves of the checks (see `upscale.check.check_flow`).
    report : callable, optional
        Receives a progress line before and after each method at each block.
    say : callable, optional
        Told when the fine solves start and end (silent by default).
    wells : FineWells, optional
        Wells solved on the fine field as the plan uses it (cropped to the
        blocks; `upscale.check.wells.fine_wells`): every method at every
        block is also driven by them, and its well error joins its largest error.
    layers : list of (LayerChoice or None), optional
        How the layers of each block were chosen, when they were chosen
        before (`upscale.jobs.run.with_layers`), for the record.

    Returns
    -------
    Plan

    Raises
    ------
    InputError
        A block list `check_blocks` refuses, or a `max_error` out of range
        (before any work).

    Examples
    --------
    >>> import numpy as np
    >>> from upscale.analysis.compare import candidates
    >>> layered = np.tile([[1.0], [4.0]], (8, 16))   # rows of 1 and 4: layers along x
    >>> found = plan_blocks(Field.from_arrays(layered), [BlockSpec(2, 1), BlockSpec(4, 1), BlockSpec(8, 2)],
    ...                     candidates(["arithmetic"]))
    >>> [str(found.coarsest(c)) for c in found.candidates]   # 8x2 blocks mix the layers
    ['4x1']
    """
    check_max_error(max_error)
    found = [resolve_layers(block, field) for block in blocks]
    blocks = [block for block, _ in found]
    layers = layers or [choice for _, choice in found]
    check_blocks(blocks, field.shape, field.ndim)
    fine = field.leading(blocks[0].used_shape(field.shape))
    flows = shared_fine_solves(fine, solver=solver, tolerance=tolerance, say=say)
    comparisons = []
    for block, choice in zip(blocks, layers):
        def told(i: int, n: int, candidate: Candidate, entry: Entry | None, block: BlockSpec = block) -> None:
            if report:
                report(f"{block.label} {progress_line(i, n, candidate, entry)}")

        comparisons.append(compare_methods(field, block, chosen, solver=solver, tolerance=tolerance,
                                           report=told, fine_flows=flows, wells=wells,
                                           layers=choice))  # fmt: skip
    return Plan(fine, tuple(blocks), tuple(comparisons), max_error, flows, list(chosen), wells)
