"""Map figures: fine and coarse fields, pressures (under an axis drop or driven by wells), flux mismatches.

Every map is drawn cell by cell on the cells' true edges in map
coordinates (the raster's, or metres from the origin; `coordinates`), with
one colour bar per figure that states the property and unit. Cells with no
value show a hatched background (`style.missing_background`). For a 3D
model a map shows one layer; `field_maps` with a row shows a vertical
x–z section through it, on the true layer thicknesses — for a model with a
geometry (`upscale.geometry`) on the true elevations, every column between
its own surfaces, so a pinched-out cell has no height; in a layer's map it
has no value. Wells are marked at
their x, y by their name, injectors and producers by their own markers.
"""

from __future__ import annotations

import numpy as np
from matplotlib.axes import Axes
from matplotlib.colors import Normalize, TwoSlopeNorm
from matplotlib.figure import Figure
from matplotlib.lines import Line2D

from ..analysis.compare import Comparison, Entry
from ..analysis.ensemble_maps import BlockSpread
from ..analysis.percentiles import PERCENTILES, label
from ..check.wells import WellCheck
from ..field import Field, Grid
from ..grid import BlockSpec
from ..units import property_label
from .coordinates import depth_edges, face_edges, label_map, plan_edges
from .flux import coarse_face_mismatch
from .layout import LABEL, TICK, outer_labels, page_sizes, panel_grid, title
from .style import (
    MISMATCH_MAP,
    MISSING_HATCH,
    MISSING_LABEL,
    MISSING_LINE,
    PERMEABILITY_MAP,
    PRESSURE_MAP,
    SPREAD_MAP,
    extend_of,
    log_norm,
    missing_background,
    missing_key,
    on_log_scale,
    with_missing,
)
from .verdict import entry_name, one_method


def _draw(ax, values: np.ndarray, edges: tuple[np.ndarray, np.ndarray], **style):
    """`values` (rows, columns) as cells between `edges` (x, y), over the hatched no-value background."""
    missing_background(ax)
    # cells as an embedded image in vector files: a 256 x 256 map as SVG quads took 14 MB and 8 s
    return ax.pcolormesh(*edges, np.ma.masked_invalid(values), shading="flat", rasterized=True, **style)


def _edges(grid: Grid, section: bool) -> tuple[np.ndarray, np.ndarray]:
    x, y = plan_edges(grid)
    return (x, depth_edges(grid)) if section else (x, y)


def _columns(field: Field, row: int, values: np.ndarray) -> tuple[tuple[np.ndarray, np.ndarray], np.ndarray]:
    """Edges and values of a section through `row` on the true elevations of `field`'s geometry.

    Each column is drawn between its own surfaces, as stair steps: its two
    edges carry its surfaces, and a cell of no width (no value) joins it to
    the next column.

    Returns
    -------
    ((x, z), values)
        x and z of shape (L + 1, 2N), values of shape (L, 2N - 1).
    """
    x, _ = plan_edges(field.grid)
    surfaces = np.repeat(field.geometry.surfaces()[:, row, :], 2, axis=1)
    drawn = np.full((values.shape[0], surfaces.shape[1] - 1), np.nan)
    drawn[:, 0::2] = values
    return (np.broadcast_to(np.repeat(x, 2)[1:-1], surfaces.shape), surfaces), drawn


def _finish(fig: Figure, axes: list, grid: Grid, section: bool, values: list[np.ndarray],
            elevations: tuple[float, float] | None = None, missing: str = MISSING_LABEL) -> None:  # fmt: skip
    """Axis labels on the outer panels, aspect, the no-value key (`missing`) when a panel has no-value cells.

    A section on true `elevations` (lowest, highest, m) is drawn upwards.
    """
    for ax in axes:
        label_map(ax, grid, section)
        if section and elevations is not None:
            ax.set_aspect("auto")
            ax.set_ylim(*elevations)
            ax.set_ylabel("elevation (m)")
        elif section:
            ax.set_aspect("auto")
            ax.set_ylim(float(depth_edges(grid)[-1]), 0.0)  # depth grows downwards
        else:
            ax.set_aspect("equal")
    outer_labels(axes)
    if any(np.isnan(np.asarray(v, dtype=float)).any() for v in values):
        missing_key(fig, missing)
    page_sizes(fig)


