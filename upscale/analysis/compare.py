"""Stage 6: several methods on one field, checked against one shared fine solve and ranked.

`compare_methods` upscales the field with each method, solves the coarse
model of each under the same pressure drops as the fine model and under the
held-out corner-to-corner flow (`upscale.check.axis.HELD_OUT`) — the fine
solves are done once and shared — and ranks the methods by their largest
absolute check error over the axes and the held-out flow: a method fitted to
the axis flows cannot win by them alone. Given wells, each coarse model is
also driven by them (`upscale.check.wells`, one fine solve shared) and the
error of their total rate joins the largest error. A method that cannot run on this field
(renormalization on a block that is not a power of two, a harmonic mean of
zeros...) is kept in the list with its reason instead of stopping the
comparison.
"""

from __future__ import annotations

import dataclasses
import math
import time
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

from ..check.axis import HELD_OUT, AxisCheck, coarse_check, fine_solves, held_out_solves
from ..check.wells import FineWells, WellCheck, coarse_wells
from ..compiling import compile_seconds
from ..errors import InputError
from ..field import Field, Grid
from ..flow import AxisFlow
from ..flow.corner import CornerFlow
from ..flow.solvers import ConvergenceError
from ..grid import BlockSpec
from ..methods.coarsen import Upscaled, coarsen
from ..methods.registry import METHODS, check_exponent, find_method, per_axis_text, serves_some_axes
from ..steps import Say, Steps, silent
from .layers import LayerChoice, resolve_layers

#: Boundary conditions a comparison tries for ``flow`` unless one is chosen.
ALL_CONDITIONS = ("sealed", "linear", "periodic")


@dataclass(frozen=True)
class Candidate:
    """One method with its options, as compared.

    Attributes
    ----------
    label : str
        Name in tables and figures, e.g. ``flow (periodic)``.
    method : str
        Method name (a key of `upscale.METHODS`).
    options : dict
        The method's options.
    """

    label: str
    method: str
    options: dict


@dataclass(frozen=True, eq=False)
class Entry:
    """The outcome of one candidate.

    Attributes
    ----------
    candidate : Candidate
    result : Upscaled or None
        None when the method failed.
    checks : dict of str to AxisCheck
        Per axis, then per held-out flow, the shared fine solve and this method's coarse solve.
    seconds : float
        Time to upscale and solve the coarse checks, without compiling kernels.
    error : str or None
        Why the method could not run on this field.
    rank : int or None
        1 for the smallest `worst_error`; None for a failed method.
    compiling : float
        Time spent compiling kernels on their first use meanwhile (s; see
        `upscale.compiling`), left out of `seconds`.
    wells : WellCheck or None
        The well check of this method's coarse model, when wells were given.
    """

    candidate: Candidate
    result: Upscaled | None
    checks: dict[str, AxisCheck]
    seconds: float
    error: str | None = None
    rank: int | None = None
    compiling: float = 0.0
    wells: WellCheck | None = None

    @property
    def worst_error(self) -> float:
        """Largest ``|rel_error|`` over the axes, held-out flows and wells (inf: failed, or a NaN error)."""
        if self.error is not None or not self.checks:
            return math.inf
        errors = [abs(c.rel_error) for c in self.checks.values()]
        if self.wells is not None:
            errors.append(abs(self.wells.rel_error))
        return math.inf if any(math.isnan(e) for e in errors) else max(errors)


