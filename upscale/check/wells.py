"""The well-driven check: the same wells on the fine and on the coarse model.

Beside the pressure drops of `upscale.check.axis`, a model is judged by the
rates its wells see. The wells of a wells file (`upscale.io.wells`) drive
one steady solve on the fine grid and one on the coarse grid
(`upscale.flow.wells.well_flow`): closed outer faces, or one outer pressure
on the four sides. On the fine grid each well connects to the cells it
crosses by Peaceman's well index; on the coarse grid to the blocks that hold
it, by Peaceman's formula applied to the block with its upscaled kx, ky
(full-tensor terms are left out of the index) and its size, and the blocks
connect by the coarse model's own transmissibilities
(`upscale.Upscaled.transmissibilities`: harmonic half-block, or the faces a
method upscaled directly).

Pressure wells are compared by their rates, rate wells by their pressures
(the drawdown from the reference pressure: the outer pressure, else the
mean of the pressure wells); the headline is the error of the total rate
``Σ |q|``. The result is kept apart from the axis check: its summary is the
``well_check`` object of ``summary.json``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np

from ..field import Field
from ..flow import Transmissibilities, transmissibilities
from ..flow.wells import (
    Connections,
    Well,
    WellFlow,
    connect,
    refuse_rates_only,
    refuse_shared_cells,
    well_flow,
)

#: What a rate means, recorded beside the numbers.
RATE_UNIT = "q·μ in (unit of k)·m·(unit of pressure), positive into the rock (injection)"


@dataclass(frozen=True, eq=False)
class WellCheck:
    """Fine and coarse solves of the same wells.

    Attributes
    ----------
    wells : tuple of Well
    fine, coarse : WellFlow
    outer_pressure : float or None
        The pressure on the four side faces, None when closed.
    fine_cells, coarse_cells : dict of str to list of (int, int, int)
        The (layer, row, column) every well connects to on each grid, zero-based.
    """

    wells: tuple[Well, ...]
    fine: WellFlow
    coarse: WellFlow
    outer_pressure: float | None
    fine_cells: dict[str, list[tuple[int, int, int]]]
    coarse_cells: dict[str, list[tuple[int, int, int]]]

    @property
    def rel_error(self) -> float:
        """Error of the total rate ``Σ |q|``: ``(coarse - fine) / fine``; NaN when nothing flows."""
        return _relative(self.coarse.total_rate, self.fine.total_rate)

    @property
    def reference(self) -> float:
        """The pressure drawdowns are measured from: the outer pressure, else the pressure wells' mean."""
        if self.outer_pressure is not None:
            return self.outer_pressure
        return float(np.mean([w.value for w in self.wells if w.control == "pressure"]))

    def well_error(self, well: Well) -> float:
        """Relative error of the well's rate (pressure well) or drawdown from `reference` (rate well)."""
        if well.control == "pressure":
            return _relative(self.coarse.rates[well.name], self.fine.rates[well.name])
        fine, coarse = (flow.pressures[well.name] - self.reference for flow in (self.fine, self.coarse))
        return _relative(coarse, fine)

    def summary(self) -> dict[str, Any]:
        """The check as plain data: the ``well_check`` object of ``summary.json``."""

        def solve(flow: WellFlow) -> dict[str, Any]:
            return {"total_rate": flow.total_rate, "boundary_rate": flow.boundary_rate,
                    "unknowns": flow.unknowns, "solver": flow.method, "iterations": flow.iterations,
                    "residual": flow.residual}  # fmt: skip

        wells = {
            w.name: {
                "control": w.control, "value": w.value, "x": w.x, "y": w.y, "radius_m": w.radius,
                "skin": w.skin, "layers": "all" if w.layers is None else list(w.layers),
                "fine": {"rate": self.fine.rates[w.name], "pressure": self.fine.pressures[w.name],
                         "cells": [list(c) for c in self.fine_cells[w.name]]},
                "coarse": {"rate": self.coarse.rates[w.name], "pressure": self.coarse.pressures[w.name],
                           "cells": [list(c) for c in self.coarse_cells[w.name]]},
                "rel_error": self.well_error(w),
            }
            for w in self.wells
        }  # fmt: skip
        return {
            "outer_faces": "closed" if self.outer_pressure is None else {"pressure": self.outer_pressure},
            "rate_unit": RATE_UNIT,
            "total_rate": {"fine": self.fine.total_rate, "coarse": self.coarse.total_rate,
                           "rel_error": self.rel_error},
            "wells": wells,
            "fine": solve(self.fine),
            "coarse": solve(self.coarse),
        }  # fmt: skip


def _relative(coarse: float, fine: float) -> float:
    """``(coarse - fine) / fine``; 0 when both are 0, NaN when only the fine one is."""
    if fine == 0:
        return 0.0 if coarse == 0 else math.nan
    return (coarse - fine) / fine


