"""Tests of near-well upscaling (`upscale.methods.near_well`) through the well check.

What is tested, and against what
--------------------------------
* Homogeneous field upscaled (any average is exact on it, common practice),
  a producer–injector pair with closed sides: with near-well upscaling the
  coarse well check reproduces the fine rates within 1 % — the issue's
  tolerance; near-well upscaling (Ding 1995, "Scaling-up in the vicinity of
  wells in heterogeneous field", SPE 29137; Durlofsky, Milliken & Bernath
  2000, "Scaleup in the near-well region", SPE J. 5(1); both from memory)
  reproduces the local fine solution on the coarse blocks when the coarse
  pressures around the well are right, so what is left is the coarse grid's
  error away from the wells (measured +0.15 % and +0.18 %). Twice: wells in
  the centre of their blocks (Peaceman's index is right there too, measured
  −0.5 %) and wells off the centre of their blocks, where Peaceman's index,
  which puts the well in the block centre, misses by 11 % (measured) and
  near-well upscaling does not.
* The choice is recorded per well and per block (``set_by``), and
  ``peaceman`` keeps Peaceman's coarse index (Peaceman 1983, the formula of
  `upscale.flow.wells.well_index` on the block).
* A 3D model with a rate well completed in its lower layers: the rates stay
  the given ones and the well connects to the blocks of its completed interval
  only, each by its own near-well factor.
* Lognormal (σ(ln k) 1 and 2) and channel fields with two to five wells,
  8x8 blocks: near-well upscaling has the smaller total-rate error than
  Peaceman's coarse index in most cases (the issue's check; numbers in the test).
"""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest

from upscale import Field, coarsen
from upscale.check.wells import well_check
from upscale.flow.wells import Well, well_index

K, DX, RW = 100.0, 10.0, 0.1


def _at(name: str, column: int, row: int, pressure: float) -> Well:
    """A pressure well in the centre of fine cell (row, column)."""
    return Well(name, (column + 0.5) * DX, -(row + 0.5) * DX, None, "pressure", pressure, RW)


@pytest.mark.parametrize("cells, block, wells", [
    (63, "9x9", [_at("I", 4, 4, 1.0), _at("P", 58, 58, 0.0)]),    # each in its block's centre
    (64, "8x8", [_at("I", 6, 6, 1.0), _at("P", 57, 57, 0.0)]),    # 1.5 and 2.5 cells off it
])  # fmt: skip
def test_near_well_upscaling_reproduces_the_fine_rates_on_a_homogeneous_field(cells, block, wells) -> None:
    field = Field.from_arrays(np.full((cells, cells), K), cell_size=(DX, DX))
    result = coarsen(field, block, "geometric")
    check = well_check(result.fine, result.coarse, wells, coarse_trans=result.transmissibilities())
    assert check.connection == "near-well"
    assert check.set_by == {"I": ["near-well"], "P": ["near-well"]}
    for name in ("I", "P"):
        assert check.coarse.rates[name] == pytest.approx(check.fine.rates[name], rel=1e-2)
    assert abs(check.rel_error) < 1e-2
    assert check.faces  # the faces around the wells were set from the same local solves


def test_peaceman_is_kept_when_asked_and_misses_an_off_centre_well() -> None:
    field = Field.from_arrays(np.full((64, 64), K), cell_size=(DX, DX))
    result = coarsen(field, "8x8", "geometric")
    wells = [_at("I", 6, 6, 1.0), _at("P", 57, 57, 0.0)]
    check = well_check(result.fine, result.coarse, wells, coarse_trans=result.transmissibilities(),
                       connection="peaceman")  # fmt: skip
    peaceman = float(well_index(K, K, 8 * DX, 8 * DX, 1.0, RW))
    assert check.factors == {name: [pytest.approx(peaceman, rel=1e-12)] for name in ("I", "P")}
    assert check.set_by == {"I": ["peaceman"], "P": ["peaceman"]} and check.faces == {}
    assert check.rel_error < -0.05  # the coarse well sits in the block centre, 25 m farther from the other
    summary = check.summary()
    assert summary["connection"] == "peaceman" and summary["near_well_faces"] == []
    assert summary["wells"]["I"]["coarse"]["factors"] == check.factors["I"]