@dataclass(frozen=True, eq=False)
class Comparison:
    """Every candidate's outcome, ranked, with the shared fine solves.

    Attributes
    ----------
    fine : Field
        The fine field as used (cropped to whole blocks when asked).
    block : BlockSpec
    entries : list of Entry
        In rank order; failed methods last.
    fine_flows : dict of str to (AxisFlow or CornerFlow)
        The fine pressure-drop solve along each axis, then the held-out flows.
    candidates : list of Candidate
        The candidates in the order given (which breaks ties).
    wells : FineWells or None
        The wells' fine solve, when the methods were also checked by wells.
    layers : LayerChoice or None
        How the block's automatic layers were chosen (None: not automatic).
    per_axis : Entry or None
        The best method per axis (`with_per_axis`), upscaled and checked
        like the others but not ranked among them; None: not sought, or no
        method that may serve some axes only ran.
    """

    fine: Field
    block: BlockSpec
    entries: list[Entry]
    fine_flows: dict[str, AxisFlow | CornerFlow]
    candidates: list[Candidate]
    wells: FineWells | None = None
    layers: LayerChoice | None = None
    per_axis: Entry | None = None

    @property
    def ranked(self) -> list[Entry]:
        """The entries that ran, best first."""
        return [e for e in self.entries if e.rank is not None]

    @property
    def best(self) -> Entry | None:
        """The top-ranked entry (None if every method failed)."""
        return self.ranked[0] if self.ranked else None

    def zero_k_notes(self) -> list[str]:
        """What the zero-k rule did (`upscale.methods.zeros`): one line per outcome, naming its methods."""
        touched: dict[str, list[str]] = {}
        for e in self.ranked:
            line = e.result.zeros.line(self.fine.unit)
            if line:
                touched.setdefault(f"{line} (--zero-k {e.result.zeros.rule})", []).append(e.candidate.label)
        return [f"{', '.join(labels)}: {line}" for line, labels in touched.items()]

    def best_along(self, axis: str) -> Entry | None:
        """The entry with the smallest ``|rel_error|`` along one axis (ties: candidate order)."""
        ran = [e for e in self.entries if e.error is None]
        order = sorted(ran, key=lambda e: (_tied(_size(e.checks[axis].rel_error)), self._order[id(e)]))
        return order[0] if order else None

    @property
    def _order(self) -> dict[int, int]:
        return {id(e): self.candidates.index(e.candidate) for e in self.entries}


def candidates(
    methods: list[str] | None = None,
    *,
    bc: str | None = None,
    border: int | None = None,
    exponent: float | None = None,
) -> list[Candidate]:
    """The candidates of a comparison, from method names and shared options.

    Parameters
    ----------
    methods : list of str, optional
        Method names; default every method. ``flow`` without `bc` stands for
        its three boundary conditions.
    bc, border : optional
        Options of the flow-based methods (``border`` defaults to 0).
    exponent : float, optional
        Exponent of ``power``; default 1/3 (for a 3D lognormal block the power
        average with ω = 1/3 matches ``k_G exp(σ²/6)`` to first order; see
        docs/methods.md).

    Raises
    ------
    InputError
        For an unknown method name (the message lists the valid ones).

    Examples
    --------
    >>> [c.label for c in candidates(["geometric", "flow"])]
    ['geometric', 'flow (sealed)', 'flow (linear)', 'flow (periodic)']
    >>> [c.label for c in candidates(["flow-transmissibility"], border=2)]
    ['flow-transmissibility (sealed, border 2)']
    """
    check_exponent(exponent)
    names = list(METHODS) if not methods else methods
    unknown = [n for n in names if n not in METHODS]
    if unknown:
        raise InputError(f"unknown method {unknown[0]!r}; choose among {', '.join(METHODS)}")
    found = []
    for name in dict.fromkeys(names):
        options: dict[str, Any] = {}
        if name == "power":
            options["exponent"] = 1.0 / 3.0 if exponent is None else exponent
        if "border" in METHODS[name].options:
            options["border"] = border or 0
        conditions = [None]
        if "bc" in METHODS[name].options:
            conditions = [bc] if bc else (list(ALL_CONDITIONS) if name == "flow" else ["sealed"])
        for condition in conditions:
            opts = dict(options, **({"bc": condition} if condition else {}))
            found.append(Candidate(_label(name, opts), name, opts))
    return found


