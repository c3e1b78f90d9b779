"""Options shared by several commands, and parsers for their values."""

from __future__ import annotations

import contextlib
import re
from collections.abc import Callable
from typing import Any

import click
import dask.utils

from ..analysis.percentiles import CONVENTIONS
from ..check.limits import DEFAULT_LIMIT
from ..errors import InputError
from ..flow.solvers import SOLVERS
from ..grid import REMAINDER_POLICIES, BlockSpec
from ..io import GEOMETRY_ROLES, RESAMPLING_RULES, VALUE_SCALES
from ..methods.near_well import CONNECTIONS
from ..methods.registry import METHODS, find_method, per_axis, per_axis_text
from ..units import UNITS


class MethodChoice(click.Choice):
    """A method name (click's choice), or a method per axis such as ``xy=arithmetic,z=harmonic``.

    A method per axis is checked (`upscale.methods.registry.find_method`:
    one ``upscale: error:`` line) and given in its own text, axes grouped x
    first; whether it names every axis of the field is checked once the field is read.
    """

    def __init__(self) -> None:
        super().__init__(list(METHODS))

    def convert(self, value: Any, param: click.Parameter | None, ctx: click.Context | None) -> Any:
        """`value` as a method name or the text of a method per axis."""
        if isinstance(value, str) and "=" in value:
            find_method(value)
            return per_axis_text(per_axis(value))
        return super().convert(value, param, ctx)


def parse_numbers(text: str | None, name: str) -> list[float] | None:
    """``"2"`` or ``"2,3,1.5"`` -> list of floats; a clear error otherwise."""
    if text is None:
        return None
    try:
        return [float(part) for part in text.split(",")]
    except ValueError:
        raise click.BadParameter(
            f"{text!r} is not a number or a comma-separated list", param_hint=name
        ) from None


def parse_cell_size(text: str | None) -> tuple[float, float] | None:
    """``"25"`` or ``"25x30"`` (x first) -> (dx, dy) in m."""
    if text is None:
        return None
    parts = text.lower().split("x")
    try:
        values = [float(p) for p in parts]
    except ValueError:
        values = []
    if len(values) not in (1, 2) or min(values) <= 0:
        raise click.BadParameter(
            f"{text!r} is not DX or DXxDY in metres (e.g. 25 or 25x30)", param_hint="--cell-size"
        )
    return (values[0], values[-1])


def parse_chunk(text: str | None, block: tuple[int, int, int] | None) -> int | None:
    """``--chunk``: a size (``"64MB"``) or a number of coarse blocks (``"400blocks"``) -> bytes.

    A block count is turned into the float64 bytes of that many blocks; it is
    refused when the block is not known yet (None: ``--grid-like``).

    Examples
    --------
    >>> parse_chunk("400blocks", (1, 10, 10)), parse_chunk("1KB", (1, 10, 10))
    (320000, 1000)
    """
    if text is not None and text.strip().lower().endswith("blocks"):
        count = text.strip()[:-6].strip()
        if block is None:
            raise click.BadParameter(f"{text!r}: a number of blocks needs the block size, which "
                                     "--grid-like takes from the template; give a size such as 64MB",
                                     param_hint="--chunk")  # fmt: skip
        if not count.isdigit() or int(count) < 1:
            raise click.BadParameter(f"{text!r} is not a number of blocks such as 400blocks",
                                     param_hint="--chunk")  # fmt: skip
        return int(count) * block[0] * block[1] * block[2] * 8
    return parse_bytes(text)


def parse_bytes(text: str | None) -> int | None:
    """A size -> bytes, as dask reads it (`dask.utils.parse_bytes`); a number is required.

    Units, in any case, spaces allowed: B; kB, MB, GB, TB, PB (powers of
    1000) and KiB, MiB, GiB, TiB, PiB (powers of 1024); dask also takes the
    short forms K, M, G, T, P — powers of 1000 like kB, not 1024 — and Ki,
    Mi, Gi, Ti, Pi, and numbers such as ``1e6``. A size that comes to zero
    bytes or less is refused.

    Examples
    --------
    >>> parse_bytes("64MB"), parse_bytes("64M"), parse_bytes("64MiB"), parse_bytes("64Mi")
    (64000000, 64000000, 67108864, 67108864)
    """
    if text is None:
        return None
    try:
        size = dask.utils.parse_bytes(text) if any(c.isdigit() for c in text) else 0
    except (ValueError, OverflowError):  # an unknown unit or number; inf
        size = 0
    if size <= 0:
        raise click.BadParameter(f"{text!r} is not a size such as 64MB or 1GiB, or a number of blocks "
                                 "such as 400blocks", param_hint="--chunk")  # fmt: skip
    return size


