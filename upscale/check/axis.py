"""Stage 5: the check that the coarse model passes the same flow as the fine one.

For every flow axis, the same pressure drop is applied to the fine and to
the coarse model — fixed pressures on the two outer faces across the axis,
closed sides — and the effective permeabilities are compared:
``rel_error = (k_coarse - k_fine) / k_fine``. The coarse model connects its
blocks by the same harmonic half-block rule as the fine cells (or by
transmissibilities upscaled directly, when a method provides them).

Every check also solves the flows of `HELD_OUT`, which no method is fitted
to: today the corner-to-corner flow of `upscale.flow.corner` (key
``"corner"``), between corner regions of whole coarse blocks, compared by its
effective permeability (the rate over the rate of k = 1 on the same grid)
in the same ``rel_error``. A check's dict holds the axes first, then these.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

from ..errors import InputError
from ..field import Field, Grid
from ..flow import AxisFlow, Transmissibilities, pressure_drop, transmissibilities
from ..flow.corner import CornerFlow, Corners, corner_flow, corners_of
from .limits import DEFAULT_LIMIT, too_large

#: The held-out flows every check solves beside the axes, in this order (see the module docstring).
HELD_OUT = ("corner",)


def flow_order(name: str) -> int:
    """Where the flow `name` goes in a check: x, y, z, then the held-out flows.

    Examples
    --------
    >>> sorted(["corner", "y", "x"], key=flow_order)
    ['x', 'y', 'corner']
    """
    return ("x", "y", "z", *HELD_OUT).index(name)


def flow_label(name: str) -> str:
    """How tables and figures name a check flow.

    Examples
    --------
    >>> flow_label("x"), flow_label("corner")
    ('along x', 'corner to corner')
    """
    return "corner to corner" if name == "corner" else f"along {name}"


def check_names(axes: tuple[str, ...] | str) -> tuple[str, ...]:
    """The flows of a check on `axes`: the axes, then `HELD_OUT`."""
    return (*axes, *HELD_OUT)


@dataclass(frozen=True, eq=False)
class AxisCheck:
    """Fine and coarse flow of one check flow: along an axis, or a held-out flow.

    Attributes
    ----------
    axis : str
        ``"x"``, ``"y"``, ``"z"``, or the name of a held-out flow (`HELD_OUT`).
    fine, coarse : AxisFlow or CornerFlow
        The two solves; both report ``k_eff``.
    """

    axis: str
    fine: AxisFlow | CornerFlow
    coarse: AxisFlow | CornerFlow

    @property
    def rel_error(self) -> float:
        """``(k_coarse - k_fine) / k_fine``; 0 when both are 0, NaN when only the fine one is."""
        if self.fine.k_eff == 0:
            return 0.0 if self.coarse.k_eff == 0 else math.nan
        return (self.coarse.k_eff - self.fine.k_eff) / self.fine.k_eff

    def summary(self) -> dict[str, Any]:
        """The check as plain numbers for ``summary.json``."""

        def solve(flow: AxisFlow | CornerFlow) -> dict[str, Any]:
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
    """Solve the same flows on the fine and the coarse model: per axis, and the held-out flows.

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
        Per axis, then per held-out flow (`HELD_OUT`).

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
    >>> list(check), check["corner"].rel_error > 0   # the held-out flow crosses the layers too
    (['x', 'y', 'corner'], True)
    """
    fine_flows = fine_solves(fine, axes or fine.axes, coarse_grid=coarse.grid, solver=solver,
                             tolerance=tolerance)  # fmt: skip
    return coarse_check(fine_flows, coarse, solver=solver, tolerance=tolerance)


def fine_solves(
    fine: Field,
    axes: tuple[str, ...],
    *,
    coarse_grid: Grid | None = None,
    solver: str = "auto",
    tolerance: float = 1e-10,
) -> dict[str, AxisFlow | CornerFlow]:
    """The fine half of the check: one solve per axis and per held-out flow, to share between methods.

    Parameters
    ----------
    fine : Field
        The fine field (dask arrays are loaded into memory).
    axes : tuple of str
        Axes to solve along.
    coarse_grid : Grid, optional
        The coarse grid of the partition (e.g. `upscale.BlockSpec.coarse_grid`):
        it places the held-out flows' regions on whole blocks. Without it the
        held-out flows are left to `coarse_check`, which then solves them on
        the fine grid for every coarse model it checks.
    solver, tolerance
        As in `check_flow`.

    Returns
    -------
    dict of str to (AxisFlow or CornerFlow)
        Per axis, then (with `coarse_grid`) ``"corner"``.
    """
    fine_t = transmissibilities(fine)
    flows: dict[str, AxisFlow | CornerFlow] = {
        axis: pressure_drop(fine_t, axis, solver=solver, tolerance=tolerance) for axis in axes
    }
    if coarse_grid is not None:
        corners = corners_of(fine.grid, coarse_grid)[0]
        flows.update(_held_out(fine_t, corners, solver=solver, tolerance=tolerance))
    return flows


def held_out_solves(trans: Transmissibilities, coarse_grid: Grid, *, solver: str = "auto",
                    tolerance: float = 1e-10) -> dict[str, CornerFlow]:  # fmt: skip
    """The held-out flows (`HELD_OUT`) alone on the grid of `trans`, regions on the blocks of `coarse_grid`.

    For a caller that shares the axis solves between block partitions (a plan).
    """
    return _held_out(trans, corners_of(trans.grid, coarse_grid)[0], solver=solver, tolerance=tolerance)


def _held_out(trans: Transmissibilities, corners: Corners, *, solver: str, tolerance: float
              ) -> dict[str, CornerFlow]:  # fmt: skip
    """The held-out flows (`HELD_OUT`) on one grid, with its corner regions."""
    return {"corner": corner_flow(trans, corners, solver=solver, tolerance=tolerance)}


def coarse_check(
    fine_flows: dict[str, AxisFlow | CornerFlow],
    coarse: Field | Transmissibilities,
    *,
    solver: str = "auto",
    tolerance: float = 1e-10,
) -> dict[str, AxisCheck]:
    """The coarse half of the check, against fine solves from `fine_solves`.

    The held-out flows missing from `fine_flows` (`fine_solves` without a
    coarse grid) are solved here on the fine grid first.

    Returns
    -------
    dict of str to AxisCheck
        Per flow of `fine_flows`, then per held-out flow it lacked.

    Raises
    ------
    InputError
        If the two grids do not cover the same domain, or if the fine
        held-out flows were placed for another partition.
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
    fine_corners, coarse_corners = corners_of(fine_grid, coarse_t.grid)
    if any(name not in fine_flows for name in HELD_OUT):
        fine_t = next(iter(fine_flows.values())).trans
        fine_flows = {**fine_flows, **_held_out(fine_t, fine_corners, solver=solver, tolerance=tolerance)}
    if fine_flows["corner"].corners != fine_corners:
        raise InputError(
            f"the fine corner flow was solved for another block partition ({fine_flows['corner'].corners}, "
            f"here {fine_corners}); solve the fine flows with this coarse grid"
        )
    coarse_flows = {axis: pressure_drop(coarse_t, axis, solver=solver, tolerance=tolerance)
                    for axis in fine_flows if axis not in HELD_OUT}  # fmt: skip
    coarse_flows.update(_held_out(coarse_t, coarse_corners, solver=solver, tolerance=tolerance))
    order = sorted(fine_flows, key=flow_order)
    return {name: AxisCheck(name, fine_flows[name], coarse_flows[name]) for name in order}


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
