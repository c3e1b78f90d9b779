"""``--out-unit``: coarse values, package and tables in another unit of the input's kind (issue 20).

References: 1 D = 9.869233e-13 m² (the darcy's definition, 1 cm³/s of a 1 cP
fluid through 1 cm² under 1 atm/cm; value from memory, as in NIST SP 811's
table of conversion factors); 1 mD = 1e-3 D (SI prefix); 1 day = 86 400 s
exactly (common practice).
"""

from __future__ import annotations

import json
import re

import numpy as np
import pytest
import rasterio

from upscale.errors import InputError
from upscale.units import unit_factor

DARCY_M2 = 9.869233e-13  # from memory (NIST SP 811), rounded to 7 digits


def test_factors_within_a_kind():
    assert unit_factor("mD", "m2") == pytest.approx(1e-3 * DARCY_M2, rel=1e-7)
    assert unit_factor("D", "m2") == pytest.approx(DARCY_M2, rel=1e-7)
    assert unit_factor("mD", "D") == pytest.approx(1e-3, rel=1e-15)
    assert unit_factor("m/s", "m/day") == 86_400.0
    assert unit_factor("m/day", "m/s") * 86_400.0 == pytest.approx(1.0, rel=1e-15)
    assert unit_factor("mD", "mD") == 1.0


@pytest.mark.parametrize(("unit", "to"), [("mD", "m/s"), ("m/day", "D")])
def test_factor_across_kinds_is_refused(unit, to):
    with pytest.raises(InputError, match="density and viscosity"):
        unit_factor(unit, to)


def _field(write_tif, rng):
    """A 32 x 32 lognormal map (geometric mean 100 mD), 10 m cells."""
    return write_tif("k.tif", np.exp(rng.normal(np.log(100.0), 1.0, (32, 32))))


def _run(run_cli, path, out, *extra):
    code, stdout, err = run_cli("run", path, "--block", "4x4", "--method", "flow", *extra, "--out", out)
    assert (code, err) == (0, "")
    return stdout


def test_run_in_m2_is_the_md_run_times_the_factor(run_cli, write_tif, tmp_path):
    path = _field(write_tif, np.random.default_rng(20))
    _run(run_cli, path, tmp_path / "mD")
    stdout = _run(run_cli, path, tmp_path / "m2", "--out-unit", "m2")
    factor = 1e-3 * DARCY_M2
    for name in ("kx", "ky"):
        with (rasterio.open(tmp_path / "mD" / f"{name}.tif") as a,
              rasterio.open(tmp_path / "m2" / f"{name}.tif") as b):
            np.testing.assert_allclose(b.read(), a.read() * factor, rtol=1e-6)
            assert (a.tags()["unit"], b.tags()["unit"]) == ("mD", "m2")
            assert b.units == ("m2",)
    summaries = [json.loads((tmp_path / u / "summary.json").read_text()) for u in ("mD", "m2")]
    assert summaries[1]["unit"] == "m2"
    assert summaries[1]["read"]["unit"] == "mD"  # the input is read as it was given
    for axis in ("x", "y"):  # the check's errors are ratios: unchanged
        before, after = (s["check"][axis]["rel_error"] for s in summaries)
        assert after == pytest.approx(before, rel=1e-6, abs=1e-12)
    manifest = json.loads((tmp_path / "m2" / "manifest.json").read_text())
    assert manifest["units"]["input_unit"] == "m2"
    # the package keeps its own units (--units si: m², m³) whatever --out-unit says
    tables = [np.genfromtxt(tmp_path / u / "cells.csv", delimiter=",", names=True) for u in ("mD", "m2")]
    for name in ("kx", "ky"):
        np.testing.assert_allclose(tables[1][name], tables[0][name], rtol=1e-12)
    assert "(kx, ky in m2)" in stdout


def test_check_again_reads_the_fine_field_in_the_out_unit(run_cli, write_tif, tmp_path):
    path = _field(write_tif, np.random.default_rng(21))
    _run(run_cli, path, tmp_path / "D", "--out-unit", "D")
    before = json.loads((tmp_path / "D" / "summary.json").read_text())["check"]
    code, _, err = run_cli("check", tmp_path / "D")
    assert (code, err) == (0, "")
    after = json.loads((tmp_path / "D" / "summary.json").read_text())["check"]
    for axis in ("x", "y"):
        assert after[axis]["rel_error"] == pytest.approx(before[axis]["rel_error"], rel=1e-6, abs=1e-12)


def test_m_per_day_out_of_m_per_s_input(run_cli, write_tif, tmp_path):
    path = write_tif("K.tif", np.full((8, 8), 1e-5))
    _run(run_cli, path, tmp_path / "out", "--unit", "m/s", "--out-unit", "m/day")
    with rasterio.open(tmp_path / "out" / "kx.tif") as src:
        np.testing.assert_allclose(src.read(), 1e-5 * 86_400.0, rtol=1e-14)


def test_cross_kind_is_refused_in_one_line(run_cli, write_tif, tmp_path):
    path = write_tif("k.tif", np.full((8, 8), 100.0))
    code, stdout, err = run_cli("run", path, "--block", "4x4", "--method", "arithmetic", "--out-unit", "m/s",
                                "--out", tmp_path / "out")  # fmt: skip
    assert code != 0 and stdout == ""
    assert err.count("\n") == 1
    assert err.startswith("upscale: error: --out-unit m/s is a hydraulic conductivity")
    assert "density and viscosity" in err
    assert not (tmp_path / "out").exists()