def field_options(command: Callable[..., Any]) -> Callable[..., Any]:
    """Options that describe how to read a field (shared by run and info)."""
    options = [
        click.option("--unit", type=click.Choice(list(UNITS)), default="mD", show_default=True,
                     help="Unit of the stored values: permeability (mD, D, m2) or hydraulic "
                     "conductivity (m/s, m/day)."),
        click.option("--scale", type=click.Choice(VALUE_SCALES), default="linear", show_default=True,
                     help="Whether the file stores k, log10(k) or ln(k)."),
        click.option("--nodata", type=float, default=None,
                     help="Value marking inactive cells (overrides the raster's own nodata)."),
        click.option("--ky", type=click.Path(dir_okay=False), default=None,
                     help="Raster of permeability along y on the same grid (default: the field)."),
        click.option("--kz", type=click.Path(dir_okay=False), default=None,
                     help="Raster of permeability along z, 3D only (default: the field)."),
        click.option("--kv-kh", type=float, default=None,
                     help="kz as a fraction of kx, 3D only (e.g. 0.1)."),
        click.option("--porosity", type=click.Path(dir_okay=False), default=None,
                     help="Porosity raster (fraction) on the same grid."),
        click.option("--resample", type=click.Choice(RESAMPLING_RULES), default=None,
                     help="Resample a --ky, --kz or --porosity raster on another grid (origin, cell "
                     "size, extent or CRS) onto the field's grid with this rule; nodata stays out "
                     "[default: refuse such a raster]."),
        click.option("--dz", default=None, metavar="M[,M...]",
                     help="Layer thickness in m: one value, or one per layer (band), top first. "
                     "Required for multi-band rasters."),
        click.option("--top", default=None, metavar="M|FILE",
                     help="Elevation of the model's top in m (positive up): one value or a one-band "
                     "raster [default: 0]."),
        click.option("--thickness", default=None, metavar="M|FILE",
                     help="Cell thickness in m, 0 = pinched out: a raster with one band per layer (replaces "
                     "--dz), or for a map one value or a raster (a 2D conductivity map then also gets "
                     "transmissivity)."),
        click.option("--surfaces", default=None, type=click.Path(dir_okay=False),
                     help="Raster of every layer's top elevation and the last layer's base (one band more "
                     "than layers), in m, positive up; replaces --dz, --top and --thickness."),
        click.option("--cell-size", default=None, metavar="DX[xDY]",
                     help="Cell size in m; required for .npy arrays and rasters without a "
                     "projected CRS."),
    ]
    for option in reversed(options):
        command = option(command)
    return command


def block_options(command: Callable[..., Any]) -> Callable[..., Any]:
    """The block partition and its rules (shared by run and compare); see `block_spec`."""
    command = block_rule_options(command)
    command = click.option(
        "--grid-like", type=click.Path(dir_okay=False), default=None, metavar="FILE",
        help="A raster whose cells are the coarse blocks along x and y (its origin and cell size; its values "
        "are not read): each cell a whole number of fine cells, its edges on fine cell edges, the same CRS. "
        "The field is cut to the template's whole cells, so the coarse GeoTIFFs are on the template's grid; "
        "--block then gives the layers only (2, 2,2,4 or auto:4) [default: 1 fine layer per coarse layer].",
    )(command)  # fmt: skip
    return click.option(
        "--block", default=None, metavar="NXxNY[xNZ]",
        help="Fine cells per coarse block, x (columns) first: 8x4 is 8 columns by 4 rows; 8x8x2 adds 2 "
        "layers. Required unless --grid-like gives x and y.",
    )(command)  # fmt: skip


