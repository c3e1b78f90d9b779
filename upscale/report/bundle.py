"""Everything a report folder holds, rendered in memory: figures as PNG and SVG, and the page."""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np

from ..analysis.compare import Comparison
from ..analysis.ensemble import EnsembleRanking, EnsembleSummary
from ..analysis.ensemble_maps import REPRESENTATIVE_RULE, BlockSpread
from ..analysis.geometry import dip_caution
from ..analysis.percentiles import PERCENTILES, bar_text, label, note
from ..analysis.plan_record import PlanRecord
from ..analysis.records import check_flows, versions, working_folder
from ..caution import CAUTION
from ..check.axis import flow_label
from ..field import Grid
from ..units import quantity_name
from .charts import error_by_block_chart
from .ensemble_page import ensemble_page
from .figures import Plot, build_figures, rendered
from .html import report_page
from .maps import block_spread_maps
from .plan_page import plan_page
from .spread import ensemble_chart, method_spread_chart
from .style import MISSING_LABEL
from .verdict import bound_mark, bound_note, outside_band


@dataclass(frozen=True)
class Bundle:
    """Rendered figures ``(name, png, svg)`` and the HTML page."""

    images: list[tuple[str, bytes, bytes]]
    page: str


def _dims(shape: tuple[int, int, int], ndim: int) -> str:
    layers, rows, cols = shape
    return f"{cols} × {rows}" + (f" × {layers}" if ndim == 3 else "")


def bundle(comparison: Comparison, *, title: str, command: list[str], layer: int | None = None) -> Bundle:
    """Render the figures and the HTML report of a comparison (or of one run).

    Parameters
    ----------
    comparison : Comparison
        With at least one method that ran.
    title : str
        Page title.
    command : list of str
        The command line that reproduces the run.
    layer : int, optional
        Fine layer shown in plan for a 3D model (default: the middle one).

    Returns
    -------
    Bundle
    """
    fine = comparison.fine
    plots = build_figures(comparison, fine.unit, layer=layer)
    images, shown = _rendered(plots)
    grid = fine.grid
    shape = fine.geometry
    described = None if shape is None else shape.describe(float(grid.dx[0]), float(grid.dy[0]))
    job = {
        "title": title,
        "command": command,
        "working_folder": working_folder(command),
        "inputs": [{"role": s.role, "path": s.path, "sha256": s.sha256} for s in fine.sources],
        "unit": fine.unit,
        "grid": f"{_dims(fine.shape, fine.ndim)} cells of {grid.dx[0]:g} m × {grid.dy[0]:g} m"
        + (_geometry_text(described) if described else
           f", {grid.dz.sum():g} m thick in all" if fine.ndim == 3 else ""),
        "block": f"{comparison.block.label} fine cells (x first)",
        "caution": " ".join(filter(None, [CAUTION, _dip_caution(described)])),
        "versions": versions(),
    }
    page = report_page(comparison, shown, job)
    return Bundle(images, page)


def _geometry_text(described: dict) -> str:
    """The grid line's words on a geometry (`upscale.geometry.Geometry.describe`)."""
    thickness = described["thickness_m"]
    dip = described["steepest_dip_deg"]
    pinched = described["pinched_cells"]
    return (f", cells {thickness['min']:g}–{thickness['max']:g} m thick ({pinched} pinched out)"
            + (f", steepest dip {dip:.2g}°" if dip is not None else ""))


def _dip_caution(described: dict | None) -> str | None:
    """The dip caution of `upscale.analysis.geometry.dip_caution`, as a sentence; None when none applies."""
    caution = None if described is None else dip_caution(described["steepest_dip_deg"])
    return None if caution is None else caution[0].upper() + caution[1:] + "."


def _rendered(plots: list[Plot]) -> tuple[list[tuple[str, bytes, bytes]], list[tuple[Plot, bytes]]]:
    images = [(plot.name, *rendered(plot)) for plot in plots]
    return images, [(plot, png) for plot, (_, png, _) in zip(plots, images)]


def _percent(value: float | None) -> str:
    return "–" if value is None else f"{100 * value:+.2f} %"


