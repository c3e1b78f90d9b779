"""Bad-input battery of the command line: one clear line, exit status 2, nothing written.

Each case runs `upscale.cli.main.main` on a real bad input (a raster written
with rasterio, a broken file, a bad option) and checks that the command
exits with status 2, prints exactly one line on stderr that starts with
``upscale: error:`` and names the problem, prints no traceback, and leaves
the output location as it was (not created, or unchanged). One case is also
run through the installed console script in a subprocess.

The same battery runs ``compare``, ``info`` and ``check DIR`` on the shared
validation. Behaviours that are not errors (integer
rasters, ``--exponent 0``, NaN cells, ``--debug``, a geographic raster with
``--cell-size``) are documented by the tests after the battery.
"""

from __future__ import annotations

import json
import os
import re
import shutil
import struct
import subprocess
from dataclasses import dataclass, field
from pathlib import Path
from types import SimpleNamespace

import numpy as np
import pytest
import rasterio
from affine import Affine
from conftest import ORIGIN, UPSCALE_EXE, north_up, partial_leftovers, snapshot, write_raster

import upscale
from upscale.gallery.problems import uncorrelated_lognormal

SEED = 8_830_194_657
SHAPE = (32, 48)


@pytest.fixture(scope="module")
def inputs(tmp_path_factory) -> SimpleNamespace:
    """Every input of the battery, written once for the module."""
    folder = tmp_path_factory.mktemp("bad-inputs")
    k = uncorrelated_lognormal(SHAPE, SEED)

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
    full = tif("model_full.tif", uncorrelated_lognormal((3, *SHAPE), SEED + 1))
    garbage = folder / "garbage.tif"
    garbage.write_bytes(np.random.default_rng(SEED + 2).bytes(4096))
    truncated = folder / "truncated.tif"
    truncated.write_bytes(full.read_bytes()[: full.stat().st_size // 2])
    rotated = Affine.translation(*ORIGIN) @ Affine.rotation(5.0) @ Affine.scale(10.0, -10.0)
    shifted = north_up(10.0, (ORIGIN[0] + 100.0, ORIGIN[1]))
    porosity = np.full(SHAPE, 0.2)
    porosity_negative = porosity.copy()
    porosity_negative[2, 3] = -0.1
    porosity_infinite = porosity.copy()
    porosity_infinite[5, 6] = np.inf
    plus_inf = k.copy()
    plus_inf[6, 11] = np.inf
    minus_inf = k.copy()
    minus_inf[7, 12] = -np.inf
    kz = uncorrelated_lognormal((3, *SHAPE), SEED + 3)
    notes = folder / "notes.txt"
    notes.write_text("kx in mD, see the report\n")
    empty_file = folder / "empty_file.tif"
    empty_file.write_bytes(b"")
    header_cut = folder / "header_cut.tif"
    header_cut.write_bytes(_first_ifd_only(good.read_bytes()))
    unreadable = folder / "unreadable.tif"
    shutil.copy(good, unreadable)
    unreadable.chmod(0)
    np.save(folder / "line.npy", k.ravel())
    np.save(folder / "flags.npy", k > 10.0)
    np.save(folder / "field.npy", k)
    negative_values = tif("negative_values.tif", negative)

    def library_run(name: str, checksum: bool, then: Path | None) -> Path:
        """A finished run of a copy of good.tif (by the library); then that copy is replaced or removed."""
        place = folder / name
        place.mkdir()
        source = place / "field.tif"
        shutil.copy(good, source)
        fine = upscale.read_field(source, checksum=checksum)  # checksum=False records sha256 ""
        upscale.write_result(upscale.coarsen(fine, "8x8", "geometric"), place / "run")
        if then is None:
            source.unlink()
        else:
            shutil.copy(then, source)
        return place / "run"

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
        sheared=tif("sheared.tif", k, transform=Affine(10.0, 2.0, ORIGIN[0], 0.0, -10.0, ORIGIN[1])),
        shifted=tif("shifted.tif", k, transform=shifted),
        plain=tif("plain.tif", k, georeferenced=False),
        complex=tif("complex.tif", k.astype(np.complex64)),
        plus_inf=tif("plus_inf.tif", plus_inf),
        minus_inf=tif("minus_inf.tif", minus_inf),
        porosity_shifted=tif("porosity_shifted.tif", porosity, transform=shifted),
        porosity_crs=tif("porosity_crs.tif", porosity, crs="EPSG:32634"),
        porosity_plain=tif("porosity_plain.tif", porosity, georeferenced=False),
        porosity_negative=tif("porosity_negative.tif", porosity_negative),
        porosity_infinite=tif("porosity_infinite.tif", porosity_infinite),
        kz_layers=tif("kz_layers.tif", kz[:2]),
        kz_shifted=tif("kz_shifted.tif", kz, transform=shifted),
        kz_crs=tif("kz_crs.tif", kz, crs="EPSG:32634"),
        ky_crs=tif("ky_crs.tif", k, crs="EPSG:32634"),
        notes=notes,
        empty_file=empty_file,
        header_cut=header_cut,
        unreadable=unreadable,
        line=folder / "line.npy",
        flags=folder / "flags.npy",
        array=folder / "field.npy",
        no_run=_made(folder / "no_run"),
        check_changed=library_run("changed", True, then=negative_values),
        check_gone=library_run("gone", True, then=None),
        check_rotated=library_run("rotated", False, then=folder / "rotated.tif"),
        check_garbage=library_run("garbage", False, then=garbage),
        check_negative=library_run("negative", False, then=negative_values),
    )


def _made(folder: Path) -> Path:
    folder.mkdir()
    return folder


def _first_ifd_only(tiff: bytes) -> bytes:
    """A little-endian TIFF cut right after its first directory: the tags' values and the data are gone."""
    assert tiff[:4] == b"II*\x00"
    (start,) = struct.unpack("<I", tiff[4:8])
    (entries,) = struct.unpack("<H", tiff[start : start + 2])
    return tiff[: start + 2 + 12 * entries + 4]


@dataclass(frozen=True)
class Case:
    """One bad command: its arguments, what the error line must say, the output set-up."""

    args: tuple  # items are strings, or attribute names of `inputs` prefixed with '@'
    says: tuple  # regular expressions the error line must match
    out: str = "absent"  # 'absent', 'file' (a file is in the way) or 'results' (earlier run)
    marks: tuple = field(default=())
    watch: str = ""  # attribute of `inputs` (a run folder) whose files must stay as they were


#: The case needs a file that cannot be read, and root reads every file.
NEEDS_NON_ROOT = (
    pytest.mark.skipif(hasattr(os, "geteuid") and os.geteuid() == 0, reason="root can read any file"),
)


RUN = ("run", "@good", "--block", "8x8", "--method", "geometric")
MODEL = ("run", "@model", "--dz", "1", "--block", "8x8", "--method", "geometric")
COMPARE = ("compare", "@good", "--block", "8x8", "--methods", "geometric,arithmetic")


def run_on(name: str, *options: str, method: str = "geometric") -> tuple:
    """``upscale run @name --block 8x8 --method METHOD OPTIONS...``."""
    return ("run", f"@{name}", "--block", "8x8", "--method", method, *options)

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
         r"first at \(band 1, row 3, column 5\), \(band 1, row 10, column 7\)"),
    ),  # fmt: skip
    "zero permeability, harmonic": Case(
        ("run", "@zero", "--block", "8x8", "--method", "harmonic"),
        (r"zero\.tif", r"2 zero permeability value\(s\)",
         r"\(band 1, row 4, column 9\), \(band 1, row 30, column 2\)", r"harmonic average"),
    ),  # fmt: skip
    "zero permeability, geometric": Case(
        ("run", "@zero", "--block", "8x8", "--method", "geometric"),
        (r"2 zero permeability value\(s\)", r"\(band 1, row 4, column 9\)", r"geometric average"),
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
    # --- values and data types
    "complex raster": Case(run_on("complex"), (r"complex\.tif: complex values cannot be permeabilities",)),
    "+inf permeability": Case(
        run_on("plus_inf"),
        (r"kx \(.*plus_inf\.tif\): 1 infinite value\(s\)", r"first at \(band 1, row 6, column 11\)",
         r"mark them as nodata"),
    ),  # fmt: skip
    "-inf permeability": Case(
        run_on("minus_inf"),
        (r"minus_inf\.tif\): 1 infinite value\(s\)", r"first at \(band 1, row 7, column 12\)"),
    ),
    "negative permeability, earlier results kept with --overwrite": Case(
        (*run_on("negative", method="arithmetic"), "--overwrite"),
        (r"negative\.tif", r"4 negative value\(s\)"),
        out="results",
    ),
    "zero permeability, power --exponent 0": Case(
        run_on("zero", "--exponent", "0", method="power"),
        (r"2 zero permeability value\(s\)", r"the power average", r"exponent > 0"),
    ),
    "zero permeability, power --exponent -0.5": Case(
        run_on("zero", "--exponent", "-0.5", method="power"),
        (r"zero\.tif\): 2 zero permeability value\(s\)", r"\(band 1, row 4, column 9\)"),
    ),
    ".npy of one dimension": Case(
        run_on("line", "--cell-size", "10"),
        (r"line\.npy: expected a 2D or 3D numeric array, got 1D float64",),
    ),
    ".npy of booleans": Case(
        run_on("flags", "--cell-size", "10"), (r"flags\.npy: expected a 2D or 3D numeric array, got 2D bool",)
    ),
    # --- geometry and georeference
    "sheared raster": Case(
        run_on("sheared"),
        (r"sheared\.tif: the raster is rotated or sheared \(geotransform \(10\.0, 2\.0,",
         r"resample it onto a north-up grid"),
    ),  # fmt: skip
    "raster without georeference": Case(
        run_on("plain"), (r"plain\.tif: no georeference, so the cell size is unknown", r"--cell-size DX")
    ),
    ".npy without --cell-size": Case(run_on("array"), (r"field\.npy: no georeference", r"--cell-size")),
    "--cell-size disagreeing with the raster": Case(
        run_on("good", "--cell-size", "20"),
        (r"good\.tif: the raster's own cell size is 10 x 10 m", r"given \(20 x 20\) disagrees",
         r"leave it out"),
    ),  # fmt: skip
    # --- secondary rasters: shape, transform and CRS must match
    "porosity on a shifted grid": Case(
        (*RUN, "--porosity", "@porosity_shifted"),
        (r"--porosity .*porosity_shifted\.tif: not on the grid of .*good\.tif: its geotransform differs",),
    ),
    "porosity in another CRS": Case(
        (*RUN, "--porosity", "@porosity_crs"),
        (r"--porosity .*porosity_crs\.tif: not on the grid of .*good\.tif",
         r"its CRS \(EPSG:32634\) differs from EPSG:32633"),
    ),  # fmt: skip
    "porosity without georeference": Case(
        (*RUN, "--porosity", "@porosity_plain"),
        (r"--porosity .*porosity_plain\.tif: not on the grid of .*good\.tif: its geotransform differs",),
    ),
    "kz with another number of layers": Case(
        (*MODEL, "--kz", "@kz_layers"),
        (r"--kz .*kz_layers\.tif: not on the grid of .*model_full\.tif",
         r"shape \(2, 32, 48\) differs from \(3, 32, 48\) \(bands, rows, columns\)"),
    ),  # fmt: skip
    "kz on a shifted grid": Case(
        (*MODEL, "--kz", "@kz_shifted"),
        (r"--kz .*kz_shifted\.tif: not on the grid of .*model_full\.tif: its geotransform differs",),
    ),
    "kz in another CRS": Case(
        (*MODEL, "--kz", "@kz_crs"),
        (r"--kz .*kz_crs\.tif: not on the grid of", r"its CRS \(EPSG:32634\) differs from EPSG:32633"),
    ),
    "ky in another CRS": Case(
        (*RUN, "--ky", "@ky_crs"), (r"--ky .*ky_crs\.tif: not on the grid of .*good\.tif", r"CRS")
    ),
    "ky not a raster": Case((*RUN, "--ky", "@notes"), (r"notes\.txt: cannot be read as a raster",)),
    "missing porosity file": Case((*RUN, "--porosity", "@missing"), (r"nothing\.tif: no such file",)),
    "missing kz file": Case((*MODEL, "--kz", "@missing"), (r"nothing\.tif: no such file",)),
    "--kz on a 2D map": Case(
        (*RUN, "--kz", "@good"), (r"--kz was given but .*good\.tif is a one-band 2D map",)
    ),
    "negative porosity": Case(
        (*RUN, "--porosity", "@porosity_negative"),
        (r"porosity \(.*porosity_negative\.tif\): 1 negative value\(s\)",
         r"first at \(band 1, row 2, column 3\)", r"cannot be negative"),
    ),  # fmt: skip
    "infinite porosity": Case(
        (*RUN, "--porosity", "@porosity_infinite"),
        (r"porosity \(.*porosity_infinite\.tif\): 1 infinite value\(s\)",
         r"first at \(band 1, row 5, column 6\)"),
    ),  # fmt: skip
    # --- files that are not rasters, or cannot be read
    "text file as FIELD": Case(
        run_on("notes"), (r"notes\.txt: cannot be read as a raster", r"not recognized")
    ),
    "empty file as FIELD": Case(run_on("empty_file"), (r"empty_file\.tif: cannot be read as a raster",)),
    "GeoTIFF cut after its first directory": Case(
        run_on("header_cut"),
        (r"header_cut\.tif: cannot be read as a raster",),
    ),  # fmt: skip
    "truncated GeoTIFF says why": Case(
        ("run", "@truncated", "--dz", "1", "--block", "8x8", "--method", "geometric"),
        (r"truncated\.tif: cannot be read as a raster \(", r"^(?!.*previous exception)"),
    ),  # fmt: skip
    "unreadable file": Case(
        run_on("unreadable"), (r"unreadable\.tif: cannot be read as a raster",), marks=NEEDS_NON_ROOT
    ),
    # --- option values
    "--block 0x8": Case(run_on("good", "--block", "0x8"), (r"block: nx must be a whole number >= 1, got 0",)),
    "--block with z on a 2D map": Case(
        run_on("good", "--block", "8x8x2"), (r"block 8x8x2 has a z size but the field is a 2D map",)
    ),
    "--dz 0": Case(
        ("run", "@model", "--dz", "0", "--block", "8x8", "--method", "geometric"),
        (r"dz: cell sizes must be finite and positive \(m\), got \[0\. 0\. 0\.\]",),
    ),
    "--dz negative": Case(
        ("run", "@model", "--dz", "-2", "--block", "8x8", "--method", "geometric"),
        (r"dz: cell sizes must be finite and positive", r"-2\."),
    ),
    "--dz with one zero layer": Case(
        ("run", "@model", "--dz", "1,0,2", "--block", "8x8", "--method", "geometric"),
        (r"dz: cell sizes must be finite and positive \(m\), got \[1\. 0\. 2\.\]",),
    ),
    "--dz not a number": Case(
        ("run", "@model", "--dz", "two", "--block", "8x8", "--method", "geometric"),
        (r"--dz", r"'two' is not a number or a comma-separated list"),
    ),
    "--exponent nan": Case(
        run_on("good", "--exponent", "nan", method="power"),
        (r"--exponent", r"nan"),

    ),
    "--exponent inf": Case(
        run_on("good", "--exponent", "inf", method="power"),
        (r"--exponent", r"inf"),

    ),
    "--kv-kh 0": Case((*MODEL, "--kv-kh", "0"), (r"--kv-kh must be > 0", r"got 0\.0")),
    "--kv-kh nan": Case((*MODEL, "--kv-kh", "nan"), (r"--kv-kh must be > 0", r"got nan")),
    "--kv-kh inf": Case(
        (*MODEL, "--kv-kh", "inf"),
        (r"--kv-kh", r"got inf"),
    ),  # fmt: skip
    "--kz with --kv-kh": Case(
        (*MODEL, "--kz", "@model", "--kv-kh", "0.1"), (r"give either --kz or --kv-kh, not both",)
    ),
    "--check-limit 0": Case(
        (*RUN, "--check-limit", "0"), (r"'--check-limit'", r"0 is not in the range x>=1")
    ),
    "--chunk 0": Case((*RUN, "--chunk", "0"), (r"--chunk", r"'0' is not a size such as 64MB")),
    "--chunk 0blocks": Case(
        (*RUN, "--chunk", "0blocks"), (r"--chunk", r"'0blocks' is not a number of blocks such as 400blocks")
    ),
    "--workers 0": Case((*RUN, "--workers", "0"), (r"--workers must be 1 or more, not 0",)),
    "--workers with --scheduler": Case(
        (*RUN, "--workers", "2", "--scheduler", "tcp://127.0.0.1:9"),
        (r"give --workers \(a local cluster\) or --scheduler \(an existing one\), not both",),
    ),
    "--layer 0": Case((*RUN, "--layer", "0"), (r"'--layer'", r"0 is not in the range x>=1")),
    "--layer beyond the model, without --plot": Case(
        (*MODEL, "--layer", "4"),
        (r"--layer is past the field's 3 layer\(s\)",),
    ),  # fmt: skip
    "--layer 1 on a 2D map": Case(
        (*COMPARE, "--layer", "1"),
        (r"--layer: the field is a 2D map",),

    ),
    "--plot with --no-check": Case(
        (*RUN, "--plot", "--no-check"), (r"--plot and --report show the flow check; leave out --no-check",)
    ),
    # --- compare: the shared validation, and its own options
    "compare: missing file": Case(
        ("compare", "@missing", "--block", "8x8"), (r"nothing\.tif: no such file",)
    ),
    "compare: complex raster": Case(
        ("compare", "@complex", "--block", "8x8"), (r"complex\.tif: complex values cannot be permeabilities",)
    ),
    "compare: geographic CRS": Case(
        ("compare", "@lonlat", "--block", "8x8"), (r"lonlat\.tif", r"geographic CRS \(EPSG:4326\)")
    ),
    "compare: several bands without --dz": Case(
        ("compare", "@model", "--block", "8x8"), (r"model_full\.tif: 3 bands make a 3D model", r"--dz")
    ),
    "compare: porosity in another CRS": Case(
        (*COMPARE, "--porosity", "@porosity_crs"),
        (r"--porosity .*porosity_crs\.tif: not on the grid of", r"CRS \(EPSG:32634\)"),
    ),
    "compare: negative permeability, earlier results kept with --overwrite": Case(
        ("compare", "@negative", "--block", "8x8", "--methods", "geometric,arithmetic", "--overwrite"),
        (r"no method ran on this field", r"negative\.tif\): 4 negative value\(s\)",
         r"first at \(band 1, row 3, column 5\)"),
        out="results",
    ),  # fmt: skip
    "compare: --layer beyond the model": Case(
        ("compare", "@model", "--dz", "1", "--block", "8x8", "--methods", "geometric", "--layer", "4"),
        (r"--layer is past the field's 3 layer\(s\)",),
    ),
    "compare: --layer beyond a 2D map": Case(
        (*COMPARE, "--layer", "2"), (r"--layer: the field is a 2D map",)
    ),
    "compare: --check-limit 0": Case(
        (*COMPARE, "--check-limit", "0"), (r"'--check-limit'", r"0 is not in the range x>=1")
    ),
    "compare: --exponent nan": Case(
        ("compare", "@good", "--block", "8x8", "--methods", "power", "--exponent", "nan"),
        (r"--exponent", r"nan"),
    ),  # fmt: skip
    "compare: realizations on different grids": Case(
        ("compare", "@good", "@shifted", "--block", "8x8", "--methods", "geometric"),
        (r"the realizations must share one grid; not on the grid of good: shifted \(transform\) — ",),
    ),
    # --- info: the shared validation
    "info: complex raster": Case(("info", "@complex"), (r"complex\.tif: complex values cannot",)),
    "info: sheared raster": Case(("info", "@sheared"), (r"sheared\.tif: the raster is rotated or sheared",)),
    "info: geographic CRS": Case(("info", "@lonlat"), (r"lonlat\.tif", r"geographic CRS", r"--cell-size")),
    "info: not a raster": Case(("info", "@notes"), (r"notes\.txt: cannot be read as a raster",)),
    "info: truncated GeoTIFF": Case(
        ("info", "@truncated", "--dz", "1"), (r"truncated\.tif: cannot be read as a raster",)
    ),
    "info: porosity on a shifted grid": Case(
        ("info", "@good", "--porosity", "@porosity_shifted"),
        (r"--porosity .*porosity_shifted\.tif: not on the grid of .*good\.tif",),
    ),
    "info: kz with another number of layers": Case(
        ("info", "@model", "--dz", "1", "--kz", "@kz_layers"), (r"--kz .*kz_layers\.tif", r"shape")
    ),
    "info: --dz 0": Case(
        ("info", "@model", "--dz", "0"), (r"dz: cell sizes must be finite and positive",)
    ),
    # --- check DIR: the run folder stays as it was
    "check: a folder without a run": Case(
        ("check", "@no_run"), (r"no_run: no summary\.json here, so no complete upscale run to check",)
    ),
    "check: input changed since the run": Case(
        ("check", "@check_changed"),
        (r"changed/field\.tif: the run's kx input changed since the run \(SHA-256 differs\)",),
        watch="check_changed",
    ),
    "check: input gone": Case(
        ("check", "@check_gone"),
        (r"gone/field\.tif: the run's kx input is gone; it is needed to check again",),
        watch="check_gone",
    ),
    "check: --check-limit 0": Case(
        ("check", "@check_changed", "--check-limit", "0"),
        (r"'--check-limit'", r"0 is not in the range x>=1"),
        watch="check_changed",
    ),
    "check: input now rotated (run without checksums)": Case(
        ("check", "@check_rotated"),
        (r"rotated/field\.tif: the raster is rotated or sheared",),
        watch="check_rotated",
    ),
    "check: input now not a raster (run without checksums)": Case(
        ("check", "@check_garbage"),
        (r"garbage/field\.tif: cannot be read as a raster",),
        watch="check_garbage",
    ),
    "check: input now negative (run without checksums)": Case(
        ("check", "@check_negative"),
        (r"negative/field\.tif", r"4 negative value\(s\)", r"first at \(band 1, row 3, column 5\)"),
        watch="check_negative",
    ),  # fmt: skip
}


