"""Terminal output of the commands: short, aligned tables."""

from __future__ import annotations

import math
from pathlib import Path

import click

from ..analysis.ensemble import EnsembleRanking, EnsembleSummary
from ..analysis.percentiles import PERCENTILES, short_label
from ..analysis.records import SolveRecord
from ..analysis.summary import FlowCheck, RunSummary
from ..export.package import PACKAGE_FILES, STRUCTURED_VTK, WELL_FILES
from ..field import PERMEABILITY
from ..methods.coarsen import Upscaled
from ..report.verdict import bound_note, outside_band
from ..units import property_label, symbol

#: Row labels of the transmissivities: T alone, or Tx and Ty when the method made ky differ from kx.
_AQUIFER = {False: {"transmissivity": "T"}, True: {"transmissivity": "Tx", "transmissivity_y": "Ty"}}

def number(value: float | None, spec: str = ".4g") -> str:
    """A number for a table; ``-`` for a missing or non-finite one."""
    if value is None or (isinstance(value, float) and not math.isfinite(value)):
        return "-"
    return format(value, spec)


def crs_text(crs: object) -> str:
    """A CRS in one short line: its authority code, else its PROJ string."""
    if crs is None:
        return "none"
    authority = crs.to_authority()
    return ":".join(authority) if authority else crs.to_proj4().replace("=True", "")


def dims(shape: tuple[int, int, int], ndim: int) -> str:
    """Grid size x first, e.g. ``256 x 128`` or ``96 x 96 x 16``."""
    layers, rows, cols = shape
    return f"{cols} x {rows}" + (f" x {layers}" if ndim == 3 else "")


def table(header: list[str], rows: list[list[str]]) -> str:
    """Left-aligned first column, right-aligned others."""
    widths = [max(len(r[i]) for r in [header, *rows]) for i in range(len(header))]

    def line(cells: list[str]) -> str:
        return "  ".join(
            c.ljust(w) if i == 0 else c.rjust(w) for i, (c, w) in enumerate(zip(cells, widths))
        )

    return "\n".join([line(header), *(line(r) for r in rows)])


def print_result(result: Upscaled, summary: RunSummary, out: str) -> None:
    """Print what a run did: grids, method, and fine vs coarse statistics."""
    fine, coarse = result.fine, result.coarse
    opts = ", ".join(f"{k}={v}" for k, v in result.options.items())
    axes = "(x, y, z)" if fine.ndim == 3 else "(x, y)"
    click.echo(f"fine grid    {dims(fine.shape, fine.ndim)} cells {axes}")
    click.echo(
        f"coarse grid  {dims(coarse.shape, fine.ndim)} blocks of {result.block} cells, "
        f"{summary.active.coarse_blocks} active"
    )
    template = summary.grid_like
    if template is not None:
        click.echo(f"grid like    {template.path}: blocks are its cells from column "
                   f"{template.template_columns[0]}, row {template.template_rows[0]}, on the fine cells from "
                   f"column {template.columns[0]}, row {template.rows[0]} (counted from 0)")  # fmt: skip
    click.echo(f"method       {result.method}" + (f" ({opts})" if opts else ""))
    if summary.layers is not None:
        from ..analysis.layers import choice_lines

        head, *boundaries = choice_lines(summary.layers)
        click.echo(f"layers       {head}")
        for line in boundaries:
            click.echo(f"               {line}")
    if result.dropped_cells:
        click.echo(f"cropped      {result.dropped_cells} fine cells beyond the last whole block")
    zeros = result.zeros.line(fine.unit)
    if zeros:
        click.echo(f"zero k       {zeros} (--zero-k {result.zeros.rule})")
    stats = summary.statistics
    rows = []
    aquifer = [name for name in stats.coarse if name.startswith("transmissivity")]
    for name in [*coarse.properties(), *aquifer]:
        f, c = stats.fine[name], stats.coarse[name]
        label = _AQUIFER[len(aquifer) > 1][name] if name in aquifer else property_label(name, fine.unit)
        rows.append([label, number(f.mean), number(f.geometric_mean),
                     number(c.mean), number(c.geometric_mean), number(c.min), number(c.max)])  # fmt: skip
    click.echo("")
    click.echo(table(["property", "fine mean", "fine geo", "coarse mean", "coarse geo",
                      "coarse min", "coarse max"], rows))  # fmt: skip
    shape = summary.geometry
    click.echo(f"({', '.join(property_label(PERMEABILITY[a], fine.unit) for a in fine.axes)} in {fine.unit}"
               + ("; porosity as a fraction" if fine.porosity is not None else "")
               + (f"; {', '.join(_AQUIFER[len(aquifer) > 1][n] for n in aquifer)}: transmissivity K × "
                  f"thickness in {shape.transmissivity_unit}" if aquifer else "")
               + ")")  # fmt: skip
    if shape is not None and shape.caution:
        click.echo(f"caution: {shape.caution}")
    tensor = summary.tensor
    if tensor and tensor.blocks:
        cross = tensor.off_diagonal_max
        click.echo(f"tensor: anisotropy (largest/smallest principal k) median "
                   f"{number(tensor.anisotropy_median, '.3g')}, max {number(tensor.anisotropy_max, '.3g')}"
                   + (f"; largest off-diagonal {number(cross, '.2%')} of the diagonal"
                      if cross else ""))  # fmt: skip
        if tensor.warning:
            click.echo(f"warning: {tensor.warning}")
        closed = {a: n for a, n in tensor.blocks_without_path.items() if n}
        if closed:
            click.echo("blocks with no flowing path across: "
                       + ", ".join(f"{n} along {a}" for a, n in closed.items()))  # fmt: skip
    faces = summary.transmissibility
    if faces and faces.rule != "harmonic half-block":
        click.echo(f"coarse transmissibilities from {faces.rule}"
                   + (f"; {faces.replaced_faces} undefined ones took the harmonic value"
                      if faces.replaced_faces else ""))  # fmt: skip
    if faces and faces.iterations is not None:
        click.echo(f"local-global: {faces.iterations} iterations, last change {faces.last_change:.2g}"
                   + (f", {faces.kept_faces} faces kept their previous value" if faces.kept_faces else ""))
    click.echo("")
    print_check(summary.check, fine.unit)
    if summary.well_check is not None:
        print_well_check(summary.well_check)
    click.echo("")
    package = {*PACKAGE_FILES, STRUCTURED_VTK, *WELL_FILES}
    files = [f for f in summary.files if not f.startswith("figures/") and f not in package]
    files.insert(len(files) - ("report.html" in files), "the coarse-grid package (manifest.json)")
    figures = sum(f.endswith(".png") for f in summary.files if f.startswith("figures/"))
    if figures:
        files.insert(len(files) - ("report.html" in files), f"{figures} figures in figures/ (PNG, SVG)")
    click.echo(f"wrote {', '.join(files + ['summary.json'])} to {Path(out)}")


