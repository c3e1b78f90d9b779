"""Units of permeability and hydraulic conductivity.

Permeability values are kept in the unit the user gave them in; every
average is linear-homogeneous (scaling all cells by c scales the result by
c), so no conversion is needed to upscale. Conversions to SI are provided
for reports and exports.

Hydraulic conductivity K (m/s) and intrinsic permeability k (m²) are related
by ``K = k * rho * g / mu`` for a given fluid. The factor used here is for
fresh water at 20 °C; it is only used when a conductivity has to be shown
as a permeability or the other way round.
"""

from __future__ import annotations

from typing import Any, Final

from .errors import InputError

#: Standard atmosphere in pascal (exact by definition; 10th CGPM, 1954).
ATMOSPHERE_PA: Final = 101_325.0
#: Standard acceleration of gravity in m/s² (exact by definition; 3rd CGPM, 1901).
GRAVITY: Final = 9.80665
#: Density of fresh water at 20 °C in kg/m³ (from memory: 998.2).
WATER_DENSITY_20C: Final = 998.2
#: Dynamic viscosity of fresh water at 20 °C in Pa·s (from memory: 1.002 mPa·s).
WATER_VISCOSITY_20C: Final = 1.002e-3

#: One darcy in m²: the permeability that passes 1 cm³/s of a 1 cP fluid through
#: 1 cm² under a gradient of 1 atm/cm (the definition of the darcy).
DARCY_M2: Final = (1e-6 * 1e-3 * 1e-2) / (1e-4 * ATMOSPHERE_PA)

#: Conductivity per permeability for water at 20 °C, in 1/(m·s): K = k * this.
WATER_K_PER_PERMEABILITY: Final = WATER_DENSITY_20C * GRAVITY / WATER_VISCOSITY_20C

_SECONDS_PER_DAY: Final = 86_400.0
#: The international foot in m (exact; the 1959 international yard and pound agreement).
FOOT_M: Final = 0.3048
#: Unit systems of the coarse-grid package: ``si`` (m, m², m³) and ``field`` (ft, mD).
UNIT_SYSTEMS: Final = ("si", "field")

#: Unit name -> (kind, factor to the kind's SI unit: m² for permeability, m/s for conductivity).
UNITS: Final[dict[str, tuple[str, float]]] = {
    "mD": ("permeability", 1e-3 * DARCY_M2),
    "D": ("permeability", DARCY_M2),
    "m2": ("permeability", 1.0),
    "m/s": ("conductivity", 1.0),
    "m/day": ("conductivity", 1.0 / _SECONDS_PER_DAY),
}

#: Kind of unit -> the quantity's name in messages and labels.
QUANTITIES: Final = {"permeability": "permeability", "conductivity": "hydraulic conductivity"}


def check_unit(unit: str) -> str:
    """Return `unit` if it is known, else raise `InputError` listing the known ones.

    Examples
    --------
    >>> check_unit("mD")
    'mD'
    """
    if unit not in UNITS:
        raise InputError(f"unknown unit {unit!r}; use one of {', '.join(UNITS)}")
    return unit


def unit_factor(unit: str, to: str) -> float:
    """The factor that turns values in `unit` into values in `to`, both of one kind.

    Permeability (mD, D, m2) and hydraulic conductivity (m/s, m/day) are not
    converted into each other: that needs the fluid's density and viscosity
    (``K = k ρ g / μ``), which the tool does not take.

    Raises
    ------
    InputError
        If `to` is unknown or of the other kind.

    Examples
    --------
    >>> unit_factor("m/day", "m/s") * 86_400
    1.0
    >>> round(unit_factor("D", "mD"), 9)
    1000.0
    """
    kind, factor = UNITS[check_unit(unit)]
    other, to_factor = UNITS[check_unit(to)]
    if kind != other:
        raise InputError(f"`out_unit={to}` is a {QUANTITIES[other]} and the input's unit {unit} a "
                         f"{QUANTITIES[kind]}; "
                         "converting between them needs the fluid's density and viscosity, which "
                         "upscale does not take — give a unit of the input's kind "
                         f"({', '.join(u for u, (k, _) in UNITS.items() if k == kind)})")  # fmt: skip
    return 1.0 if unit == to else factor / to_factor


