"""Write an ensemble's summary: ``ensemble.csv`` (one row per realization) and ``ensemble.json``."""

from __future__ import annotations

import csv
import json
from pathlib import Path
from typing import Any

from ..caution import CAUTION
from ..ensemble import csv_rows
from .summary import jsonable

#: The ensemble's summary; written last, it marks the ensemble folder complete.
ENSEMBLE = "ensemble.json"


def write_ensemble(stage: Path, ensemble: dict[str, Any], names: list[str]) -> None:
    """Write ``ensemble.csv`` and then ``ensemble.json`` (listing the files) into `stage`."""
    header, rows = csv_rows(ensemble)
    with open(stage / "ensemble.csv", "w", newline="", encoding="utf-8") as f:
        writer = csv.writer(f)
        writer.writerow(header)
        writer.writerows([["" if v is None else v for v in row] for row in rows])
    content = dict(ensemble, files=[*names, "ensemble.csv"], caution=CAUTION)
    (stage / ENSEMBLE).write_text(json.dumps(jsonable(content), indent=2, allow_nan=False) + "\n")