def test_a_rate_well_in_the_lower_layers_of_a_3d_model() -> None:
    rng = np.random.default_rng(3_908_412_775)
    k = np.exp(rng.normal(np.log(K), 0.5, size=(4, 24, 24)))
    field = Field.from_arrays(k, cell_size=(DX, DX), dz=2.0, kz=k / 10)
    result = coarsen(field, "8x8x2", "geometric")
    wells = [Well("I", 125.0, -125.0, (3, 4), "rate", 50.0, RW), _at("P", 3, 20, 0.0)]
    check = well_check(result.fine, result.coarse, wells, coarse_trans=result.transmissibilities())
    assert check.coarse_cells["I"] == [(1, 1, 1)] and check.set_by["I"] == ["near-well"]
    assert check.coarse_cells["P"] == [(0, 2, 0), (1, 2, 0)] and check.set_by["P"] == ["near-well"] * 2
    assert check.coarse.rates["I"] == pytest.approx(50.0, rel=1e-9)
    assert check.coarse.rates["P"] == pytest.approx(-50.0, rel=1e-9)
    assert all(f > 0 for f in check.factors["P"]) and check.factors["P"][0] != check.factors["P"][1]


def _pattern(size: int, fractions: list[tuple[float, float]]) -> list[Well]:
    """An injector (p = 1) at the first position, producers (p = 0) at the others, in fine-cell centres."""
    cells = [(int(fx * size), int(fy * size)) for fx, fy in fractions]
    return [_at(f"W{i}", column, row, 1.0 if i == 0 else 0.0) for i, (column, row) in enumerate(cells)]


PATTERNS = {
    "pair": [(0.1, 0.1), (0.9, 0.9)],
    "line of 3": [(0.1, 0.5), (0.9, 0.1), (0.9, 0.9)],
    "five-spot": [(0.5, 0.5), (0.15, 0.15), (0.85, 0.15), (0.15, 0.85), (0.85, 0.85)],
}


def test_near_well_upscaling_beats_peaceman_on_heterogeneous_fields_in_most_seeds() -> None:
    # The check: lognormal (σ(ln k) 1 and 2) and channel fields with two to five wells, 8x8
    # blocks; near-well upscaling (Ding 1995; Durlofsky, Milliken & Bernath 2000, from memory) should
    # reduce the total-rate error of Peaceman's coarse index (Peaceman 1983) in most seeds. Measured
    # here on 64² fields, 3 seeds x 3 fields x 3 patterns = 27 cases: near-well smaller in 27 of 27,
    # median |error| 1.2 % against 49 %, worst 26 % against 367 % (tests/benchmarks/bench_wells.py:
    # more seeds, 128²). The test asks for more than half, and a smaller median.
    from upscale.check.wells import coarse_wells, fine_wells
    from upscale.gallery.fields import channel_field, lognormal_field

    size, better, errors = 64, 0, {"peaceman": [], "near-well": []}
    for s in range(3):
        seed = 4_471_902_336 + 7_919 * s
        fields = [lognormal_field((size, size), (10.0, 10.0), geometric_mean=K, sigma_ln=sigma, seed=seed)
                  for sigma in (1.0, 2.0)]  # fmt: skip
        fields.append(channel_field((size, size), channels=5, width=6.0, k_sand=K, k_shale=1.0, seed=seed)[0])
        for k in fields:
            result = coarsen(Field.from_arrays(k, cell_size=(DX, DX)), "8x8", "flow")
            for fractions in PATTERNS.values():
                fine = fine_wells(result.fine, _pattern(size, fractions))
                found = {how: abs(coarse_wells(dataclasses.replace(fine, connection=how), result.coarse,
                                               coarse_trans=result.transmissibilities()).rel_error)
                         for how in ("peaceman", "near-well")}  # fmt: skip
                better += found["near-well"] < found["peaceman"]
                for how, e in found.items():
                    errors[how].append(e)
    cases = len(errors["peaceman"])
    assert better > cases / 2, (better, cases)
    assert np.median(errors["near-well"]) < np.median(errors["peaceman"])