def _slice(array: np.ndarray, layer: int | None, row: int | None) -> np.ndarray:
    return array[:, row, :] if row is not None else array[layer]


def field_maps(comparison: Comparison, unit: str, *, layer: int = 0, row: int | None = None) -> Figure:
    """The fine kx beside the coarse kx of every method, on one shared log colour scale.

    Values beyond the scale (the 0.5th to 99.5th percentile) and zeros take
    its end colours, marked by triangles on the colour bar.

    Parameters
    ----------
    comparison : Comparison
    unit : str
        Permeability unit for the colour bar.
    layer : int
        Fine layer shown in plan (its coarse layer is the one holding it).
    row : int, optional
        Show a vertical x–z section through this fine row instead (3D).
    """
    fine = comparison.fine
    ran = comparison.ranked
    spec = comparison.block
    where = (None, row) if row is not None else (layer, None)
    coarse_where = ((None, spec.coarse_index(row, fine.shape[1], 1)) if row is not None
                    else (spec.coarse_index(layer, fine.shape[0], 0), None))  # fmt: skip
    fine_values = _slice(np.asarray(fine.kx, dtype=float), *where)
    if fine.geometry is not None and row is None:  # a pinched-out cell holds no rock: no value to show
        fine_values = np.where(np.asarray(fine.geometry.thickness)[layer] > 0, fine_values, np.nan)
    coarse_values = [_slice(e.result.coarse.kx, *coarse_where) for e in ran]
    norm = log_norm(fine_values, *coarse_values)
    section = row is not None
    held = "" if section or fine.ndim == 2 else "\n" + coarse_layer_text(spec, layer, fine.shape[0])
    fig, axes = panel_grid(1 + len(ran), height=2.0 if section else None, share=True,
                           title_lines=1 + held.count("\n"))  # fmt: skip
    cmap = with_missing(PERMEABILITY_MAP)
    true = section and fine.geometry is not None

    def panel(ax: Axes, field: Field, values: np.ndarray, at: int | None):
        if not true:
            return _draw(ax, on_log_scale(values), _edges(field.grid, section), cmap=cmap, norm=norm)
        (x, z), values = _columns(field, at, values)
        mesh = _draw(ax, on_log_scale(values), (x, z), cmap=cmap, norm=norm)
        # no value is hatched inside the model only: above and below it there is no rock to draw
        ax.patch.set_hatch(None)
        ax.fill_between(x[0], z[-1], z[0], facecolor="none", hatch=MISSING_HATCH, edgecolor=MISSING_LINE,
                        linewidth=0, zorder=0)  # fmt: skip
        return mesh

    mesh = panel(axes[0], fine, fine_values, row)
    axes[0].set_title("fine")
    for ax, entry, values in zip(axes[1:], ran, coarse_values):
        panel(ax, entry.result.coarse, values, coarse_where[1])
        ax.set_title(entry_name(comparison, entry) + held)
    kx = property_label("kx", unit)
    fig.colorbar(mesh, ax=axes, label=f"{kx} ({unit}, log scale)", shrink=0.8,
                 extend=extend_of(norm, fine_values, *coarse_values))  # fmt: skip
    where_text = f"section through row {row}" if section else f"layer {layer + 1}"
    title(fig, f"Fine and coarse {kx}, {where_text}" if fine.ndim == 3 else f"Fine and coarse {kx}")
    elevations = None
    if true:
        surfaces = fine.geometry.surfaces()[:, row, :]
        elevations = (float(np.nanmin(surfaces)), float(np.nanmax(surfaces)))
    missing = MISSING_LABEL if fine.geometry is None else "no value (inactive or pinched out)"
    _finish(fig, axes, fine.grid, section, [fine_values, *coarse_values], elevations, missing)
    return fig


