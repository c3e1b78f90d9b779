"""Ensembles of equiprobable realizations: the same job on each, and the spread of the results.

P10, P50 and P90 here are the 10th, 50th and 90th percentiles of the values
over the realizations (non-exceedance: 10 % of the realizations lie below
P10), computed by `numpy.percentile` with linear interpolation between
order statistics (Hyndman & Fan 1996, "Sample quantiles in statistical
packages", definition 7). Note that some trades quote P10 as the value
exceeded by 10 % of the cases, which is this P90.
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np

from .compare import TIE

PERCENTILES = (10, 50, 90)
QUANTITIES = ("k_fine", "k_coarse", "rel_error")


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
    statistics = {quantity: {axis: spread([r[quantity].get(axis) for r in rows]) for axis in axes}
                  for quantity in QUANTITIES}  # fmt: skip
    return {"realizations": rows, "statistics": statistics, "percentiles": PERCENTILE_NOTE}


#: How the percentiles are defined, recorded beside them.
PERCENTILE_NOTE = ("10th, 50th and 90th percentiles over the realizations (numpy.percentile, linear); "
                   "P10 is exceeded by 90 % of them")  # fmt: skip


def spread(values: list[float | None]) -> dict[str, float] | None:
    """P10, P50, P90, mean, min, max and count of the finite values (None if there are none)."""
    finite = np.array([np.nan if v is None else v for v in values], dtype=float)
    finite = finite[np.isfinite(finite)]
    if finite.size == 0:
        return None
    p = np.percentile(finite, PERCENTILES)
    return {**{f"p{q}": float(v) for q, v in zip(PERCENTILES, p)}, "mean": float(finite.mean()),
            "min": float(finite.min()), "max": float(finite.max()), "count": int(finite.size)}  # fmt: skip


def method_spread(names: list[str], comparisons: list[dict[str, Any]]) -> list[dict[str, Any]]:
    """Every method's check errors over the realizations, ranked by their median.

    Parameters
    ----------
    names : list of str
        Realization names.
    comparisons : list of dict
        Each realization's ``compare.json`` content (the same methods in each).

    Returns
    -------
    list of dict
        One per method, best first: ``name`` (label), ``method``, ``rank``, ``ran`` and ``failed``
        (realizations), ``worst_error`` (the spread of the largest
        ``|rel_error|`` over the axes, the quantity each comparison ranks
        by), ``rel_error`` (its spread per axis), ``rank_in_realizations``
        (mean rank and how often first) and ``by_realization`` (per
        realization its ``worst`` and ``rel_error`` per axis; None where the
        method did not run). Ranked by the P50 of ``worst_error`` (ties
        within 1e-9 keep the order of the comparison), the methods that ran
        on every realization first, then by how many realizations a method
        failed on; methods that ran nowhere come last, unranked.

    Examples
    --------
    >>> def c(a, b): return {"dimensions": 2, "methods": [
    ...     {"name": n, "method": n, "error": None, "rank": 0,
    ...      "check": {"x": {"rel_error": e}, "y": {"rel_error": 0.0}}}
    ...     for n, e in (("one", a), ("two", b))]}
    >>> [(m["name"], m["worst_error"]["p50"]) for m in method_spread(["r1", "r2", "r3"],
    ...      [c(0.1, -0.05), c(0.3, 0.02), c(-0.2, 0.01)])]
    [('two', 0.02), ('one', 0.2)]
    """
    axes = "xyz"[: comparisons[0]["dimensions"]]
    methods = []
    for label in [m["name"] for m in comparisons[0]["methods"]]:
        entries = {name: next(m for m in c["methods"] if m["name"] == label)
                   for name, c in zip(names, comparisons)}  # fmt: skip
        ran = {name: e for name, e in entries.items() if e["error"] is None and e["check"]}
        worst = {name: _worst(e["check"], axes) for name, e in ran.items()}
        methods.append({
            "name": label, "method": entries[names[0]]["method"], "ran": len(ran),
            "failed": len(entries) - len(ran),
            "worst_error": spread(list(worst.values())),
            "rel_error": {a: spread([e["check"][a]["rel_error"] for e in ran.values()]) for a in axes},
            "rank_in_realizations": {
                "mean": float(np.mean([e["rank"] for e in ran.values()])) if ran else None,
                "first": sum(e["rank"] == 1 for e in ran.values()),
            },
            "by_realization": {name: {"worst": worst[name], "rel_error": {
                a: ran[name]["check"][a]["rel_error"] for a in axes}} if name in ran else None
                for name in names},
        })  # fmt: skip
    # a method that failed on some realizations ranks after every one that ran on all
    ranked = sorted((m for m in methods if m["worst_error"]),
                    key=lambda m: (m["failed"], round(m["worst_error"]["p50"] / TIE) * TIE))  # fmt: skip
    for rank, m in enumerate(ranked, start=1):
        m["rank"] = rank
    unranked = [dict(m, rank=None) for m in methods if not m["worst_error"]]
    return ranked + unranked


def _worst(check: dict[str, Any], axes: str) -> float | None:
    """Largest |rel_error| over the axes; None when one is undefined (no flow in the fine model)."""
    errors = [check[a]["rel_error"] for a in axes]
    return None if any(e is None or not math.isfinite(e) for e in errors) else max(abs(e) for e in errors)


def csv_rows(ensemble: dict[str, Any]) -> tuple[list[str], list[list[Any]]]:
    """Header and rows of ``ensemble.csv``: one row per realization."""
    axes = [a for a in "xyz" if any(a in r["k_fine"] for r in ensemble["realizations"])]
    header = ["name", *(f"{q}_{a}" for a in axes for q in QUANTITIES)]
    rows = [[r["name"], *(r[q].get(a) for a in axes for q in QUANTITIES)] for r in ensemble["realizations"]]
    return header, rows
