"""Method name -> implementation, shared by the library and the command line."""

from __future__ import annotations

import math
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from typing import Any

from ..errors import InputError
from ..field import AXES, PERMEABILITY, Field
from ..parallel import apply_blocks
from . import averages, bounds, geometry
from .flow_based import TENSOR, direct_properties, flow_properties
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
            if key not in done and field.geometry is not None:
                w = field.geometry.ratio(field.grid.dz)
                done[key] = geometry.weighted(self.rule, array, w, field.grid.dz, cells, axis, **options)
            elif key not in done:
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


def run_kernel(method: Method, field: Field, cells: tuple[int, int, int], **options: Any) -> dict[str, Any]:
    """The method's lazy coarse properties of `field`, honouring its geometry.

    Without a geometry, the method's kernel. With one, the averages weigh
    cells by their true volumes; every other method upscales the reference
    field and its values are turned back (`upscale.methods.geometry`).
    """
    kernel = method.kernel
    if field.geometry is None or isinstance(kernel, PerAxis) or (
        isinstance(kernel, EachAxis) and kernel.rule in geometry.WEIGHTED
    ):
        return kernel(field, cells, **options)
    return geometry.to_true(kernel(field.reference(), cells, **options), geometry.block_ratio(field, cells))


#: The axes a method per axis names, in the order its text lists them.
AXIS_LETTERS = "xyz"


@dataclass(frozen=True)
class PerAxis:
    """The kernel of a method per axis: each axis's coarse permeability by its own method.

    Called as every method's kernel, it runs each method's kernel with the
    options that method takes and keeps, for each axis the method serves,
    that axis's permeability (the diagonal term of a tensor): each axis's
    value is the one its method gives alone.

    Parameters
    ----------
    parts : tuple of (str, Method)
        Axis letters (e.g. ``"xy"``) and the method that serves them.
    """

    parts: tuple[tuple[str, Method], ...]

    def __call__(self, field: Field, cells: tuple[int, int, int], **options: Any) -> dict[str, Any]:
        """Lazy coarse ``kx``, ``ky`` (``kz``) of `field` in blocks of `cells` (z, y, x) fine cells."""
        coarse: dict[str, Any] = {}
        for axes, method in self.parts:
            lazy = run_kernel(method, field, cells, **{o: options[o] for o in method.options})
            for axis in axes:
                name = PERMEABILITY[axis]
                coarse[name] = lazy[name] if name in lazy else lazy["tensor"][TENSOR.index(f"k{axis}{axis}")]
        return coarse


def _known(name: str) -> Method:
    """The method of `name` in `METHODS`; an unknown name is refused with the list of names."""
    if name not in METHODS:
        raise InputError(f"unknown method {name!r}; choose one of {', '.join(METHODS)}")
    return METHODS[name]


def per_axis(text: str) -> dict[str, str]:
    """The method of each axis named in a method per axis such as ``xy=arithmetic,z=harmonic``.

    Parameters
    ----------
    text : str
        Groups of axis letters (x, y, z) and a method name, separated by commas.

    Returns
    -------
    dict of str to str
        Axis letter -> method name, in the order x, y, z.

    Raises
    ------
    InputError
        If the text is not of that form, names an axis twice or an unknown method.

    Examples
    --------
    >>> per_axis("z=flow, xy=arithmetic")
    {'x': 'arithmetic', 'y': 'arithmetic', 'z': 'flow'}
    """
    chosen: dict[str, str] = {}
    for group in text.split(","):
        axes, _, name = (part.strip() for part in group.partition("="))
        if not axes or not name or set(axes) - set(AXIS_LETTERS):
            raise InputError(f"method per axis {text!r}: write groups of axes and a method, as "
                             "xy=arithmetic,z=harmonic")  # fmt: skip
        _known(name)
        for axis in axes:
            if axis in chosen:
                raise InputError(f"method per axis {text!r}: axis {axis} is given twice")
            chosen[axis] = name
    return {axis: chosen[axis] for axis in AXIS_LETTERS if axis in chosen}


def per_axis_text(chosen: Mapping[str, str]) -> str:
    """The text of a method per axis: axes that share a method grouped, x first.

    Examples
    --------
    >>> per_axis_text({"x": "arithmetic", "z": "harmonic", "y": "arithmetic"})
    'xy=arithmetic,z=harmonic'
    """
    groups: dict[str, str] = {}
    for axis in AXIS_LETTERS:
        if axis in chosen:
            groups[chosen[axis]] = groups.get(chosen[axis], "") + axis
    return ",".join(f"{axes}={name}" for name, axes in groups.items())


def method_record(name: str, options: Mapping[str, Any]) -> dict[str, Any]:
    """A method as summaries and the package record it: ``name``, ``options`` and, per axis, ``per_axis``.

    ``per_axis`` (axis letter -> method name) is written for a method per
    axis only.

    Examples
    --------
    >>> method_record("xy=arithmetic,z=harmonic", {})  # doctest: +NORMALIZE_WHITESPACE
    {'name': 'xy=arithmetic,z=harmonic', 'options': {},
     'per_axis': {'x': 'arithmetic', 'y': 'arithmetic', 'z': 'harmonic'}}
    >>> method_record("power", {"exponent": 0.5})
    {'name': 'power', 'options': {'exponent': 0.5}}
    """
    record = {"name": name, "options": dict(options)}
    return {**record, "per_axis": per_axis(name)} if "=" in name else record