def well_check(
    fine: Field,
    coarse: Field,
    wells: tuple[Well, ...] | list[Well],
    *,
    coarse_trans: Transmissibilities | None = None,
    fine_trans: Transmissibilities | None = None,
    outer_pressure: float | None = None,
    solver: str = "auto",
    tolerance: float = 1e-10,
) -> WellCheck:
    """Solve the wells on the fine and on the coarse model (module docstring).

    Parameters
    ----------
    fine : Field
        The fine field (dask arrays are loaded).
    coarse : Field
        The coarse field of the same domain: its kx, ky and block sizes give the
        coarse well indices.
    wells : sequence of Well
        From `upscale.io.wells.read_wells`, or built in Python.
    coarse_trans : Transmissibilities, optional
        The coarse model's transmissibilities (`upscale.Upscaled.transmissibilities`);
        default: the harmonic half-block rule on `coarse`.
    fine_trans : Transmissibilities, optional
        The fine transmissibilities, when already computed.
    outer_pressure : float, optional
        Pressure held on the four side faces; None (default): closed.
    solver, tolerance
        As in `upscale.check.check_flow`.

    Returns
    -------
    WellCheck

    Raises
    ------
    InputError
        For wells that cannot be placed (outside the grid, inactive cells, two
        in one fine cell, a radius above the equivalent radius), or rate wells
        alone inside closed faces.

    Examples
    --------
    >>> import numpy as np
    >>> from upscale import coarsen
    >>> from upscale.flow.wells import Well
    >>> result = coarsen(np.full((16, 16), 100.0), "4x4", "arithmetic")
    >>> wells = [Well("I", 2.5, -2.5, None, "pressure", 1.0, 0.05),
    ...          Well("P", 13.5, -13.5, None, "pressure", 0.0, 0.05)]
    >>> check = well_check(result.fine, result.coarse, wells)
    >>> round(check.fine.rates["I"] + check.fine.rates["P"], 9)   # closed faces: in = out
    0.0
    """
    shared = fine_wells(fine, wells, fine_trans=fine_trans, outer_pressure=outer_pressure, solver=solver,
                        tolerance=tolerance)  # fmt: skip
    return coarse_wells(shared, coarse, coarse_trans=coarse_trans, solver=solver, tolerance=tolerance)


@dataclass(frozen=True, eq=False)
class FineWells:
    """The fine half of the well check, to share between coarse models (`coarse_wells`).

    Attributes
    ----------
    fine : Field
    wells : tuple of Well
    flow : WellFlow
    cells : dict of str to list of (int, int, int)
        The fine (layer, row, column) each well connects to.
    outer_pressure : float or None
    """

    fine: Field
    wells: tuple[Well, ...]
    flow: WellFlow
    cells: dict[str, list[tuple[int, int, int]]]
    outer_pressure: float | None


def fine_wells(fine: Field, wells: tuple[Well, ...] | list[Well], *,
               fine_trans: Transmissibilities | None = None, outer_pressure: float | None = None,
               solver: str = "auto", tolerance: float = 1e-10) -> FineWells:  # fmt: skip
    """The wells solved on the fine grid: one solve, whatever the number of coarse models checked.

    Parameters and errors as in `well_check`.
    """
    on_fine = place_wells(fine, wells, outer_pressure)
    flow = well_flow(fine_trans or transmissibilities(fine), on_fine, outer_pressure=outer_pressure,
                     solver=solver, tolerance=tolerance)  # fmt: skip
    return FineWells(fine, tuple(wells), flow, _cells(on_fine, fine.shape), outer_pressure)


def coarse_wells(shared: FineWells, coarse: Field, *, coarse_trans: Transmissibilities | None = None,
                 solver: str = "auto", tolerance: float = 1e-10) -> WellCheck:  # fmt: skip
    """The coarse half of the well check, against the fine solve of `fine_wells`.

    Parameters and errors as in `well_check`.
    """
    on_coarse = [connect(w, coarse.grid, *_horizontal(coarse), fine=shared.fine.grid) for w in shared.wells]
    flow = well_flow(coarse_trans or transmissibilities(coarse), on_coarse,
                     outer_pressure=shared.outer_pressure, solver=solver, tolerance=tolerance)  # fmt: skip
    return WellCheck(shared.wells, shared.flow, flow, shared.outer_pressure, shared.cells,
                     _cells(on_coarse, coarse.shape))  # fmt: skip


def place_wells(fine: Field, wells: tuple[Well, ...] | list[Well], outer_pressure: float | None = None
                ) -> list[Connections]:  # fmt: skip
    """The wells connected to the fine grid, every rule that needs the grid checked (before any solve).

    Raises
    ------
    InputError
        As `well_check`.
    """
    refuse_rates_only(wells, outer_pressure)
    connections = [connect(w, fine.grid, *_horizontal(fine)) for w in wells]
    refuse_shared_cells(connections)
    return connections


def _horizontal(field: Field) -> tuple[np.ndarray, np.ndarray]:
    """Kx and ky of a field in memory, ky = kx when not given."""
    kx = np.asarray(field.kx, dtype=np.float64)
    return kx, kx if field.ky is None or field.ky is field.kx else np.asarray(field.ky, dtype=np.float64)


def _cells(
    connections: list[Connections], shape: tuple[int, int, int]
) -> dict[str, list[tuple[int, int, int]]]:
    """(layer, row, column) of every connected cell, per well."""
    return {c.well.name: [tuple(int(i) for i in cell) for cell in zip(*np.unravel_index(c.cells, shape))]
            for c in connections}  # fmt: skip