def coarse_layer_text(spec: BlockSpec, layer: int, layers: int) -> str:
    """The coarse layer holding fine `layer` (zero-based) of `layers`, and its fine layers, numbered from 1.

    Examples
    --------
    >>> coarse_layer_text(BlockSpec.parse("8x8x2,2,4"), 2, 8)
    'coarse layer 2: fine 3–4'
    >>> coarse_layer_text(BlockSpec.parse("8x8x1,3"), 0, 4)
    'coarse layer 1: fine 1'
    """
    edges = spec.edges(layers, 0)
    index = spec.coarse_index(layer, layers, 0)
    first, last = int(edges[index]) + 1, int(edges[index + 1])
    return f"coarse layer {index + 1}: fine {first}" + (f"–{last}" if last > first else "")


def _best_and_worst(comparison: Comparison, ran: list[Entry]) -> list[tuple[Entry, str]]:
    """The best and the worst of `ran` (or its one method, alone) with their panel titles."""
    chosen = [ran[0]] + ([ran[-1]] if len(ran) > 1 else [])
    tags = [""] if one_method(comparison) else ["best: ", "worst: "]
    return [(entry, f"{tag}{entry.candidate.label}") for entry, tag in zip(chosen, tags)]


def pressure_maps(comparison: Comparison, *, axis: str = "x", layer: int = 0) -> Figure:
    """Fine and coarse pressures of the check along `axis`: the best and the worst method, or the one."""
    chosen = _best_and_worst(comparison, comparison.ranked)
    fine_flow = comparison.fine_flows[axis]
    coarse_layer = comparison.block.coarse_index(layer, fine_flow.pressure.shape[0], 0)
    fig, axes = panel_grid(1 + len(chosen), width=3.0, share=True)
    norm = Normalize(0.0, 1.0)
    cmap = with_missing(PRESSURE_MAP)
    shown = [fine_flow.pressure[layer]]
    mesh = _draw(axes[0], shown[0], plan_edges(fine_flow.trans.grid), cmap=cmap, norm=norm)
    axes[0].set_title("fine")
    for ax, (entry, text) in zip(axes[1:], chosen):
        flow = entry.checks[axis].coarse
        shown.append(flow.pressure[coarse_layer])
        _draw(ax, shown[-1], plan_edges(flow.trans.grid), cmap=cmap, norm=norm)
        ax.set_title(text)
    fig.colorbar(mesh, ax=axes, label="pressure (fraction of the drop, inlet = 1)", shrink=0.8)
    title(fig, f"Pressure under a drop along {axis}")
    _finish(fig, axes, fine_flow.trans.grid, False, shown)
    return fig


def well_pressure_maps(comparison: Comparison, *, layer: int = 0) -> Figure | None:
    """Fine and coarse pressures of the well check, wells marked: the best and the worst method, or the one.

    One linear colour scale for all panels, from the lowest to the highest
    cell pressure shown: the cells beside the wells, where fine and coarse
    differ most, keep their own colours (a percentile scale would clip
    them), and no value lies beyond it. The wells' own bottom-hole pressures
    lie beyond the cells' by the drawdown their well index carries.

    Parameters
    ----------
    comparison : Comparison
    layer : int
        Fine layer shown (its coarse layer is the one holding it).

    Returns
    -------
    Figure or None
        None when no method was checked with wells.
    """
    ran = [e for e in comparison.ranked if e.wells is not None]
    if not ran:
        return None
    chosen = _best_and_worst(comparison, ran)
    fine = ran[0].wells
    coarse_layer = comparison.block.coarse_index(layer, fine.fine.pressure.shape[0], 0)
    shown = [fine.fine.pressure[layer]] + [e.wells.coarse.pressure[coarse_layer] for e, _ in chosen]
    grids = [comparison.fine.grid] + [e.result.coarse.grid for e, _ in chosen]
    finite = np.concatenate([v[np.isfinite(v)] for v in shown])
    low, high = (float(finite.min()), float(finite.max())) if finite.size else (0.0, 1.0)
    norm = Normalize(low, max(high, low + 1e-12 * max(1.0, abs(low))))
    cmap = with_missing(PRESSURE_MAP)
    fig, axes = panel_grid(len(shown), width=3.0, share=True)
    titles = ["fine"] + [text for _, text in chosen]
    for ax, values, grid, text in zip(axes, shown, grids, titles):
        mesh = _draw(ax, values, plan_edges(grid), cmap=cmap, norm=norm)
        ax.set_title(text)
    fig.colorbar(mesh, ax=axes, label="pressure (unit of the wells file)", shrink=0.8)
    _finish(fig, axes, comparison.fine.grid, False, shown)
    kinds = {}
    for ax in axes:
        kinds |= _mark_wells(ax, fine, layer if comparison.fine.ndim == 3 else None)
    fig.legend(handles=[kinds[k] for k in WELL_KINDS if k in kinds], loc="outside lower center",
               ncols=len(kinds), fontsize=LABEL, frameon=False)  # fmt: skip
    where = f", layer {layer + 1}" if comparison.fine.ndim == 3 else ""
    title(fig, f"Pressure driven by the wells{where}")
    return fig


