"""Map figures: fine and coarse fields, pressures, and flux mismatches on coarse faces.

Every map is drawn in map coordinates (the raster's, or metres from the
origin) with one colour bar per figure that states the property and unit.
For a 3D model a map shows one layer; `sections` shows a vertical x–z
section through one row.
"""

from __future__ import annotations

import math

import numpy as np
from affine import Affine
from matplotlib.colors import Normalize, TwoSlopeNorm
from matplotlib.figure import Figure
from matplotlib.ticker import MaxNLocator

from ..compare import Comparison, Entry
from ..field import Grid
from .flux import coarse_face_mismatch
from .style import (
    MISMATCH_MAP,
    PERMEABILITY_MAP,
    PRESSURE_MAP,
    log_norm,
    plan_extent,
    section_extent,
    with_missing,
)


def _panels(count: int, width: float = 3.4) -> tuple[Figure, list]:
    cols = min(count, 4)
    rows = math.ceil(count / cols)
    fig = Figure(figsize=(width * cols + 1.2, width * rows + 0.8), layout="constrained")
    axes = fig.subplots(rows, cols, squeeze=False).ravel()
    for ax in axes[count:]:
        ax.set_visible(False)
    return fig, list(axes[:count])


def _coords(ax, grid: Grid, section: bool) -> None:
    unit = "m" if grid.crs is None else _crs_unit(grid)
    ax.set_xlabel(f"x ({unit})")
    ax.set_ylabel("depth below top (m)" if section else f"y ({unit})")
    ax.tick_params(labelsize=7)
    ax.xaxis.set_major_locator(MaxNLocator(4))


def _crs_unit(grid: Grid) -> str:
    units = getattr(grid.crs, "linear_units", None) or "m"
    return {"metre": "m", "meter": "m"}.get(units, units)


def _draw(ax, values: np.ndarray, grid: Grid, section: bool, **style):
    extent = section_extent(grid) if section else plan_extent(grid)
    image = ax.imshow(values, extent=extent, interpolation="nearest", origin="upper", **style)
    ax.set_aspect("auto" if section else "equal")
    _coords(ax, grid, section)
    return image


def _slice(array: np.ndarray, layer: int | None, row: int | None) -> np.ndarray:
    return array[:, row, :] if row is not None else array[layer]


def field_maps(comparison: Comparison, unit: str, *, layer: int = 0, row: int | None = None) -> Figure:
    """The fine kx beside the coarse kx of every method, on one shared log colour scale.

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
    bz, by, _ = comparison.block.cells
    where = (None, row) if row is not None else (layer, None)
    coarse_where = (None, row // by) if row is not None else (layer // bz, None)
    fine_values = _slice(np.asarray(fine.kx, dtype=float), *where)
    coarse_values = [_slice(e.result.coarse.kx, *coarse_where) for e in ran]
    norm = log_norm(fine_values, *coarse_values)
    fig, axes = _panels(1 + len(ran))
    cmap = with_missing(PERMEABILITY_MAP)
    section = row is not None
    image = _draw(axes[0], fine_values, fine.grid, section, cmap=cmap, norm=norm)
    axes[0].set_title("fine", fontsize=9)
    for ax, entry, values in zip(axes[1:], ran, coarse_values):
        _draw(ax, values, entry.result.coarse.grid, section, cmap=cmap, norm=norm)
        ax.set_title(f"{entry.rank}. {entry.candidate.label}", fontsize=9)
    fig.colorbar(image, ax=axes, label=f"kx ({unit}, log scale)", shrink=0.8)
    where_text = f"section through row {row}" if section else f"layer {layer + 1}"
    fig.suptitle(f"Fine and coarse kx, {where_text}" if fine.ndim == 3 else "Fine and coarse kx")
    return fig


def pressure_maps(comparison: Comparison, *, axis: str = "x", layer: int = 0) -> Figure:
    """Fine and coarse pressures of the check along `axis` for the best and the worst method."""
    ran = comparison.ranked
    chosen = [ran[0]] + ([ran[-1]] if len(ran) > 1 else [])
    bz = comparison.block.cells[0]
    fine_flow = comparison.fine_flows[axis]
    fig, axes = _panels(1 + len(chosen))
    norm = Normalize(0.0, 1.0)
    cmap = with_missing(PRESSURE_MAP)
    image = _draw(axes[0], fine_flow.pressure[layer], fine_flow.trans.grid, False, cmap=cmap, norm=norm)
    axes[0].set_title("fine", fontsize=9)
    for ax, entry, tag in zip(axes[1:], chosen, ("best", "worst")):
        flow = entry.checks[axis].coarse
        _draw(ax, flow.pressure[layer // bz], flow.trans.grid, False, cmap=cmap, norm=norm)
        ax.set_title(f"{tag}: {entry.candidate.label}", fontsize=9)
    fig.colorbar(image, ax=axes, label="pressure (fraction of the drop, inlet = 1)", shrink=0.8)
    fig.suptitle(f"Pressure under a drop along {axis}")
    return fig


def mismatch_maps(comparison: Comparison, *, axis: str = "x", layer: int = 0) -> Figure:
    """Coarse-face flux minus the fine flux through each coarse face, per method (flow along `axis`)."""
    a = {"x": 2, "y": 1, "z": 0}[axis]
    ran = comparison.ranked
    block = comparison.block.cells
    maps = [_mismatch(e, comparison, axis, a, block, layer) for e in ran]
    largest = max([np.nanmax(np.abs(m)) for m in maps if m.size] + [1e-12])
    norm = TwoSlopeNorm(0.0, -100 * largest, 100 * largest)
    fig, axes = _panels(len(ran))
    cmap = with_missing(MISMATCH_MAP)
    image = None
    for ax, entry, values in zip(axes, ran, maps):
        grid = entry.result.coarse.grid
        image = _draw(ax, 100 * values, _face_grid(grid, a), False, cmap=cmap, norm=norm)
        ax.set_title(f"{entry.rank}. {entry.candidate.label}", fontsize=9)
    if image is not None:
        fig.colorbar(image, ax=axes, label="coarse − fine flux through the face (% of the total flow)",
                     shrink=0.8)  # fmt: skip
    fig.suptitle(f"Flux mismatch on the coarse faces normal to {axis}, flow along {axis}")
    return fig


def _mismatch(entry: Entry, comparison: Comparison, axis: str, a: int, block, layer: int) -> np.ndarray:
    check = entry.checks[axis]
    values = coarse_face_mismatch(comparison.fine_flows[axis], check.coarse, block, a)
    return values[min(layer // block[0], values.shape[0] - 1)]


def _face_grid(grid: Grid, a: int) -> Grid:
    """A grid whose cells sit on the inner faces normal to array axis `a` (for drawing)."""
    if a == 0:
        return grid
    sizes = {"dz": grid.dz, "dy": grid.dy, "dx": grid.dx}
    name = "dx" if a == 2 else "dy"
    inner = sizes[name]
    sizes[name] = 0.5 * (inner[:-1] + inner[1:])
    transform = grid.transform
    if transform is not None:
        shift = (inner[0] / 2, 0) if a == 2 else (0, -inner[0] / 2)
        transform = Affine.translation(*shift) @ transform
    return Grid(**sizes, transform=transform, crs=grid.crs)
