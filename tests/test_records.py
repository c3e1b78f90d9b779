"""The result model: typed records whose JSON form is the files the tool writes.

What is tested
--------------
* ``summary.json`` of real runs — a flow-based method with porosity (tensor,
  transmissibility rule, pore volume), a check past the limit done on
  windows, no check — read with `RunSummary.from_dict` gives a record whose
  ``to_dict()`` dumps to the file's bytes, and ``from_dict(to_dict())`` is
  the record again; `write_result` returns that record.
* ``compare.json`` of a real comparison (with a method that cannot run on
  the field) the same way with `ComparisonRecord`; the record built in
  memory from the comparison is the one the file holds.
* ``ensemble.json`` of an ensemble run (`EnsembleSummary`) and of an
  ensemble comparison (`EnsembleRanking`) the same way; the ranking computed
  again from the realizations' ``compare.json`` files read back is the one
  written.
* The terminal report reads the record, not a dict: a statistic changed in
  the record is what `print_result` prints.
"""

from __future__ import annotations

import dataclasses
import json
from pathlib import Path

import numpy as np
import pytest
from conftest import write_raster

import upscale
from upscale.analysis.compare import candidates
from upscale.analysis.comparison_record import ComparisonRecord, comparison_record
from upscale.analysis.ensemble import EnsembleRanking, EnsembleSummary, method_spread
from upscale.analysis.summary import FlowCheck, RunSummary
from upscale.cli.report import print_result
from upscale.gallery.problems import uncorrelated_lognormal
from upscale.grid import BlockSpec
from upscale.jobs.compare import compare_file, run_command

SEED = 804_113


def _dumped(record: RunSummary | ComparisonRecord | EnsembleSummary | EnsembleRanking) -> str:
    """The record as the tool writes it."""
    return json.dumps(record.to_dict(), indent=2, allow_nan=False) + "\n"


@pytest.fixture(scope="module")
def fields(tmp_path_factory) -> dict[str, Path]:
    folder = tmp_path_factory.mktemp("records")
    k = uncorrelated_lognormal((16, 24), SEED)
    porosity = np.random.default_rng(SEED + 1).uniform(0.05, 0.3, size=(16, 24))
    (folder / "ensemble").mkdir()
    for r in range(3):
        write_raster(folder / "ensemble" / f"r{r}.tif", uncorrelated_lognormal((16, 24), SEED + 10 + r))
    return {"k": write_raster(folder / "k.tif", k), "porosity": write_raster(folder / "por.tif", porosity),
            "ensemble": folder / "ensemble"}


def _round_trip(out: Path) -> RunSummary:
    text = (out / "summary.json").read_text()
    record = RunSummary.from_dict(json.loads(text))
    assert _dumped(record) == text
    assert RunSummary.from_dict(record.to_dict()) == record
    return record


def test_a_flow_based_run_with_porosity_round_trips(fields, tmp_path, run_cli):
    out = tmp_path / "flow"
    code, _, _ = run_cli("-q", "run", fields["k"], "--porosity", fields["porosity"], "--block", "4x4",
                         "--method", "flow", "--bc", "linear", "--out", out)  # fmt: skip
    assert code == 0
    record = _round_trip(out)
    assert record.tensor is not None and record.tensor.blocks == 6 * 4
    assert record.transmissibility is not None and record.active.coarse_pore_volume_m3 > 0
    assert set(record.check.axes) == {"x", "y", "corner"} and record.check.skipped is None
    assert record.statistics.fine["kx"].active == 16 * 24


def test_a_check_on_windows_and_no_check_round_trip(fields, tmp_path, run_cli):
    windows, none = tmp_path / "windows", tmp_path / "none"
    assert run_cli("-q", "run", fields["k"], "--block", "4x4", "--method", "geometric",
                   "--check-limit", 100, "--out", windows)[0] == 0  # fmt: skip
    assert run_cli("-q", "run", fields["k"], "--block", "4x4", "--method", "geometric", "--no-check",
                   "--out", none)[0] == 0  # fmt: skip
    check = _round_trip(windows).check
    assert check.skipped and check.windows and set(check.spread) == {"x", "y", "corner"} and not check.axes
    assert _round_trip(none).check is None