def _resolved(args: tuple, inputs: SimpleNamespace) -> list[str]:
    return [str(getattr(inputs, a[1:])) if a.startswith("@") else a for a in args]


def _argv(case: Case, inputs: SimpleNamespace, out: Path) -> list[str]:
    argv = _resolved(case.args, inputs)
    if argv[0] in ("run", "compare"):
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
    watched = getattr(inputs, case.watch) if case.watch else None
    run_before = snapshot(watched) if watched else None
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
    if watched:
        assert snapshot(watched) == run_before  # check DIR leaves the run as it was


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
    assert "4 negative value(s), first at (band 1, row 3, column 5)" in lines[0]
    assert not out.exists()


def test_debug_shows_the_error_itself(run_cli, inputs, tmp_path):
    with pytest.raises(upscale.InputError, match="no such file"):
        run_cli("--debug", "run", inputs.missing, "--block", "8x8", "--method", "geometric",
                "--out", tmp_path / "out")  # fmt: skip


# --- behaviours that are not errors, documented


def _band(path: Path) -> np.ndarray:
    with rasterio.open(path) as src:
        return src.read(1)


def test_integer_raster_is_converted_exactly_and_noted_with_verbose(run_cli, write_tif, tmp_path):
    counts = np.random.default_rng(SEED + 4).integers(1, 2000, size=SHAPE)
    stored = write_tif("int16.tif", counts, dtype="int16")
    as_float = write_tif("float64.tif", counts, dtype="float64")
    code, _, err = run_cli("-v", "run", stored, "--block", "8x8", "--method", "geometric",
                           "--out", tmp_path / "int")  # fmt: skip
    assert code == 0
    assert any(line.startswith(f"upscale: {stored}: int16 values converted to float64")
               for line in err.splitlines())  # fmt: skip
    assert run_cli("run", as_float, "--block", "8x8", "--method", "geometric",
                   "--out", tmp_path / "float")[0] == 0  # fmt: skip
    assert np.array_equal(_band(tmp_path / "int" / "kx.tif"), _band(tmp_path / "float" / "kx.tif"))


