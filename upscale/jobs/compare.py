"""The comparison jobs: methods compared on one field or on an ensemble, written to a folder.

`compare_file` is ``upscale compare`` on one field, `compare_ensemble` on
several; both compare each field the same way (`upscale.analysis.compare`),
draw its figures and page, and write its folder.
"""

from __future__ import annotations

import shlex
from pathlib import Path
from typing import TYPE_CHECKING, Any

from ..analysis.compare import Candidate, Comparison, Entry, compare_methods, progress_line, with_per_axis
from ..analysis.comparison_record import ComparisonRecord, comparison_record
from ..analysis.ensemble import EnsembleRanking, ensemble_ranking
from ..analysis.percentiles import refuse_convention
from ..analysis.records import GridLikeRecord
from ..check.limits import RAISE_LIMIT, refuse_check_past_memory, too_large
from ..check.wells import FineWells, fine_wells
from ..errors import InputError
from ..export.comparison import write_comparison
from ..export.ensemble import ENSEMBLE, write_ranking
from ..export.staging import staged_folder
from ..field import Field
from ..grid import BlockSpec
from ..io import read_field
from ..io.realizations import read_realizations
from ..io.wells import read_wells
from ..optional import require_extra
from ..steps import Say, Steps, silent
from .run import refuse_automatic_layers, refuse_layer, refuse_unit, snapped, with_layers

if TYPE_CHECKING:
    from ..report.bundle import Bundle


def compare_file(path: str, block: BlockSpec, chosen: list[Candidate], out: str | Path, *,
                 read: dict[str, Any], chunk_bytes: int | None = None, solver: str = "auto",
                 tolerance: float = 1e-10, check_limit: int = 20_000_000, layer: int | None = None,
                 recorded_read: dict[str, Any] | None = None, command: list[str] | None = None,
                 overwrite: bool = False, say: Say = silent, wells: str | None = None,
                 outer_pressure: float | None = None, well_connection: str = "near-well",
                 out_unit: str | None = None,
                 grid_like: str | None = None) -> tuple[Comparison, Bundle]:  # fmt: skip
    """Compare methods on the field in `path` and write ``compare.json``, the figures and the page.

    Parameters
    ----------
    path : str
        The fine field.
    block, chosen, out, read, chunk_bytes, solver, tolerance, check_limit, layer
        As in `compare_ensemble`, for one field (`out` is the comparison's folder);
        automatic layers of `block` are chosen from the field (`upscale.jobs.run.with_layers`).
    recorded_read, command, overwrite, say
        As in `compare_ensemble`.
    wells : str, optional
        A wells file (``docs/wells.md``): every method is also checked by these
        wells (one fine solve), and ranked on the error of their total rate too.
    outer_pressure : float, optional
        Pressure on the four side faces in the well check; None: closed.
    well_connection : {'near-well', 'peaceman'}
        How the coarse well connection factors are set (`upscale.methods.near_well`).
    out_unit : str, optional
        The unit of the coarse values, tables and figures, of the input's kind
        (`upscale.Field.in_unit`); None: the input's.
    grid_like : str, optional
        A template raster whose cells are the coarse blocks along x and y:
        the field is cut to its whole cells (`upscale.jobs.run.snapped`).

    Returns
    -------
    (Comparison, Bundle)
        The ranked methods, and the figures and page written.

    Raises
    ------
    InputError
        A field past `check_limit` or the memory, a `layer` the model does not
        have (before any work), or no method that ran.
    """
    refuse_unit(read, out_unit)
    fine = read_field(path, chunk_bytes=chunk_bytes, block=block.chunk_cells, **read)
    refuse_comparison(fine, check_limit, layer)
    fine, block, template = snapped(grid_like, fine, block)
    (block,), (layers,), fine = with_layers(path, [block], fine, chunk_bytes=chunk_bytes, read=read,
                                            grid_like=template)  # fmt: skip
    fine = fine.in_unit(out_unit or fine.unit)
    shared = wells_of_file(fine, block, wells, (outer_pressure, well_connection), solver, tolerance, say)
    result = compare_methods(fine, block, chosen, solver=solver, tolerance=tolerance,
                             report=lambda *args: say(progress_line(*args)), say=say,
                             wells=shared, layers=layers)  # fmt: skip
    _refuse_if_none_ran(result)
    result = with_per_axis(result, solver=solver, tolerance=tolerance)
    suggested = None if result.per_axis is None else run_command(
        command or _compare_command(path, block, grid_like), result.per_axis.candidate, out)
    record, made = _drawn(result, path, layer=layer, command=command or [], recorded_read=recorded_read,
                          per_axis_command=suggested, grid_like=template)  # fmt: skip
    write_comparison(out, record, made.images, made.page, overwrite=overwrite)
    return result, made


