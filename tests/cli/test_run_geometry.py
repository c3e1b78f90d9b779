"""``upscale run`` with a geometry: an aquifer map's transmissivity, the summary's record, the dip caution.

What is tested
--------------
* Transmissivity is T = K b (Theis 1935, "The relation between the lowering
  of the piezometric surface and the rate and duration of discharge of a
  well using ground-water storage"; the definition, common practice): a
  homogeneous aquifer of K in m/day and thickness b (one value) gives
  T = K b in every block of ``transmissivity.tif`` (m²/day) and of
  ``cells.csv`` (m²/s); with a thickness raster, the arithmetic method
  gives each block T = Σ K_i b_i / n over its n cells (exact: the average
  weighs cells by volume and the block's thickness is their mean, common
  practice). The console table has a T row and names its unit.
* A permeability map with a thickness has no transmissivity.
* The ``geometry`` record of summary.json: what gave the geometry, the fine
  and coarse bulk volumes (equal); pinched-out cells are counted in
  tests/export/test_geometry_outputs.py.
* The dip caution: lateral transmissibilities neglect the dip and are too
  large by 1/cos²θ − 1 (module docstring of `upscale.geometry`; common
  practice), 1 % at 5.7°. A top sloping 1 m in 5 m (11.3°) prints and
  records the caution; one sloping 1 m in 50 m (1.1°) does not.
"""

from __future__ import annotations

import csv
import json
import math

import numpy as np
import pytest
import rasterio

from upscale.gallery.problems import uncorrelated_lognormal

SEED = 3_318_640_219
CELL = 10.0


def _cells(folder) -> dict[str, np.ndarray]:
    with open(folder / "cells.csv", newline="") as f:
        rows = list(csv.DictReader(f))
    return {name: np.array([float(r[name]) if r[name] else np.nan for r in rows]) for name in rows[0]}


def _band(path) -> np.ndarray:
    with rasterio.open(path) as src:
        return src.read(1).astype(np.float64), src.tags()


def test_a_homogeneous_aquifer_has_transmissivity_k_times_b(run_cli, write_tif, tmp_path):
    K, b = 3.5, 12.0  # m/day, m
    k = write_tif("K.tif", np.full((8, 8), K), cell_size=CELL)
    out = tmp_path / "out"
    code, printed, _ = run_cli("run", k, "--unit", "m/day", "--thickness", b, "--block", "4x4",
                               "--method", "harmonic", "--out", out)  # fmt: skip
    assert code == 0
    T, tags = _band(out / "transmissivity.tif")
    np.testing.assert_allclose(T, K * b, rtol=1e-15)
    assert tags["unit"] == "m²/day"
    np.testing.assert_allclose(_cells(out)["transmissivity"], K * b / 86_400.0, rtol=1e-15)  # m²/s
    summary = json.loads((out / "summary.json").read_text())
    assert summary["geometry"]["transmissivity_unit"] == "m²/day"
    assert summary["geometry"]["given"] == "thickness" and summary["geometry"]["thickness"] == b
    assert summary["statistics"]["coarse"]["transmissivity"]["mean"] == pytest.approx(K * b, rel=1e-15)
    row = next(line for line in printed.splitlines() if line.startswith("T "))
    assert float(row.split()[3]) == pytest.approx(K * b)  # coarse mean
    assert "T: transmissivity K × thickness in m²/day" in printed
    assert "transmissivity.tif" in printed


def test_a_thickness_raster_gives_each_block_the_mean_of_k_times_b(run_cli, write_tif, tmp_path):
    K = uncorrelated_lognormal((8, 12), SEED)
    b = 5.0 + 20.0 * np.random.default_rng(SEED).random((8, 12))
    out = tmp_path / "out"
    code, _, _ = run_cli("run", write_tif("K.tif", K, cell_size=CELL), "--unit", "m/s", "--thickness",
                         write_tif("b.tif", b, cell_size=CELL), "--block", "4x4", "--method", "arithmetic",
                         "--no-check", "--out", out)  # fmt: skip
    assert code == 0
    expected = (K * b).reshape(2, 4, 3, 4).mean(axis=(1, 3))  # Σ K_i b_i / n per block
    T, tags = _band(out / "transmissivity.tif")
    np.testing.assert_allclose(T, expected, rtol=1e-13)
    assert tags["unit"] == "m²/s"


