"""Write a comparison or a plan: its JSON file, the figures (PNG and SVG) and ``report.html``."""

from __future__ import annotations

import dataclasses
import json
from pathlib import Path
from typing import Any

from ..analysis.comparison_record import ComparisonRecord
from .staging import staged_folder

#: Name of the comparison file; written last, it marks a complete comparison folder.
COMPARE = "compare.json"
#: Name of the plan file (``upscale plan``); written last, it marks a complete plan folder.
PLAN = "plan.json"


def write_figures(stage: Path, images: list[tuple[str, bytes, bytes]]) -> list[str]:
    """Write each figure as ``figures/NAME.png`` and ``.svg`` under `stage`; the names written."""
    folder = stage / "figures"
    folder.mkdir(exist_ok=True)
    files = []
    for name, png, svg in images:
        (folder / f"{name}.png").write_bytes(png)
        (folder / f"{name}.svg").write_bytes(svg)
        files += [f"figures/{name}.png", f"figures/{name}.svg"]
    return files


def write_comparison(
    folder: str | Path,
    record: ComparisonRecord,
    images: list[tuple[str, bytes, bytes]],
    page: str,
    *,
    overwrite: bool = False,
) -> None:
    """Write a comparison folder all at once (staged, then moved into place).

    Parameters
    ----------
    folder : str or Path
        Output folder.
    record : ComparisonRecord
        From `upscale.analysis.comparison_record.comparison_record`; written as ``compare.json``,
        last, with the files written beside it.
    images : list of (str, bytes, bytes)
        Each figure's name, PNG and SVG bytes.
    page : str
        The HTML report, written as ``report.html``.
    overwrite : bool
        Replace the results in a folder that holds some.
    """
    write_report_folder(folder, record, images, page, marker=COMPARE, overwrite=overwrite)


def write_report_folder(folder: str | Path, record: Any, images: list[tuple[str, bytes, bytes]], page: str,
                        *, marker: str, overwrite: bool = False) -> None:  # fmt: skip
    """Write a record as the JSON file `marker` (last), its figures and ``report.html``, staged.

    Parameters
    ----------
    folder : str or Path
        Output folder.
    record : dataclass
        A frozen record with a ``files`` field and ``to_dict()`` (`ComparisonRecord`, `PlanRecord`).
    images : list of (str, bytes, bytes)
        Each figure's name, PNG and SVG bytes.
    page : str
        The HTML report, written as ``report.html``.
    marker : str
        The JSON file's name; written last, it marks the folder complete.
    overwrite : bool
        Replace the results in a folder that holds some.
    """
    with staged_folder(folder, overwrite, marker=marker) as stage:
        files = write_figures(stage, images) + ["report.html"]
        (stage / "report.html").write_text(page, encoding="utf-8")
        content = dataclasses.replace(record, files=tuple(files)).to_dict()
        (stage / marker).write_text(json.dumps(content, indent=2, allow_nan=False) + "\n")
