"""What a fine field holds before it is upscaled: grid, units, activity, statistics, suspect values.

`describe_field` scans every property once and returns the description
``upscale info`` prints (and writes with ``--json``).
"""

from __future__ import annotations

import math
from typing import Any

from ..field import Field
from ..grid.layers import LayerRequest
from ..parallel import compute_together
from ..stats import ValueScan, scan_each
from .connectivity import HIGH_K, Span, connectivity, connectivity_arrays
from .layers import LayerChoice, LayerProfile, choose_groups, layer_sums, profile_from_sums

#: The grouping of the layers `describe_field` suggests unless told: the fewest coarse layers that keep
#: 90 % of the between-layer variance (and merge no barrier the count allows to keep).
GROUPING = LayerRequest(keep=0.9)


def describe_field(fine: Field, path: str, grouping: LayerRequest = GROUPING
                   ) -> tuple[dict[str, Any], dict[str, ValueScan]]:  # fmt: skip
    """The description of `fine` (read from `path`) as plain data, and the scans it came from.

    Parameters
    ----------
    fine : Field
    path : str
        Where `fine` was read from, as given.
    grouping : LayerRequest
        The automatic grouping of a 3D model's layers to suggest
        (`upscale.analysis.layers.choose_groups`).

    Returns
    -------
    description : dict
        ``path``, ``dimensions``, ``shape``, ``cell_size_m``, ``crs``, ``unit``,
        ``active_cells``, ``active_fraction``, ``statistics`` (per property),
        ``log10_k``, ``problems``, ``suspect_values``, ``suggested_nodata`` and
        ``connectivity`` (the high-k bodies per axis, `upscale.analysis.connectivity`;
        None past its cell limit) and, for a 3D model, ``layers``: the layer
        profile (`upscale.analysis.layers.LayerProfile.summary`, with the
        barrier runs) and, under its key ``grouping``, the grouping chosen
        for `grouping` (`upscale.analysis.layers.LayerChoice.summary`);
        ``geometry`` (`upscale.geometry.Geometry.describe`) or None for a
        flat model.
    scans : dict of str to ValueScan
        Per property.
    """
    scans, profile, spans = _read_once(fine)
    grid = fine.grid
    layers, rows, cols = fine.shape
    kx = scans["kx"]
    description = {
        "path": path,
        "dimensions": fine.ndim,
        "shape": {"layers": layers, "rows": rows, "columns": cols},
        "cell_size_m": {"dx": float(grid.dx[0]), "dy": float(grid.dy[0]), "dz": grid.dz.tolist()},
        "crs": grid.crs.to_string() if grid.crs is not None else None,
        "unit": fine.unit,
        "active_cells": kx.active,
        "active_fraction": kx.active / kx.cells,
        "statistics": {name: scan.summary() for name, scan in scans.items()},
        "log10_k": {
            "min": math.log10(kx.minimum) if kx.minimum > 0 else None,
            "max": math.log10(kx.maximum) if kx.maximum > 0 else None,
            "mean": kx.log_sum / kx.positive / math.log(10) if kx.positive else None,
            "std": kx.log10_std,
        },
        "problems": {
            "negative": kx.negative, "zero": kx.zero, "infinite": kx.infinite,
        },  # fmt: skip
        "suspect_values": _suspects(scans, fine.properties()),
    }
    description["suggested_nodata"] = _suggested(description["suspect_values"])
    shape = fine.geometry
    description["geometry"] = None if shape is None else shape.describe(float(grid.dx[0]), float(grid.dy[0]))
    description["connectivity"] = None if spans is None else {
        "high_k": HIGH_K, "axes": {axis: s.summary() for axis, s in spans.items()}}  # fmt: skip
    if fine.ndim == 3:
        choice = LayerChoice(grouping, *choose_groups(profile, grouping))
        description["layers"] = {**profile.summary(), "grouping": choice.summary()}
    return description, scans


def _read_once(fine: Field) -> tuple[dict[str, ValueScan], LayerProfile | None, dict[str, Span] | None]:
    """The scans, the layer profile (None for a map) and the spans of `fine`, its chunks read once.

    The three read the whole field: computed apart, a lazy field was read
    from its file three times.
    """
    names = fine.properties()
    whole = connectivity_arrays(fine)
    sums = layer_sums(fine) if fine.ndim == 3 else {}
    lazy = {**{f"scan {n}": s for n, s in scan_each(names).items()},
            **{f"sum {key}": value for key, value in sums.items()},
            **{f"whole {n}": array for n, array in whole.items()}}  # fmt: skip
    done = compute_together(lazy)
    scans = {name: done[f"scan {name}"] for name in names}
    profile = profile_from_sums(fine, {key: done[f"sum {key}"] for key in sums}) if sums else None
    spans = connectivity(fine, read={n: done[f"whole {n}"] for n in whole}) if whole else None
    return scans, profile, spans


def _suspects(scans: dict[str, ValueScan], arrays: dict[str, object]) -> list[dict]:
    """Values of every property that may mark cells without data, as plain data.

    Each is ``{"property", "kind", "value", "count", "first"}``: kind
    ``sentinel`` (a value of `upscale.stats.SENTINELS`, given in ``value``),
    ``negative`` (other negative values), ``zero`` or ``infinite``; ``first``
    the first few cells as ``{"band", "row", "column"}`` (band from 1, row and
    column from 0). ky or kz taken from the field repeat kx and are left out,
    and so are zero porosities (a tight rock).
    """
    found = []
    for name, scan in scans.items():
        if name != "kx" and arrays[name] is arrays["kx"]:
            continue
        for kind, value, count, first in scan.suspects():
            if not (kind == "zero" and name == "porosity"):
                found.append({"property": name, "kind": kind, "value": value, "count": count,
                              "first": [{"band": c[0] + 1, "row": c[1], "column": c[2]} for c in first]})
    return found


def _suggested(suspects: list[dict]) -> float | None:
    """The sentinel held by the most cells, the value to give as ``--nodata`` (None if none)."""
    sentinels = [s for s in suspects if s["kind"] == "sentinel"]
    return max(sentinels, key=lambda s: s["count"])["value"] if sentinels else None