def test_write_result_returns_the_record_it_writes(fields, tmp_path):
    result = upscale.coarsen(upscale.read_field(fields["k"], porosity=fields["porosity"]), "8x8", "harmonic")
    returned = upscale.write_result(result, tmp_path / "out", timings={"upscale_s": 0.5})
    assert isinstance(returned, RunSummary)
    assert _round_trip(tmp_path / "out") == returned


def test_a_comparison_round_trips_and_is_the_record_built_in_memory(fields, tmp_path):
    out = tmp_path / "cmp"
    # renormalization needs blocks of a power of two: it cannot run on 3x3 blocks and is kept with its reason
    chosen = candidates(["geometric", "harmonic", "renormalization"])
    command = ["upscale", "compare", str(fields["k"])]
    compared, _ = compare_file(str(fields["k"]), BlockSpec.parse("3x4"), chosen, out, read={},
                               command=command)  # fmt: skip
    text = (out / "compare.json").read_text()
    record = ComparisonRecord.from_dict(json.loads(text))
    assert _dumped(record) == text
    assert ComparisonRecord.from_dict(record.to_dict()) == record
    built = comparison_record(compared, command=command,
                              per_axis_command=run_command(command, compared.per_axis.candidate, out))
    assert dataclasses.replace(built, files=record.files) == record
    failed = record.method("renormalization")
    assert failed.error and failed.rank is None and failed.check is None
    assert failed.largest_error("xy") is None
    assert record.method("harmonic").bound == "lower" and record.method("geometric").bound is None


def test_the_terminal_report_reads_the_record(fields, tmp_path, capsys):
    result = upscale.coarsen(upscale.read_field(fields["k"]), "8x8", "geometric")
    summary = upscale.write_result(result, tmp_path / "out")
    capsys.readouterr()
    marked = dataclasses.replace(summary.statistics.coarse["kx"], mean=1234.5)
    statistics = dataclasses.replace(summary.statistics, coarse={**summary.statistics.coarse, "kx": marked})
    check = FlowCheck({})  # a check with no axis prints its header and no row
    print_result(result, dataclasses.replace(summary, statistics=statistics, check=check), str(tmp_path))
    printed = capsys.readouterr().out
    assert "1234" in printed.split("kx", 1)[1].splitlines()[0]
    assert "flow check: the same pressure drop" in printed


def _read(path: Path, kind: type) -> tuple[str, object]:
    text = path.read_text()
    record = kind.from_dict(json.loads(text))
    assert _dumped(record) == text
    assert kind.from_dict(record.to_dict()) == record
    return text, record


def test_an_ensemble_run_round_trips(fields, tmp_path, run_cli):
    out = tmp_path / "ens"
    assert run_cli("-q", "run", fields["ensemble"] / "r*.tif", "--block", "4x4", "--method", "arithmetic",
                   "--out", out)[0] == 0  # fmt: skip
    _, record = _read(out / "ensemble.json", EnsembleSummary)
    assert [r.name for r in record.realizations] == ["r0", "r1", "r2"]
    assert record.axes == "xy" and record.statistics["rel_error"]["x"].count == 3
    assert record.method.name == "arithmetic"


def test_an_ensemble_comparison_round_trips_and_ranks_again_from_its_files(fields, tmp_path, run_cli):
    out = tmp_path / "cmp"
    assert run_cli("-q", "compare", fields["ensemble"] / "r*.tif", "--block", "4x4", "--methods",
                   "geometric,harmonic,arithmetic", "--out", out)[0] == 0  # fmt: skip
    _, ranking = _read(out / "ensemble.json", EnsembleRanking)
    names = [r.name for r in ranking.realizations]
    comparisons = [_read(out / name / "compare.json", ComparisonRecord)[1] for name in names]
    assert tuple(method_spread(names, comparisons)) == ranking.methods
    assert ranking.best == ranking.methods[0].name and ranking.methods[0].rank == 1
