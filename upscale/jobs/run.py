"""Jobs from files to finished output folders: read, upscale, check, plot, write.

`upscale run` calls `upscale_file` once for a field, and `run_ensemble` for
several (the same settings, each into its own folder, and their spread).
The comparisons are in `upscale.jobs.compare`.
"""

from __future__ import annotations

import logging
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any

import numpy as np

from ..analysis.compare import single
from ..analysis.connectivity import connectivity, struggle
from ..analysis.ensemble import EnsembleSummary, ensemble_summary
from ..analysis.ensemble_maps import block_spreads
from ..analysis.layers import LayerChoice, resolve_layers
from ..analysis.percentiles import refuse_convention
from ..analysis.records import GridLikeRecord, grid_like_record
from ..analysis.summary import RunSummary
from ..check.axis import coarse_check, fine_solves
from ..check.limits import RAISE_LIMIT, refuse_check_past_memory, refuse_global_past_limit, too_large
from ..check.subdomains import check_subdomains
from ..check.wells import place_wells, well_check
from ..errors import InputError
from ..export import write_result
from ..export.ensemble import ENSEMBLE, write_ensemble
from ..export.staging import staged_folder
from ..field import Field
from ..grid import BlockSpec
from ..grid.template import snap_to
from ..io import read_field
from ..io.realizations import read_realizations
from ..io.template import read_template
from ..io.wells import read_wells
from ..methods.coarsen import Upscaled, coarsen
from ..methods.registry import find_method
from ..optional import require_extra
from ..steps import Say, Steps, silent
from ..units import unit_factor, unit_factors

log = logging.getLogger(__name__)


@dataclass(frozen=True)
class Settings:
    """Everything a job needs besides its input path and output folder.

    Attributes
    ----------
    block : BlockSpec
        With `grid_like`, its sizes along x and y are replaced by the template's.
    method : str
    options : dict
        The method's options (``exponent``, ``bc``, ``border``; None when not given).
    read : dict
        Keyword arguments of `upscale.read_field` (unit, scale, nodata, ky, kz, ...).
    recorded_read : dict
        The read options the summary records.
    chunk_bytes : int or None
    check : bool
        Whether to run the fine-versus-coarse check.
    solver, tolerance, check_limit
        The check's solver settings.
    units : {'si', 'field'}
        Units of the coarse-grid package.
    out_unit : str or None
        Unit of the coarse values, tables and figures, of the input's kind
        (`upscale.units.unit_factor`); None: the input's unit.
    plot, report : bool
        Whether to write the figures and the HTML report.
    layer : int or None
        Zero-based fine layer drawn in 3D maps.
    wells : str or None
        A wells file (``docs/wells.md``): the check also solves these wells on both grids.
    outer_pressure : float or None
        Pressure on the four side faces in the well check; None: closed.
    well_connection : {'near-well', 'peaceman'}
        How the coarse well connection factors are set (`upscale.methods.near_well`).
    percentiles : {'nonexceedance', 'exceedance'}
        How an ensemble's percentiles are named (`upscale.analysis.percentiles`).
    command : list of str
        The command line, recorded in the outputs.
    grid_like : str or None
        A template raster whose cells are the coarse blocks along x and y
        (`upscale.grid.template`): the field is cut to its whole cells.
    """

    block: BlockSpec
    method: str
    options: dict[str, Any]
    read: dict[str, Any]
    recorded_read: dict[str, Any]
    chunk_bytes: int | None = None
    check: bool = True
    solver: str = "auto"
    tolerance: float = 1e-10
    check_limit: int = 20_000_000
    units: str = "si"
    out_unit: str | None = None
    plot: bool = False
    report: bool = False
    layer: int | None = None
    wells: str | None = None
    outer_pressure: float | None = None
    well_connection: str = "near-well"
    percentiles: str = "nonexceedance"
    command: list[str] = field(default_factory=list)
    grid_like: str | None = None

    def __post_init__(self) -> None:
        refuse_unit(self.read, self.out_unit)  # before any work
        unit_factors(self.out_unit or str(self.read.get("unit", "mD")), self.units)
        refuse_convention(self.percentiles)

    def require_libraries(self) -> None:
        """Import, before any work, the optional libraries the outputs need (`upscale.optional`).

        Raises
        ------
        MissingLibraryError
            Without the ``formats`` extra (every run writes the package), or the
            ``figures`` extra when figures or a report are asked for.
        """
        require_extra("formats")
        if self.plot or self.report:
            require_extra("figures")


