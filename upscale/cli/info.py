"""``upscale info``: what a field holds, before upscaling it."""

from __future__ import annotations

import json
import math

import click

from ..analysis.describe import GROUPING, describe_field
from ..analysis.geometry import dip_caution
from ..analysis.layers import choice_lines
from ..analysis.records import jsonable
from ..errors import InputError
from ..export.staging import check_figure_file, write_file
from ..grid.layers import BARRIER_CONTRAST, LayerRequest
from ..io import read_field
from ..optional import require_extra
from ..stats import ValueScan, where
from .options import field_options, read_options
from .progress import progress
from .report import crs_text, dims, number, table
from .settings import global_options


@click.command()
@click.argument("field", type=click.Path(dir_okay=False))
@field_options
@click.option("--json", "as_json", is_flag=True, help="Print the description as JSON.")
@click.option("--layers", "layers", metavar="auto:N|auto:P%", default=None,
              help=f"Grouping of a 3D model's layers to suggest and draw: N coarse layers, or the fewest "
                   f"that keep P % of the between-layer variance.  [default: {GROUPING}]")  # fmt: skip
@click.option("--plot", "plot", metavar="FILE", type=click.Path(dir_okay=False), default=None,
              help="Draw the layer profile of a 3D model, its barriers and the grouping of --layers into "
                   "FILE (.png or .svg).")  # fmt: skip
@click.option("--overwrite", is_flag=True, help="Replace the --plot file if it exists.")
@global_options
@click.pass_context
def info(ctx: click.Context, field: str, as_json: bool, layers: str | None, plot: str | None, overwrite: bool,
         **options: object) -> None:  # fmt: skip
    """Describe FIELD: grid, cell size, CRS, units, active cells and statistics of log k.

    Flags negative, zero and infinite values and values that often mark cells
    without data (-9999, 1e30, ...) with their counts and first cells, and
    suggests the --nodata that would make them inactive. For a 3D model,
    adds the profile of its layers, the barriers it finds and a grouping of
    the layers into coarse layers (--layers), and --plot draws them.

    \b
    Examples:
      upscale info demo-fields/marrowfen_3d.tif --dz 2
      upscale info demo-fields/marrowfen_layered.tif --dz 1 --layers auto:8 --plot profile.png
    """
    grouping = _grouping(layers)
    kind = check_figure_file(plot, overwrite) if plot is not None else None
    if plot is not None:
        require_extra("figures")
    fine = read_field(field, checksum=False, **read_options(options))
    if fine.ndim == 2 and plot is not None:
        raise InputError(f"--plot draws the layers of a 3D model, and {field} is a 2D map (give --dz for a "
                         "raster whose bands are layers)")  # fmt: skip
    if fine.ndim == 2 and layers is not None:
        raise InputError(f"--layers groups the layers of a 3D model, and {field} is a 2D map (give --dz for "
                         "a raster whose bands are layers)")  # fmt: skip
    with progress(ctx.obj["quiet"]):
        description, scans = describe_field(fine, field, grouping)
    if plot is not None:
        from ..report.figures import figure_bytes
        from ..report.layer_profile import layer_profile_figure

        figure = layer_profile_figure(description["layers"], fine.unit, name=field)
        write_file(plot, figure_bytes(figure, kind))
    grid = fine.grid
    kx = scans["kx"]
    if as_json:
        click.echo(json.dumps(jsonable(description), indent=2))
        return
    click.echo(f"field        {field}")
    kind = "3D model" if fine.ndim == 3 else "2D map"
    click.echo(f"grid         {dims(fine.shape, fine.ndim)} cells ({kind})")
    sizes = f"dx {grid.dx[0]:g} m, dy {grid.dy[0]:g} m"
    if fine.ndim == 3:
        dz = grid.dz
        sizes += f", dz {dz[0]:g} m" if (dz == dz[0]).all() else f", dz {dz.min():g}-{dz.max():g} m"
    click.echo(f"cell size    {sizes}")
    if description["geometry"] is not None:
        _print_geometry(description["geometry"])
    click.echo(f"CRS          {crs_text(grid.crs)}")
    click.echo(f"unit         {fine.unit}")
    click.echo(f"active       {kx.active} of {kx.cells} cells ({100 * kx.active / kx.cells:.1f} %)")
    _print_problems(description["suspect_values"], scans.get("porosity"), description["suggested_nodata"])
    _print_connectivity(description["connectivity"])
    log10 = {key: number(value, ".3f") for key, value in description["log10_k"].items()}
    click.echo(f"log10 k      mean {log10['mean']}, std {log10['std']}, "
               f"min {log10['min']}, max {log10['max']} (over positive values)")  # fmt: skip
    rows_out = [
        [name, str(s["active"]), number(s["min"]), number(s["max"]), number(s["mean"]),
         number(s["geometric_mean"])]
        for name, s in description["statistics"].items()
    ]  # fmt: skip
    click.echo("")
    click.echo(table(["property", "active", "min", "max", "mean", "geo mean"], rows_out))
    if "layers" in description:
        _print_layers(description["layers"], fine.unit)
    if plot is not None:
        click.echo(f"figure       {plot}")


