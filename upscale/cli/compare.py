"""``upscale compare``: every method on one field, checked, ranked, plotted and reported."""

from __future__ import annotations

import math

import click
import numpy as np

from ..analysis.compare import Entry, candidates
from ..caution import CAUTION
from ..check.axis import HELD_OUT
from ..export import check_destination
from ..field import PERMEABILITY
from ..io.realizations import expand
from ..jobs.compare import compare_ensemble, compare_file, run_command
from ..report.verdict import bound_note, one_method, outside_band
from ..units import property_label, symbol
from .options import (
    block_options,
    block_spec,
    check_options,
    field_options,
    method_options,
    out_unit_option,
    parse_chunk,
    parse_methods,
    percentile_option,
    read_options,
    recorded,
    well_options,
)
from .progress import teller
from .report import number, print_layers, print_notes, print_spread, table
from .settings import global_options


@click.command(epilog=f"Caution: {CAUTION}")
@click.argument("field", nargs=-1, required=True, type=click.Path(dir_okay=False))
@block_options
@method_options
@click.option("--layer", type=click.IntRange(min=1), default=None,
              help="Layer drawn in the maps of a 3D model, 1 = top [default: the middle one].")
@field_options
@click.option("--chunk", default=None, metavar="SIZE",
              help="Memory per chunk: a size (64MB) or a number of coarse blocks (400blocks).")
@check_options
@well_options
@percentile_option
@out_unit_option
@click.option("--out", "out", required=True, type=click.Path(file_okay=False),
              help="Output folder for compare.json, figures/ and report.html. For several fields, "
              "one such folder per field plus ranking.csv, figures/spread.*, report.html and "
              "ensemble.json.")
@click.option("--overwrite", is_flag=True, help="Replace the results in a folder that holds some.")
@global_options
@click.pass_context
def compare(ctx: click.Context, field: tuple[str, ...], methods: str | None, exponent: float | None,
            bc: str | None, border: int | None, layer: int | None, chunk: str | None, solver: str,
            tolerance: float, check_limit: int, wells: str | None, outer_pressure: float | None,
            well_connection: str, percentiles: str, out_unit: str | None, out: str, overwrite: bool,
            **options: object) -> None:  # fmt: skip
    """Upscale FIELD with every method, check each against the fine model, and rank them.

    Several FIELDs or a glob (an ensemble of realizations on one grid): the
    comparison of each, and the methods ranked by the median over the
    realizations of their largest check error, with its 10th and 90th
    percentiles (or P90 and P10 exceeded with --percentiles exceedance).

    The fine model is solved once per axis and shared by all methods; each
    method's coarse model is solved under the same pressure drops, and the
    methods are ranked by their largest check error over the axes. Writes
    compare.json, figures/ (PNG and SVG) and report.html (self-contained)
    into the output folder. With --wells, every coarse model is also driven
    by the wells of the file and the error of their total rate joins the
    ranking. A method that cannot run on this field is listed
    with its reason.

    \b
    Examples:
      upscale compare map.tif --block 8x8 --out cmp/
      upscale compare map.tif --block 16x16 --methods geometric,flow --border 2 --out cmp/
      upscale compare 'realizations/*.tif' --block 8x8 --methods geometric,flow --out cmp/
      upscale compare map.tif --block 8x8 --methods flow,local-global --wells wells.csv --out cmp/
    """
    check_destination(out, overwrite)
    chosen = candidates(parse_methods(methods), bc=bc, border=border, exponent=exponent)
    spec, grid_like = block_spec(options)
    read = read_options(options)
    say = teller(ctx)
    paths = expand(list(field))
    jobs = {"read": read, "chunk_bytes": parse_chunk(chunk, None if grid_like else spec.chunk_cells),
            "grid_like": grid_like, "solver": solver,
            "tolerance": tolerance, "check_limit": check_limit, "layer": None if layer is None else layer - 1,
            "recorded_read": recorded(read), "command": ctx.obj["command"], "overwrite": overwrite,
            "say": say, "wells": wells, "outer_pressure": outer_pressure,
            "well_connection": well_connection, "out_unit": out_unit}  # fmt: skip
    if len(paths) > 1:
        content = compare_ensemble(paths, spec, chosen, out, percentiles=percentiles, **jobs)
        if not ctx.obj["quiet"]:
            print_spread(content, out)
        return
    result, files = compare_file(paths[0], spec, chosen, out, **jobs)
    quiet = ctx.obj["quiet"]
    fine = result.fine
    if not quiet:
        if result.layers is not None:
            print_layers(result.layers.summary())
        _print(result.entries, fine.axes, fine.unit)
        for line in result.zero_k_notes():
            click.echo(f"zero k: {line}")
        best = result.best
        several = not one_method(result)
        click.echo(f"\nbest: {best.candidate.label}" if several else
                   f"\n{best.candidate.label}: largest check error {100 * best.worst_error:.2f} % "
                   f"(axes and {', '.join(HELD_OUT)}" + (", wells)" if result.wells else ")"))
        print_notes(outside_band(best.candidate.label, best.worst_error, several=several),
                    bound_note(best.candidate.method, best.candidate.label) if several else None)
        if result.per_axis is not None and several:
            _print_per_axis(result.per_axis, (*fine.axes, *HELD_OUT), run_command(ctx.obj["command"],
                            result.per_axis.candidate, out))  # fmt: skip
        click.echo(f"wrote compare.json, report.html and {len(files.images)} figures (PNG, SVG) to {out}")


