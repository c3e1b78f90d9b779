"""Per-block maps of an ensemble's coarse permeabilities, and its representative realization.

What is tested
--------------
* ``upscale run 'r*.tif' --method flow`` on five small generated
  realizations (flow: kx and ky differ) writes ``maps/`` with, per
  permeability, three percentile GeoTIFFs named in the reading asked for and
  the standard deviation of ln k. Read back with rasterio, each holds
  exactly numpy's percentile over the realizations' own coarse GeoTIFFs
  (``r*/kx.tif``, each a single run's output) — the 10th, 50th, 90th in the
  non-exceedance reading, the 90th, 50th, 10th under ``p10_exceed``,
  ``p50_exceed``, ``p90_exceed`` in the exceedance reading (numpy.percentile
  documentation: "the value below which q percent of the observations
  fall"; the exceedance reading is common practice among reservoir
  engineers) — and the sample standard deviation of ln k written out
  (sqrt of the sum of squared deviations over n - 1); their georeference
  (transform, CRS, size) is that of a single run's ``kx.tif``; ``ensemble.json``
  lists them.
* The representative realization is the one whose fine k_eff is nearest the
  median over the realizations (the smallest sum over x and y of
  ``(ln k_fine - ln median)²``), computed here from every realization's
  ``summary.json``; it is printed and in ``ensemble.json``.
* With ``--plot --report``, the page holds a figure of maps per permeability
  (``figures/spread_maps_kx.png``, ``..._ky.png``) and names the
  representative realization.
* A block inactive in some realizations: its percentiles are over the
  others, no value where none is active, and no standard deviation from
  fewer than two values (by hand on a stack).
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
import rasterio
from conftest import write_raster

from upscale.analysis.ensemble_maps import block_spread, representative
from upscale.gallery.problems import uncorrelated_lognormal

SIZE = (48, 40)
NAMES = [f"r{r}" for r in range(5)]
#: Per reading, each file's statistic key and numpy's percentile it must hold.
READINGS = {"nonexceedance": {"p10_nonexceed": 10, "p50_nonexceed": 50, "p90_nonexceed": 90},
            "exceedance": {"p10_exceed": 90, "p50_exceed": 50, "p90_exceed": 10}}


@pytest.fixture(scope="module")
def realizations(tmp_path_factory):
    folder = tmp_path_factory.mktemp("realizations")
    for r, name in enumerate(NAMES):
        write_raster(folder / f"{name}.tif", uncorrelated_lognormal(SIZE, seed=9_400 + r), cell_size=10.0)
    return folder


def _read(path):
    with rasterio.open(path) as raster:
        return raster.read(), raster.transform, raster.crs, (raster.width, raster.height, raster.count)


@pytest.mark.parametrize("reading", list(READINGS))
def test_maps_hold_numpy_s_percentiles_and_the_std_of_ln_k(run_cli, realizations, tmp_path, reading):
    out = tmp_path / "ens"
    code, stdout, stderr = run_cli("run", realizations / "r*.tif", "--block", "8x8", "--method", "flow",
                                   "--solver", "direct", "--percentiles", reading, "--out", out)  # fmt: skip
    assert code == 0, stderr
    ensemble = json.loads((out / "ensemble.json").read_text())
    listed = []
    for name in ("kx", "ky"):
        runs = [_read(out / r / f"{name}.tif") for r in NAMES]  # each realization's own coarse GeoTIFF
        stack = np.stack([values for values, *_ in runs])
        _, transform, crs, size = runs[0]
        assert np.isfinite(stack).all() and stack.shape[1:] == (1, 6, 5)
        files = ensemble["maps"]["files"][name]
        assert sorted(files) == sorted([*READINGS[reading], "std_ln"])
        for statistic, q in READINGS[reading].items():
            assert files[statistic] == f"maps/{name}_{statistic}.tif"
            found, *where = _read(out / files[statistic])
            np.testing.assert_array_equal(found, np.percentile(stack, q, axis=0), err_msg=(name, statistic))
            assert where == [transform, crs, size]
        logs = np.log(stack)
        want = np.sqrt(((logs - logs.mean(axis=0)) ** 2).sum(axis=0) / (len(NAMES) - 1))
        found, *where = _read(out / files["std_ln"])
        np.testing.assert_allclose(found, want, rtol=1e-13)
        assert where == [transform, crs, size] and found.min() > 0
        listed += files.values()
    assert not np.array_equal(_read(out / "r0" / "kx.tif")[0], _read(out / "r0" / "ky.tif")[0])
    assert [f for f in ensemble["files"] if f.startswith("maps/")] == listed
    assert sorted(p.name for p in (out / "maps").iterdir()) == sorted(f.split("/")[1] for f in listed)

    # the representative realization: fine k_eff nearest the median on x and y together
    k_fine = np.array([[json.loads((out / r / "summary.json").read_text())["check"][a]["k_fine"]
                        for a in "xy"] for r in NAMES])  # fmt: skip
    distance = ((np.log(k_fine) - np.log(np.median(k_fine, axis=0))) ** 2).sum(axis=1)
    nearest = NAMES[int(np.argmin(distance))]
    assert ensemble["representative"]["name"] == nearest and ensemble["representative"]["by"] == "k_fine"
    assert f"representative realization: {nearest} (" in stdout


def test_the_page_draws_the_maps_and_names_the_representative(run_cli, realizations, tmp_path):
    out = tmp_path / "ens"
    code, _, stderr = run_cli("-q", "run", realizations / "r*.tif", "--block", "8x8", "--method", "flow",
                              "--solver", "direct", "--plot", "--report", "--out", out)  # fmt: skip
    assert code == 0, stderr
    ensemble = json.loads((out / "ensemble.json").read_text())
    page = (out / "report.html").read_text(encoding="utf-8")
    for name in ("kx", "ky"):
        assert f"figures/spread_maps_{name}.png" in ensemble["files"]
        assert (out / "figures" / f"spread_maps_{name}.png").stat().st_size > 10_000
        assert f'id="spread_maps_{name}"' in page
    chosen = ensemble["representative"]["name"]
    assert f'<p id="representative">Representative realization: {chosen} — ' in page


def test_a_block_inactive_in_some_realizations():
    stack = np.array([[2.0, np.nan, np.nan], [8.0, 5.0, np.nan], [4.0, np.nan, np.nan]]).reshape(3, 1, 1, 3)
    found = block_spread(stack)
    assert found.count.ravel().tolist() == [3, 1, 0]
    median = found.percentiles[50].ravel()
    assert median[:2].tolist() == [4.0, 5.0] and math.isnan(median[2])
    assert found.percentiles[90][0, 0, 0] == np.percentile([2.0, 8.0, 4.0], 90)
    # ln 2, ln 4, ln 8 are ln 2 times 1, 2, 3: their sample standard deviation is ln 2
    assert found.std_ln[0, 0, 0] == pytest.approx(math.log(2.0), rel=1e-14)
    assert np.isnan(found.std_ln.ravel()[1:]).all()


def test_the_representative_is_the_nearest_to_the_median_over_all_axes():
    # b is nearest the median along x, but far along y; c is nearest over both together
    k_fine = {"a": {"x": 100.0, "y": 50.0}, "b": {"x": 120.0, "y": 400.0}, "c": {"x": 130.0, "y": 60.0},
              "d": {"x": 200.0, "y": 70.0}, "e": {"x": 110.0, "y": None}}  # fmt: skip
    # the median over a-d (e has no k along y): x 125, y 65
    distance = {n: (math.log(k["x"] / 125.0)) ** 2 + (math.log(k["y"] / 65.0)) ** 2
                for n, k in k_fine.items() if k["y"] is not None}  # fmt: skip
    assert min(distance, key=distance.get) == "c" == representative(k_fine)
