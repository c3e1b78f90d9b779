"""Method name -> implementation, shared by the library and the command line."""

from __future__ import annotations

import math
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from typing import Any

from ..errors import InputError
from ..field import AXES, PERMEABILITY, Field
from ..parallel import apply_blocks
from . import averages, bounds
from .flow_based import direct_properties, flow_properties
from .global_flow import global_properties
from .local_global import MAX_CHANGE, MAX_ITERATIONS, couple, local_global_properties
from .renormalization import renormalized_properties


@dataclass(frozen=True)
class EachAxis:
    """The kernel of a method that reduces each block of one array at a time.

    Called as every method's kernel, ``kernel(field, cells, **options)``, it
    gives the lazy ``kx``, ``ky`` (``kz``) of `rule` applied to each
    permeability array, chunk by chunk (`upscale.parallel.apply_blocks`).

    Parameters
    ----------
    rule : callable
        ``rule(k, dz, block, axis, **options) -> coarse`` on one chunk of
        whole blocks (`upscale.methods.averages`, `upscale.methods.bounds`).
    directional : bool
        True if the result along an axis depends on the flow axis (bounds);
        otherwise an array shared by two properties is reduced once.
    """

    rule: Callable[..., Any]
    directional: bool = False

    def __call__(self, field: Field, cells: tuple[int, int, int], **options: Any) -> dict[str, Any]:
        """Lazy coarse ``kx``, ``ky`` (``kz``) of `field` in blocks of `cells` (z, y, x) fine cells."""
        coarse: dict[str, Any] = {}
        done: dict[tuple[int, int | None], Any] = {}
        for axis_name in field.axes:
            name, axis = PERMEABILITY[axis_name], AXES[axis_name]
            array = getattr(field, name)
            key = (id(array), axis if self.directional else None)
            if key not in done:
                done[key] = apply_blocks(self.rule, array, field.grid.dz, cells, axis, **options)
            coarse[name] = done[key]
        return coarse


@dataclass(frozen=True)
class Method:
    """An upscaling method.

    Parameters
    ----------
    name : str
        Name used on the command line and in summaries.
    kernel : callable
        ``kernel(field, cells, **options) -> dict`` of lazy coarse arrays, one
        protocol for every family: averages and bounds give ``kx``, ``ky``
        (``kz``) through `EachAxis`; flow-based methods give ``tensor`` (and
        ``faces``), see `upscale.methods.flow_based`.
    summary : str
        One line for ``--help`` and reports.
    options : tuple of str
        Names of the method's own options (e.g. ``exponent``).
    takes_zeros : callable
        ``takes_zeros(options) -> bool``: whether zero-permeability cells are valid input.
    defaults : mapping
        Values of options that may be left out.
    local : bool
        True for methods that solve local flow problems on all properties at once.
    faces : str or None
        The ``source`` of the coarse face transmissibilities the method
        upscales directly (``flow``, ``global``), as the package's
        ``connections.csv`` names it; None: the harmonic half-block rule.
    global_flows : bool
        True if the kernel fits the fine model's global flows: it takes them
        as ``flows=`` (`upscale.methods.global_flow`), so that a run or a
        comparison that solves them for the check solves them once.
    couple : callable or None
        ``couple(regions, trans, closed, **options) -> (faces, Coupling)``:
        a step after the coarse model is built that iterates its face
        transmissibilities with coarse global flows (``local-global``), from
        what the kernel gave as ``regions``.
    bound : {'upper', 'lower'} or None
        Whether the method is a bound of the effective permeability rather
        than an estimate of it: the arithmetic and harmonic means are the
        upper and lower bounds of Wiener (1912), slabs and tubes those of
        Cardwell & Parsons (1945). A bound that ranks first on a field does so
        because its error cancels there, not because it captures the flow.
    """

    name: str
    kernel: Callable[..., dict[str, Any]]
    summary: str
    options: tuple[str, ...] = ()
    takes_zeros: Callable[[Mapping[str, Any]], bool] = field(default=lambda options: True)
    defaults: Mapping[str, Any] = field(default_factory=dict)
    local: bool = False
    faces: str | None = None
    global_flows: bool = False
    bound: str | None = None
    couple: Callable[..., Any] | None = None

    @property
    def directional(self) -> bool:
        """True if the result along an axis depends on the flow axis (bounds)."""
        return isinstance(self.kernel, EachAxis) and self.kernel.directional