def _print(entries: list[Entry], axes: tuple[str, ...], unit: str) -> None:
    flows = (*axes, *HELD_OUT)
    wells = any(e.wells is not None for e in entries)
    rows = []
    for e in entries:
        if e.error:
            rows.append([e.candidate.label, "-", *(["-"] * (len(axes) + len(flows) + wells)),
                         f"{e.seconds:.2f}"])  # fmt: skip
            continue
        coarse = e.result.coarse
        means = [number(_mean(getattr(coarse, PERMEABILITY[a]))) for a in axes]
        errors = [_percent(e.checks[f].rel_error) for f in flows]
        errors += [] if e.wells is None else [_percent(e.wells.rel_error)]
        rows.append([e.candidate.label, str(e.rank), *means, *errors, f"{e.seconds:.2f}"])
    names = [property_label(PERMEABILITY[a], unit) for a in axes]
    header = ["method", "rank", *(f"{name} mean" for name in names), *(f"error {f}" for f in flows),
              *(["error wells"] if wells else []), "time s"]  # fmt: skip
    click.echo(table(header, rows))
    click.echo(f"({symbol(unit)} in {unit}; error = (k_coarse - k_fine) / k_fine under the same pressure "
               "drop;\n"
               " corner: the held-out corner-to-corner flow, k = its rate over that of k = 1;\n"
               + (" wells: the error of the total well rate (docs/wells.md);\n" if wells else "")
               + " rank: by the largest |error| over the axes and the corner flow"
               + (", and the wells)" if wells else ")"))  # fmt: skip
    compiling = sum(e.compiling for e in entries)
    if compiling >= 0.5:
        click.echo(f"(first use: {compiling:.1f} s went to compiling kernels, not counted in the times; "
                   "later runs load them from the cache)")
    for e in entries:
        if e.error:
            click.echo(f"{e.candidate.label} did not run: {e.error}")


def _print_per_axis(entry: Entry, flows: tuple[str, ...], command: str) -> None:
    """The best method per axis, its check errors and the command line that runs it."""
    errors = ", ".join(f"{f} {_percent(entry.checks[f].rel_error)}" for f in flows)
    click.echo(f"best per axis: {entry.candidate.label} (error {errors})\n  {command}")


def _percent(error: float) -> str:
    return "-" if math.isnan(error) else f"{100 * error:+.2f} %"


def _mean(values: np.ndarray) -> float:
    finite = values[np.isfinite(values)]
    return float(finite.mean()) if finite.size else math.nan