def serves_some_axes(name: str, options: Mapping[str, Any]) -> bool:
    """Whether method `name` with `options` may serve some axes only, in a method per axis.

    Not the methods that upscale the coarse transmissibilities of every axis
    together (flow-transmissibility, global, local-global), nor flow with a
    boundary condition that gives a full tensor (linear, periodic).

    Examples
    --------
    >>> serves_some_axes("flow", {"bc": "sealed"}), serves_some_axes("flow", {"bc": "linear"})
    (True, False)
    """
    method = METHODS[name]
    return method.faces is None and not method.global_flows and options.get("bc", "sealed") == "sealed"


def _refuse_mixing(name: str) -> None:
    """Refuse a method that cannot serve some axes only, saying why."""
    if not serves_some_axes(name, {}):
        raise InputError(f"method {name!r} cannot serve some axes only: it upscales the coarse "
                         "transmissibilities of every axis together; use it on every axis, or flow "
                         "for some axes")  # fmt: skip


def find_method(name: str) -> Method:
    """The method of a name in `METHODS`, or of a method per axis (`per_axis`).

    A method per axis that names one method is that method; one that names
    several is a `Method` of its own, whose kernel is `PerAxis`, whose options
    are those its methods take (each passed to the methods that take it),
    and which is a bound only if all its methods are the same bound.

    Raises
    ------
    InputError
        For an unknown method, or a method per axis that `per_axis` refuses or
        that mixes a method which upscales transmissibilities directly
        (flow-transmissibility, global, local-global).

    Examples
    --------
    >>> find_method("z=harmonic,xy=arithmetic").name
    'xy=arithmetic,z=harmonic'
    >>> find_method("xy=flow").name
    'flow'
    """
    if "=" not in name:
        return _known(name)
    chosen = per_axis(name)
    names = list(dict.fromkeys(chosen.values()))
    if len(names) == 1:
        return METHODS[names[0]]
    for one in names:
        _refuse_mixing(one)
    text = per_axis_text(chosen)
    parts = tuple((axes, METHODS[part]) for part, axes in (g.split("=")[::-1] for g in text.split(",")))
    methods = [METHODS[n] for n in names]
    bounds = {m.bound for m in methods}
    return Method(
        text,
        PerAxis(parts),
        "a method per axis: " + ", ".join(f"{axes} by {m.name}" for axes, m in parts),
        options=tuple(dict.fromkeys(o for m in methods for o in m.options)),
        takes_zeros=lambda options: all(m.takes_zeros({o: options[o] for o in m.options}) for m in methods),
        defaults={k: v for m in methods for k, v in m.defaults.items()},
        local=any(m.local for m in methods),
        bound=bounds.pop() if len(bounds) == 1 else None,
    )


def method_for_axes(name: str, axes: tuple[str, ...]) -> str:
    """The name of `name` (a method or a method per axis) on a field of `axes`.

    Parameters
    ----------
    name : str
        A key of `METHODS` or a method per axis (`per_axis`).
    axes : tuple of str
        The field's axes, ``("x", "y")`` or ``("x", "y", "z")``.

    Returns
    -------
    str
        A method's name, or the text of a method per axis that names every
        axis of the field and two methods or more (`per_axis_text`).

    Raises
    ------
    InputError
        If a method per axis leaves out an axis of the field or names one it lacks.

    Examples
    --------
    >>> method_for_axes("x=flow,y=flow", ("x", "y"))
    'flow'
    """
    if "=" not in name:
        return name
    chosen = per_axis(name)
    lacking = [a for a in axes if a not in chosen]
    if lacking:
        raise InputError(f"method per axis {name!r} names no method for axis {lacking[0]}; name one for "
                         f"every axis of the field ({', '.join(axes)})")  # fmt: skip
    beyond = [a for a in chosen if a not in axes]
    if beyond:
        raise InputError(f"method per axis {name!r} names axis {beyond[0]}, which the field lacks "
                         f"(its axes: {', '.join(axes)})")  # fmt: skip
    return find_method(name).name


def check_exponent(exponent: float | None) -> None:
    """Refuse an exponent of the power average that is not a finite number (nan, inf)."""
    if exponent is not None and not math.isfinite(exponent):
        raise InputError(f"`exponent` must be a finite number such as 0.5 or -1, got {exponent}")


def get_method(name: str, options: Mapping[str, Any] | None = None) -> tuple[Method, dict]:
    """Look up a method and check its options.

    Parameters
    ----------
    name : str
        A key of `METHODS`, or a method per axis (`find_method`).
    options : mapping, optional
        Method options; unknown ones and missing required ones are refused.
        A method per axis takes the options of its methods, each passed to
        the methods that take it; its flow-based methods take ``bc='sealed'``
        only, since the other conditions give a full tensor, whose cross terms
        couple the axes.

    Returns
    -------
    (Method, dict)
        The method and its options restricted to the ones it takes.

    Examples
    --------
    >>> method, opts = get_method("power", {"exponent": 0.5})
    >>> method.name, opts
    ('power', {'exponent': 0.5})
    >>> get_method("xy=power,z=flow", {"exponent": 0.5})[1]
    {'exponent': 0.5, 'bc': 'sealed', 'border': 0}
    """
    method = find_method(name)
    given = {k: v for k, v in (options or {}).items() if v is not None}
    given = {**{k: v for k, v in method.defaults.items() if k not in given}, **given}
    extra = sorted(set(given) - set(method.options))
    if extra:
        raise InputError(f"method {name!r} takes no option {', '.join(extra)}")
    missing = [o for o in method.options if o not in given]
    if missing:
        raise InputError(f"method {name!r} needs `{missing[0]}`")
    check_exponent(given.get("exponent"))
    if isinstance(method.kernel, PerAxis) and given.get("bc", "sealed") != "sealed":
        raise InputError(f"`bc` {given['bc']} gives a full tensor, whose cross terms couple the axes; a "
                         "method per axis takes flow with `bc=sealed` only (or flow alone on every axis)")
    return method, {o: given[o] for o in method.options}