def _solve(solve: SolveRecord) -> str:
    text = solve.solver + (f", {solve.iterations} it" if solve.iterations else "")
    return text if solve.connected else text + ", no path"


def print_check(check: FlowCheck | None, unit: str = "mD") -> None:
    """Print the fine-versus-coarse flow check recorded in a summary (k, or K for a conductivity `unit`)."""
    if check is None:
        click.echo("flow check   not run (--no-check)")
        return
    if check.skipped is not None:
        click.echo(f"flow check   the whole fine model was not solved: {check.skipped}")
        if check.windows:
            _print_windows(check)
        return
    rows = []
    for axis, c in check.axes.items():
        error = "-" if c.rel_error is None else f"{100 * c.rel_error:+.2f} %"
        rows.append([axis, number(c.k_fine), number(c.k_coarse), error, _solve(c.fine), _solve(c.coarse)])
    click.echo("flow check: the same pressure drop across each axis on both grids"
               + (", and corner to corner (held out)" if "corner" in check.axes else ""))  # fmt: skip
    k = symbol(unit)
    click.echo(table(["flow", f"{k} fine", f"{k} coarse", "error", "fine solve", "coarse solve"], rows))


def print_well_check(check: dict) -> None:
    """Print the well-driven check recorded in a summary (its ``well_check`` object)."""
    if "skipped" in check:
        click.echo(f"well check   not run: {check['skipped']}")
        return
    outer = check["outer_faces"]
    sides = "closed sides" if outer == "closed" else f"sides at pressure {number(outer['pressure'])}"
    how = {"near-well": "near-well upscaling", "peaceman": "Peaceman's index",
           "package": "the package's wells table"}.get(check.get("connection", "peaceman"))  # fmt: skip
    click.echo(f"well check: the wells of {check['file']} on both grids, {sides}")
    click.echo(f"coarse wells connected by {how}")
    rows = []
    for name, w in check["wells"].items():
        shown = "rate" if w["control"] == "pressure" else "pressure"
        error = "-" if w["rel_error"] is None else f"{100 * w['rel_error']:+.2f} %"
        rows.append([name, f"{w['control']} {number(w['value'])}", shown, number(w["fine"][shown]),
                     number(w["coarse"][shown]), error])  # fmt: skip
    total = check["total_rate"]
    error = "-" if total["rel_error"] is None else f"{100 * total['rel_error']:+.2f} %"
    rows.append(["total rate", "", "Σ |q|", number(total["fine"]), number(total["coarse"]), error])
    click.echo(table(["well", "control", "compared", "fine", "coarse", "error"], rows))
    click.echo(f"(rates: {check['rate_unit']}; a rate well's error is that of its drawdown)")