def block_rule_options(command: Callable[..., Any]) -> Callable[..., Any]:
    """The rules of a block partition: remainder, least active fraction, zero k (run, compare, plan)."""
    options = [
        click.option("--remainder", type=click.Choice(REMAINDER_POLICIES), default="stop",
                     show_default=True, help="When the grid does not divide into whole blocks: stop "
                     "with an error, crop the last cells, or keep smaller edge blocks."),
        click.option("--min-active", type=click.FloatRange(0, 1), default=0.0, show_default=True,
                     help="Blocks whose active volume fraction is below this become inactive."),
        click.option("--zero-k", default="auto", show_default=True,
                     metavar="auto|inactive|floor[:K]|keep",
                     help="Blocks upscaled to k = 0 along some axis (no path across them), which many "
                     "simulators refuse: auto makes blocks with k = 0 along every axis inactive and "
                     "raises a zero along some axes only to the floor; inactive makes every such "
                     "block inactive; floor raises every zero to K (unit of k; default a thousandth "
                     "of the smallest positive k of the blocks along that axis); keep leaves the "
                     "zeros."),
    ]  # fmt: skip
    for option in reversed(options):
        command = option(command)
    return command


def block_spec(options: dict[str, Any]) -> tuple[BlockSpec, str | None]:
    """Turn the values of `block_options` into the `BlockSpec` they describe, and the template raster.

    With a template (``--grid-like``), ``--block`` gives the layers alone
    (``2``, ``2,2,4``, ``auto:4``; 1 fine layer per coarse layer when left
    out) and the sizes along x and y are 1 until the job reads them from the
    template (`upscale.jobs.run.snapped`).

    Examples
    --------
    >>> rules = {"remainder": "stop", "min_active": 0.0, "zero_k": "auto"}
    >>> spec, template = block_spec({"block": "2,2,4", "grid_like": "coarse.tif", **rules})
    >>> spec.cells, template
    (((2, 2, 4), 1, 1), 'coarse.tif')
    """
    text, grid_like = options.pop("block"), options.pop("grid_like")
    rules = _block_rules(options)
    if grid_like is None:
        if text is None:
            raise InputError("give the blocks: --block NXxNY[xNZ] (fine cells per block, e.g. 8x8), or "
                             "--grid-like FILE (a raster whose cells are the blocks)")  # fmt: skip
        return BlockSpec.parse(text, **rules), None
    if text is None or "x" not in text.lower():
        with contextlib.suppress(InputError):  # refused below, in the words of --grid-like
            return BlockSpec.parse(f"1x1x{text or 1}", **rules), grid_like
    raise InputError(f"--grid-like takes the blocks' x and y from the template's cells; give --block the "
                     f"layers alone (2, 2,2,4 or auto:4), not {text!r}")


def block_specs(text: str, options: dict[str, Any]) -> list[BlockSpec]:
    """``"4x4,8x8"`` and the values of `block_rule_options` (taken from `options`) -> one `BlockSpec` each.

    A comma starts a new block only where a block follows (``NXx...``), so a
    grouping of the layers (``8x8x2,2,4``) stays one block.
    """
    rules = _block_rules(options)
    return [BlockSpec.parse(part, **rules) for part in re.split(r",(?=\s*\d+\s*x)", text, flags=re.I)]


def _block_rules(options: dict[str, Any]) -> dict[str, Any]:
    """The values of `block_rule_options`, taken from `options`."""
    return {name: options.pop(name) for name in ("remainder", "min_active", "zero_k")}


def method_options(command: Callable[..., Any]) -> Callable[..., Any]:
    """The methods compared and their shared options (compare, plan); see `parse_methods`."""
    options = [
        click.option("--methods", default=None, metavar="A,B,...",
                     help=f"Methods to compare (default: all): {', '.join(METHODS)}. 'flow' without --bc "
                     "stands for its three boundary conditions."),
        click.option("--exponent", type=float, default=None,
                     help="Exponent ω of the power average [default: 1/3]."),
        click.option("--bc", type=click.Choice(["sealed", "linear", "periodic"]), default=None,
                     help="Boundary conditions of the flow methods [default: all three for flow]."),
        click.option("--border", type=int, default=None, metavar="CELLS",
                     help="Border of the flow methods' local solves, in fine cells [default: 0]."),
    ]  # fmt: skip
    for option in reversed(options):
        command = option(command)
    return command


def parse_methods(text: str | None) -> list[str] | None:
    """``--methods``: ``"a,b"`` -> ``["a", "b"]``; None (every method) when not given."""
    return None if not text else [m.strip() for m in text.split(",") if m.strip()]


