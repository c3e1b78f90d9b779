"""Comparison records built by hand: what `upscale.analysis.ensemble.method_spread` ranks.

Each method gets a check error per axis (a fraction) or None when it did not
run; the solves behind the errors are a unit fine k_eff and the coarse one it
implies.
"""

from __future__ import annotations

import dataclasses

from upscale.analysis.comparison_record import RANKING, ComparisonRecord, MethodRecord
from upscale.analysis.records import AxisResult, GridRecord, InputRecord, Provenance, SolveRecord
from upscale.caution import CAUTION

_SOLVE = SolveRecord(k_eff=1.0, inflow=1.0, outflow=-1.0, mass_balance=0.0, connected=True, unknowns=64,
                     isolated_cells=0, solver="direct", iterations=0, residual=0.0)  # fmt: skip


def method(name: str, rank: int | None, errors: dict[str, float] | None,
           kind: str | None = None) -> MethodRecord:  # fmt: skip
    """A method labelled `name` (method `kind`, default `name`) with these check errors, or failed (None)."""
    def axis(e: float) -> AxisResult:
        return AxisResult(1.0, 1.0 + e, e, _SOLVE, dataclasses.replace(_SOLVE, k_eff=1.0 + e))

    check = None if errors is None else {a: axis(e) for a, e in errors.items()}
    return MethodRecord(name, kind or name, {}, rank, None if errors else "cannot run here", 0.0, 0.0, None,
                        check, None)  # fmt: skip


def comparison(methods: list[MethodRecord], dimensions: int = 2, *, path: str = "field.tif",
               block: dict | None = None) -> ComparisonRecord:  # fmt: skip
    """One field's comparison of `methods` (in rank order) on a grid of `dimensions`."""
    inputs = (InputRecord("kx", path, path, "0" * 64),)
    grid = GridRecord({"layers": 1, "rows": 8, "columns": 8}, 1.0, 1.0, [1.0], None, None)
    ranked = [m for m in methods if m.rank is not None]
    return ComparisonRecord(Provenance("upscale", {}, None, None, inputs, None), "mD",
                            block or {"x": 2, "y": 2, "z": 1}, dimensions, grid, RANKING, tuple(methods),
                            ranked[0].name if ranked else None, {}, CAUTION)  # fmt: skip