def ensemble_bundle(ensemble: EnsembleSummary, *, unit: str, title: str, command: list[str],
                    maps: tuple[dict[str, BlockSpread], Grid, str] | None = None) -> Bundle:  # fmt: skip
    """The figures and the page of one method over an ensemble (``upscale run`` on several fields).

    Parameters
    ----------
    ensemble : EnsembleSummary
        From `upscale.analysis.ensemble.ensemble_summary`.
    unit : str
        Permeability unit.
    title : str
        Page title.
    command : list of str
        The command line.
    maps : (dict of str to BlockSpread, Grid, str), optional
        The per-block spread of each coarse permeability, the coarse grid and
        the unit: a figure of maps each (a permeability whose percentile maps
        are kx's is left out).
    """
    convention = ensemble.convention
    plots = [Plot("ensemble", ensemble_chart(ensemble, unit),
                  f"Each dot is one realization; {bar_text(convention)} ({ensemble.percentiles}). "
                  "Look at how far the coarse k_eff strays from the fine one, and whether the check "
                  "errors of some realizations leave the ±5 % band.")]  # fmt: skip
    plots += _spread_plots(maps, len(ensemble.realizations), convention) if maps else []
    images, shown = _rendered(plots)
    rows = []
    for quantity, name in (("k_fine", "fine k_eff"), ("k_coarse", "coarse k_eff"), ("rel_error", "error")):
        for axis, s in ensemble.statistics[quantity].items():
            if s is None:
                continue
            cell = _percent if quantity == "rel_error" else (lambda v: f"{v:.4g}")
            values = [cell(v) for v in (*(s.percentile(q) for q in PERCENTILES), s.mean, s.min, s.max)]
            rows.append([f"{name} {flow_label(axis)}", *values, str(s.count)])
    errors = [s.q50 for s in ensemble.statistics["rel_error"].values() if s]
    name = ensemble.method.name
    worst = max(errors, key=abs) if errors else None
    job = {
        "title": title, "command": command, "working_folder": working_folder(command),
        "caution": CAUTION, "versions": versions(),
        "verdict": f"{name} on {len(ensemble.realizations)} realizations: "
        + (f"median check error within {100 * abs(worst):.2f} % on every axis"
           + (" and corner to corner." if "corner" in ensemble.statistics["rel_error"] else ".")
           if errors else "the check was not run."),
        "warning": outside_band(name, worst, several=False, measure="median check error",
                                where="over these realizations") if errors else None,
        "note": None,
        "what": f"Effective {quantity_name(unit)} ({unit}) of the fine and the coarse model under the same "
        "pressure drop, and the check error, over the realizations.",
        "realizations": [{"name": r.name, **(r.inputs[0].to_dict() if r.inputs else
                                             {"path": "", "sha256": None})}
                         for r in ensemble.realizations],
        "block": _block(ensemble.block, ensemble.axes),
        "percentiles": ensemble.percentiles,
        "representative": None if ensemble.representative is None else
        f"Representative realization: {ensemble.representative} — {REPRESENTATIVE_RULE}.",
    }  # fmt: skip
    head = ["quantity", *(label(q, convention) for q in PERCENTILES), "mean", "min", "max", "realizations"]
    return Bundle(images, ensemble_page(job, head, rows, shown))


def _spread_plots(maps: tuple[dict[str, BlockSpread], Grid, str], realizations: int,
                  convention: str) -> list[Plot]:  # fmt: skip
    """A figure of per-block maps for each coarse permeability (one with kx's percentile maps left out)."""
    spreads, grid, unit = maps
    kx = spreads["kx"]
    drawn = {name: s for name, s in spreads.items()
             if name == "kx" or not all(np.array_equal(s.percentiles[q], kx.percentiles[q], equal_nan=True)
                                        for q in PERCENTILES)}  # fmt: skip
    same = [name for name in spreads if name not in drawn]
    return [Plot(f"spread_maps_{name}", block_spread_maps(s, grid, name, unit, convention=convention,
                                                          realizations=realizations),
                 f"Per coarse block, over the realizations: three percentiles of the coarse {name} on one "
                 f"log colour scale ({note(convention)}), and on its own scale the standard deviation of "
                 f"ln {name}, a relative spread (0.1 is about ±10 %). Look for blocks where the realizations "
                 "disagree: there one coarse model cannot stand for the ensemble."
                 + (f" {', '.join(same)}: the same maps as kx." if name == "kx" and same else "")
                 + f" Hatched blocks have {MISSING_LABEL}.")
            for name, s in drawn.items()]  # fmt: skip


