"""Write an ensemble's summary, with ``ensemble.json`` last.

``ensemble.csv`` has one row per realization and ``maps/`` the per-block
spread of the coarse permeabilities as GeoTIFFs (``upscale run``);
``ranking.csv`` one row per method compared (``upscale compare``).
"""

from __future__ import annotations

import csv
import dataclasses
import json
from pathlib import Path
from typing import Any

from ..analysis.ensemble import EnsembleRanking, EnsembleSummary, MethodSpread, csv_rows
from ..analysis.ensemble_maps import BlockSpread
from ..analysis.percentiles import PERCENTILES, key
from ..field import Grid
from .comparison import write_figures
from .geotiff import write_property

#: The ensemble's summary; written last, it marks the ensemble folder complete.
ENSEMBLE = "ensemble.json"


def write_ensemble(stage: Path, ensemble: EnsembleSummary, names: list[str], *,
                   maps: tuple[dict[str, BlockSpread], Grid, str] | None = None,
                   images: list[tuple[str, bytes, bytes]] | None = None,
                   page: str | None = None) -> None:  # fmt: skip
    """Write ``ensemble.csv``, the maps, any figures and page, then ``ensemble.json`` (listing the files).

    Parameters
    ----------
    stage : Path
        The staged ensemble folder, holding one run folder per realization.
    ensemble : EnsembleSummary
        Written as ``ensemble.json``, with the files and maps written.
    names : list of str
        The realizations' folders.
    maps : (dict of str to BlockSpread, Grid, str), optional
        The per-block spread of each coarse permeability, the coarse grid and
        the permeability unit: written by `write_block_maps`.
    images, page
        The figures and the HTML page.
    """
    header, rows = csv_rows(ensemble)
    _write_csv(stage / "ensemble.csv", header, rows)
    written = write_block_maps(stage, *maps, ensemble.convention) if maps else {}
    files = [*names, "ensemble.csv", *(f for by in written.values() for f in by.values()),
             *(write_figures(stage, images) if images else [])]  # fmt: skip
    if page is not None:
        (stage / "report.html").write_text(page, encoding="utf-8")
        files.append("report.html")
    content = dataclasses.replace(ensemble, maps=written, files=tuple(files)).to_dict()
    (stage / ENSEMBLE).write_text(json.dumps(content, indent=2, allow_nan=False) + "\n")


def block_map_files(names: list[str], convention: str) -> dict[str, dict[str, str]]:
    """The files of the per-block maps of each permeability in `names`: statistic key -> path.

    Examples
    --------
    >>> block_map_files(["kx"], "exceedance")["kx"]["p10_exceed"]
    'maps/kx_p10_exceed.tif'
    """
    return {name: {**{key(q, convention): f"maps/{name}_{key(q, convention)}.tif" for q in PERCENTILES},
                   "std_ln": f"maps/{name}_std_ln.tif"} for name in names}  # fmt: skip


def write_block_maps(stage: Path, spreads: dict[str, BlockSpread], grid: Grid, unit: str,
                     convention: str) -> dict[str, dict[str, str]]:  # fmt: skip
    """Write the per-block percentiles and standard deviation of ln k of each permeability as GeoTIFFs.

    Parameters
    ----------
    stage : Path
        The staged ensemble folder; the files go into its ``maps/``.
    spreads : dict of str to BlockSpread
        Per permeability (`upscale.analysis.ensemble_maps.block_spreads`).
    grid : Grid
        The coarse grid every realization shares: georeferences the files.
    unit : str
        The permeabilities' unit (the percentiles'); the standard deviation of ln k has none.
    convention : {'nonexceedance', 'exceedance'}
        How the percentiles' files are named (`upscale.analysis.percentiles`).

    Returns
    -------
    dict of str to dict of str to str
        `block_map_files` of what was written.
    """
    (stage / "maps").mkdir(exist_ok=True)
    files = block_map_files(list(spreads), convention)
    for name, found in spreads.items():
        tags = {"tool": "upscale", "over": "realizations", "percentile_convention": convention}
        for q in PERCENTILES:
            statistic = key(q, convention)
            write_property(stage / files[name][statistic], found.percentiles[q], grid, f"{name} {statistic}",
                           unit, {**tags, "numpy_percentile": str(q)}, depths=True)  # fmt: skip
        write_property(stage / files[name]["std_ln"], found.std_ln, grid, f"{name} std_ln", "1",
                       {**tags, "statistic": "sample standard deviation of ln k (ddof=1)"},
                       depths=True)  # fmt: skip
    return files


def ranking_rows(methods: tuple[MethodSpread, ...], axes: str,
                 convention: str) -> tuple[list[str], list[list[Any]]]:  # fmt: skip
    """Header and rows of ``ranking.csv``: one row per method, best first (errors as fractions).

    The percentiles' columns are named in `convention` (``largest_error_p10_nonexceed`` ...).
    """
    spreads = [("largest_error", lambda m: m.worst_error)]
    spreads += [(f"rel_error_{a}", lambda m, a=a: m.rel_error[a]) for a in axes]
    header = ["rank", "method", "ran", "failed",
              *(f"{name}_{key(q, convention)}" for name, _ in spreads for q in PERCENTILES),
              "mean_rank", "times_first"]
    rows = []
    for m in methods:
        values = [None if get(m) is None else get(m).percentile(q)
                  for _, get in spreads for q in PERCENTILES]  # fmt: skip
        rows.append([m.rank, m.name, m.ran, m.failed, *values,
                     m.rank_in_realizations.mean, m.rank_in_realizations.first])  # fmt: skip
    return header, rows


def write_ranking(stage: Path, ranking: EnsembleRanking, names: list[str], *,
                  images: list[tuple[str, bytes, bytes]], page: str) -> None:  # fmt: skip
    """Write ``ranking.csv``, the figures, ``report.html``, then ``ensemble.json`` (listing the files).

    Parameters
    ----------
    stage : Path
        The staged ensemble folder, holding one comparison folder per realization.
    ranking : EnsembleRanking
        From `upscale.analysis.ensemble.ensemble_ranking`; written as ``ensemble.json``.
    names : list of str
        The realizations' folders.
    images, page
        The figures and the HTML page.
    """
    header, rows = ranking_rows(ranking.methods, ranking.axes, ranking.convention)
    _write_csv(stage / "ranking.csv", header, rows)
    files = [*names, "ranking.csv", *write_figures(stage, images), "report.html"]
    (stage / "report.html").write_text(page, encoding="utf-8")
    content = dataclasses.replace(ranking, files=tuple(files)).to_dict()
    (stage / ENSEMBLE).write_text(json.dumps(content, indent=2, allow_nan=False) + "\n")


def _write_csv(path: Path, header: list[str], rows: list[list[Any]]) -> None:
    with open(path, "w", newline="", encoding="utf-8") as f:
        writer = csv.writer(f)
        writer.writerow(header)
        writer.writerows([["" if v is None else v for v in row] for row in rows])