def _print_windows(check: FlowCheck) -> None:
    """The sub-domain check: one row per window, then the spread per axis."""
    axes = list(check.spread)
    rows = []
    for w in check.windows:
        place = f"rows {w.rows[0]}-{w.rows[1] - 1}, columns {w.columns[0]}-{w.columns[1] - 1}"
        errors = [w.check[a].rel_error for a in axes]
        rows.append([place, *("-" if e is None else f"{100 * e:+.2f} %" for e in errors)])
    click.echo(f"checked instead on {len(rows)} windows ({check.rule}):")
    click.echo(table(["window (fine cells)", *(f"error {a}" for a in axes)], rows))
    for axis, s in check.spread.items():
        if s:
            click.echo(f"spread along {axis}: min {100 * s.min:+.2f} %, "
                       f"median {100 * s.median:+.2f} %, max {100 * s.max:+.2f} %")  # fmt: skip


def print_ensemble(ensemble: EnsembleSummary, out: str, unit: str | None = None) -> None:
    """Print the spread of an ensemble's check: three percentiles per quantity and axis, the reading above.

    `unit` is the run's ``--out-unit``, named under the table; None: the input's unit.
    """
    rows = []
    for quantity in ("k_fine", "k_coarse", "rel_error"):
        for axis, s in ensemble.statistics[quantity].items():
            if s is None:
                continue
            scale, spec = (100.0, "+.2f") if quantity == "rel_error" else (1.0, ".4g")
            rows.append([f"{quantity} {axis}", *(number(scale * s.percentile(q), spec) for q in PERCENTILES),
                         str(s.count)])  # fmt: skip
    click.echo(f"ensemble of {len(ensemble.realizations)} realizations")
    if rows:
        click.echo(f"percentiles: {ensemble.percentiles}")
        columns = [short_label(q, ensemble.convention) for q in PERCENTILES]
        click.echo(table(["quantity", *columns, "n"], rows))
        click.echo(f"(k in {unit}, errors in %)" if unit else "(k in the input's unit, errors in %)")
    if ensemble.representative is not None:
        click.echo(f"representative realization: {ensemble.representative} (its fine k_eff is nearest the "
                   "median over the realizations)")  # fmt: skip
    extra = [name for name in ("maps", "figures", "report.html") if (Path(out) / name).exists()]
    click.echo(f"wrote one folder per realization, ensemble.csv, {', '.join([*extra, ''])}"
               f"ensemble.json to {Path(out)}")  # fmt: skip


def print_layers(layers: dict) -> None:
    """How automatic layers were chosen (`LayerChoice.summary`): the grouping, then each boundary's reason."""
    from ..analysis.layers import choice_lines

    head, *boundaries = choice_lines(layers)
    click.echo(f"layers: {head}")
    for line in boundaries:
        click.echo(f"  {line}")


def print_notes(warning: str | None, note: str | None = None) -> None:
    """A warning (the ±5 % band) and a note (a bound ranked first) under a ranking, when there are any."""
    if warning:
        click.echo(f"warning: {warning}")
    if note:
        click.echo(f"note: {note}")


def print_spread(ranking: EnsembleRanking, out: str) -> None:
    """Print the methods compared over an ensemble: rank, percentiles of the largest error, wins."""
    rows = []
    for m in ranking.methods:
        w = m.worst_error
        spread = [number(100 * w.percentile(q), ".2f") for q in PERCENTILES] if w else ["-"] * 3
        rows.append([str(m.rank or "-"), m.name, *spread, f"{m.ran}/{m.ran + m.failed}",
                     str(m.rank_in_realizations.first)])  # fmt: skip
    click.echo(f"methods compared on {len(ranking.realizations)} realizations, ranked by the median of "
               "their largest check error over the axes")  # fmt: skip
    click.echo(f"percentiles: {ranking.percentiles}")
    click.echo(table(["rank", "method", *(short_label(q, ranking.convention) for q in PERCENTILES),
                      "ran", "first"], rows))  # fmt: skip
    click.echo("(largest |error| over the axes per realization, in %)")
    best = ranking.methods[0] if ranking.best else None
    if best:
        several = len(ranking.methods) > 1
        click.echo(f"\nbest over the ensemble: {best.name}")
        print_notes(outside_band(best.name, best.worst_error.q50, several=several,
                                 measure="median largest check error", where="over these realizations"),
                    bound_note(best.method, best.name) if several else None)
    click.echo(f"wrote one comparison folder per realization, ranking.csv, figures, report.html and "
               f"ensemble.json to {Path(out)}")  # fmt: skip