#: How each kind of well is marked: (marker, face, edge); the kind follows the sign of its fine rate. A face
#: and an edge of opposite shades keep every marker visible on every colour of the pressure scale.
WELL_KINDS = {"injector": ("^", "white", "black"), "producer": ("v", "black", "white"),
              "no flow": ("s", "#999999", "black")}  # fmt: skip


def _well_label(check: WellCheck, name: str, layer: int | None) -> str:
    """The well's name, and its completed layers (1 = top) when `layer` is not one of them.

    Examples
    --------
    >>> from types import SimpleNamespace
    >>> check = SimpleNamespace(fine_cells={"B": [(0, 4, 7), (1, 4, 7)]})
    >>> _well_label(check, "B", 1), _well_label(check, "B", 3), _well_label(check, "B", None)
    ('B', 'B (layers 1–2)', 'B')
    """
    layers = sorted({cell[0] + 1 for cell in check.fine_cells[name]})
    if layer is None or layer + 1 in layers:
        return name
    return f"{name} (layer {layers[0]})" if len(layers) == 1 else f"{name} (layers {layers[0]}–{layers[-1]})"


def _kind(check: WellCheck, name: str) -> str:
    rate = check.fine.rates[name]
    return "injector" if rate > 0 else "producer" if rate < 0 else "no flow"


def _mark_wells(ax: Axes, check: WellCheck, layer: int | None) -> dict[str, Line2D]:
    """Each well of `check` at its x, y with its name, marked by its kind; returns one marker per kind drawn.

    A name is written on the side of the marker towards the panel's centre,
    so that it stays inside the panel. In a 3D model (`layer`: the fine
    layer shown, zero-based) a well not completed in it says where it is.
    """
    (x0, x1), (y0, y1) = sorted(ax.get_xlim()), sorted(ax.get_ylim())
    drawn = {}
    for well in check.wells:
        kind = _kind(check, well.name)
        marker, face, edge = WELL_KINDS[kind]
        look = {"marker": marker, "markersize": 7, "markerfacecolor": face, "markeredgecolor": edge,
                "markeredgewidth": 0.9, "linestyle": "none"}  # fmt: skip
        ax.plot([well.x], [well.y], label=well.name, **look)
        east, north = well.x > (x0 + x1) / 2, well.y > (y0 + y1) / 2
        ax.annotate(_well_label(check, well.name, layer), (well.x, well.y),
                    xytext=(-6 if east else 6, -6 if north else 6), textcoords="offset points",
                    ha="right" if east else "left",
                    va="top" if north else "bottom", fontsize=TICK,
                    bbox={"boxstyle": "round,pad=0.15", "facecolor": "white", "edgecolor": "none",
                          "alpha": 0.8})  # fmt: skip
        drawn[kind] = Line2D([], [], label=kind, **(look | {"markeredgecolor": "black"}))  # on white
    return drawn


