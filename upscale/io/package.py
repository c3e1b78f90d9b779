"""Read a coarse-grid package back into a two-point system, from its files alone.

`upscale check DIR` solves the coarse half of the flow check from what
this returns: cell sizes, active cells, inner and outer-face
transmissibilities — read from ``cells.csv``, ``connections.csv``,
``boundary.csv`` and ``manifest.json`` only, converted back to the unit of
the run's input so the coarse k_eff compares with the fine one.
"""

from __future__ import annotations

import json
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
from affine import Affine

from ..errors import InputError
from ..field import Field, Grid
from ..flow import Transmissibilities
from ..geometry import Geometry
from ..optional import lazy
from .read import sha256

pa = lazy("pyarrow", "formats")
pacsv = lazy("pyarrow.csv", "formats")

MANIFEST = "manifest.json"
_AXIS = {"z": 0, "y": 1, "x": 2}


def _table(path: Path, recorded: dict[str, Any]) -> dict[str, np.ndarray]:
    """A table, after checking it against the manifest's row count and SHA-256."""
    if path.name not in recorded:
        raise InputError(f"{path}: the manifest does not list it")
    try:
        digest = sha256(path)
        table = pacsv.read_csv(path)
    except (OSError, pa.ArrowInvalid) as exc:
        raise InputError(f"{path}: cannot be read as a package table ({_plain(exc)})") from None
    if digest != recorded[path.name]["sha256"] or table.num_rows != recorded[path.name]["rows"]:
        raise InputError(
            f"{path}: changed since the run (its SHA-256 or its {recorded[path.name]['rows']} rows "
            "differ from the manifest's); the package no longer describes the run's coarse model"
        )
    return {name: table.column(name).to_numpy(zero_copy_only=False) for name in table.column_names}


def _plain(exc: Exception) -> str:
    """The first line of an error, printable characters only."""
    text = str(exc).splitlines()[0] if str(exc) else type(exc).__name__
    return "".join(c if c.isprintable() else "?" for c in text)[:200]


def _numbers(values: np.ndarray, what: str, path: Path, positive: bool) -> np.ndarray:
    try:
        numbers = np.asarray(values, dtype=np.float64)
    except (TypeError, ValueError):
        raise InputError(f"{path}: {what} holds values that are not numbers") from None
    bad = ~np.isfinite(numbers) | ((numbers <= 0) if positive else (numbers < 0))
    if bad.any():
        need = "positive" if positive else "0 or more"
        raise InputError(f"{path}: {int(bad.sum())} {what} value(s) missing or not {need}, "
                         f"first in data row {int(np.flatnonzero(bad)[0]) + 1}")  # fmt: skip
    return numbers


