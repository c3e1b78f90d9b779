"""Read a coarse-grid package back into a two-point system, from its files alone.

`upscale check DIR` solves the coarse half of the flow check from what
this returns: cell sizes, active cells, inner and outer-face
transmissibilities — read from ``cells.csv``, ``connections.csv``,
``boundary.csv`` and ``manifest.json`` only, converted back to the unit of
the run's input so the coarse k_eff compares with the fine one.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.csv as pacsv

from ..errors import InputError
from ..field import Grid
from ..flow import Transmissibilities

MANIFEST = "manifest.json"
_AXIS = {"z": 0, "y": 1, "x": 2}


def _table(path: Path) -> dict[str, np.ndarray]:
    try:
        table = pacsv.read_csv(path)
    except (OSError, pa.ArrowInvalid) as exc:
        raise InputError(f"{path}: cannot be read as a package table ({exc})") from None
    return {name: table.column(name).to_numpy(zero_copy_only=False) for name in table.column_names}


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
        Sizes in m, transmissibilities in (unit of the run's input k) · m.

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
    except (OSError, ValueError, KeyError, TypeError) as exc:
        raise InputError(f"{folder / MANIFEST}: not a coarse-grid package manifest ({exc})") from None
    try:
        cells = _table(folder / "cells.csv")
        pairs = _table(folder / "connections.csv")
        outer = _table(folder / "boundary.csv")
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
        for name, a in _AXIS.items():
            along = pairs["axis"] == name
            faces[a][np.unravel_index(pairs["id1"][along].astype(np.int64), shape)] = (
                pairs["transmissibility"][along] / tf
            )
            for side, sign in enumerate("-+"):
                here = outer["face"] == name + sign
                where = list(np.unravel_index(outer["id"][here].astype(np.int64), shape))
                where[a] = np.zeros_like(where[a])
                boundary[a][side][tuple(where)] = outer["half_transmissibility"][here] / tf
    except (KeyError, ValueError, IndexError) as exc:
        raise InputError(f"{folder}: the package tables are incomplete or inconsistent ({exc})") from None
    trans = Transmissibilities(grid, tuple(faces), tuple((b[0], b[1]) for b in boundary), active)
    return manifest, trans
