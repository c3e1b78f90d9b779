"""Ensembles of equiprobable realizations: the same job on each, and the spread of the results.

P10, P50 and P90 here are the 10th, 50th and 90th percentiles of the values
over the realizations (non-exceedance: 10 % of the realizations lie below
P10), computed by `numpy.percentile` with linear interpolation between
order statistics (Hyndman & Fan 1996, "Sample quantiles in statistical
packages", definition 7). Note that some trades quote P10 as the value
exceeded by 10 % of the cases, which is this P90.
"""

from __future__ import annotations

import glob
from pathlib import Path
from typing import Any

import numpy as np

from .errors import InputError
from .field import Field

PERCENTILES = (10, 50, 90)
QUANTITIES = ("k_fine", "k_coarse", "rel_error")


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


def check_same_grid(fields: dict[str, Field]) -> None:
    """Refuse realizations that are not on the grid of the first one, listing the odd ones."""
    items = list(fields.items())
    first_name, first = items[0]

    def key(f: Field) -> tuple:
        g = f.grid
        return (f.shape, tuple(g.dx), tuple(g.dy), tuple(g.dz), g.transform, g.crs)

    odd = [name for name, f in items[1:] if key(f) != key(first)]
    if odd:
        raise InputError(
            f"the realizations must share one grid; {', '.join(odd)} differ from {first_name} "
            "(shape, cell size, layers, transform or CRS)"
        )


def ensemble_summary(names: list[str], summaries: list[dict[str, Any]]) -> dict[str, Any]:
    """Per-realization check results and their percentiles over the ensemble.

    Parameters
    ----------
    names : list of str
        Realization names.
    summaries : list of dict
        Each realization's ``summary.json`` content.

    Returns
    -------
    dict
        ``realizations`` (name, input, SHA-256, and per axis k_fine, k_coarse,
        rel_error) and ``statistics``: per quantity and axis ``p10``, ``p50``,
        ``p90``, ``mean``, ``min``, ``max`` (null when the check was not run).

    Examples
    --------
    >>> s = [{"inputs": [], "check": {"x": {"k_fine": v, "k_coarse": v, "rel_error": 0.0}}}
    ...      for v in (1.0, 2.0, 3.0)]
    >>> ensemble_summary(["a", "b", "c"], s)["statistics"]["k_fine"]["x"]["p50"]
    2.0
    """
    rows = []
    for name, summary in zip(names, summaries):
        check = summary.get("check") or {}
        row: dict[str, Any] = {"name": name,
                               "inputs": [{k: i[k] for k in ("role", "path", "sha256")}
                                          for i in summary.get("inputs", [])]}  # fmt: skip
        for quantity in QUANTITIES:
            row[quantity] = {axis: c.get(quantity) for axis, c in check.items() if isinstance(c, dict)}
        rows.append(row)
    axes = sorted({axis for row in rows for axis in row["k_fine"]}, key="xyz".index)
    statistics: dict[str, Any] = {}
    for quantity in QUANTITIES:
        statistics[quantity] = {}
        for axis in axes:
            values = np.array([r[quantity].get(axis) for r in rows], dtype=float)
            values = values[np.isfinite(values)]
            if values.size == 0:
                statistics[quantity][axis] = None
                continue
            p = np.percentile(values, PERCENTILES)
            statistics[quantity][axis] = {
                **{f"p{q}": float(v) for q, v in zip(PERCENTILES, p)},
                "mean": float(values.mean()), "min": float(values.min()), "max": float(values.max()),
                "count": int(values.size),
            }  # fmt: skip
    return {
        "realizations": rows,
        "statistics": statistics,
        "percentiles": "10th, 50th and 90th percentiles over the realizations (numpy.percentile, "
        "linear); P10 is exceeded by 90 % of them",
    }


def csv_rows(ensemble: dict[str, Any]) -> tuple[list[str], list[list[Any]]]:
    """Header and rows of ``ensemble.csv``: one row per realization."""
    axes = [a for a in "xyz" if any(a in r["k_fine"] for r in ensemble["realizations"])]
    header = ["name", *(f"{q}_{a}" for a in axes for q in QUANTITIES)]
    rows = [[r["name"], *(r[q].get(a) for a in axes for q in QUANTITIES)] for r in ensemble["realizations"]]
    return header, rows
