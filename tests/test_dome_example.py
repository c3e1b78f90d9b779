"""The README's geometry example keeps what upscaling must keep.

The README's console example on the demo dome model (a varying top, a shale
wedge that pinches out, porosity on a grid of twice the cell size read with
``--resample average``) is run as written on the committed demo fields, and
its outputs are checked against quantities computed here from the input
rasters alone, with NumPy and the rasters' own transforms (no code of the
tool):

* the pore volume of the coarse model equals that of the fine model to
  1e-12 relative (common practice: upscaling conserves pore volume), both
  the one ``summary.json`` records and the coarse porosity times the coarse
  bulk volumes;
* each coarse block's thickness is its fine cells' bulk volume over its plan
  area, so east of the wedge the coarse layer that holds it is exactly as
  thick as the sand layer below it (a pinched-out cell holds no volume);
  this on the coarse model of the same read and method from Python
  (`read_field`, `coarsen`), as the run's outputs do not hold the coarse
  thicknesses.

`tests/test_readme.py` compares the example's printed text with the README.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest
import rasterio
from affine import Affine
from test_readme import ROOT, _console_examples

from upscale import coarsen, read_field
from upscale.cli.main import main

DOME = "demo-fields/marrowfen_dome.tif"
#: The README's first example on the dome model with its geometry.
COMMAND = next(c for c, _ in _console_examples() if c[2] == DOME and "--surfaces" in c)


def _option(name: str) -> str:
    return COMMAND[COMMAND.index(name) + 1]


def _read(path: Path) -> tuple[np.ndarray, Affine]:
    with rasterio.open(path) as raster:
        return raster.read().astype(np.float64), raster.transform


def _blocks(values: np.ndarray, cells: tuple[int, int, int]) -> np.ndarray:
    """Sums over blocks of `cells` (layers, rows, columns) of an (L, M, N) array."""
    layers, rows, cols = values.shape
    nz, ny, nx = cells
    return values.reshape(layers // nz, nz, rows // ny, ny, cols // nx, nx).sum(axis=(1, 3, 5))


def _cells_under(n: int, origin: float, size: float, other_origin: float, other_size: float) -> np.ndarray:
    """Index of the other grid's cell that holds each of `n` cells along one axis (m, signed sizes).

    Each cell must lie inside one cell of the other grid: the area-weighted
    average over the other cells under it is then that cell's value.
    """
    edges = (origin + size * np.arange(n + 1) - other_origin) / other_size
    first, last = np.floor(edges[:-1]), np.ceil(edges[1:]) - 1
    assert np.array_equal(first, last)
    return first.astype(int)


@pytest.fixture(scope="module")
def dome(tmp_path_factory: pytest.TempPathFactory) -> dict:
    """The example run in a copy of the README's folder, and the fine model from its rasters."""
    folder = tmp_path_factory.mktemp("readme")
    (folder / "demo-fields").symlink_to(ROOT / "demo-fields")
    args = [str(folder / a) if a.startswith("demo-fields/") else a for a in COMMAND[1:]]
    args[args.index("--out") + 1] = str(folder / _option("--out"))
    assert main(["--quiet", *args]) == 0
    surfaces, fine = _read(ROOT / _option("--surfaces"))
    porosity, other = _read(ROOT / _option("--porosity"))
    rows, cols = surfaces.shape[1:]
    under = (_cells_under(rows, fine.f, fine.e, other.f, other.e),
             _cells_under(cols, fine.c, fine.a, other.c, other.a))  # fmt: skip
    return {
        "out": folder / _option("--out"),
        "thickness": surfaces[:-1] - surfaces[1:],
        "porosity": porosity[:, under[0]][:, :, under[1]],
        "area": fine.a * -fine.e,
        "cells": tuple(int(n) for n in reversed(_option("--block").split("x"))),
    }


def test_coarse_pore_volume_equals_the_fine_one(dome: dict) -> None:
    # common practice: upscaling conserves pore volume
    fine_pore = float(np.sum(dome["porosity"] * dome["thickness"]) * dome["area"])
    summary = json.loads((dome["out"] / "summary.json").read_text())
    assert summary["active"]["coarse_pore_volume_m3"] == pytest.approx(fine_pore, rel=1e-12)
    coarse_porosity, _ = _read(dome["out"] / "porosity.tif")
    bulk = _blocks(dome["thickness"], dome["cells"]) * dome["area"]
    assert float(np.sum(coarse_porosity * bulk)) == pytest.approx(fine_pore, rel=1e-12)


def test_coarse_thickness_is_bulk_volume_over_plan_area_where_the_wedge_pinches_out(dome: dict) -> None:
    thickness, cells = dome["thickness"], dome["cells"]
    given = {name: ROOT / _option(f"--{name}") for name in ("surfaces", "porosity")}
    given.update(kv_kh=float(_option("--kv-kh")), resample=_option("--resample"))
    field = read_field(ROOT / COMMAND[2], **given)
    coarse = coarsen(field, _option("--block"), _option("--method")).coarse.geometry.thickness
    plan = cells[1] * cells[2]
    np.testing.assert_allclose(coarse, _blocks(thickness, cells) / plan, rtol=1e-13)
    wedge = 4  # layer 5, in coarse layer 3 with layer 6 below it
    pinched = _blocks((thickness[wedge] > 0)[None].astype(float), (1, *cells[1:]))[0] == 0
    assert 0 < pinched.mean() < 1
    below = _blocks(thickness[wedge + 1][None], (1, *cells[1:]))[0] / plan
    np.testing.assert_allclose(coarse[wedge // cells[0]][pinched], below[pinched], rtol=1e-13)
