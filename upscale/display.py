"""Short summaries of values for a terminal and a notebook.

`Field`, `Grid` and `Upscaled` describe themselves in a few labelled rows:
as indented text lines for ``repr`` and as a small HTML table for a
notebook's ``_repr_html_``. The helpers here format those rows; what goes in
them belongs to each class.
"""

from __future__ import annotations

import html
import re
from typing import Any

import numpy as np

#: One summary row: a label and its text.
Row = tuple[str, str]


def as_text(title: str, rows: list[Row]) -> str:
    """A title line and one indented line per row, labels aligned.

    Examples
    --------
    >>> print(as_text("Grid: 2 × 3 cells", [("cell size", "dx 10 m"), ("CRS", "none")]))
    Grid: 2 × 3 cells
      cell size  dx 10 m
      CRS        none
    """
    width = max((len(label) for label, _ in rows), default=0)
    return "\n".join([title, *(f"  {label:<{width}}  {text}" for label, text in rows)])


def as_html(title: str, rows: list[Row]) -> str:
    """The same rows as a small HTML table with the title as its caption (text escaped).

    Examples
    --------
    >>> page = as_html("Grid", [("CRS", "<none>")])
    >>> page[:61]
    '<table><caption style="text-align:left"><b>Grid</b></caption>'
    >>> page[61:]
    '<tr><th style="text-align:left">CRS</th><td style="text-align:left">&lt;none&gt;</td></tr></table>'
    """
    left = ' style="text-align:left"'
    body = "".join(f"<tr><th{left}>{html.escape(label)}</th><td{left}>{html.escape(text)}</td></tr>"
                   for label, text in rows)  # fmt: skip
    return f"<table><caption{left}><b>{html.escape(title)}</b></caption>{body}</table>"


def cells(shape: tuple[int, ...], names: tuple[str, ...]) -> str:
    """Sizes along named axes, e.g. ``'96 × 96 (rows × columns)'``.

    Examples
    --------
    >>> cells((4, 12, 12), ("layers", "rows", "columns"))
    '4 × 12 × 12 (layers × rows × columns)'
    """
    return " × ".join(map(str, shape)) + " (" + " × ".join(names) + ")"


def sizes(name: str, values: np.ndarray) -> str:
    """Cell sizes in m along one axis: one value when uniform, else the range.

    Examples
    --------
    >>> sizes("dz", np.array([2.0, 2.0])), sizes("dx", np.array([200.0, 200.0, 80.0]))
    ('dz 2 m', 'dx 80–200 m')
    """
    low, high = float(values.min()), float(values.max())
    return f"{name} {low:.6g} m" if low == high else f"{name} {low:.6g}–{high:.6g} m"


def crs_name(crs: Any) -> str:
    """A rasterio CRS in a few words: ``EPSG:32633``, its name, or what kind it is.

    Examples
    --------
    >>> from rasterio.crs import CRS
    >>> crs_name(CRS.from_epsg(32633)), crs_name(None)
    ('EPSG:32633', 'none')
    """
    if crs is None:
        return "none"
    text = crs.to_string()
    if len(text) <= 40:
        return text
    named = re.match(r'\s*\w+\[\s*"([^"]*)"', crs.to_wkt())
    if named and named.group(1) not in ("", "unknown"):
        return named.group(1)
    kind = "projected" if crs.is_projected else "geographic" if crs.is_geographic else "local"
    return f"unnamed {kind} CRS in {'degrees' if crs.is_geographic else crs.linear_units}"