def upscale_file(path: str, settings: Settings, out: str | Path, *, overwrite: bool = False,
                 say: Say = silent, prefix: str = "") -> tuple[Upscaled, RunSummary]:  # fmt: skip
    """Upscale the field in `path` and write the result into `out`.

    Parameters
    ----------
    path : str
        The fine field.
    settings : Settings
        What to do.
    out : str or Path
        The output folder (staged: complete or absent).
    overwrite : bool
        Replace the results in a folder that holds some.
    say : callable, optional
        Receives a line when each step (reading, upscaling, checking, drawing,
        writing) starts and ends; silent by default.
    prefix : str
        Put before each of those lines.

    Returns
    -------
    (Upscaled, RunSummary)
        The result and its summary as written.

    Raises
    ------
    InputError
        For bad input, including ``--plot``/``--report`` without a check.
    """
    settings.require_libraries()
    steps = Steps(say, prefix)
    with steps("read_s", f"reading {path}"):
        fine = read_field(path, chunk_bytes=settings.chunk_bytes, block=settings.block.chunk_cells,
                          **settings.read)  # fmt: skip
    refuse_layer(settings.layer, fine)
    fine, block, grid_like = snapped(settings.grid_like, fine, settings.block)
    (block,), (layers,), fine = with_layers(path, [block], fine, chunk_bytes=settings.chunk_bytes,
                                            read=settings.read, grid_like=grid_like)  # fmt: skip
    fine = fine.in_unit(settings.out_unit or fine.unit)
    settings = replace(settings, block=block)
    wells = _wells(settings, fine)
    fits_flows = find_method(settings.method).global_flows
    if fits_flows:
        refuse_global_past_limit(settings.block.used_shape(fine.shape), settings.check_limit)
    if settings.check or fits_flows:
        refuse_check_past_memory(fine, settings.check_limit)  # before the upscaling, not after
    warning = struggle(connectivity(fine, settings.check_limit), settings.block)
    if warning:
        log.warning("%s: %s", path, warning)
    flows = None
    if fits_flows:  # solved once: the method fits them, the check compares with them
        used = fine.leading(settings.block.used_shape(fine.shape))
        with steps("fine_s", f"solving the fine model along {', '.join(used.axes)}"):
            flows = fine_solves(used, used.axes, solver=settings.solver, tolerance=settings.tolerance)
    cells = "x".join(map(str, fine.shape[::-1][: fine.ndim]))  # x first, like --block
    with steps("upscale_s", f"upscaling {cells} cells by {settings.method} in {settings.block} blocks"):
        result = coarsen(fine, settings.block, settings.method, flows=flows, **settings.options)
    check, checks = None, None
    drawing = settings.plot or settings.report
    if settings.check:
        reason = too_large(result.fine.shape, settings.check_limit)
        if reason and drawing:
            raise InputError(f"`plot` and `report` show the flow check, and {reason}; {RAISE_LIMIT}")
        if reason:
            # never silently: the global solve is skipped, windows are checked instead
            with steps("check_s", f"checking the flow on sub-domains ({reason})"):
                check = {"skipped": reason, **check_subdomains(
                    result.fine, result.coarse, result.transmissibilities(), result.block,
                    settings.check_limit, solver=settings.solver, tolerance=settings.tolerance)}  # fmt: skip
        else:
            solves = "coarse solves" if flows else "fine and coarse solves"
            with steps("check_s", f"checking the flow: {solves} along " + ", ".join(result.fine.axes)):
                flows = flows or fine_solves(result.fine, result.fine.axes, solver=settings.solver,
                                             tolerance=settings.tolerance)  # fmt: skip
                checks = coarse_check(flows, result.transmissibilities(), solver=settings.solver,
                                      tolerance=settings.tolerance)  # fmt: skip
                check = {axis: c.summary() for axis, c in checks.items()}
    wells_check, found = None, None
    if wells:
        if reason:
            wells_check = {"file": settings.wells, "skipped": reason}
        else:
            with steps("wells_s", f"checking {len(wells)} wells: fine and coarse solves"):
                found = well_check(result.fine, result.coarse, wells,
                                   coarse_trans=result.transmissibilities(),
                                   fine_trans=next(iter(flows.values())).trans,
                                   outer_pressure=settings.outer_pressure,
                                   connection=settings.well_connection, solver=settings.solver,
                                   tolerance=settings.tolerance)  # fmt: skip
                wells_check = {"file": settings.wells, **found.summary()}
    made = None
    if checks and drawing:
        from ..report.bundle import bundle  # matplotlib: the figures extra

        layer = settings.layer
        with steps(None, "drawing the figures"):
            made = bundle(single(result, checks, steps.timings["upscale_s"], wells=found),
                          title=f"upscale — {result.method} on {path}", command=settings.command,
                          layer=layer)  # fmt: skip
    with steps(None, "writing the coarse grid and the summary"):
        summary = write_result(result, out, overwrite=overwrite, command=settings.command,
                               timings=steps.timings, check=check, read=settings.recorded_read,
                               wells=wells_check, layers=layers.summary() if layers else None,
                               grid_like=grid_like,
                               images=made.images if made and settings.plot else None,
                               page=made.page if made and settings.report else None,
                               units=settings.units)  # fmt: skip
    return result, summary


