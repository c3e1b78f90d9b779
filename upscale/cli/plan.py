"""``upscale plan``: how coarse can a field go — every method at every block size, checked once."""

from __future__ import annotations

import math

import click

from ..analysis.compare import candidates
from ..analysis.plan_record import MEASURE_WELLS, PlanRecord
from ..caution import CAUTION
from ..export import check_destination
from ..jobs.plan import plan_file
from ..report.verdict import no_block_warning, uneven_note
from .options import (
    block_rule_options,
    block_specs,
    check_options,
    field_options,
    method_options,
    parse_chunk,
    parse_methods,
    read_options,
    recorded,
    well_options,
)
from .progress import teller
from .report import print_layers, print_notes, table
from .settings import global_options


def parse_max_error(text: str) -> float:
    """``--max-error``: a percentage (``5%``) or a fraction (``0.05``) -> a fraction in (0, 1).

    Examples
    --------
    >>> parse_max_error("5%"), parse_max_error("2.5 %"), parse_max_error("0.05")
    (0.05, 0.025, 0.05)
    """
    percent = text.strip().endswith("%")
    try:
        value = float(text.strip().removesuffix("%"))
    except ValueError:
        raise click.BadParameter(f"{text!r} is not a percentage such as 5% or a fraction such as 0.05",
                                 param_hint="--max-error") from None  # fmt: skip
    value = value / 100 if percent else value
    if not 0 < value < 1:
        hint = (f"; a number without % is a fraction: for {text.strip()} percent write {text.strip()}%"
                if not percent and 1 <= value < 100 else "")  # fmt: skip
        raise click.BadParameter(f"the largest error accepted must be more than 0 % and less than 100 %, "
                                 f"got {text!r}{hint}", param_hint="--max-error")  # fmt: skip
    return value


@click.command(epilog=f"Caution: {CAUTION}")
@click.argument("field", type=click.Path(dir_okay=False))
@click.option("--blocks", required=True, metavar="NXxNY,...",
              help="Block sizes to try, finest first, each in fine cells x first (as --block of run): "
              "4x4,8x8,16x16,32x32.")  # fmt: skip
@block_rule_options
@click.option("--max-error", default="5%", show_default=True, metavar="PERCENT",
              help="Largest check error accepted: a percentage (5%) or a fraction (0.05), more than 0 % "
              "and less than 100 %.")  # fmt: skip
@method_options
@field_options
@click.option("--chunk", default=None, metavar="SIZE",
              help="Memory per chunk: a size (64MB) or a number of the coarsest blocks (400blocks).")
@check_options
@well_options
@click.option("--out", "out", required=True, type=click.Path(file_okay=False),
              help="Output folder for plan.json, figures/ and report.html.")
@click.option("--overwrite", is_flag=True, help="Replace the results in a folder that holds some.")
@global_options
@click.pass_context
def plan(ctx: click.Context, field: str, blocks: str, max_error: str, methods: str | None,
         exponent: float | None, bc: str | None, border: int | None, chunk: str | None, solver: str,
         tolerance: float, check_limit: int, wells: str | None, outer_pressure: float | None,
         well_connection: str, out: str, overwrite: bool, **options: object) -> None:  # fmt: skip
    """How coarse can FIELD go? Every method at every block size, against shared fine solves.

    Upscales FIELD with every method at every block size listed, checks each
    coarse model against the fine model — solved once per axis flow and
    shared, since the fine model does not change with the block; the corner
    flow once per block, since its regions are whole blocks — and names, per
    method, the coarsest block whose largest check error over the checked
    flows (with --wells, and the wells' total rate) is within --max-error,
    or says that none is. Writes plan.json,
    figures/error_by_block (PNG and SVG) and report.html (self-contained)
    into the output folder.

    \b
    Examples:
      upscale plan map.tif --blocks 4x4,8x8,16x16,32x32 --methods geometric,flow-transmissibility --out plan/
      upscale plan map.tif --blocks 4x4,8x8,16x16 --max-error 2% --methods flow --bc periodic --out plan/
      upscale plan map.tif --blocks 4x4,8x8,16x16 --methods global,local-global --wells wells.csv --out plan/
    """
    check_destination(out, overwrite)
    limit = parse_max_error(max_error)
    chosen = candidates(parse_methods(methods), bc=bc, border=border, exponent=exponent)
    specs = block_specs(blocks, options)
    read = read_options(options)
    _, record = plan_file(field, specs, chosen, out, read=read, max_error=limit,
                          chunk_bytes=parse_chunk(chunk, specs[-1].chunk_cells), solver=solver,
                          tolerance=tolerance,
                          check_limit=check_limit, recorded_read=recorded(read), command=ctx.obj["command"],
                          overwrite=overwrite, say=teller(ctx), wells=wells, outer_pressure=outer_pressure,
                          well_connection=well_connection)  # fmt: skip
    if not ctx.obj["quiet"]:
        for block in record.blocks:
            if block.layers is not None:
                print_layers(block.layers)
        _print(record)
        click.echo(f"wrote plan.json, report.html and 1 figure (PNG, SVG) to {out}")


def _print(record: PlanRecord) -> None:
    limit = f"{100 * record.max_error:g} %"
    header = ["method", *(b.name for b in record.blocks), f"coarsest within {limit}"]
    rows = [[m.name, *(_error(b.largest_error, b.error) for b in m.blocks), m.coarsest or "none"]
            for m in record.methods]  # fmt: skip
    click.echo(table(header, rows))
    wells = " and the wells' total rate" if record.measure == MEASURE_WELLS else ""
    click.echo(f"(error = largest |k_coarse - k_fine| / k_fine over the checked flows{wells}; the fine axis "
               "flows are solved once for every block, the corner flow once per block)")  # fmt: skip
    for m in record.methods:
        for b in m.blocks:
            if b.error:
                click.echo(f"{m.name} did not run at {b.block}: {b.error}")
    print_notes(no_block_warning(record), uneven_note(record))


def _error(value: float | None, error: str | None) -> str:
    if error:
        return "did not run"
    return "-" if value is None or not math.isfinite(value) else f"{100 * value:.2f} %"