def spread_bundle(ranking: EnsembleRanking, *, title: str, command: list[str]) -> Bundle:
    """The figure and the page of methods compared over an ensemble (``upscale compare`` on several fields).

    Parameters
    ----------
    ranking : EnsembleRanking
        From `upscale.analysis.ensemble.ensemble_ranking`: the methods, realizations, axes, block.
    title : str
        Page title.
    command : list of str
        The command line.
    """
    axes, methods, convention = ranking.axes, ranking.methods, ranking.convention
    flows = check_flows(axes, {name for m in methods for name in m.rel_error})  # none held out in old records
    n = len(ranking.realizations)
    plots = [Plot("spread", method_spread_chart(methods, axes, n, convention),
                  f"Check error of each method on every realization (dots), {bar_text(convention)} "
                  f"({ranking.percentiles}). The ranking follows the median of the largest error; look at "
                  "the bars too: a method whose bar leaves the ±5 % band misses badly on some "
                  "realizations.")]  # fmt: skip
    images, shown = _rendered(plots)
    rows = []
    for m in methods:
        w = m.worst_error
        worst = [f"{100 * w.percentile(q):.2f} %" for q in PERCENTILES] if w else ["–"] * 3
        per_axis = [_percent(m.rel_error[a].q50) if m.rel_error.get(a) else "–" for a in flows]
        mean_rank = m.rank_in_realizations.mean
        mark = bound_mark(m.method)
        rows.append([str(m.rank or "–"), m.name + (f" ({mark})" if mark else ""),
                     f"{m.ran} / {m.ran + m.failed}", *worst, *per_axis,
                     "–" if mean_rank is None else f"{mean_rank:.1f}",
                     str(m.rank_in_realizations.first)])  # fmt: skip
    best = methods[0] if methods and methods[0].rank else None
    several = len(methods) > 1
    verdict, warning, note = "No method ran on these realizations.", None, None
    if best:
        w = best.worst_error
        verdict = (f"{'Best over' if several else 'Over'} {n} realizations: {best.name}, median largest "
                   f"check error {100 * w.q50:.2f} %; {label(90, convention)}: "
                   f"{100 * w.q90:.2f} %.")  # fmt: skip
        warning = outside_band(best.name, w.q50, several=several, measure="median largest check error",
                               where="over these realizations")  # fmt: skip
        note = bound_note(best.method, best.name) if several else None
    job = {
        "title": title, "command": command, "working_folder": working_folder(command),
        "caution": CAUTION, "versions": versions(), "verdict": verdict, "warning": warning, "note": note,
        "what": ("Methods ranked by the median over the realizations of their largest check error over "
                 "the axes and the corner-to-corner flow (methods that failed on some realizations after "
                 "those that ran on all)"
                 if several else "The method's largest check error over the axes and the corner-to-corner "
                 "flow, over the "
                 "realizations") + f"; the {label(10, convention)} and the {label(90, convention)} show how "
        "much that varies from one realization to the next — with few realizations they are interpolated "
        "between the nearest ones.",
        "realizations": [r.to_dict() for r in ranking.realizations], "block": _block(ranking.block, axes),
        "percentiles": ranking.percentiles,
    }  # fmt: skip
    head = ["rank", "method", "ran", *(f"largest error, {label(q, convention)}" for q in PERCENTILES),
            *(f"median error {flow_label(a)}" for a in flows), "mean rank",
            "times first"]  # fmt: skip
    if not several:  # one method's check over the realizations: nothing was ranked
        head, rows = head[1:-2], [row[1:-2] for row in rows]
    return Bundle(images, ensemble_page(job, head, rows, shown))


def plan_bundle(plan: PlanRecord, *, title: str, command: list[str]) -> Bundle:
    """The figure and the page of a plan (``upscale plan``).

    Parameters
    ----------
    plan : PlanRecord
        From `upscale.analysis.plan_record.plan_record`.
    title : str
        Page title.
    command : list of str
        The command line.
    """
    limit = f"{100 * plan.max_error:g} %"
    plots = [Plot("error_by_block", error_by_block_chart(plan),
                  "Largest check error of each method (one line each) against the fine cells per block, "
                  f"with the largest error accepted ({limit}, dashed): a method's answer is the rightmost "
                  "point inside the grey band. A line that dips back into the band at a coarser block "
                  "owes that to errors that cancel."
                  + (" Blocks with grouped layers: dotted, open markers, at their mean fine cells per block."
                     if any(isinstance(b.z, list) for b in plan.blocks) else ""))]  # fmt: skip
    images, shown = _rendered(plots)
    shape, fine = plan.fine.shape, plan.fine
    job = {
        "title": title, "command": command, "working_folder": working_folder(command),
        "inputs": [i.to_dict() for i in plan.provenance.inputs], "caution": CAUTION, "versions": versions(),
        "grid": f"{_dims((shape['layers'], shape['rows'], shape['columns']), plan.dimensions)} cells of "
        f"{_size(fine.dx_m):g} m × {_size(fine.dy_m):g} m"
        + (f", {sum(fine.dz_m):g} m thick in all" if plan.dimensions == 3 else ""),
    }  # fmt: skip
    return Bundle(images, plan_page(plan, shown, job))


def _size(size: float | dict[str, float]) -> float:
    """A cell size as recorded (`GridRecord`): one number, or the regular size beside the edge block's."""
    return size["regular"] if isinstance(size, dict) else size


def _block(block: dict[str, Any], axes: str) -> str:
    # a grouping of the layers is recorded as the list of its sizes, written 2,2,4 like --block
    sizes = (",".join(map(str, block[a])) if isinstance(block[a], list) else str(block[a]) for a in axes)
    return "x".join(sizes) + " fine cells (x first)"