def _label(name: str, options: dict) -> str:
    parts = [options["bc"]] if "bc" in options else []
    if options.get("border"):
        parts.append(f"border {options['border']}")
    if "exponent" in options:
        parts.append(f"ω={options['exponent']:.3g}")
    return name + (f" ({', '.join(parts)})" if parts else "")


def compare_methods(
    field: Field,
    block: BlockSpec | str,
    chosen: list[Candidate],
    *,
    solver: str = "auto",
    tolerance: float = 1e-10,
    report: Callable[[int, int, Candidate, Entry | None], None] | None = None,
    say: Say = silent,
    fine_flows: dict[str, AxisFlow] | None = None,
    wells: FineWells | None = None,
    layers: LayerChoice | None = None,
) -> Comparison:
    """Upscale `field` with every candidate, check each against one fine solve, and rank.

    Parameters
    ----------
    field : Field
        The fine field.
    block : BlockSpec or str
        The block partition; automatic layers (``auto:N``, ``auto:P%``) are
        chosen from `field` first (`upscale.analysis.layers.resolve_layers`).
    chosen : list of Candidate
        From `candidates`.
    solver, tolerance
        Linear solves of the checks (see `upscale.check.check_flow`).
    report : callable, optional
        ``report(i, n, candidate, entry)`` before each candidate (entry None)
        and after it — for progress messages.
    say : callable, optional
        Told when the fine solves start and end (silent by default).
    fine_flows : dict of str to AxisFlow, optional
        The fine solves of the check, from `shared_fine_solves` on the same
        fine field as used here (a plan shares them between block sizes);
        solved here when None.
    wells : FineWells, optional
        Wells solved on the fine field as used here (`upscale.check.wells.fine_wells`):
        each method's coarse model is driven by them too, and ranked on them.
    layers : LayerChoice, optional
        How the layers of `block` were chosen, when it was resolved before
        (`upscale.jobs.run.with_layers`), for the record.

    Returns
    -------
    Comparison

    Examples
    --------
    >>> import numpy as np
    >>> layered = np.tile([[1.0], [4.0]], (4, 8))   # rows of 1 and 4: layers along x
    >>> found = compare_methods(Field.from_arrays(layered), "2x2", candidates(["arithmetic", "harmonic"]))
    >>> found.best_along("x").candidate.label, found.best_along("y").candidate.label
    ('arithmetic', 'harmonic')
    >>> [(e.candidate.label, e.rank) for e in found.entries]   # -36 % along x beats +56 % along y
    [('harmonic', 1), ('arithmetic', 2)]
    """
    spec, chosen_layers = resolve_layers(BlockSpec.parse(block) if isinstance(block, str) else block, field)
    spec.check(field.shape, field.ndim)
    fine = field.leading(spec.used_shape(field.shape))
    if fine_flows is None:
        with Steps(say)(None, f"solving the fine model along {', '.join(fine.axes)} and corner to corner"):
            fine_flows = fine_solves(fine, fine.axes, coarse_grid=spec.coarse_grid(fine.grid), solver=solver,
                                     tolerance=tolerance)  # fmt: skip
    else:
        fine_flows = with_held_out(fine_flows, spec.coarse_grid(fine.grid), solver=solver,
                                   tolerance=tolerance, say=say)  # fmt: skip
    entries = []
    for i, candidate in enumerate(chosen):
        if report:
            report(i, len(chosen), candidate, None)
        entry = _entry(field, spec, candidate, fine_flows, wells, solver=solver, tolerance=tolerance)
        entries.append(entry)
        if report:
            report(i, len(chosen), candidate, entry)
    # errors equal to TIE are tied, and keep the order of the candidates
    ran = sorted((e for e in entries if e.error is None), key=lambda e: _tied(e.worst_error))
    ranked = [dataclasses.replace(e, rank=r + 1) for r, e in enumerate(ran)]
    failed = [e for e in entries if e.error is not None]
    return Comparison(fine, spec, ranked + failed, fine_flows, list(chosen), wells, layers or chosen_layers)