def _print_geometry(geometry: dict) -> None:
    """The geometry's ranges, pinched-out cells and steepest dip, and a caution on a steep one."""
    top, thickness, dip = geometry["top_m"], geometry["thickness_m"], geometry["steepest_dip_deg"]
    pinched = geometry["pinched_cells"]
    parts = [f"top {top['min']:g} to {top['max']:g} m" if top else "top not given (dip unknown)",
             f"thickness {thickness['min']:g} to {thickness['max']:g} m",
             f"{pinched} cells pinched out ({100 * pinched / geometry['cells']:.1f} %)",
             *([f"steepest dip {dip:.2g}°"] if dip is not None else [])]  # fmt: skip
    click.echo(f"geometry     {', '.join(parts)}")
    caution = dip_caution(dip)
    if caution:
        click.echo(f"             caution: {caution}")


def _grouping(text: str | None) -> LayerRequest:
    """The grouping `--layers` asks for (`GROUPING` without it)."""
    if text is None:
        return GROUPING
    request = LayerRequest.parse(text)
    if request is None:
        raise InputError(f"--layers {text!r}: give auto:N (N coarse layers) or auto:P% (the fewest coarse "
                         "layers that keep P % of the between-layer variance)")  # fmt: skip
    return request


def _print_problems(suspects: list[dict], porosity: ValueScan | None, nodata: float | None) -> None:
    """The suspect values one per line, porosity above 1, and one line of advice."""
    lines = []
    for s in suspects:
        cells = where(tuple((c["band"] - 1, c["row"], c["column"]) for c in s["first"]))
        if s["kind"] == "sentinel":
            lines.append(f"{s['count']} cell(s) of {s['property']} hold {_shown(s['value'])}, a common "
                         f"nodata marker; first at {cells}")  # fmt: skip
        else:
            lines.append(f"{s['count']} {s['kind']} value(s) in {s['property']}, first at {cells}")
    if porosity is not None and porosity.maximum > 1:
        lines.append(f"porosity up to {porosity.maximum:g}, above 1")
    if not lines:
        return
    for label, line in zip(["problems", *[""] * len(lines)], lines):
        click.echo(f"{label:<13}{line}")
    if nodata is not None:
        value = _shown(nodata)
        click.echo(f"hint         if {value} marks cells without data, give --nodata {value}")
    elif suspects:
        click.echo("hint         if these values mark cells without data, give --nodata VALUE; "
                   "'upscale run' refuses what a method cannot take")


def _print_layers(profile: dict, unit: str) -> None:
    """The layer profile, top down (thickness, active share, mean and spread of ln k), and the barriers."""

    def geo(row: dict, name: str) -> str:
        return "-" if row[f"ln_{name}_mean"] is None else number(math.exp(row[f"ln_{name}_mean"]))

    def spread(row: dict, name: str) -> str:
        return "-" if row[f"ln_{name}_std"] is None else number(row[f"ln_{name}_std"], ".2f")

    rows = [[str(row["layer"]), f"{row['thickness_m']:g}", f"{100 * row['active_fraction']:.0f} %",
             geo(row, "kx"), spread(row, "kx"), geo(row, "kz"), spread(row, "kz")]
            for row in profile["layers"]]  # fmt: skip
    click.echo("")
    click.echo(table(["layer", "dz m", "active", "kx geo", "sd ln kx", "kz geo", "sd ln kz"], rows))
    click.echo(f"(top down; kx, kz in {unit}; geo: geometric mean over the layer's active cells)")
    runs = [f"{b['first']}-{b['last']}" if b["last"] > b["first"] else str(b["first"])
            for b in profile["barriers"]]
    if runs:
        click.echo(f"barriers     layers {', '.join(runs)}: kz {BARRIER_CONTRAST:g} times or more below the "
                   "typical layer; --block NXxNYxauto:N keeps them as coarse layers of their "
                   "own")  # fmt: skip
    else:
        click.echo(f"barriers     none (no layer's kz is {BARRIER_CONTRAST:g} times below the typical layer)")
    for label, line in zip(["grouping", *[""] * len(profile["layers"])], choice_lines(profile["grouping"])):
        click.echo(f"{label:<13}{line}")


def _print_connectivity(found: dict | None) -> None:
    """Per axis, the share of high-k cells and the bodies of them that join its two faces."""
    if found is None:
        return
    click.echo(f"high k       {found['high_k']}")
    for axis, s in found["axes"].items():
        line = f"{100 * s['high_fraction']:.1f} % of the active cells; "
        if s["spans"]:
            bodies = "1 body spans" if s["spanning_bodies"] == 1 else f"{s['spanning_bodies']} bodies span"
            line += (f"{bodies} the field, holding "
                     f"{100 * s['spanning_fraction']:.1f} % of them, {s['cross_section_cells']:.3g} "
                     "cells across on average")  # fmt: skip
        else:
            line += "no body spans the field"
        click.echo(f"  along {axis}    {line}")


def _shown(value: float) -> str:
    """A value as short as it reads back exactly: ``-9999``, ``1e+30``, ``3.4028234663852886e+38``."""
    short = f"{value:g}"
    return short if float(short) == value else repr(value)
