"""Tests of the well-driven check (`upscale.check.wells`): the same wells on fine and coarse grids.

What is tested, and against what
--------------------------------
* A homogeneous square upscaled (any average is exact on it, common
  practice) with one pressure well in the centre of the middle block, the
  sides at a fixed pressure: the coarse well, connected by Peaceman's index
  of the coarse block (r_o = 0.198 ΔX for square blocks; Peaceman 1978,
  "Interpretation of well-block pressures in numerical reservoir
  simulation", SPE J. 18(3)), gives the radial (Dupuit–Thiem) rate
  ``2π k h Δp / ln(r_e / r_w)`` with the square's conformal radius r_e
  (`upscale.gallery.problems.square_outer_radius`) within 0.5 %, as the fine grid does: the
  textbook result on 9 blocks across (measured 0.1 %, fine 0.03 %).
* Rate wells are compared by their drawdown: on the same homogeneous model a
  rate injector with a pressure producer keeps its rate on both grids
  (given) and the check reports the drawdown error instead; the total-rate
  error is the relative difference of ``Σ |q|`` by definition.
* The check's record (`WellCheck.summary`) holds every well fine and coarse
  with the cells it connects to.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from upscale import Field, coarsen
from upscale.check.wells import well_check
from upscale.flow.wells import Well
from upscale.gallery.problems import square_outer_radius

K, H, DX, RW = 50.0, 2.0, 10.0, 0.1


def test_peaceman_coarse_well_gives_the_radial_rate() -> None:
    n = 63  # 9 blocks of 7 x 7 cells: the centre cell is the centre of the middle block
    field = Field.from_arrays(np.full((n, n), K), cell_size=(DX, DX), dz=H)
    result = coarsen(field, "7x7", "geometric")
    centre = n * DX / 2
    check = well_check(result.fine, result.coarse, [Well("W", centre, -centre, None, "pressure", 1.0, RW)],
                       coarse_trans=result.transmissibilities(), outer_pressure=0.0)  # fmt: skip
    radial = 2 * math.pi * K * H / math.log(square_outer_radius(n * DX) / RW)  # Dupuit–Thiem, Δp = 1
    assert check.coarse_cells["W"] == [(0, 4, 4)] and check.fine_cells["W"] == [(0, 31, 31)]
    assert check.coarse.rates["W"] == pytest.approx(radial, rel=5e-3)
    assert check.fine.rates["W"] == pytest.approx(radial, rel=5e-3)
    assert check.rel_error == pytest.approx(check.coarse.rates["W"] / check.fine.rates["W"] - 1, rel=1e-12)


def test_rate_wells_are_compared_by_drawdown() -> None:
    n = 24
    field = Field.from_arrays(np.full((2, n, n), K), cell_size=(DX, DX), dz=[1.0, 3.0])
    result = coarsen(field, "4x4x2", "arithmetic")
    wells = [
        Well("I", 45.0, -45.0, (2, 2), "rate", 40.0, RW),
        Well("P", 195.0, -195.0, None, "pressure", 5.0, RW),
    ]
    check = well_check(result.fine, result.coarse, wells)
    assert check.fine.rates == pytest.approx({"I": 40.0, "P": -40.0}, rel=1e-9)
    assert check.coarse.rates == pytest.approx({"I": 40.0, "P": -40.0}, rel=1e-9)
    assert check.rel_error == pytest.approx(0.0, abs=1e-9)
    drawdown = [flow.pressures["I"] - 5.0 for flow in (check.fine, check.coarse)]
    assert check.well_error(wells[0]) == pytest.approx(drawdown[1] / drawdown[0] - 1, rel=1e-12)
    summary = check.summary()
    assert summary["outer_faces"] == "closed" and summary["wells"]["I"]["layers"] == [2, 2]
    assert summary["wells"]["I"]["fine"]["cells"] == [[1, 4, 4]]  # the completed lower layer only
    assert summary["wells"]["I"]["coarse"]["cells"] == [[0, 1, 1]]  # the one block of both layers
    assert summary["total_rate"]["fine"] == pytest.approx(80.0, rel=1e-9)
