"""The well-driven check: the same wells on the fine and on the coarse model.

Beside the pressure drops of `upscale.check.axis`, a model is judged by the
rates its wells see. The wells of a wells file (`upscale.io.wells`) drive
one steady solve on the fine grid and one on the coarse grid
(`upscale.flow.wells.well_flow`): closed outer faces, or one outer pressure
on the four sides. On the fine grid each well connects to the cells it
crosses by Peaceman's well index; on the coarse grid to the blocks that hold
it, and the blocks connect by the coarse model's own transmissibilities
(`upscale.Upscaled.transmissibilities`: harmonic half-block, or the faces a
method upscaled directly). The coarse connection factors come from
near-well upscaling (default; `upscale.methods.near_well`, which also sets
the faces near each well), from Peaceman's formula applied to the block
with its upscaled kx, ky (full-tensor terms are left out of the index) and
its size (``connection="peaceman"``), or from a package's wells tables
(`coarse_wells` with `given`).

Pressure wells are compared by their rates, rate wells by their pressures
(the drawdown from the reference pressure: the outer pressure, else the
mean of the pressure wells); the headline is the error of the total rate
``Σ |q|``. The result is kept apart from the axis check: its summary is the
``well_check`` object of ``summary.json``.
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass
from typing import Any

import numpy as np

from ..errors import InputError
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
from ..io.package import PackageWells
from ..methods.near_well import CONNECTIONS, CoarseWells, upscale_wells, with_faces

#: What a rate means, recorded beside the numbers.
RATE_UNIT = "q·μ in (unit of k)·m·(unit of pressure), positive into the rock (injection)"
#: The unit of a coarse connection factor and of a near-well face transmissibility.
FACTOR_UNIT = "(unit of k)·m"


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
    connection : str
        How the coarse connection factors were set (`upscale.methods.near_well.CONNECTIONS`),
        or ``package`` (read from a package's wells table).
    factors : dict of str to list of float
        Each well's coarse connection factor in each of its blocks, (unit of k) · m.
    set_by : dict of str to list of str
        What set each factor: ``near-well`` or ``peaceman``.
    faces : dict of (int, int, int, int) to float
        The coarse faces near-well upscaling set, keyed by (array axis, layer,
        row, column of the block before the face): T in (unit of k) · m.
    """

    wells: tuple[Well, ...]
    fine: WellFlow
    coarse: WellFlow
    outer_pressure: float | None
    fine_cells: dict[str, list[tuple[int, int, int]]]
    coarse_cells: dict[str, list[tuple[int, int, int]]]
    connection: str = "peaceman"
    factors: dict[str, list[float]] = dataclasses.field(default_factory=dict)
    set_by: dict[str, list[str]] = dataclasses.field(default_factory=dict)
    faces: dict[tuple[int, int, int, int], float] = dataclasses.field(default_factory=dict)

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
                           "cells": [list(c) for c in self.coarse_cells[w.name]],
                           "factors": self.factors[w.name], "set_by": self.set_by[w.name]},
                "rel_error": self.well_error(w),
            }
            for w in self.wells
        }  # fmt: skip
        faces = [{"axis": "zyx"[a], "cell": [layer, row, column], "transmissibility": T}
                 for (a, layer, row, column), T in sorted(self.faces.items())]  # fmt: skip
        return {
            "outer_faces": "closed" if self.outer_pressure is None else {"pressure": self.outer_pressure},
            "rate_unit": RATE_UNIT,
            "connection": self.connection,
            "factor_unit": FACTOR_UNIT,
            "near_well_faces": faces,
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
    connection: str = "near-well",
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
    connection : {'near-well', 'peaceman'}
        How the coarse well connection factors are set: near-well upscaling
        (default; `upscale.methods.near_well`) or Peaceman's formula on the block.
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
    shared = fine_wells(fine, wells, fine_trans=fine_trans, outer_pressure=outer_pressure,
                        connection=connection, solver=solver, tolerance=tolerance)  # fmt: skip
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
    connections : list of Connections
        The wells on the fine grid, with their fine Peaceman indices.
    connection : str
        How the coarse connection factors are set (`upscale.methods.near_well.CONNECTIONS`).
    """

    fine: Field
    wells: tuple[Well, ...]
    flow: WellFlow
    cells: dict[str, list[tuple[int, int, int]]]
    outer_pressure: float | None
    connections: list[Connections] = dataclasses.field(default_factory=list)
    connection: str = "near-well"


def fine_wells(fine: Field, wells: tuple[Well, ...] | list[Well], *,
               fine_trans: Transmissibilities | None = None, outer_pressure: float | None = None,
               connection: str = "near-well", solver: str = "auto",
               tolerance: float = 1e-10) -> FineWells:  # fmt: skip
    """The wells solved on the fine grid: one solve, whatever the number of coarse models checked.

    Parameters and errors as in `well_check`; `connection` is how every coarse
    model checked against this solve sets its well connection factors.
    """
    if connection not in CONNECTIONS:
        raise InputError(f"the well connection is {' or '.join(CONNECTIONS)}, got {connection!r}")
    on_fine = place_wells(fine, wells, outer_pressure)
    flow = well_flow(fine_trans or transmissibilities(fine), on_fine, outer_pressure=outer_pressure,
                     solver=solver, tolerance=tolerance)  # fmt: skip
    return FineWells(fine, tuple(wells), flow, _cells(on_fine, fine.shape), outer_pressure, on_fine,
                     connection)  # fmt: skip


def coarse_wells(shared: FineWells, coarse: Field, *, coarse_trans: Transmissibilities | None = None,
                 given: PackageWells | None = None, solver: str = "auto",
                 tolerance: float = 1e-10) -> WellCheck:  # fmt: skip
    """The coarse half of the well check, against the fine solve of `fine_wells`.

    Parameters and errors as in `well_check`, and

    given : PackageWells, optional
        A package's wells tables (`upscale.io.package.read_package_wells`): the
        coarse wells connect by its factors, with its near-well faces, instead
        of as ``shared.connection`` says. They must hold the same wells in the
        same coarse cells.
    """
    trans = coarse_trans or transmissibilities(coarse)
    if given is None:
        on_coarse = [connect(w, coarse.grid, **_horizontal(coarse), fine=shared.fine.grid)
                     for w in shared.wells]  # fmt: skip
        found = upscale_wells(shared.fine, trans, shared.connections, on_coarse, connection=shared.connection,
                              outer_pressure=shared.outer_pressure, solver=solver,
                              tolerance=tolerance)  # fmt: skip
        connection = shared.connection
    else:
        model = with_faces(trans, given.faces)
        connections = _from_table(shared.wells, given, coarse, shared.fine)
        flow = well_flow(model, connections, outer_pressure=shared.outer_pressure, solver=solver,
                         tolerance=tolerance)  # fmt: skip
        methods = [given.set_by[w.name] for w in shared.wells]
        found, connection = CoarseWells(connections, methods, given.faces, model, flow), "package"
    names = [c.well.name for c in found.connections]
    return WellCheck(shared.wells, shared.flow, found.flow, shared.outer_pressure, shared.cells,
                     _cells(found.connections, coarse.shape), connection,
                     {n: c.index.tolist() for n, c in zip(names, found.connections)},
                     {n: list(m) for n, m in zip(names, found.methods)}, found.faces)  # fmt: skip


def _from_table(wells: tuple[Well, ...], table: PackageWells, coarse: Field, fine: Field
                ) -> list[Connections]:  # fmt: skip
    """The wells connected as a package's wells table says, after checking it holds them where they are.

    Raises
    ------
    InputError
        If the table holds other wells, or a well in other coarse cells.
    """
    names = [w.name for w in wells]
    if sorted(names) != sorted(table.cells):
        raise InputError(
            f"the package's wells table holds the wells {', '.join(table.cells)} and the wells file "
            f"{', '.join(names)}; check a package with the wells file of its run, or run again with this one"
        )
    found = []
    for w in wells:
        cells = connect(w, coarse.grid, **_horizontal(coarse), fine=fine.grid).cells
        if not np.array_equal(np.sort(cells), np.sort(table.cells[w.name])):
            raise InputError(
                f"well {w.name}: the wells file puts it in coarse cell(s) {', '.join(map(str, cells))} and "
                f"the package's wells table in {', '.join(map(str, table.cells[w.name]))}; check a package "
                "with the wells file of its run, or run again with this one"
            )
        found.append(Connections(w, table.cells[w.name], table.factors[w.name]))
    return found


def place_wells(fine: Field, wells: tuple[Well, ...] | list[Well], outer_pressure: float | None = None
                ) -> list[Connections]:  # fmt: skip
    """The wells connected to the fine grid, every rule that needs the grid checked (before any solve).

    Raises
    ------
    InputError
        As `well_check`.
    """
    refuse_rates_only(wells, outer_pressure)
    connections = [connect(w, fine.grid, **_horizontal(fine)) for w in wells]
    refuse_shared_cells(connections)
    return connections


def _horizontal(field: Field) -> dict[str, np.ndarray | None]:
    """The `connect` arrays of a field in memory: ``kx``, ``ky`` and ``rock``.

    ky is kx when not given. With a geometry they are the reference field's,
    and ``rock`` flags the cells not pinched out; None without one.
    """
    rock = None
    if field.geometry is not None:
        rock = np.asarray(field.geometry.thickness) > 0
        field = field.reference()
    kx = np.asarray(field.kx, dtype=np.float64)
    ky = kx if field.ky is None or field.ky is field.kx else np.asarray(field.ky, dtype=np.float64)
    return {"kx": kx, "ky": ky, "rock": rock}


def _cells(
    connections: list[Connections], shape: tuple[int, int, int]
) -> dict[str, list[tuple[int, int, int]]]:
    """(layer, row, column) of every connected cell, per well."""
    return {c.well.name: [tuple(int(i) for i in cell) for cell in zip(*np.unravel_index(c.cells, shape))]
            for c in connections}  # fmt: skip