def test_integer_raster_conversion_is_noted_without_verbose(run_cli, write_tif, tmp_path):
    stored = write_tif("int16.tif", np.full(SHAPE, 120), dtype="int16")
    code, _, err = run_cli("run", stored, "--block", "8x8", "--method", "geometric",
                           "--out", tmp_path / "out")  # fmt: skip
    assert code == 0
    assert "int16 values converted to float64" in err


def test_almost_all_nodata_field_is_noted(run_cli, write_tif, tmp_path):
    # what a wrong nodata value, or a damaged compressed file read as mostly nodata, looks like
    sparse = np.full(SHAPE, -9999.0)
    sparse[:2, :2] = 50.0
    half = np.where(np.indices(SHAPE)[1] % 2 == 0, 50.0, -9999.0)
    notes = {}
    for name, k in (("sparse", sparse), ("half", half)):
        path = write_tif(f"{name}.tif", k, nodata=-9999.0)
        code, _, err = run_cli("run", path, "--block", "8x8", "--method", "arithmetic",
                               "--out", tmp_path / name)  # fmt: skip
        assert code == 0, err
        notes[name] = [line for line in err.splitlines() if "hold a value" in line]
    assert len(notes["sparse"]) == 1 and f"only 4 of {SHAPE[0] * SHAPE[1]} cells" in notes["sparse"][0]
    assert notes["half"] == []