def _compare_command(path: str, block: BlockSpec, grid_like: str | None) -> list[str]:
    """The ``upscale compare`` command line of a comparison called from Python (none recorded).

    Examples
    --------
    >>> _compare_command("m.tif", BlockSpec(3, 2, 2), "coarse.tif")
    ['upscale', 'compare', 'm.tif', '--grid-like', 'coarse.tif', '--block', '2']
    """
    if grid_like is None:
        return ["upscale", "compare", path, "--block", str(block)]
    layers = str(block).split("x", 2)[2:]  # the template gives x and y; --block the layers alone
    return ["upscale", "compare", path, "--grid-like", grid_like, *(["--block", *layers] if layers else [])]


#: Options of ``upscale compare`` that ``upscale run`` does not take, or takes from the method chosen.
_NOT_RUN = ("--methods", "--bc", "--border", "--exponent", "--out")


def run_command(command: list[str], candidate: Candidate, out: str | Path) -> str:
    """The ``upscale run`` command line of `candidate` on the field and block of a compare command.

    Parameters
    ----------
    command : list of str
        The ``upscale compare`` command line, program name first.
    candidate : Candidate
        A method of the comparison (its best method per axis).
    out : str or Path
        The comparison's folder; the run writes beside it, into ``OUT-per-axis``.

    Returns
    -------
    str
        The command line, quoted for a POSIX shell: the compare command's
        words but its methods, their options and its folder, then the method
        and the options it takes (those at their default left out).

    Examples
    --------
    >>> best = Candidate("x", "x=flow,y=harmonic", {"bc": "sealed", "border": 2})
    >>> run_command(["upscale", "compare", "a map.tif", "--block", "8x8", "--methods", "flow,harmonic",
    ...              "--out", "cmp"], best, "cmp")
    "upscale run 'a map.tif' --block 8x8 --method x=flow,y=harmonic --border 2 --out cmp-per-axis"
    """
    words, skip = [], False
    for word in command:
        if skip or word == "--overwrite" or word.split("=")[0] in _NOT_RUN:
            skip = word in _NOT_RUN
            continue
        words.append(word)
    words[words.index("compare")] = "run"
    options = {k: v for k, v in candidate.options.items() if (k, v) not in (("bc", "sealed"), ("border", 0))}
    words += ["--method", candidate.method, *(w for k, v in options.items() for w in (f"--{k}", str(v)))]
    return shlex.join([*words, "--out", f"{str(out).rstrip('/')}-per-axis"])


def wells_of_file(fine: Field, block: BlockSpec, path: str | None, how: tuple[float | None, str], solver: str,
           tolerance: float, say: Say) -> FineWells | None:  # fmt: skip
    """The wells of `path` solved on the fine field as the comparison uses it, or None without a file.

    `how` is the outer pressure (None: closed) and the well connection.
    """
    if path is None:
        return None
    wells = read_wells(path)
    with Steps(say)(None, f"solving the fine model driven by {len(wells)} wells"):
        return fine_wells(fine.leading(block.used_shape(fine.shape)), wells, outer_pressure=how[0],
                          connection=how[1], solver=solver, tolerance=tolerance)  # fmt: skip