def mismatch_maps(comparison: Comparison, *, axis: str = "x", layer: int = 0) -> Figure:
    """Coarse-face flux minus the fine flux through each coarse face, per method (flow along `axis`).

    A face beside an inactive block carries no flow in either model and has
    no value: it is drawn hatched, unlike a face where the two models agree
    (white, the centre of the scale).
    """
    a = {"x": 2, "y": 1, "z": 0}[axis]
    ran = comparison.ranked
    maps = [100 * _mismatch(e, comparison, axis, a, layer) for e in ran]
    largest = max([np.nanmax(np.abs(m)) for m in maps if np.isfinite(m).any()] + [1e-10])
    norm = TwoSlopeNorm(0.0, -largest, largest)
    fig, axes = panel_grid(len(ran), width=3.0 if len(ran) == 1 else 2.6, share=True)
    cmap = with_missing(MISMATCH_MAP)
    mesh = None
    for ax, entry, values in zip(axes, ran, maps):
        mesh = _draw(ax, values, face_edges(entry.result.coarse.grid, a), cmap=cmap, norm=norm)
        ax.set_title(entry_name(comparison, entry))
    if mesh is not None:
        fig.colorbar(mesh, ax=axes, label="coarse − fine flux through the face\n(% of the total flow)",
                     shrink=0.8)  # fmt: skip
    title(fig, f"Flux mismatch on the coarse faces normal to {axis}, flow along {axis}")
    _finish(fig, axes, ran[0].result.coarse.grid, False, maps)
    return fig


def _mismatch(entry: Entry, comparison: Comparison, axis: str, a: int, layer: int) -> np.ndarray:
    """One layer of the mismatch on the coarse faces normal to array axis `a`; NaN beside inactive blocks."""
    check = entry.checks[axis]
    fine = comparison.fine_flows[axis]
    values = coarse_face_mismatch(fine, check.coarse, comparison.block.cells, a)
    k = np.asarray(entry.result.coarse.kx, dtype=float)
    n = k.shape[a]
    active = np.isfinite(k)
    beside = np.take(active, np.arange(n - 1), axis=a) & np.take(active, np.arange(1, n), axis=a)
    values = np.where(beside, values, np.nan)
    return values[min(comparison.block.coarse_index(layer, fine.pressure.shape[0], 0), values.shape[0] - 1)]


def block_spread_maps(spread: BlockSpread, grid: Grid, name: str, unit: str, *, convention: str,
                      realizations: int) -> Figure:  # fmt: skip
    """Per block over an ensemble: three percentiles of a coarse permeability and the spread of its ln.

    The percentiles share one log colour scale; the standard deviation of
    ln k (unitless) has its own, from 0. A 3D model shows its middle coarse layer.

    Parameters
    ----------
    spread : BlockSpread
        From `upscale.analysis.ensemble_maps.block_spread`.
    grid : Grid
        The coarse grid.
    name, unit : str
        The permeability (``kx`` ...) and its unit.
    convention : {'nonexceedance', 'exceedance'}
        How the panels name the percentiles (`upscale.analysis.percentiles`).
    realizations : int
        How many realizations, for the title.
    """
    layer = grid.dz.size // 2
    values = [spread.percentiles[q][layer] for q in PERCENTILES]
    norm = log_norm(*values)
    fig, axes = panel_grid(4, share=True, extra=(1.6, 0.9))
    edges = _edges(grid, False)
    cmap = with_missing(PERMEABILITY_MAP)
    for ax, q, shown in zip(axes, PERCENTILES, values):
        mesh = _draw(ax, on_log_scale(shown), edges, cmap=cmap, norm=norm)
        ax.set_title(label(q, convention))
    fig.colorbar(mesh, ax=axes[:3], label=f"{property_label(name, unit)} ({unit}, log scale)", shrink=0.8,
                 extend=extend_of(norm, *values))  # fmt: skip
    std = spread.std_ln[layer]
    finite = std[np.isfinite(std)]
    top = float(finite.max()) if finite.size and finite.max() > 0 else 1.0
    wide = _draw(axes[3], std, edges, cmap=with_missing(SPREAD_MAP), norm=Normalize(0.0, top))
    axes[3].set_title(f"std of ln {name}")
    fig.colorbar(wide, ax=axes[3], label=f"std of ln {name} (unitless)", shrink=0.8)
    where = f", coarse layer {layer + 1} of {grid.dz.size}" if grid.dz.size > 1 else ""
    title(fig, f"Coarse {name} per block over {realizations} realizations{where}")
    _finish(fig, axes, grid, False, [*values, std])
    return fig
