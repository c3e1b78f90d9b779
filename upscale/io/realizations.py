"""The realizations of an ensemble: patterns expanded to files, a name for each, one grid for all."""

from __future__ import annotations

import glob
from pathlib import Path
from typing import Any

import numpy as np

from ..errors import InputError
from ..field import Field
from ..grid import BlockSpec
from .read import read_field


def expand(patterns: list[str]) -> list[str]:
    """Paths from file names and glob patterns, in order, each once.

    Raises
    ------
    InputError
        If a pattern matches nothing.
    """
    found: list[str] = []
    for pattern in patterns:
        if glob.has_magic(pattern):
            matches = sorted(glob.glob(pattern))
            if not matches:
                raise InputError(f"{pattern!r} matches no file")
            found += matches
        else:
            found.append(pattern)
    return list(dict.fromkeys(found))


def names_of(paths: list[str]) -> list[str]:
    """Sub-folder name of each realization: its file name without the suffix.

    Raises
    ------
    InputError
        If two realizations would share a name.
    """
    names = [Path(p).stem for p in paths]
    seen: dict[str, str] = {}
    for name, path in zip(names, paths):
        if name in seen:
            raise InputError(f"{seen[name]} and {path} would both be written to {name}/; rename one")
        seen[name] = path
    return names



#: What a grid is compared on, and the name of each part in a message.
_GRID_PARTS = ("shape", "cell size", "layers", "transform", "CRS")


def _grid(f: Field) -> tuple:
    g = f.grid  # a raster's columns share one width, and its rows one height
    return (f.shape, (tuple(np.unique(g.dx)), tuple(np.unique(g.dy))), tuple(g.dz), g.transform, g.crs)


def check_same_grid(fields: dict[str, Field]) -> None:
    """Refuse realizations that are not on one grid, naming the odd ones out.

    The reference is the grid most realizations share; on a tie, the grid of
    the first one among those most shared.

    Raises
    ------
    InputError
        Naming each realization off the reference grid with what differs
        (shape, cell size, layers, transform or CRS), and the realizations
        on it.
    """
    grids = {name: _grid(f) for name, f in fields.items()}
    shared = list(grids.values())
    reference = max(shared, key=shared.count)  # max keeps the first of equal counts
    odd = [name for name, g in grids.items() if g != reference]
    if not odd:
        return
    on_it = [name for name, g in grids.items() if g == reference]

    def differs(name: str) -> str:
        parts = [p for p, a, b in zip(_GRID_PARTS, grids[name], reference) if a != b]
        return f"{name} ({', '.join(parts)})"

    shown = ", ".join(on_it[:3]) + (f" and {len(on_it) - 3} more" if len(on_it) > 3 else "")
    raise InputError(
        f"the realizations must share one grid; not on the grid of {shown}: "
        f"{', '.join(map(differs, odd))} — resample each onto that grid or leave it out"
    )


def read_realizations(paths: list[str], chunk_bytes: int | None, block: BlockSpec, read: dict[str, Any],
                      checksum: bool = True) -> tuple[list[str], dict[str, Field]]:  # fmt: skip
    """Open every realization (lazily) under its name, refusing clashing names and differing grids."""
    names = names_of(paths)
    fields = {name: read_field(path, chunk_bytes=chunk_bytes, block=block.chunk_cells, checksum=checksum,
                               **read)
              for name, path in zip(names, paths)}  # fmt: skip
    check_same_grid(fields)
    return names, fields

