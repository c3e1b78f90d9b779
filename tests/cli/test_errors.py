"""Bad-input battery of the command line: one clear line, exit status 2, nothing written.

Each case runs `upscale.cli.main.main` on a real bad input (a raster written
with rasterio, a broken file, a bad option) and checks that the command
exits with status 2, prints exactly one line on stderr that starts with
``upscale: error:`` and names the problem, prints no traceback, and leaves
the output location as it was (not created, or unchanged). One case is also
run through the installed console script in a subprocess.
"""

from __future__ import annotations

import re
import subprocess
from dataclasses import dataclass, field
from pathlib import Path
from types import SimpleNamespace

import numpy as np
import pytest
import rasterio
from affine import Affine
from conftest import ORIGIN, UPSCALE_EXE, lognormal, partial_leftovers, snapshot, write_raster

import upscale

SEED = 8_830_194_657
SHAPE = (32, 48)


@pytest.fixture(scope="module")
def inputs(tmp_path_factory) -> SimpleNamespace:
    """Every input of the battery, written once for the module."""
    folder = tmp_path_factory.mktemp("bad-inputs")
    k = lognormal(SHAPE, SEED)

    def tif(name, values, **kwargs):
        return write_raster(folder / name, values, **kwargs)

    negative = k.copy()
    for row, col in ((3, 5), (10, 7), (20, 40), (25, 1)):
        negative[row, col] = -abs(negative[row, col])
    zero = k.copy()
    zero[4, 9] = zero[30, 2] = 0.0
    porosity_big = np.full(SHAPE, 0.2)
    porosity_big[2, 3] = 1.5
    good = tif("good.tif", k)
    full = tif("model_full.tif", lognormal((3, *SHAPE), SEED + 1))
    garbage = folder / "garbage.tif"
    garbage.write_bytes(np.random.default_rng(SEED + 2).bytes(4096))
    truncated = folder / "truncated.tif"
    truncated.write_bytes(full.read_bytes()[: full.stat().st_size // 2])
    rotated = Affine.translation(*ORIGIN) @ Affine.rotation(5.0) @ Affine.scale(10.0, -10.0)
    return SimpleNamespace(
        folder=folder,
        good=good,
        missing=folder / "nothing.tif",
        garbage=garbage,
        truncated=truncated,
        negative=tif("negative.tif", negative),
        zero=tif("zero.tif", zero),
        empty=tif("empty.tif", np.full(SHAPE, -9999.0), nodata=-9999.0),
        porosity_other=tif("porosity_other.tif", np.full((32, 40), 0.2)),
        porosity_big=tif("porosity_big.tif", porosity_big),
        lonlat=tif("lonlat.tif", k, crs="EPSG:4326", cell_size=0.0001),
        model=full,
        rotated=tif("rotated.tif", k, transform=rotated),
    )


@dataclass(frozen=True)
class Case:
    """One bad command: its arguments, what the error line must say, the output set-up."""

    args: tuple  # items are strings, or attribute names of `inputs` prefixed with '@'
    says: tuple  # regular expressions the error line must match
    out: str = "absent"  # 'absent', 'file' (a file is in the way) or 'results' (earlier run)
    marks: tuple = field(default=())


RUN = ("run", "@good", "--block", "8x8", "--method", "geometric")

CASES = {
    "missing file": Case(
        ("run", "@missing", "--block", "8x8", "--method", "geometric"),
        (r"nothing\.tif: no such file",),
    ),
    "corrupt file": Case(
        ("run", "@garbage", "--block", "8x8", "--method", "geometric"),
        (r"garbage\.tif: cannot be read as a raster",),
    ),
    "truncated GeoTIFF": Case(
        ("run", "@truncated", "--dz", "1", "--block", "8x8", "--method", "geometric"),
        (r"truncated\.tif",),
    ),  # fmt: skip
    "folder as FIELD": Case(
        ("run", "@folder", "--block", "8x8", "--method", "geometric"),
        (r"'FIELD(\.\.\.)?'", r"is a directory"),
    ),
    "negative permeability": Case(
        ("run", "@negative", "--block", "8x8", "--method", "arithmetic"),
        (r"negative\.tif", r"4 negative value\(s\)",
         r"first at \(layer 0, row 3, column 5\), \(layer 0, row 10, column 7\)"),
    ),  # fmt: skip
    "zero permeability, harmonic": Case(
        ("run", "@zero", "--block", "8x8", "--method", "harmonic"),
        (r"zero\.tif", r"2 zero permeability value\(s\)",
         r"\(layer 0, row 4, column 9\), \(layer 0, row 30, column 2\)", r"harmonic average"),
    ),  # fmt: skip
    "zero permeability, geometric": Case(
        ("run", "@zero", "--block", "8x8", "--method", "geometric"),
        (r"2 zero permeability value\(s\)", r"\(layer 0, row 4, column 9\)", r"geometric average"),
    ),
    "all cells inactive": Case(
        ("run", "@empty", "--block", "8x8", "--method", "arithmetic"),
        (r"empty\.tif", r"no active cell"),
    ),
    "block larger than the grid": Case(
        ("run", "@good", "--block", "64x8", "--method", "geometric"),
        (r"block 64x8 is larger than the grid along x \(columns\): 64 > 48",),
    ),
    "bad block syntax": Case(
        ("run", "@good", "--block", "8by8", "--method", "geometric"),
        (r"block '8by8' is not of the form NXxNY or NXxNYxNZ",),
    ),
    "grid not divisible, default remainder": Case(
        ("run", "@good", "--block", "5x5", "--method", "geometric"),
        (r"does not divide into whole 5x5 blocks", r"48 cells = 9 blocks \+ 3", r"crop or keep"),
    ),
    "porosity on another grid": Case(
        (*RUN, "--porosity", "@porosity_other"),
        (r"--porosity .*porosity_other\.tif: not on the grid of .*good\.tif",
         r"shape \(1, 32, 40\) differs"),
    ),  # fmt: skip
    "porosity above 1": Case(
        (*RUN, "--porosity", "@porosity_big"),
        (r"porosity_big\.tif", r"porosity up to 1\.5", r"fraction in \[0, 1\]"),
    ),
    "geographic CRS without --cell-size": Case(
        ("run", "@lonlat", "--block", "8x8", "--method", "geometric"),
        (r"lonlat\.tif", r"geographic CRS \(EPSG:4326\)", r"--cell-size"),
    ),
    "several bands without --dz": Case(
        ("run", "@model", "--block", "8x8", "--method", "geometric"),
        (r"model_full\.tif: 3 bands make a 3D model", r"--dz"),
    ),
    "wrong number of --dz values": Case(
        ("run", "@model", "--dz", "1,2", "--block", "8x8", "--method", "geometric"),
        (r"--dz has 2 values but .*model_full\.tif has 3 layers",),
    ),
    "--kv-kh on a 2D map": Case(
        (*RUN, "--kv-kh", "0.1"),
        (r"--kv-kh was given but .*good\.tif is a one-band 2D map",),
    ),
    "unknown method": Case(
        ("run", "@good", "--block", "8x8", "--method", "bogus"),
        (r"'--method'", r"'bogus' is not one of", *(f"'{m}'" for m in upscale.METHODS)),
    ),
    "power without --exponent": Case(
        ("run", "@good", "--block", "8x8", "--method", "power"),
        (r"method 'power' needs --exponent",),
    ),
    "bad --chunk": Case((*RUN, "--chunk", "12qb"), (r"--chunk", r"'12qb' is not a size")),
    "bad --cell-size": Case(
        (*RUN, "--cell-size", "ten"), (r"--cell-size", r"'ten' is not DX or DXxDY in metres")
    ),
    "negative --cell-size": Case((*RUN, "--cell-size", "-5"), (r"--cell-size", r"'-5'")),
    "--min-active above 1": Case((*RUN, "--min-active", "1.5"), (r"--min-active", r"1\.5")),
    "rotated raster": Case(
        ("run", "@rotated", "--block", "8x8", "--method", "geometric"),
        (r"rotated\.tif: the raster is rotated or sheared",),
    ),
    "output path is a file": Case(RUN, (r"'--out'", r"is a file"), out="file"),
    "output folder holds results": Case(
        RUN, (r"already holds files \(kx\.tif, summary\.json\)", r"--overwrite"), out="results"
    ),
    "info on a missing file": Case(("info", "@missing"), (r"nothing\.tif: no such file",)),
    "info on several bands without --dz": Case(
        ("info", "@model"), (r"3 bands make a 3D model", r"--dz")
    ),
}


def _argv(case: Case, inputs: SimpleNamespace, out: Path) -> list[str]:
    argv = [str(getattr(inputs, a[1:])) if a.startswith("@") else a for a in case.args]
    if argv[0] == "run":
        argv += ["--out", str(out)]
    return argv


def _prepare(case: Case, out: Path) -> None:
    if case.out == "file":
        out.write_text("a file where the output folder should go")
    elif case.out == "results":
        out.mkdir()
        (out / "kx.tif").write_bytes(b"an earlier result")
        (out / "summary.json").write_text('{"files": ["kx.tif"]}\n')


@pytest.mark.parametrize(
    "name", [pytest.param(name, id=name, marks=case.marks) for name, case in CASES.items()]
)
def test_bad_input_gives_one_error_line_and_writes_nothing(run_cli, inputs, tmp_path, name):
    case = CASES[name]
    out = tmp_path / "out"
    _prepare(case, out)
    before = snapshot(tmp_path)
    argv = _argv(case, inputs, out)
    code, stdout, err = run_cli(*argv)
    assert "Traceback" not in stdout + err
    lines = err.splitlines()
    assert len(lines) == 1, err
    line = lines[0]
    assert line.startswith("upscale: error: "), line
    for pattern in case.says:
        assert re.search(pattern, line), f"{pattern!r} not in {line!r}"
    assert code == 2
    assert snapshot(tmp_path) == before  # no output folder, no change to an earlier one
    assert partial_leftovers(tmp_path) == []


def test_zero_permeability_is_accepted_by_the_arithmetic_mean(run_cli, inputs, tmp_path):
    out = tmp_path / "out"
    code, _, err = run_cli(
        "run", inputs.zero, "--block", "8x8", "--method", "arithmetic", "--out", out
    )
    assert (code, err) == (0, "")
    with rasterio.open(inputs.zero) as src:
        fine = src.read(1)
    with rasterio.open(out / "kx.tif") as dst:
        coarse = dst.read(1)
    # block (0, 1) holds the zero at row 4, column 9; equal cell volumes (common practice)
    assert fine[4, 9] == 0.0
    assert coarse[0, 1] == pytest.approx(fine[0:8, 8:16].mean(), rel=1e-12)
    assert np.isfinite(coarse).all()


def test_console_script_reports_a_bad_input_without_traceback(inputs, tmp_path):
    out = tmp_path / "out"
    done = subprocess.run(
        [str(UPSCALE_EXE), "run", str(inputs.negative), "--block", "8x8", "--method", "harmonic",
         "--out", str(out)],
        capture_output=True, text=True, timeout=120, cwd=tmp_path,
    )  # fmt: skip
    assert done.returncode == 2
    assert done.stdout == ""
    assert "Traceback" not in done.stderr
    lines = done.stderr.splitlines()
    assert len(lines) == 1 and lines[0].startswith("upscale: error: kx (")
    assert "4 negative value(s), first at (layer 0, row 3, column 5)" in lines[0]
    assert not out.exists()


def test_debug_shows_the_error_itself(run_cli, inputs, tmp_path):
    with pytest.raises(upscale.InputError, match="no such file"):
        run_cli("--debug", "run", inputs.missing, "--block", "8x8", "--method", "geometric",
                "--out", tmp_path / "out")  # fmt: skip