def snapped(template: str | None, fine: Field, block: BlockSpec
            ) -> tuple[Field, BlockSpec, GridLikeRecord | None]:  # fmt: skip
    """`fine` cut to the whole cells of the raster `template`, and `block` of their size along x and y.

    Parameters
    ----------
    template : str or None
        A template raster whose cells are to be the coarse blocks (`upscale.grid.template`).
    fine : Field
        The fine field.
    block : BlockSpec
        Its layers are kept; its sizes along x and y are the template's.

    Returns
    -------
    (Field, BlockSpec, GridLikeRecord or None)
        Unchanged, with None, without a template.

    Raises
    ------
    InputError
        A template that cannot be read or does not fit the field (`upscale.grid.template.snap_to`).
    """
    if template is None:
        return fine, block, None
    found = read_template(template)
    snap = snap_to(fine.grid, found)
    record = grid_like_record(found, snap)
    return record.window(fine), replace(block, nx=snap.nx, ny=snap.ny), record


def with_layers(path: str, blocks: list[BlockSpec], fine: Field, *, chunk_bytes: int | None,
                read: dict[str, Any], grid_like: GridLikeRecord | None = None
                ) -> tuple[list[BlockSpec], list[LayerChoice | None], Field]:  # fmt: skip
    """`blocks` with their automatic layers chosen from `fine` (once each), and the field to upscale them in.

    Parameters
    ----------
    path : str
        The fine field's file, as `fine` was read from it.
    blocks : list of BlockSpec
        The blocks, `fine` read in chunks of whole blocks of the last one.
    fine : Field
        The fine field.
    chunk_bytes, read
        As `fine` was read (`upscale.read_field`).
    grid_like : GridLikeRecord, optional
        The template whose whole cells `fine` was cut to (`snapped`); a field opened again is cut alike.

    Returns
    -------
    (list of BlockSpec, list of LayerChoice or None, Field)
        The blocks with their layers chosen, the choice of each (None: not
        automatic), and `fine` — opened again (lazily, without a second
        checksum) when a grouping of the layers needs chunks that hold every
        layer, so that no chunk splits a coarse layer.

    Raises
    ------
    InputError
        A block that does not fit the field (`upscale.analysis.layers.resolve_layers`).
    """
    found = [resolve_layers(block, fine) for block in blocks]
    resolved = [block for block, _ in found]
    if not resolved:
        return [], [], fine
    grouped = any(block.groups is not None for block in resolved)
    chunk = (fine.shape[0] if grouped else resolved[-1].chunk_cells[0], *resolved[-1].chunk_cells[1:])
    if chunk != blocks[-1].chunk_cells:  # within the chunk budget
        again = read_field(path, chunk_bytes=chunk_bytes, block=chunk, checksum=False, **read)
        fine = replace(again if grid_like is None else grid_like.window(again), sources=fine.sources)
    return resolved, [choice for _, choice in found], fine


def refuse_automatic_layers(block: BlockSpec) -> None:
    """Refuse, before any work, automatic layers for an ensemble: one grouping is chosen from one field."""
    if block.request is not None and block.groups is None:
        raise InputError(f"block {block}: automatic layers are chosen from one field; for an ensemble give "
                         "the grouping (e.g. 8x8x2,2,4,8, as one realization's run chose)")