def compare_ensemble(paths: list[str], block: BlockSpec, chosen: list[Candidate], out: str | Path, *,
                     read: dict[str, Any], chunk_bytes: int | None = None, solver: str = "auto",
                     tolerance: float = 1e-10, check_limit: int = 20_000_000, layer: int | None = None,
                     recorded_read: dict[str, Any] | None = None, command: list[str] | None = None,
                     overwrite: bool = False, say: Say = silent, wells: str | None = None,
                     outer_pressure: float | None = None, well_connection: str = "near-well",
                     percentiles: str = "nonexceedance", out_unit: str | None = None,
                     grid_like: str | None = None) -> EnsembleRanking:  # fmt: skip
    """Compare the same methods on every realization, and rank them by their spread.

    Each realization gets the folder `upscale compare` writes for one field
    (``compare.json``, figures, ``report.html``); the ensemble folder adds
    ``ranking.csv``, ``figures/spread.*``, ``report.html`` and
    ``ensemble.json`` (written last), ranking the methods by the median over the
    realizations of their largest check error (`upscale.analysis.ensemble.method_spread`).

    Parameters
    ----------
    paths : list of str
        The realizations (on one grid).
    block : BlockSpec
        Its layers may be grouped explicitly, not automatically: one grouping
        for every realization is chosen from one field (``upscale compare`` or
        ``upscale run`` of one realization).
    chosen : list of Candidate
        From `upscale.analysis.compare.candidates`.
    out : str or Path
        The ensemble's folder.
    read : dict
        Keyword arguments of `upscale.read_field`.
    chunk_bytes, solver, tolerance, check_limit, layer
        As for one comparison; `layer` is zero-based.
    recorded_read, command
        Recorded in the outputs.
    overwrite : bool
        Replace the results in a folder that holds some.
    say : callable, optional
        Receives progress lines (silent by default).
    wells, outer_pressure, well_connection, out_unit, grid_like : optional
        As in `compare_file`, for every realization.
    percentiles : {'nonexceedance', 'exceedance'}
        How the percentiles are named (`upscale.analysis.percentiles`).

    Returns
    -------
    EnsembleRanking
        The content of ``ensemble.json``.

    Raises
    ------
    InputError
        Realizations sharing a name or on different grids, a field past
        `check_limit`, a `layer` the model does not have, automatic layers
        (all before any work).
    """
    refuse_automatic_layers(block)
    refuse_convention(percentiles)
    refuse_unit(read, out_unit)
    command = command or []
    names, fields = read_realizations(paths, chunk_bytes, block, read)
    fields = {name: fine.in_unit(out_unit or fine.unit) for name, fine in fields.items()}
    refuse_comparison(next(iter(fields.values())), check_limit, layer)
    _, block, template = snapped(grid_like, fields[names[0]], block)  # the realizations share one grid
    if template is not None:
        fields = {name: template.window(fine) for name, fine in fields.items()}
    records = []
    with staged_folder(out, overwrite, marker=ENSEMBLE) as stage:
        for i, (name, fine) in enumerate(fields.items(), start=1):
            def told(line: str, name: str = name) -> None:
                say(f"{name}: {line}")

            def report(j: int, n: int, candidate: Candidate, entry: Entry | None) -> None:
                told(progress_line(j, n, candidate, entry))

            how = (outer_pressure, well_connection)
            shared = wells_of_file(fine, block, wells, how, solver, tolerance, told)
            result = compare_methods(fine, block, chosen, solver=solver, tolerance=tolerance,
                                     report=report, say=told, wells=shared)  # fmt: skip
            _refuse_if_none_ran(result, paths[i - 1])
            with Steps(told)(None, "drawing the figures and writing"):
                record, made = _drawn(result, paths[i - 1], layer=layer, command=command,
                                      recorded_read=recorded_read, grid_like=template)  # fmt: skip
                write_comparison(stage / name, record, made.images, made.page)
            records.append(record)
            say(f"[{i}/{len(fields)}] realizations done ({name})")
        ranking = ensemble_ranking(names, records, command=command, convention=percentiles)
        from ..report.bundle import spread_bundle  # matplotlib: the figures extra

        made = spread_bundle(ranking, command=command,
                             title=f"upscale — methods compared on {len(names)} realizations")  # fmt: skip
        write_ranking(stage, ranking, names, images=made.images, page=made.page)
    return ranking



def refuse_comparison(fine: Field, max_cells: int, layer: int | None) -> None:
    """Refuse, before any work, a comparison the flow check cannot rank or a `layer` it cannot draw."""
    require_extra("figures")  # every comparison draws its figures and page
    reason = too_large(fine.shape, max_cells)
    if reason:
        raise InputError(f"a comparison ranks methods by the flow check, and {reason}; {RAISE_LIMIT}")
    refuse_check_past_memory(fine, max_cells)
    refuse_layer(layer, fine)



def _refuse_if_none_ran(result: Comparison, path: str | None = None) -> None:
    """Refuse a comparison where every method failed, with each one's reason (`path`: a realization)."""
    if result.best is not None:
        return
    reasons = "; ".join(f"{e.candidate.label}: {e.error}" for e in result.entries)
    if path is None:
        raise InputError("no method ran on this field: " + reasons)
    raise InputError(f"no method ran on {path}: " + reasons)


def _drawn(result: Comparison, path: str, *, layer: int | None, command: list[str],
           recorded_read: dict[str, Any] | None,
           per_axis_command: str | None = None,
           grid_like: GridLikeRecord | None = None) -> tuple[ComparisonRecord, Bundle]:  # fmt: skip
    """The record of one field's comparison (``compare.json``), and its figures and page."""
    from ..report.bundle import bundle  # matplotlib: the figures extra

    made = bundle(result, title=f"upscale — methods compared on {path}", command=command, layer=layer)
    return comparison_record(result, command=command, read=recorded_read, per_axis_command=per_axis_command,
                             grid_like=grid_like), made  # fmt: skip