METHODS: Mapping[str, Method] = {
    m.name: m
    for m in (
        Method(
            "arithmetic", EachAxis(averages.arithmetic_mean), "volume-weighted arithmetic mean", bound="upper"
        ),
        Method(
            "harmonic",
            EachAxis(averages.harmonic_mean),
            "volume-weighted harmonic mean",
            takes_zeros=lambda options: False,
            bound="lower",
        ),
        Method(
            "geometric",
            EachAxis(averages.geometric_mean),
            "volume-weighted geometric mean",
            takes_zeros=lambda options: False,
        ),
        Method(
            "power",
            EachAxis(averages.power_mean),
            "volume-weighted power average with exponent ω (`exponent`)",
            options=("exponent",),
            takes_zeros=lambda options: options["exponent"] > 0,
        ),
        Method(
            "tubes",
            EachAxis(bounds.tubes_bound, directional=True),
            "Cardwell–Parsons lower bound: cells in series along each tube, tubes in parallel",
            bound="lower",
        ),
        Method(
            "slabs",
            EachAxis(bounds.slabs_bound, directional=True),
            "Cardwell–Parsons upper bound: cells in parallel across each slab, slabs in series",
            bound="upper",
        ),
        Method(
            "flow",
            flow_properties,
            "local pressure solve in each block (`bc=sealed|linear|periodic`, `border=N`)",
            options=("bc", "border"),
            defaults={"bc": "sealed", "border": 0},
            local=True,
        ),
        Method(
            "flow-transmissibility",
            direct_properties,
            "flow-based blocks, and coarse transmissibilities from two-block solves (`border=N`)",
            options=("bc", "border"),
            defaults={"bc": "sealed", "border": 0},
            local=True,
            faces="flow",
        ),
        Method(
            "global",
            global_properties,
            "coarse transmissibilities fitted to the fine model's global flows; sealed flow-based blocks",
            local=True,
            faces="global",
            global_flows=True,
        ),
        Method(
            "renormalization",
            renormalized_properties,
            "King's renormalization: repeated exact 2x2(x2) solves; powers-of-two blocks",
            local=True,
        ),
        Method(
            "local-global",
            local_global_properties,
            "two-block transmissibilities iterated with coarse global flows on extended regions (`border=N`)",
            options=("bc", "border", "sides", "max_change", "max_iterations"),
            defaults={"bc": "sealed", "border": 0, "sides": "pressure", "max_change": MAX_CHANGE,
                      "max_iterations": MAX_ITERATIONS},
            local=True,
            faces="local-global",
            couple=couple,
        ),
    )
}


def check_exponent(exponent: float | None) -> None:
    """Refuse an exponent of the power average that is not a finite number (nan, inf)."""
    if exponent is not None and not math.isfinite(exponent):
        raise InputError(f"`exponent` must be a finite number such as 0.5 or -1, got {exponent}")


def get_method(name: str, options: Mapping[str, Any] | None = None) -> tuple[Method, dict]:
    """Look up a method and check its options.

    Parameters
    ----------
    name : str
        A key of `METHODS`.
    options : mapping, optional
        Method options; unknown ones and missing required ones are refused.

    Returns
    -------
    (Method, dict)
        The method and its options restricted to the ones it takes.

    Examples
    --------
    >>> method, opts = get_method("power", {"exponent": 0.5})
    >>> method.name, opts
    ('power', {'exponent': 0.5})
    """
    if name not in METHODS:
        raise InputError(f"unknown method {name!r}; choose one of {', '.join(METHODS)}")
    method = METHODS[name]
    given = {k: v for k, v in (options or {}).items() if v is not None}
    given = {**{k: v for k, v in method.defaults.items() if k not in given}, **given}
    extra = sorted(set(given) - set(method.options))
    if extra:
        raise InputError(f"method {name!r} takes no option {', '.join(extra)}")
    missing = [o for o in method.options if o not in given]
    if missing:
        raise InputError(f"method {name!r} needs `{missing[0]}`")
    check_exponent(given.get("exponent"))
    return method, {o: given[o] for o in method.options}
