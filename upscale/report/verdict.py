"""What the report says about the methods: how each is named, the ±5 % band, and notes on bounds.

Shared by the pages, the figures and the terminal, so each fact is worded once:

* methods compared are ranked and the best is named; the check of one
  method (``upscale run``, or a comparison of one) is reported as that
  method's check — no rank, no "best";
* when no method's largest check error is within ±`BAND` %, the page, the
  error chart and the terminal say so;
* a method that is a bound of the effective permeability
  (`upscale.methods.registry.Method.bound`) carries a note when it ranks
  first: its error cancels on this field, which is no evidence that it
  captures the flow;
* a plan names each method's coarsest block within the error accepted, warns
  when no method passes at any block, and notes a method that passes at a
  coarse block but not at a finer one.
"""

from __future__ import annotations

import math

from ..analysis.compare import Comparison, Entry
from ..analysis.plan_record import PlanRecord
from ..errors import InputError
from ..methods.registry import find_method

#: The band of check errors drawn and judged as acceptable (±5 %): a common engineering tolerance.
BAND = 5.0


def one_method(comparison: Comparison) -> bool:
    """Whether `comparison` holds a single method's check (nothing was ranked against it)."""
    return len(comparison.candidates) == 1


def entry_name(comparison: Comparison, entry: Entry) -> str:
    """An entry's name in figures: ``2. geometric`` among several methods, ``geometric`` alone."""
    label = entry.candidate.label
    return label if one_method(comparison) else f"{entry.rank}. {label}"


def within_band(error: float | None) -> bool:
    """Whether a check error (a fraction) is within ±`BAND` %; an unknown (None, NaN) one is not.

    Examples
    --------
    >>> within_band(-0.05), within_band(0.0501), within_band(float("nan"))
    (True, False, False)
    """
    return error is not None and math.isfinite(error) and 100 * abs(error) <= BAND * (1 + 1e-12)


def outside_band(name: str, error: float | None, *, several: bool, measure: str = "largest check error",
                 where: str = "on this field") -> str | None:  # fmt: skip
    """The warning when the best method's `error` (a fraction) lies outside ±`BAND` %, else None.

    Parameters
    ----------
    name : str
        The best (or the only) method.
    error : float or None
        Its `measure`, a fraction.
    several : bool
        Whether several methods were compared (the warning then speaks of all).
    measure, where : str
        What `error` is, and where it was measured, for the sentence.

    Examples
    --------
    >>> outside_band("slabs", -0.112, several=True)
    'No method is within the ±5 % band on this field: the best, slabs, has a largest check error of 11.20 %.'
    >>> outside_band("flow (linear)", 0.02, several=False) is None
    True
    """
    if within_band(error):
        return None
    size = "unknown" if error is None or math.isnan(error) else f"{100 * abs(error):.2f} %"
    if several:
        return (f"No method is within the ±{BAND:g} % band {where}: the best, {name}, has a {measure} "
                f"of {size}.")
    return f"{name} is outside the ±{BAND:g} % band {where}: its {measure} is {size}."


def bound_mark(method: str) -> str | None:
    """``upper bound`` or ``lower bound`` for a method that is one (see `Method.bound`), else None."""
    try:
        bound = find_method(method).bound
    except InputError:  # a label that names no method
        bound = None
    return None if bound is None else f"{bound} bound"


def bound_note(method: str, label: str) -> str | None:
    """Why a bound ranking first proves little, or None when `method` is no bound.

    Examples
    --------
    >>> bound_note("slabs", "slabs")[:60]
    'slabs is an upper bound of the effective permeability, not a'
    >>> bound_note("flow", "flow (linear)") is None
    True
    """
    mark = bound_mark(method)
    if mark is None:
        return None
    article = "an" if mark.startswith("upper") else "a"
    return (f"{label} is {article} {mark} of the effective permeability, not an estimate of it: it "
            "ranks first because its error cancels on this field, which is no evidence that it "
            "captures the flow.")  # fmt: skip


def no_block_warning(plan: PlanRecord) -> str | None:
    """The warning when no method is within the largest error accepted at any block, else None."""
    if any(m.coarsest for m in plan.methods):
        return None
    return (f"No method is within {100 * plan.max_error:g} % at any block listed, not even at "
            f"{plan.blocks[0].name}: try finer blocks or another method.")  # fmt: skip


def uneven_note(plan: PlanRecord) -> str | None:
    """A note naming the methods that pass at their coarsest block but not at some finer one, else None."""
    uneven = [m.name for m in plan.methods if m.coarsest and not m.finer_all_meet]
    if not uneven:
        return None
    return (f"{', '.join(uneven)}: within the error accepted at the coarsest block named but not at some "
            "finer one — the error does not grow steadily with the block there, and may cancel by chance "
            "at the coarser block; trust that answer less.")  # fmt: skip