def test_power_exponent_zero_is_the_geometric_mean(run_cli, inputs, tmp_path):
    power = run_cli(*_resolved(run_on("good", "--exponent", "0", method="power"), inputs),
                    "--out", tmp_path / "power")  # fmt: skip
    geometric = run_cli(*_resolved(RUN, inputs), "--out", tmp_path / "geometric")
    assert (power[0], power[2], geometric[0]) == (0, "", 0)
    assert np.array_equal(_band(tmp_path / "power" / "kx.tif"), _band(tmp_path / "geometric" / "kx.tif"))


def test_geographic_raster_runs_with_cell_size_in_metres(run_cli, inputs, tmp_path):
    out = tmp_path / "out"
    code, _, err = run_cli(*_resolved(run_on("lonlat", "--cell-size", "25x30"), inputs), "--out", out)
    assert (code, err) == (0, "")
    summary = json.loads((out / "summary.json").read_text())
    assert (summary["fine"]["dx_m"], summary["fine"]["dy_m"]) == (25.0, 30.0)
    assert (summary["coarse"]["dx_m"], summary["coarse"]["dy_m"]) == (200.0, 240.0)
    assert summary["coarse"]["crs"] == "EPSG:4326"  # the coarse grid stays in the input's CRS


def test_nan_and_nodata_cells_are_inactive_not_errors(run_cli, write_tif, tmp_path):
    k = uncorrelated_lognormal(SHAPE, SEED + 5)
    k[0, 0], k[1, 2] = np.nan, -9999.0
    k[8:16, 8:16] = -9999.0  # a whole block without an active cell
    field_path = write_tif("holes.tif", k, nodata=-9999.0)
    code, _, err = run_cli("run", field_path, "--block", "8x8", "--method", "geometric",
                           "--out", tmp_path / "out")  # fmt: skip
    assert (code, err) == (0, "")
    coarse = _band(tmp_path / "out" / "kx.tif")
    block = k[0:8, 0:8].ravel()
    active = block[np.isfinite(block) & (block > 0)]
    assert active.size == 62
    assert coarse[0, 0] == pytest.approx(np.exp(np.log(active).mean()), rel=1e-12)
    assert np.isnan(coarse[1, 1])