def _entry(field: Field, spec: BlockSpec, candidate: Candidate, fine_flows: dict[str, AxisFlow | CornerFlow],
           wells: FineWells | None, *, solver: str, tolerance: float) -> Entry:  # fmt: skip
    """One candidate upscaled and checked against the shared fine solves (and wells); why, if it failed."""
    start, compiled = time.perf_counter(), compile_seconds()
    result, checks, well_check, error = None, {}, None, None
    try:
        result = coarsen(field, spec, candidate.method, flows=fine_flows, **candidate.options)
        checks = coarse_check(fine_flows, result.transmissibilities(), solver=solver,
                              tolerance=tolerance)  # fmt: skip
        well_check = None if wells is None else coarse_wells(
            wells, result.coarse, coarse_trans=result.transmissibilities(), solver=solver,
            tolerance=tolerance)  # fmt: skip
    except (InputError, ConvergenceError) as exc:  # this method on this field, not the comparison
        result, checks, well_check, error = None, {}, None, str(exc)
    compiling = compile_seconds() - compiled
    return Entry(candidate, result, checks, time.perf_counter() - start - compiling, error,
                 compiling=compiling, wells=well_check)  # fmt: skip


def per_axis_candidate(comparison: Comparison) -> Candidate | None:
    """The best method per axis, the entry of smallest ``|rel_error|`` along each axis.

    Only methods that may serve some axes only take part (`upscale.methods.registry.serves_some_axes`).

    Returns
    -------
    Candidate or None
        Its ``method`` is a method per axis such as ``xy=arithmetic,z=harmonic``
        (a method's name when one wins along every axis), its options those of
        the entries chosen; None when no such entry ran.
    """
    axes = comparison.fine.axes
    ran = [e for e in comparison.entries if e.error is None and serves_some_axes(e.candidate.method,
                                                                                e.candidate.options)]
    if not ran:
        return None
    order = {id(e): comparison.candidates.index(e.candidate) for e in ran}
    best = {a: min(ran, key=lambda e: (_tied(_size(e.checks[a].rel_error)), order[id(e)])) for a in axes}
    chosen = {id(e): e.candidate for e in best.values()}
    if len(chosen) == 1:
        return next(iter(chosen.values()))
    options = {k: v for c in chosen.values() for k, v in c.options.items()}
    method = find_method(per_axis_text({a: e.candidate.method for a, e in best.items()})).name
    return Candidate(_label(method, options), method, options)


def with_per_axis(comparison: Comparison, *, solver: str = "auto", tolerance: float = 1e-10) -> Comparison:
    """`comparison` with its best method per axis (`per_axis_candidate`), upscaled and checked.

    The combination is checked against the same fine solves (and wells) as
    the methods compared, so its check is the one ``upscale run`` with it
    records. One entry wins along every axis: it is that entry.

    Parameters
    ----------
    comparison : Comparison
        From `compare_methods`.
    solver, tolerance
        Linear solves of the check (see `upscale.check.check_flow`).

    Examples
    --------
    >>> import numpy as np
    >>> layered = np.tile([[1.0], [4.0]], (4, 8))   # rows of 1 and 4: layers along x
    >>> found = compare_methods(Field.from_arrays(layered), "2x2", candidates(["arithmetic", "harmonic"]))
    >>> best = with_per_axis(found).per_axis
    >>> best.candidate.method, [abs(best.checks[axis].rel_error) < 1e-12 for axis in "xy"]
    ('x=arithmetic,y=harmonic', [True, True])
    """
    candidate = per_axis_candidate(comparison)
    if candidate is None:
        return comparison
    same = [e for e in comparison.entries if e.candidate == candidate]
    entry = same[0] if same else _entry(comparison.fine, comparison.block, candidate, comparison.fine_flows,
                                        comparison.wells, solver=solver, tolerance=tolerance)  # fmt: skip
    return dataclasses.replace(comparison, per_axis=entry)


