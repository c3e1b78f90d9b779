"""`upscale.io.windows.open_raster` from many threads at once, as dask's reader tasks call it."""

from __future__ import annotations

import warnings
from concurrent.futures import ThreadPoolExecutor
from pathlib import Path

import numpy as np
import rasterio
from rasterio.errors import NotGeoreferencedWarning

from upscale.io.windows import open_raster


def test_threads_opening_rasters_leave_the_warning_filters_as_they_were(tmp_path: Path) -> None:
    """Each open hides rasterio's warning about a raster with no georeference, and only then.

    ``warnings.catch_warnings`` saves and restores the process's filters; two
    threads interleaving their saves and restores would leave one's filter
    behind for good (or drop a filter of the caller's).
    """
    path = tmp_path / "no-georeference.tif"
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", NotGeoreferencedWarning)
        with rasterio.open(path, "w", driver="GTiff", width=64, height=64, count=1,
                           dtype="float64") as dst:  # fmt: skip
            dst.write(np.ones((1, 64, 64)))

    def read(_: int) -> float:
        with open_raster(str(path)) as src:
            return float(src.read(1).sum())

    before = list(warnings.filters)
    with ThreadPoolExecutor(8) as pool:
        sums = list(pool.map(read, range(400)))
    assert sums == [64.0 * 64.0] * 400
    assert warnings.filters == before
    with warnings.catch_warnings(record=True) as seen:
        warnings.simplefilter("default")
        rasterio.open(path).close()
    assert [w.category for w in seen] == [NotGeoreferencedWarning]
