"""Stage 5: the check that the coarse model passes the same flow as the fine one.

For every flow axis, the same pressure drop is applied to the fine and to
the coarse model — fixed pressures on the two outer faces across the axis,
closed sides — and the effective permeabilities are compared:
``rel_error = (k_coarse - k_fine) / k_fine``. The coarse model connects its
blocks by the same harmonic half-block rule as the fine cells (or by
transmissibilities upscaled directly, when a method provides them).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

from ..errors import InputError
from ..field import Field
from ..flow import AxisFlow, Transmissibilities, pressure_drop, transmissibilities
from .limits import DEFAULT_LIMIT, too_large


@dataclass(frozen=True, eq=False)
class AxisCheck:
    """Fine and coarse flow along one axis."""

    axis: str
    fine: AxisFlow
    coarse: AxisFlow

    @property
    def rel_error(self) -> float:
        """``(k_coarse - k_fine) / k_fine``; 0 when both are 0, NaN when only the fine one is."""
        if self.fine.k_eff == 0:
            return 0.0 if self.coarse.k_eff == 0 else math.nan
        return (self.coarse.k_eff - self.fine.k_eff) / self.fine.k_eff

    def summary(self) -> dict[str, Any]:
        """The check as plain numbers for ``summary.json``."""

        def solve(flow: AxisFlow) -> dict[str, Any]:
            return {
                "k_eff": flow.k_eff,
                "inflow": flow.inflow,
                "outflow": flow.outflow,
                "mass_balance": flow.mass_balance,
                "connected": flow.connected,
                "unknowns": flow.unknowns,
                "isolated_cells": flow.isolated,
                "solver": flow.method,
                "iterations": flow.iterations,
                "residual": flow.residual,
            }

        return {
            "k_fine": self.fine.k_eff,
            "k_coarse": self.coarse.k_eff,
            "rel_error": self.rel_error,
            "fine": solve(self.fine),
            "coarse": solve(self.coarse),
        }


def check_flow(
    fine: Field,
    coarse: Field | Transmissibilities,
    *,
    axes: tuple[str, ...] | None = None,
    solver: str = "auto",
    tolerance: float = 1e-10,
) -> dict[str, AxisCheck]:
    """Solve the same pressure drop on the fine and the coarse model, per axis.

    Parameters
    ----------
    fine : Field
        The fine field (dask arrays are loaded into memory).
    coarse : Field or Transmissibilities
        The coarse field — its blocks are connected by the harmonic half-block
        rule with their true sizes — or coarse transmissibilities upscaled directly.
    axes : tuple of str, optional
        Axes to check; default: every axis of the fine field.
    solver : {'auto', 'amg', 'direct'}
        Linear solver (see `upscale.flow.solvers`).
    tolerance : float
        Relative residual required of every linear solve.

    Returns
    -------
    dict of str to AxisCheck

    Raises
    ------
    InputError
        If the two grids do not cover the same domain.

    Examples
    --------
    >>> import numpy as np
    >>> from upscale import Field, coarsen
    >>> layered = np.tile([[1.0], [4.0]], (2, 4))   # rows of 1 and 4: layers along x
    >>> result = coarsen(Field.from_arrays(layered), "2x2", "arithmetic")
    >>> check = check_flow(result.fine, result.coarse)
    >>> abs(check["x"].rel_error) < 1e-12, round(check["y"].rel_error, 4)   # exact along, not across
    (True, 0.5625)
    """
    fine_flows = fine_solves(fine, axes or fine.axes, solver=solver, tolerance=tolerance)
    return coarse_check(fine_flows, coarse, solver=solver, tolerance=tolerance)


def fine_solves(
    fine: Field, axes: tuple[str, ...], *, solver: str = "auto", tolerance: float = 1e-10
) -> dict[str, AxisFlow]:
    """The fine half of the check: one pressure-drop solve per axis, to share between methods.

    Parameters
    ----------
    fine : Field
        The fine field (dask arrays are loaded into memory).
    axes : tuple of str
        Axes to solve along.
    solver, tolerance
        As in `check_flow`.

    Returns
    -------
    dict of str to AxisFlow
    """
    fine_t = transmissibilities(fine)
    return {axis: pressure_drop(fine_t, axis, solver=solver, tolerance=tolerance) for axis in axes}


def coarse_check(
    fine_flows: dict[str, AxisFlow],
    coarse: Field | Transmissibilities,
    *,
    solver: str = "auto",
    tolerance: float = 1e-10,
) -> dict[str, AxisCheck]:
    """The coarse half of the check, against fine solves from `fine_solves`.

    Raises
    ------
    InputError
        If the two grids do not cover the same domain.
    """
    coarse_t = coarse if isinstance(coarse, Transmissibilities) else transmissibilities(coarse)
    fine_grid = next(iter(fine_flows.values())).trans.grid
    for name, a, b in zip("zyx", (fine_grid.dz, fine_grid.dy, fine_grid.dx),
                          (coarse_t.grid.dz, coarse_t.grid.dy, coarse_t.grid.dx)):  # fmt: skip
        if not math.isclose(a.sum(), b.sum(), rel_tol=1e-9):
            raise InputError(
                f"the fine and coarse grids differ in extent along {name}: {a.sum():g} m against "
                f"{b.sum():g} m; they must cover the same domain"
            )
    return {
        axis: AxisCheck(axis, flow, pressure_drop(coarse_t, axis, solver=solver, tolerance=tolerance))
        for axis, flow in fine_flows.items()
    }


def check_summary(
    fine: Field,
    coarse: Field | Transmissibilities,
    *,
    solver: str = "auto",
    tolerance: float = 1e-10,
    max_cells: int = DEFAULT_LIMIT,
) -> dict[str, Any]:
    """`check_flow` as JSON-ready data, or the reason it was not run.

    Parameters
    ----------
    fine, coarse, solver, tolerance
        As in `check_flow`.
    max_cells : int
        Largest fine grid (in cells) solved whole; a larger one is not checked
        and the summary says so (``{"skipped": reason}``) — never silently.

    Returns
    -------
    dict
        Per axis ``AxisCheck.summary()``, or ``{"skipped": reason}``.
    """
    reason = too_large(fine.shape, max_cells)
    if reason:
        return {"skipped": reason}
    checks = check_flow(fine, coarse, solver=solver, tolerance=tolerance)
    return {axis: c.summary() for axis, c in checks.items()}