def read_package(folder: str | Path) -> tuple[dict, Transmissibilities]:
    """The manifest and the coarse transmissibilities of a package, in the input's unit.

    Parameters
    ----------
    folder : str or Path
        An output folder of ``upscale run``.

    Returns
    -------
    manifest : dict
    trans : Transmissibilities
        Sizes in m, transmissibilities in (unit of the run's input k) · m; for a
        model with a geometry, the ``volume_ratio`` of the manifest's ``geometry``.

    Raises
    ------
    InputError
        If a file is missing or does not hold what the format says.
    """
    folder = Path(folder)
    try:
        manifest = json.loads((folder / MANIFEST).read_text())
        factors = manifest["units"]["factors"]
        length, tf = float(factors["length"]), float(factors["k"]) * float(factors["length"])
        recorded = dict(manifest["tables"])
        ratio = float(manifest.get("geometry", {}).get("volume_ratio", 1.0))  # 1: a flat model, or older
    except (OSError, ValueError, KeyError, TypeError, AttributeError) as exc:
        raise InputError(f"{folder / MANIFEST}: not a coarse-grid package manifest ({exc})") from None
    try:
        cells = _table(folder / "cells.csv", recorded)
        pairs = _table(folder / "connections.csv", recorded)
        outer = _table(folder / "boundary.csv", recorded)
        shape = (int(cells["k"].max()) + 1, int(cells["j"].max()) + 1, int(cells["i"].max()) + 1)
        L, M, N = shape
        order = np.argsort(cells["id"])
        if not np.array_equal(cells["id"][order], np.arange(L * M * N)):
            raise InputError(f"{folder / 'cells.csv'}: ids are not 0 .. {L * M * N - 1}")
        dx = cells["dx"][order].reshape(shape)[0, 0, :] / length
        dy = cells["dy"][order].reshape(shape)[0, :, 0] / length
        dz = cells["dz"][order].reshape(shape)[:, 0, 0] / length
        active = cells["active"][order].reshape(shape).astype(bool)
        grid = Grid(dz=dz, dy=dy, dx=dx)
        faces = [np.zeros(tuple(n - (b == a) for b, n in enumerate(shape))) for a in range(3)]
        boundary = [[np.zeros(tuple(1 if b == a else n for b, n in enumerate(shape))) for _ in "-+"]
                    for a in range(3)]  # fmt: skip
        T = _numbers(pairs["transmissibility"], "transmissibility", folder / "connections.csv", True)
        t = _numbers(outer["half_transmissibility"], "half_transmissibility", folder / "boundary.csv",
                     False)  # fmt: skip
        strides = {"x": 1, "y": N, "z": N * M}
        for name, a in _AXIS.items():
            along = pairs["axis"] == name
            first = pairs["id1"][along].astype(np.int64)
            if np.any(pairs["id2"][along].astype(np.int64) != first + strides[name]):
                raise InputError(f"{folder / 'connections.csv'}: a connection along {name} joins "
                                 "cells that are not neighbours along it")  # fmt: skip
            faces[a][np.unravel_index(first, shape)] = T[along] / tf
            for side, sign in enumerate("-+"):
                here = outer["face"] == name + sign
                where = list(np.unravel_index(outer["id"][here].astype(np.int64), shape))
                where[a] = np.zeros_like(where[a])
                boundary[a][side][tuple(where)] = t[here] / tf
    except InputError:
        raise
    except (KeyError, ValueError, IndexError, TypeError) as exc:
        raise InputError(
            f"{folder}: the package tables are incomplete or inconsistent ({_plain(exc)})"
        ) from None
    trans = Transmissibilities(grid, tuple(faces), tuple((b[0], b[1]) for b in boundary), active, ratio)
    return manifest, trans


def read_coarse_field(folder: str | Path, trans: Transmissibilities, unit: str) -> Field:
    """The coarse kx, ky of a package on its grid, placed on the map, in the unit of the run's input.

    What the well check needs of the coarse model besides its
    transmissibilities: each block's kx and ky (Peaceman's coarse well
    index) and where the blocks lie (the ``x``, ``y`` centres of
    ``cells.csv``, in the CRS's units).

    Parameters
    ----------
    folder : str or Path
        An output folder of ``upscale run``.
    trans : Transmissibilities
        Its coarse model, from `read_package` (the grid's sizes and active blocks).
    unit : str
        The permeability unit of the run's input.

    Returns
    -------
    Field
        kx, ky of shape (L, M, N), NaN for inactive blocks; the grid of `trans`
        with a north-up transform through the first block's corner; for a
        model with a geometry (the manifest's ``geometry``), the geometry of
        the ``top_elevation`` and ``thickness`` columns, in m.

    Raises
    ------
    InputError
        If the cells table is missing, changed, or lacks a column.
    """
    folder = Path(folder)
    manifest = json.loads((folder / MANIFEST).read_text())
    factors = manifest["units"]["factors"]
    cells = _table(folder / "cells.csv", dict(manifest["tables"]))
    try:
        order = np.argsort(cells["id"])
        k = {name: np.asarray(cells[name][order], dtype=np.float64) for name in ("kx", "ky") if name in cells}
        x, y = float(cells["x"][order][0]), float(cells["y"][order][0])
        k["kx"]
        length = float(factors["length"])
        shape = _geometry(cells, order, trans.grid.shape, length) if "geometry" in manifest else None
    except (KeyError, TypeError, ValueError) as exc:
        raise InputError(
            f"{folder / 'cells.csv'}: no kx, x and y to place the wells on, or no elevations for the "
            f"manifest's geometry ({_plain(exc)})"
        ) from None
    grid = trans.grid
    # the centres are in the CRS's units, laid out with the block sizes in m (`upscale.export.package`)
    corner = (x - grid.dx[0] / 2, y + grid.dy[0] / 2)
    transform = Affine(grid.dx.max(), 0.0, corner[0], 0.0, -grid.dy.max(), corner[1])
    placed = Grid(dz=grid.dz, dy=grid.dy, dx=grid.dx, transform=transform)
    kx = np.where(trans.active, k["kx"].reshape(grid.shape) / float(factors["k"]), np.nan)
    ky = np.where(trans.active, k.get("ky", k["kx"]).reshape(grid.shape) / float(factors["k"]), np.nan)
    return Field(kx, ky, None, None, placed, unit, geometry=shape)