def quantity_name(unit: str) -> str:
    """The quantity measured in `unit`, for labels: ``permeability`` or ``hydraulic conductivity``.

    Examples
    --------
    >>> quantity_name("mD"), quantity_name("m/day")
    ('permeability', 'hydraulic conductivity')
    """
    return QUANTITIES[UNITS[check_unit(unit)][0]]


def symbol(unit: str) -> str:
    """The symbol of the quantity measured in `unit`: ``k`` (permeability) or ``K`` (conductivity).

    Examples
    --------
    >>> symbol("m2"), symbol("m/s")
    ('k', 'K')
    """
    return "K" if UNITS[check_unit(unit)][0] == "conductivity" else "k"


def property_label(name: str, unit: str) -> str:
    """`name` (``kx``, ``ky``, ``kz`` or another property) as labels show it for values in `unit`.

    Examples
    --------
    >>> property_label("kx", "mD"), property_label("kz", "m/day"), property_label("porosity", "m/s")
    ('kx', 'Kz', 'porosity')
    """
    return symbol(unit) + name[1:] if name in ("kx", "ky", "kz") else name


def to_m2(value: float, unit: str) -> float:
    """Convert a permeability or conductivity to intrinsic permeability in m².

    Conductivities are converted for fresh water at 20 °C.

    Parameters
    ----------
    value : float
        Permeability or hydraulic conductivity in `unit`.
    unit : str
        One of the keys of `UNITS`.

    Returns
    -------
    float
        Intrinsic permeability in m².

    Examples
    --------
    >>> round(to_m2(1000.0, "mD") / 1e-12, 6)
    0.986923
    """
    kind, factor = UNITS[check_unit(unit)]
    si = value * factor
    return si / WATER_K_PER_PERMEABILITY if kind == "conductivity" else si


def from_m2(value: float, unit: str) -> float:
    """Convert an intrinsic permeability in m² to `unit` (inverse of `to_m2`)."""
    kind, factor = UNITS[check_unit(unit)]
    si = value * WATER_K_PER_PERMEABILITY if kind == "conductivity" else value
    return si / factor


def unit_factors(unit: str, system: str) -> dict[str, Any]:
    """Factors from internal values (k in `unit`, lengths in m) to the package's units.

    Returns
    -------
    dict
        ``length``, ``k`` (multiply internal values by these) and the unit
        names ``length_unit``, ``k_unit``, ``transmissibility_unit``.

    Examples
    --------
    >>> f = unit_factors("mD", "field")
    >>> f["k"], round(f["length"], 6), f["transmissibility_unit"]
    (1.0, 3.28084, 'mD·ft')
    """
    kind, to_si = UNITS[unit]
    if system == "si":
        if kind == "conductivity":
            # K A / L is a hydraulic conductance in m²/s
            return {"length": 1.0, "k": to_si, "length_unit": "m", "k_unit": "m/s",
                    "transmissibility_unit": "m²/s"}  # fmt: skip
        return {"length": 1.0, "k": to_si, "length_unit": "m", "k_unit": "m²",
                "transmissibility_unit": "m³"}  # fmt: skip
    if kind == "conductivity":
        raise InputError("`units=field` is for permeability (mD, D, m2) inputs; this one is a "
                         "hydraulic conductivity — use `units=si`")  # fmt: skip
    return {"length": 1.0 / FOOT_M, "k": to_si / (1e-3 * DARCY_M2), "length_unit": "ft",
            "k_unit": "mD", "transmissibility_unit": "mD·ft"}  # fmt: skip

