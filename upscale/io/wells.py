"""Read a wells file: one vertical well per row of a CSV file (format in ``docs/wells.md``).

The header names the columns, in any order: ``name``, ``x``, ``y``,
``control``, ``value``, ``radius`` are required; ``layers`` (default: all)
and ``skin`` (default 0) may be left out or left empty. Blank lines and
lines starting with ``#`` are skipped. Every problem is one `InputError`
line naming the file, the line and the column. What needs the grid (a well
outside it, in an inactive cell, two wells in one cell) is checked when the
wells are placed on it (`upscale.flow.wells.connect`).
"""

from __future__ import annotations

import csv
import math
from pathlib import Path

from ..errors import InputError
from ..flow.wells import CONTROLS, Well

REQUIRED = ("name", "x", "y", "control", "value", "radius")
OPTIONAL = ("layers", "skin")
#: Largest well radius accepted, m: a larger one is a radius in another unit (cm, inches); common practice.
MAX_RADIUS = 2.0


def read_wells(path: str | Path) -> tuple[Well, ...]:
    """The wells of a wells file, validated field by field.

    Parameters
    ----------
    path : str or Path
        A CSV file in the format of ``docs/wells.md``.

    Returns
    -------
    tuple of Well
        In the order of the file.

    Raises
    ------
    InputError
        One line per problem: unreadable file, missing or unknown column, a
        value that is no number or out of range, a duplicate name, no wells.
    """
    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8-sig")
    except (OSError, UnicodeDecodeError) as exc:
        raise InputError(f"{path}: the wells file cannot be read ({exc.__class__.__name__}: "
                         f"{getattr(exc, 'strerror', None) or exc})") from None  # fmt: skip
    lines = [(number, line) for number, line in enumerate(text.splitlines(), 1)
             if line.strip() and not line.lstrip().startswith("#")]  # fmt: skip
    if not lines:
        raise InputError(f"{path}: no wells; the first line names the columns ({', '.join(REQUIRED)} ...)")
    header = [h.strip().lower() for h in next(csv.reader([lines[0][1]]))]
    _check_header(path, header)
    wells: list[Well] = []
    seen: dict[str, int] = {}
    for number, line in lines[1:]:
        values = [v.strip() for v in next(csv.reader([line]))]
        if len(values) != len(header):
            raise InputError(f"{path} line {number}: {len(values)} values for {len(header)} columns")
        well = _well(dict(zip(header, values)), f"{path} line {number}")
        if well.name in seen:
            raise InputError(f"{path} line {number}: the well name {well.name!r} is used twice "
                             f"(first on line {seen[well.name]}); every well needs its own name")  # fmt: skip
        seen[well.name] = number
        wells.append(well)
    if not wells:
        raise InputError(f"{path}: no wells, only the header line")
    return tuple(wells)


def _check_header(path: Path, header: list[str]) -> None:
    """Refuse unknown, repeated or missing columns."""
    known = (*REQUIRED, *OPTIONAL)
    for name in header:
        if name not in known:
            raise InputError(f"{path}: unknown column {name!r}; the columns are {', '.join(known)}")
        if header.count(name) > 1:
            raise InputError(f"{path}: the column {name!r} appears twice")
    missing = [name for name in REQUIRED if name not in header]
    if missing:
        raise InputError(f"{path}: the column(s) {', '.join(missing)} are missing; "
                         f"required: {', '.join(REQUIRED)}")  # fmt: skip


def _well(row: dict[str, str], where: str) -> Well:
    """One row as a Well, each field checked."""
    if not row["name"]:
        raise InputError(f"{where}: the well has no name")
    control = row["control"].lower()
    if control not in CONTROLS:
        raise InputError(f"{where}: control {row['control']!r} must be pressure (bottom-hole pressure) or "
                         "rate (total rate)")  # fmt: skip
    radius = _number(row, "radius", where)
    if not 0 < radius <= MAX_RADIUS:
        raise InputError(f"{where}: radius {radius:g} must be a well radius in m, above 0 and at most "
                         f"{MAX_RADIUS:g} (0.05 to 0.15 m is usual)")  # fmt: skip
    skin = _number(row, "skin", where) if row.get("skin") else 0.0
    return Well(name=row["name"], x=_number(row, "x", where), y=_number(row, "y", where),
                layers=_layers(row.get("layers", ""), where), control=control,
                value=_number(row, "value", where), radius=radius, skin=skin)  # fmt: skip


def _number(row: dict[str, str], column: str, where: str) -> float:
    """A finite number from one column."""
    try:
        value = float(row[column])
    except ValueError:
        value = math.nan
    if not math.isfinite(value):
        raise InputError(f"{where}: {column} = {row[column]!r} is not a finite number")
    return value


def _layers(text: str, where: str) -> tuple[int, int] | None:
    """``all`` or empty -> None; ``3`` -> (3, 3); ``2-5`` -> (2, 5); counting from 1 at the top."""
    if text.lower() in ("", "all"):
        return None
    parts = text.split("-")
    try:
        first, last = int(parts[0]), int(parts[-1])
    except ValueError:
        first = last = 0
    if len(parts) > 2 or not 1 <= first <= last:
        raise InputError(f"{where}: layers {text!r} must be all, one layer (3) or first-last (2-5), "
                         "counting from 1 at the top")  # fmt: skip
    return first, last
