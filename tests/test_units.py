"""Tests of the unit conversions in `upscale.units`.

What is tested
--------------
* The darcy in m² against its definition, and the millidarcy.
* The constants of the water conductivity factor.
* `to_m2` / `from_m2` round trips for every unit, the factor 86400 between
  m/day and m/s, and the conductivity of a one-darcy medium for water.
* `check_unit` refuses unknown units with a message listing the known ones.
"""

from __future__ import annotations

import math

import pytest

from upscale.errors import InputError
from upscale.units import (
    ATMOSPHERE_PA,
    DARCY_M2,
    GRAVITY,
    UNITS,
    WATER_K_PER_PERMEABILITY,
    check_unit,
    from_m2,
    to_m2,
)


def test_darcy_in_square_metres():
    # The definition of the darcy: 1 cm³/s of a 1 cP fluid through 1 cm² under
    # 1 atm/cm gives 1 D = 9.869233e-13 m².
    assert DARCY_M2 == pytest.approx(9.869233e-13, rel=1e-6)
    assert to_m2(1.0, "D") == DARCY_M2
    assert to_m2(1000.0, "mD") == pytest.approx(9.869233e-13, rel=1e-6)
    assert to_m2(1.0, "mD") == pytest.approx(9.869233e-16, rel=1e-6)


def test_exact_si_constants():
    # standard atmosphere (10th CGPM 1954) and standard gravity (3rd CGPM 1901): exact values
    assert ATMOSPHERE_PA == 101_325.0
    assert GRAVITY == 9.80665


def test_unit_table():
    assert set(UNITS) == {"mD", "D", "m2", "m/s", "m/day"}
    assert {kind for kind, _ in UNITS.values()} == {"permeability", "conductivity"}
    assert UNITS["m2"] == ("permeability", 1.0)
    assert UNITS["m/s"] == ("conductivity", 1.0)
    assert UNITS["mD"][1] == pytest.approx(1e-3 * UNITS["D"][1], rel=1e-15)


@pytest.mark.parametrize("unit", ["mD", "D", "m2", "m/s", "m/day"])
@pytest.mark.parametrize("value", [1e-9, 0.37, 1.0, 250.0, 4.2e6])
def test_round_trip(unit, value):
    assert from_m2(to_m2(value, unit), unit) == pytest.approx(value, rel=1e-14)
    k = value * 1e-13
    assert to_m2(from_m2(k, unit), unit) == pytest.approx(k, rel=1e-14)


def test_metres_per_day_and_per_second_differ_by_86400():
    # common practice: one day is 86 400 s
    assert to_m2(86_400.0, "m/day") == pytest.approx(to_m2(1.0, "m/s"), rel=1e-15)
    assert from_m2(to_m2(1.0, "m/s"), "m/day") == pytest.approx(86_400.0, rel=1e-14)


def test_conductivity_of_one_darcy_for_water():
    # K = k rho g / mu; with water at 20 °C, 1 D corresponds to about 9.6e-6 m/s,
    # i.e. about 0.83 m/day (from memory; 1% tolerance covers the water properties).
    assert from_m2(DARCY_M2, "m/s") == pytest.approx(9.64e-6, rel=0.01)
    assert from_m2(DARCY_M2, "m/day") == pytest.approx(0.833, rel=0.01)
    assert WATER_K_PER_PERMEABILITY == pytest.approx(998.2 * 9.80665 / 1.002e-3, rel=1e-15)
    assert to_m2(1.0, "m/s") == pytest.approx(1.0 / WATER_K_PER_PERMEABILITY, rel=1e-15)


def test_check_unit():
    assert check_unit("m/day") == "m/day"
    for bad in ("md", "millidarcy", "m^2", ""):
        with pytest.raises(InputError, match=r"unknown unit .*; use one of mD, D, m2, m/s, m/day"):
            check_unit(bad)
    with pytest.raises(InputError, match="unknown unit 'cm/s'"):
        to_m2(1.0, "cm/s")
    with pytest.raises(InputError, match="unknown unit 'darcy'"):
        from_m2(1.0, "darcy")


def test_conversion_is_linear():
    # every average is linear-homogeneous, so only a factor may separate units
    for unit in UNITS:
        assert to_m2(3.0, unit) == pytest.approx(3.0 * to_m2(1.0, unit), rel=1e-15)
        assert math.isfinite(to_m2(1.0, unit)) and to_m2(1.0, unit) > 0
