"""``upscale run``: upscale one field with one method and write the coarse grid."""

from __future__ import annotations

import click

from ..caution import CAUTION
from ..errors import InputError
from ..export import check_destination
from ..io.realizations import expand
from ..jobs.cluster import compute_on
from ..jobs.run import Settings, run_ensemble, upscale_file
from ..methods.registry import METHODS
from .options import (
    MethodChoice,
    block_options,
    block_spec,
    check_options,
    field_options,
    out_unit_option,
    parse_chunk,
    percentile_option,
    read_options,
    recorded,
    well_options,
)
from .progress import progress, teller
from .report import print_ensemble, print_result
from .settings import command_line, global_options

_METHOD_HELP = ("; ".join(f"{m.name}: {command_line(m.summary)}" for m in METHODS.values())
                + ". Or a method per axis, as xy=arithmetic,z=harmonic (README: Methods); --exponent, --bc "
                "and --border go to the methods that take them.")


@click.command(epilog=f"Caution: {CAUTION}")
@click.argument("field", nargs=-1, required=True, type=click.Path(dir_okay=False))
@block_options
@click.option("--method", required=True, type=MethodChoice(), help=_METHOD_HELP)
@click.option("--exponent", type=float, default=None, help="Exponent ω of the power average.")
@click.option("--bc", type=click.Choice(["sealed", "linear", "periodic"]), default=None,
              help="Boundary conditions of the local solves of the flow methods [default: sealed].")
@click.option("--border", type=int, default=None, metavar="CELLS",
              help="Fine cells of surrounding rock added on every side of each block in the "
              "local solves of the flow methods [default: 0].")
@field_options
@click.option("--chunk", default=None, metavar="SIZE",
              help="Memory per chunk: a size (64MB) or a number of coarse blocks (400blocks); bounds "
              "the memory used [default: a 64th of the available memory, 16 MiB to 128 MiB].")
@click.option("--no-check", is_flag=True, help="Skip the fine-versus-coarse flow check.")
@click.option("--plot", is_flag=True,
              help="Also write the figures of this run (figures/*.png and *.svg): maps, check "
              "errors, bounds, histograms, flux mismatch, pressures.")
@click.option("--report", "html_report", is_flag=True,
              help="Also write report.html: one self-contained page with the figures and the check.")
@click.option("--layer", type=click.IntRange(min=1), default=None,
              help="Layer drawn in the maps of a 3D model, 1 = top [default: the middle one].")
@check_options
@well_options
@percentile_option
@click.option("--units", type=click.Choice(["si", "field"]), default="si", show_default=True,
              help="Units of the coarse-grid package: si (m, m², m³; transmissibility k·A/L in m³) "
              "or field (ft, mD; transmissibility in mD·ft).")
@out_unit_option
@click.option("--workers", type=int, default=None, metavar="N",
              help="Start a local dask cluster of N worker processes for the run.")
@click.option("--scheduler", default=None, metavar="ADDRESS",
              help="Send the work to a running dask.distributed scheduler (e.g. tcp://host:8786); "
              "workers read the inputs from the same paths.")
@click.option("--out", "out", required=True, type=click.Path(file_okay=False),
              help="Output folder (created; must be empty unless --overwrite). For several fields, "
              "one sub-folder per field plus ensemble.json and ensemble.csv.")
@click.option("--overwrite", is_flag=True, help="Replace the results in a folder that holds some.")
@global_options
@click.pass_context
def run(ctx: click.Context, field: tuple[str, ...], method: str, exponent: float | None,
        bc: str | None, border: int | None, chunk: str | None,
        no_check: bool, plot: bool, html_report: bool, layer: int | None, solver: str,
        tolerance: float, check_limit: int, wells: str | None, outer_pressure: float | None,
        well_connection: str, percentiles: str, units: str, out_unit: str | None,
        workers: int | None, scheduler: str | None,
        out: str, overwrite: bool, **options: object) -> None:  # fmt: skip
    """Upscale FIELD to coarse blocks with one method (several FIELDs or a glob: an ensemble).

    Writes one GeoTIFF per property into the output folder — kx.tif, ky.tif,
    kz.tif (3D), porosity.tif (when given), the off-diagonal tensor terms
    (kxy.tif ...) of the linear and periodic flow methods and the face
    transmissibilities (transmissibility_x.tif ...) of flow-transmissibility —
    on the coarse grid with the input's CRS, plus summary.json with the input checksums, every parameter
    and the statistics of fine and coarse values. Then checks, for every axis,
    that the coarse model passes the same flow as the fine one under the same
    pressure drop, and records the errors in summary.json.

    \b
    Examples:
      upscale run map.tif --block 8x8 --method geometric --out coarse/
      upscale run model.tif --dz 2 --kv-kh 0.1 --block 10x10x4 --method power --exponent 0.5 --out c/
      upscale run map.tif --block 16x16 --method flow --bc periodic --border 4 --out tensor/
      upscale run model.tif --dz 2 --block 10x10x4 --method xy=arithmetic,z=harmonic --out layered/
      upscale run map.tif --grid-like simulator_grid.tif --method flow --out snapped/
      upscale run 'realizations/*.tif' --block 8x8 --method flow --workers 2 --out ensemble/
    """
    check_destination(out, overwrite)
    if (plot or html_report) and no_check:
        raise InputError("--plot and --report show the flow check; leave out --no-check")
    if wells and no_check:
        raise InputError("--wells adds a well check to the flow check; leave out --no-check")
    spec, grid_like = block_spec(options)
    read = read_options(options)
    settings = Settings(
        block=spec, method=method, options={"exponent": exponent, "bc": bc, "border": border},
        read=read, recorded_read=recorded(read),
        chunk_bytes=parse_chunk(chunk, None if grid_like else spec.chunk_cells),
        check=not no_check, solver=solver, tolerance=tolerance, check_limit=check_limit, units=units,
        out_unit=out_unit, plot=plot, report=html_report, layer=None if layer is None else layer - 1,
        wells=wells, outer_pressure=outer_pressure, well_connection=well_connection,
        percentiles=percentiles, command=ctx.obj["command"], grid_like=grid_like,
    )  # fmt: skip
    paths = expand(list(field))
    quiet = ctx.obj["quiet"]
    say = teller(ctx)
    with compute_on(workers, scheduler) as count:
        if len(paths) == 1:
            with progress(quiet):
                result, summary = upscale_file(paths[0], settings, out, overwrite=overwrite, say=say)
            if not quiet:
                print_result(result, summary, out)
            return
        ensemble = run_ensemble(paths, settings, out, overwrite=overwrite, parallel=count,
                                say=say)  # fmt: skip
    if not quiet:
        print_ensemble(ensemble, out, out_unit)