def _wells(settings: Settings, fine: Field) -> tuple:
    """The wells of `settings`, read and placed on the fine grid (refused before any work), or ().

    Raises
    ------
    InputError
        For a bad wells file or well, or wells without the check.
    """
    if settings.wells is None:
        return ()
    if not settings.check:
        raise InputError("`wells` adds a well check to the flow check; leave out `check=False`")
    wells = read_wells(settings.wells)
    if not too_large(fine.shape, settings.check_limit):
        place_wells(fine.leading(settings.block.used_shape(fine.shape)), wells, settings.outer_pressure)
    return wells


def run_ensemble(paths: list[str], settings: Settings, out: str | Path, *, overwrite: bool = False,
                 parallel: int = 1, say: Say = silent) -> EnsembleSummary:  # fmt: skip
    """The same job on every realization, into one sub-folder each, and the ensemble's spread.

    Parameters
    ----------
    paths : list of str
        The realizations (on one grid).
    settings : Settings
        Shared by every realization.
    out : str or Path
        The ensemble's folder: a sub-folder per realization (named after its
        file), ``ensemble.csv``, ``maps/`` (per block and permeability the
        percentiles and the standard deviation of ln k over the realizations,
        as GeoTIFFs) and ``ensemble.json`` (written last).
    overwrite : bool
        Replace the results in a folder that holds some.
    parallel : int
        Realizations processed at the same time.
    say : callable, optional
        Receives the progress lines: every step of every realization (after
        its name) and each realization done; silent by default.

    Returns
    -------
    EnsembleSummary
        The content of ``ensemble.json``.

    Raises
    ------
    InputError
        If two realizations share a name or the grids differ (checked before any work).
    """
    settings.require_libraries()
    refuse_automatic_layers(settings.block)
    names, fields = read_realizations(paths, settings.chunk_bytes, settings.block, settings.read,
                                  checksum=False)  # fmt: skip
    done, coarse, grids = [], {}, {}

    def one(name: str, path: str) -> RunSummary:
        result, summary = upscale_file(path, settings, stage / name, say=say, prefix=f"{name}: ")
        # per block, small: every realization's coarse permeabilities are kept for the maps
        coarse[name] = {p: np.asarray(v, dtype=float) for p, v in result.coarse.properties().items()
                        if p != "porosity"}  # fmt: skip
        grids[name] = result.coarse.grid  # one grid for all (read_realizations)
        done.append(name)
        say(f"[{len(done)}/{len(paths)}] realizations done ({name})")
        return summary

    with staged_folder(out, overwrite, marker=ENSEMBLE) as stage:
        with ThreadPoolExecutor(max_workers=max(1, parallel)) as pool:
            summaries = list(pool.map(one, names, paths))
        ensemble = ensemble_summary(names, summaries, command=settings.command,
                                    convention=settings.percentiles)  # fmt: skip
        maps = (block_spreads([coarse[name] for name in names]), grids[names[0]], summaries[0].unit)
        made = None
        if settings.plot or settings.report:
            from ..report.bundle import ensemble_bundle  # matplotlib: the figures extra

            with Steps(say)(None, "drawing the spread over the realizations"):
                made = ensemble_bundle(ensemble, unit=summaries[0].unit, command=settings.command,
                                       title=f"upscale — {settings.method} on {len(names)} realizations",
                                       maps=maps)  # fmt: skip
        write_ensemble(stage, ensemble, names, maps=maps,
                       images=made.images if made and settings.plot else None,
                       page=made.page if made and settings.report else None)  # fmt: skip
    return ensemble


def refuse_unit(read: dict[str, Any], out_unit: str | None) -> None:
    """Refuse, before any work, an `out_unit` of the other kind than the unit in `read`.

    See `upscale.units.unit_factor`.
    """
    if out_unit is not None:
        unit_factor(str(read.get("unit", "mD")), out_unit)


def refuse_layer(layer: int | None, fine: Field) -> None:
    """Refuse, before any work, a zero-based `layer` to draw that the field does not have."""
    if layer is None:
        return
    if fine.ndim != 3:
        raise InputError("`layer`: the field is a 2D map; `layer` chooses the layer drawn of a 3D model "
                         "— leave it out")  # fmt: skip
    if layer >= fine.shape[0]:
        raise InputError(f"`layer` is past the field's {fine.shape[0]} layer(s)")


