"""``upscale info``: what a field holds, before upscaling it."""

from __future__ import annotations

import json
import math

import click

from ..export.summary import jsonable
from ..io import read_field
from ..parallel import compute_together
from ..stats import scan_values
from .options import field_options, read_options
from .progress import progress
from .report import crs_text, dims, number, table


@click.command()
@click.argument("field", type=click.Path(dir_okay=False))
@field_options
@click.option("--json", "as_json", is_flag=True, help="Print the description as JSON.")
@click.pass_context
def info(ctx: click.Context, field: str, as_json: bool, **options: object) -> None:
    """Describe FIELD: grid, cell size, CRS, units, active cells and statistics of log k.

    \b
    Example:
      upscale info demo-fields/marrowfen_3d.tif --dz 2
    """
    fine = read_field(field, checksum=False, **read_options(options))
    with progress(ctx.obj["quiet"]):
        scans = compute_together({name: scan_values(a) for name, a in fine.properties().items()})
    grid = fine.grid
    layers, rows, cols = fine.shape
    kx = scans["kx"]
    description = {
        "path": field,
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
    }
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
    click.echo(f"CRS          {crs_text(grid.crs)}")
    click.echo(f"unit         {fine.unit}")
    click.echo(f"active       {kx.active} of {kx.cells} cells ({100 * kx.active / kx.cells:.1f} %)")
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
    bad = []
    arrays = fine.properties()
    for name, scan in scans.items():
        if name != "kx" and arrays[name] is arrays["kx"]:
            continue  # ky or kz taken from the field: its problems are those of kx
        counts = {"negative": scan.negative, "zero": 0 if name == "porosity" else scan.zero,
                  "infinite": scan.infinite}  # fmt: skip
        counts = {k: v for k, v in counts.items() if v}
        if counts:
            bad.append(", ".join(f"{v} {k}" for k, v in counts.items()) + f" value(s) in {name}")
        if name == "porosity" and scan.maximum > 1:
            bad.append(f"porosity up to {scan.maximum:g}, above 1")
    if bad:
        click.echo("")
        click.echo("problems     " + "; ".join(bad) + "; 'upscale run' will refuse what a method cannot take")