def percentile_option(command: Callable[..., Any]) -> Callable[..., Any]:
    """``--percentiles``: how the percentiles of an ensemble are named (`upscale.analysis.percentiles`)."""
    return click.option(
        "--percentiles", type=click.Choice(CONVENTIONS), default=CONVENTIONS[0], show_default=True,
        help="How the percentiles over an ensemble (several FIELDs) are named: nonexceedance (the 10th "
        "percentile, which 10 % of the realizations fall below) or exceedance (the reverse reading of "
        "many reservoir engineers: P10 is exceeded by 10 % of the realizations, the 90th percentile).",
    )(command)


def check_options(command: Callable[..., Any]) -> Callable[..., Any]:
    """Options of the fine-versus-coarse flow check (shared by run and check)."""
    options = [
        click.option("--solver", type=click.Choice(SOLVERS), default="auto", show_default=True,
                     help="Linear solver of the check: algebraic multigrid, direct, or chosen by size."),
        click.option("--tolerance", type=click.FloatRange(min=1e-15, max=1e-3), default=1e-10,
                     show_default=True, help="Relative residual required of every pressure solve."),
        click.option("--check-limit", type=click.IntRange(min=1), default=DEFAULT_LIMIT,
                     show_default=True, metavar="CELLS",
                     help="Most fine cells the check solves at once (about 0.65 kB each in 2D, 1 kB in "
                     "3D); beyond it the check runs on sub-domain windows of at most that size, "
                     "and the summary says so."),
    ]
    for option in reversed(options):
        command = option(command)
    return command


def well_options(command: Callable[..., Any]) -> Callable[..., Any]:
    """Options of the well-driven check (shared by run and check)."""
    options = [
        click.option("--wells", type=click.Path(dir_okay=False), default=None, metavar="FILE",
                     help="A wells file (CSV, docs/wells.md): the check also drives these wells on the "
                     "fine and the coarse grid and compares their rates (pressure wells) or pressures "
                     "(rate wells)."),
        click.option("--outer-pressure", type=float, default=None, metavar="PRESSURE",
                     help="Hold the four sides of the domain at this pressure in the well check "
                     "[default: closed sides]."),
        click.option("--well-connection", type=click.Choice(CONNECTIONS), default=CONNECTIONS[0],
                     show_default=True,
                     help="How the coarse blocks that hold a well connect to it: near-well (a local "
                     "fine solve around each well sets the connection factor and the faces near "
                     "it) or peaceman (Peaceman's formula on the block's kx, ky)."),
    ]
    for option in reversed(options):
        command = option(command)
    return command


#: ``--out-unit``: the unit of the coarse values, tables and figures (run, compare).
out_unit_option = click.option(
    "--out-unit", type=click.Choice(list(UNITS)), default=None,
    help="Unit of the coarse values, transmissibilities ((unit)·m), tables and figures, of the same kind "
    "as --unit: a permeability (mD, D, m2) or a hydraulic conductivity (m/s, m/day) [default: --unit].",
)  # fmt: skip


def read_options(options: dict[str, Any]) -> dict[str, Any]:
    """Turn the values of `field_options` into keyword arguments of `upscale.read_field`."""
    dz = parse_numbers(options.pop("dz"), "--dz")
    return {
        "unit": options.pop("unit"),
        "scale": options.pop("scale"),
        "nodata": options.pop("nodata"),
        "ky": options.pop("ky"),
        "kz": options.pop("kz"),
        "kv_kh": options.pop("kv_kh"),
        "porosity": options.pop("porosity"),
        "resample": options.pop("resample"),
        "dz": dz,
        "cell_size": parse_cell_size(options.pop("cell_size")),
        "top": _value_or_path(options.pop("top")),
        "thickness": _value_or_path(options.pop("thickness")),
        "surfaces": options.pop("surfaces"),
    }


def _value_or_path(text: str | None) -> float | str | None:
    """A number in m, or else the path of a raster."""
    if text is None:
        return None
    try:
        return float(text)
    except ValueError:
        return text


def recorded(read: dict[str, Any]) -> dict[str, Any]:
    """The read options a summary records to read the field again (paths are inputs; no resampling unset)."""
    return {k: v for k, v in read.items()
            if k not in ("ky", "kz", "porosity", *GEOMETRY_ROLES) and not (k == "resample" and v is None)
            or k in GEOMETRY_ROLES and isinstance(v, float)}  # fmt: skip