def test_a_method_that_makes_ky_differ_gives_tx_and_ty(run_cli, write_tif, tmp_path):
    # layers of K across y (rows of 1 and 100 m/day): the sealed local solve gives Kx the arithmetic
    # and Ky the harmonic mean of the rows (Bear 1972, §5.10), so Tx = Kx b and Ty = Ky b differ
    K = np.where(np.arange(8)[:, None] % 2 == 0, 1.0, 100.0) * np.ones((8, 8))
    b = 10.0
    out = tmp_path / "out"
    code, printed, err = run_cli("run", write_tif("K.tif", K, cell_size=CELL), "--unit", "m/day",
                                 "--thickness", b, "--block", "4x4", "--method", "flow",
                                 "--out", out)  # fmt: skip
    assert code == 0, err
    Tx, _ = _band(out / "transmissivity.tif")
    Ty, _ = _band(out / "transmissivity_y.tif")
    np.testing.assert_allclose(Tx, 50.5 * b, rtol=1e-12)
    np.testing.assert_allclose(Ty, 2 / (1 / 1 + 1 / 100) * b, rtol=1e-12)
    rows = {line.split()[0]: line.split() for line in printed.splitlines() if line[:3] in ("Tx ", "Ty ")}
    assert set(rows) == {"Tx", "Ty"} and rows["Ty"][1] == rows["Tx"][1]  # fine: Ky is Kx, so Ty is Tx
    assert "Tx, Ty: transmissivity K × thickness in m²/day" in printed


def test_a_permeability_map_has_no_transmissivity(run_cli, write_tif, tmp_path):
    out = tmp_path / "out"
    code, printed, _ = run_cli("run", write_tif("k.tif", np.full((8, 8), 40.0), cell_size=CELL),
                               "--thickness", "12", "--block", "4x4", "--method", "arithmetic", "--no-check",
                               "--out", out)  # fmt: skip
    assert code == 0
    assert not (out / "transmissivity.tif").exists()
    assert "transmissivity" not in _cells(out)
    assert "transmissivity_unit" not in json.loads((out / "summary.json").read_text())["geometry"]
    assert "T: transmissivity" not in printed


def _sloping_run(run_cli, write_tif, tmp_path, slope: float) -> tuple[str, dict, str]:
    """A 3-layer model of 1 m thick layers whose top falls `slope` m per m eastward; its report page."""
    v, u = np.mgrid[0:8, 0:8] + 0.5
    thickness = np.ones((3, 8, 8))
    out = tmp_path / f"out-{slope}"
    code, printed, _ = run_cli(
        "run", write_tif("k.tif", uncorrelated_lognormal((3, 8, 8), SEED + 1), cell_size=CELL),
        "--top", write_tif(f"top-{slope}.tif", 100.0 - slope * CELL * u, cell_size=CELL),
        "--thickness", write_tif("th.tif", thickness, cell_size=CELL), "--kv-kh", "0.1",
        "--block", "4x4x1", "--method", "arithmetic", "--report", "--out", out,
    )  # fmt: skip
    assert code == 0
    page = (out / "report.html").read_text()
    return printed, json.loads((out / "summary.json").read_text())["geometry"], page


def test_a_steep_model_prints_and_records_the_dip_caution(run_cli, write_tif, tmp_path):
    printed, record, page = _sloping_run(run_cli, write_tif, tmp_path, 0.2)
    assert record["steepest_dip_deg"] == pytest.approx(math.degrees(math.atan(0.2)), rel=1e-12)
    assert record["caution"].startswith("the layers dip by up to 11.3°")
    excess = 1 / math.cos(math.atan(0.2)) ** 2 - 1  # 4.0 %
    assert f"{excess * 100:.1f} % too large" in record["caution"]
    assert [line for line in printed.splitlines() if line.startswith("caution:")] == [
        f"caution: {record['caution']}"]
    assert record["given"] == "top and thickness" and record["pinched_out_cells"] == 0
    assert record["fine_bulk_volume_m3"] == pytest.approx(192 * CELL**2, rel=1e-15)
    assert record["coarse_bulk_volume_m3"] == pytest.approx(record["fine_bulk_volume_m3"], rel=1e-12)
    # the report page names the geometry and carries the caution among its cautions
    assert "cells 1–1 m thick (0 pinched out), steepest dip 11°" in page
    assert "The layers dip by up to 11.3°" in page


def test_a_gentle_model_has_no_dip_caution(run_cli, write_tif, tmp_path):
    printed, record, page = _sloping_run(run_cli, write_tif, tmp_path, 0.02)
    assert record["steepest_dip_deg"] == pytest.approx(math.degrees(math.atan(0.02)), rel=1e-12)
    assert record["caution"] is None
    assert "caution:" not in printed
    assert "steepest dip 1.1°" in page and "The layers dip" not in page