def test_info_describes_problem_values_without_refusing(run_cli, inputs):
    code, out, err = run_cli("info", inputs.negative)
    assert (code, err) == (0, "")
    lines = out.splitlines()
    assert lines[lines.index("active       1536 of 1536 cells (100.0 %)") + 1].startswith(
        "problems     4 negative value(s) in kx, first at (band 1, row 3, column 5), ")
    assert ("hint         if these values mark cells without data, give --nodata VALUE; 'upscale run' "
            "refuses what a method cannot take") in lines  # fmt: skip
    code, out, _ = run_cli("info", inputs.plus_inf, "--json")
    assert code == 0
    assert json.loads(out)["problems"] == {"negative": 0, "zero": 0, "infinite": 1}


def test_info_describes_problem_values_of_porosity(run_cli, inputs):
    code, out, _ = run_cli("info", inputs.good, "--porosity", inputs.porosity_negative)
    assert code == 0
    assert re.search(r"problems .*1 negative value\(s\) in porosity", out), out


def test_debug_shows_the_traceback_of_an_input_error(inputs, tmp_path):
    out = tmp_path / "out"
    done = subprocess.run(
        [str(UPSCALE_EXE), "--debug", "run", str(inputs.missing), "--block", "8x8", "--method",
         "geometric", "--out", str(out)],
        capture_output=True, text=True, timeout=120, cwd=tmp_path,
    )  # fmt: skip
    lines = done.stderr.splitlines()
    assert lines[0] == "Traceback (most recent call last):"
    assert lines[-1] == f"upscale.errors.InputError: {inputs.missing}: no such file"
    assert not any(line.startswith("upscale: error:") for line in lines)  # the traceback replaces it
    assert done.returncode == 1  # Python's status for an uncaught exception, not the 2 of an input error
    assert not out.exists()


def test_debug_leaves_a_usage_error_as_one_line(run_cli, inputs, tmp_path):
    argv = _resolved((*RUN, "--check-limit", "0"), inputs)
    code, _, err = run_cli("--debug", *argv, "--out", tmp_path / "out")
    assert code == 2
    assert err.splitlines() == [
        "upscale: error: Invalid value for '--check-limit': 0 is not in the range x>=1."
    ]
    assert not (tmp_path / "out").exists()