def _svg_texts(path):
    """The texts of a matplotlib SVG (it writes each text's string in a comment beside its glyphs)."""
    return set(re.findall(r"<!-- (.*?) -->", path.read_text()))


def test_conductivity_labels_in_tables_figures_and_page(run_cli, write_tif, tmp_path):
    """A conductivity is named K / hydraulic conductivity where a permeability is named k / permeability."""
    values = np.exp(np.random.default_rng(22).normal(np.log(1e-5), 1.0, (32, 32)))
    path = write_tif("K.tif", values)
    out = tmp_path / "out"
    stdout = _run(run_cli, path, out, "--unit", "m/s", "--out-unit", "m/day", "--plot", "--report")
    assert "(Kx, Ky in m/day)" in stdout
    lines = stdout.splitlines()
    assert {"Kx", "Ky"} <= {line.split()[0] for line in lines if line.strip()}
    assert any(line.split()[:3] == ["flow", "K", "fine"] for line in lines)
    page = (out / "report.html").read_text()
    assert "Hydraulic conductivity unit: m/day" in page and "Kx mean (m/day)" in page
    figures = out / "figures"
    assert "Kx (m/day, log scale)" in _svg_texts(figures / "maps.svg")
    assert {"effective K along x (m/day)",
            "Coarse effective hydraulic conductivity against the fine one and the bounds"} <= _svg_texts(
        figures / "bounds.svg")  # fmt: skip
    assert "Kx (m/day)" in _svg_texts(figures / "histograms.svg")


def test_permeability_labels_unchanged(run_cli, write_tif, tmp_path):
    path = write_tif("k.tif", np.full((8, 8), 100.0))
    stdout = _run(run_cli, path, tmp_path / "out", "--out-unit", "D")
    assert "(kx, ky in D)" in stdout
    assert any(line.split()[:3] == ["flow", "k", "fine"] for line in stdout.splitlines())


def test_ensemble_in_darcy_is_the_md_ensemble_over_1000(run_cli, write_tif, tmp_path):
    rng = np.random.default_rng(23)
    paths = [write_tif(f"r{i}.tif", np.exp(rng.normal(np.log(100.0), 1.0, (16, 16)))) for i in (1, 2)]
    code, _, err = run_cli("run", *paths, "--block", "4x4", "--method", "flow", "--out", tmp_path / "mD")
    assert (code, err) == (0, "")
    code, stdout, err = run_cli("run", *paths, "--block", "4x4", "--method", "flow", "--out-unit", "D",
                                "--out", tmp_path / "D")  # fmt: skip
    assert (code, err) == (0, "")
    assert "(k in D, errors in %)" in stdout
    records = [json.loads((tmp_path / u / "ensemble.json").read_text())["realizations"] for u in ("mD", "D")]
    for md, darcy in zip(*records):
        for axis in ("x", "y"):
            assert darcy["k_coarse"][axis] == pytest.approx(md["k_coarse"][axis] * 1e-3, rel=1e-9)


def test_compare_in_m_per_day_of_a_m_per_s_input(run_cli, write_tif, tmp_path):
    values = np.exp(np.random.default_rng(24).normal(np.log(1e-5), 1.0, (16, 16)))
    path = write_tif("K.tif", values)
    common = ("compare", path, "--block", "4x4", "--methods", "arithmetic,geometric", "--unit", "m/s")
    code, _, err = run_cli(*common, "--out", tmp_path / "s")
    assert (code, err) == (0, "")
    code, stdout, err = run_cli(*common, "--out-unit", "m/day", "--out", tmp_path / "day")
    assert (code, err) == (0, "")
    assert "Kx mean" in stdout and "(K in m/day;" in stdout
    records = [json.loads((tmp_path / u / "compare.json").read_text()) for u in ("s", "day")]
    assert (records[0]["unit"], records[1]["unit"]) == ("m/s", "m/day")
    assert records[1]["ranking"] == records[0]["ranking"]
    for per_s, per_day in zip(records[0]["methods"], records[1]["methods"]):
        assert per_day["coarse_mean"]["kx"] == pytest.approx(per_s["coarse_mean"]["kx"] * 86_400.0, rel=1e-12)


def test_compare_refuses_another_kind(run_cli, write_tif, tmp_path):
    path = write_tif("k.tif", np.full((8, 8), 100.0))
    code, stdout, err = run_cli("compare", path, "--block", "4x4", "--out-unit", "m/day",
                                "--out", tmp_path / "c")  # fmt: skip
    assert code != 0 and stdout == "" and err.count("\n") == 1
    assert err.startswith("upscale: error: --out-unit m/day is a hydraulic conductivity")


def test_compare_ensemble_records_the_out_unit(run_cli, write_tif, tmp_path):
    rng = np.random.default_rng(25)
    paths = [write_tif(f"r{i}.tif", np.exp(rng.normal(np.log(100.0), 1.0, (16, 16)))) for i in (1, 2)]
    code, _, err = run_cli("compare", *paths, "--block", "4x4", "--methods", "arithmetic,geometric",
                           "--out-unit", "D", "--out", tmp_path / "c")  # fmt: skip
    assert (code, err) == (0, "")
    for name, path in zip(("r1", "r2"), paths):
        record = json.loads((tmp_path / "c" / name / "compare.json").read_text())
        with rasterio.open(path) as src:
            mean = np.mean(src.read(1).astype(float)) * 1e-3  # the arithmetic mean of 4x4 blocks, in D
        arithmetic = next(m for m in record["methods"] if m["name"] == "arithmetic")
        assert record["unit"] == "D"
        assert arithmetic["coarse_mean"]["kx"] == pytest.approx(mean, rel=1e-9)