def shared_fine_solves(fine: Field, *, solver: str = "auto", tolerance: float = 1e-10,
                       say: Say = silent) -> dict[str, AxisFlow]:  # fmt: skip
    """The fine axis solves every method of a comparison is checked against, solved once.

    They do not depend on the block partition, so a plan shares them between
    block sizes; the held-out flows do (their regions are whole blocks) and
    are added per partition by `with_held_out`.

    Parameters
    ----------
    fine : Field
        The fine field as compared (cropped to whole blocks when asked).
    solver, tolerance
        Linear solves of the checks (see `upscale.check.check_flow`).
    say : callable, optional
        Told when the fine solves start and end (silent by default).

    Returns
    -------
    dict of str to AxisFlow
        Per axis, the fine solve.
    """
    with Steps(say)(None, f"solving the fine model along {', '.join(fine.axes)}"):
        return fine_solves(fine, fine.axes, solver=solver, tolerance=tolerance)


def with_held_out(fine_flows: dict[str, AxisFlow | CornerFlow], coarse_grid: Grid, *,
                  solver: str = "auto", tolerance: float = 1e-10,
                  say: Say = silent) -> dict[str, AxisFlow | CornerFlow]:  # fmt: skip
    """`fine_flows` with the fine held-out flows of the partition into `coarse_grid` (`HELD_OUT`).

    Parameters
    ----------
    fine_flows : dict
        The fine axis solves (`shared_fine_solves`).
    coarse_grid : Grid
        The coarse grid of the partition: the held-out flows' regions are its blocks.
    solver, tolerance, say
        As in `shared_fine_solves`.

    Returns
    -------
    dict of str to (AxisFlow or CornerFlow)
        The axes, then the held-out flows.
    """
    trans = next(iter(fine_flows.values())).trans
    with Steps(say)(None, "solving the fine model corner to corner"):
        held = held_out_solves(trans, coarse_grid, solver=solver, tolerance=tolerance)
    return {**{k: f for k, f in fine_flows.items() if k not in HELD_OUT}, **held}


def single(result: Upscaled, checks: dict[str, AxisCheck], seconds: float = 0.0, *,
           wells: WellCheck | None = None) -> Comparison:  # fmt: skip
    """A comparison of one: a run's result and its check, for the same figures and report.

    Parameters
    ----------
    result : Upscaled
        What `upscale.coarsen` returned.
    checks : dict of str to AxisCheck
        Its check, from `upscale.check.check_flow`.
    seconds : float
        Time the run took.
    wells : WellCheck, optional
        Its well check (`upscale.check.wells.well_check`).
    """
    candidate = Candidate(_label(result.method, result.options), result.method, result.options)
    entry = Entry(candidate, result, checks, seconds, rank=1, wells=wells)
    flows = {axis: check.fine for axis, check in checks.items()}
    return Comparison(result.fine, result.block, [entry], flows, [candidate])


#: Check errors closer than this are equal for ranking (far below any real difference).
TIE = 1e-9


def _size(error: float) -> float:
    """``|error|``, with NaN (the fine model passes nothing, the coarse one does) as infinite."""
    return math.inf if math.isnan(error) else abs(error)


def _tied(error: float) -> float:
    return error if math.isinf(error) or math.isnan(error) else round(error / TIE) * TIE


def progress_line(i: int, n: int, candidate: Candidate, entry: Entry | None) -> str:
    """The progress line of candidate `i` of `n`: starting (entry None), done, or did not run.

    Examples
    --------
    >>> progress_line(0, 3, candidates(["geometric"])[0], None)
    '[1/3] geometric ...'
    """
    if entry is None:
        return f"[{i + 1}/{n}] {candidate.label} ..."
    if entry.error:
        return f"[{i + 1}/{n}] {candidate.label}: did not run ({entry.error})"
    return f"[{i + 1}/{n}] {candidate.label}: done in {entry.seconds:.2f} s"