def _geometry(cells: dict[str, np.ndarray], order: np.ndarray, shape: tuple[int, int, int],
              length: float) -> Geometry:  # fmt: skip
    """The coarse geometry of a package's cells (top of the first layer, every thickness), in m."""
    top, thickness = (np.asarray(cells[name][order], dtype=np.float64).reshape(shape) / length
                      for name in ("top_elevation", "thickness"))  # fmt: skip
    return Geometry(top=top[0], thickness=thickness)


@dataclass(frozen=True, eq=False)
class PackageWells:
    """A package's wells tables (``wells.csv``, ``well_faces.csv``), in the unit of the run's input.

    Attributes
    ----------
    cells : dict of str to ndarray of int
        Each well's coarse cells (flat ids, as in ``cells.csv``), in the table's order.
    factors : dict of str to ndarray of float
        Its connection factor in each, (unit of k) · m.
    set_by : dict of str to tuple of str
        What set each factor: ``near-well`` or ``peaceman``.
    faces : dict of (int, int, int, int) to float
        The faces near-well upscaling set: T in (unit of k) · m, keyed by (array
        axis, layer, row, column of the cell ``id1``).
    """

    cells: dict[str, np.ndarray]
    factors: dict[str, np.ndarray]
    set_by: dict[str, tuple[str, ...]]
    faces: dict[tuple[int, int, int, int], float]


def read_package_wells(folder: str | Path, manifest: dict, shape: tuple[int, int, int]
                       ) -> PackageWells | None:  # fmt: skip
    """The wells tables of a package, or None for a package written without wells.

    Parameters
    ----------
    folder : str or Path
        An output folder of ``upscale run``.
    manifest : dict
        Its manifest (`read_package`).
    shape : (int, int, int)
        The coarse grid's (layers, rows, columns).

    Raises
    ------
    InputError
        If a table the manifest lists is missing, changed, or does not hold what the format says.
    """
    folder = Path(folder)
    recorded = dict(manifest["tables"])
    if "wells.csv" not in recorded:
        return None
    factors = manifest["units"]["factors"]
    tf = float(factors["k"]) * float(factors["length"])
    wells = _table(folder / "wells.csv", recorded)
    faces = _table(folder / "well_faces.csv", recorded)
    try:
        names = [str(n) for n in wells["well"]]
        factor = _numbers(wells["factor"], "factor", folder / "wells.csv", True) / tf
        ids = wells["id"].astype(np.int64)
        T = _numbers(faces["transmissibility"], "transmissibility", folder / "well_faces.csv", True) / tf
        axes = [_AXIS[str(a)] for a in faces["axis"]]
        first = faces["id1"].astype(np.int64)
        at = np.unravel_index(first, shape)
        step = np.array([(shape[1] * shape[2], shape[2], 1)[a] for a in axes], dtype=np.int64)
        last = np.array([at[a][n] == shape[a] - 1 for n, a in enumerate(axes)], dtype=bool)
        if np.any(faces["id2"].astype(np.int64) != first + step) or np.any(last):
            raise InputError(f"{folder / 'well_faces.csv'}: a face joins cells that are not neighbours "
                             "along its axis")  # fmt: skip
        mine = {n: np.array([w == n for w in names]) for n in dict.fromkeys(names)}
        return PackageWells(
            {n: ids[m] for n, m in mine.items()}, {n: factor[m] for n, m in mine.items()},
            {n: tuple(str(s) for s in wells["set_by"][m]) for n, m in mine.items()},
            {(a, int(k), int(j), int(i)): float(v) for a, k, j, i, v in zip(axes, *at, T)},
        )  # fmt: skip
    except (KeyError, ValueError, IndexError, TypeError) as exc:
        raise InputError(
            f"{folder}: the wells tables are incomplete or inconsistent ({_plain(exc)})"
        ) from None
