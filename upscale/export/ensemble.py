"""Write an ensemble's summary, with ``ensemble.json`` last.

``ensemble.csv`` has one row per realization (``upscale run``);
``ranking.csv`` one row per method compared (``upscale compare``).
"""

from __future__ import annotations

import csv
import dataclasses
import json
from pathlib import Path
from typing import Any

from ..analysis.ensemble import PERCENTILES, EnsembleRanking, EnsembleSummary, MethodSpread, csv_rows
from .comparison import write_figures

#: The ensemble's summary; written last, it marks the ensemble folder complete.
ENSEMBLE = "ensemble.json"


def write_ensemble(stage: Path, ensemble: EnsembleSummary, names: list[str], *,
                   images: list[tuple[str, bytes, bytes]] | None = None,
                   page: str | None = None) -> None:  # fmt: skip
    """Write ``ensemble.csv``, any figures and page, then ``ensemble.json`` (listing the files)."""
    header, rows = csv_rows(ensemble)
    _write_csv(stage / "ensemble.csv", header, rows)
    files = [*names, "ensemble.csv", *(write_figures(stage, images) if images else [])]
    if page is not None:
        (stage / "report.html").write_text(page, encoding="utf-8")
        files.append("report.html")
    content = dataclasses.replace(ensemble, files=tuple(files)).to_dict()
    (stage / ENSEMBLE).write_text(json.dumps(content, indent=2, allow_nan=False) + "\n")


def ranking_rows(methods: tuple[MethodSpread, ...], axes: str) -> tuple[list[str], list[list[Any]]]:
    """Header and rows of ``ranking.csv``: one row per method, best first (errors as fractions)."""
    spreads = [("largest_error", lambda m: m.worst_error)]
    spreads += [(f"rel_error_{a}", lambda m, a=a: m.rel_error[a]) for a in axes]
    header = ["rank", "method", "ran", "failed",
              *(f"{name}_p{q}" for name, _ in spreads for q in PERCENTILES), "mean_rank", "times_first"]
    rows = []
    for m in methods:
        values = [None if get(m) is None else getattr(get(m), f"p{q}")
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
    header, rows = ranking_rows(ranking.methods, ranking.axes)
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
