"""The layer profile of a 3D model as a figure: ln k layer by layer, its barriers and a grouping.

Depth runs down the y axis from the top of the model on the true layer
thicknesses; each layer is drawn over its own depth interval as a step: the
geometric mean of kx and of kz over its active cells on a log axis, with a
band of one standard deviation of ln k on either side (exp(mean ± sd)).
Barrier runs are shaded across the panel, and the boundaries of a grouping
of the layers are drawn as horizontal lines in the style of their reason
(a barrier kept apart, or a contrast between the groups), with the reason
written beside the line where there is room. The right axis numbers the
fine layers (1 = top). The figure reads the plain data `upscale info`
prints (`upscale.analysis.describe.describe_field`, key ``layers``).
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np
from matplotlib.axes import Axes
from matplotlib.figure import Figure
from matplotlib.transforms import blended_transform_factory

from ..units import symbol
from .layout import LABEL, TICK, legend_below, page_sizes, title
from .style import MISSING_LINE, PALETTE

#: Boundary lines by reason: colour and line style.
BOUNDARY_STYLES = {"barrier": {"color": PALETTE[3], "linestyle": "-"},
                   "contrast": {"color": PALETTE[2], "linestyle": "--"}}  # fmt: skip
#: Smallest gap between two written reasons, as a share of the model's depth (the text's height).
LABEL_GAP = 0.03
#: Share of the x axis's log width left free on the right for the written reasons.
LABEL_ROOM = 0.22
#: Layer numbers on the right axis at most (every 1st, 2nd, 5th, 10th, ... layer).
LAYER_TICKS = 20


def layer_profile_figure(layers: dict[str, Any], unit: str, *, name: str = "") -> Figure:
    """The vertical profile of a model's layers, its barriers and the grouping chosen.

    Parameters
    ----------
    layers : dict
        The layer profile as `upscale info` gives it (``--json``, key
        ``layers``): ``layers`` (rows with ``thickness_m``, ``ln_kx_mean``,
        ``ln_kx_std``, ``ln_kz_mean``, ``ln_kz_std``; None without active
        cells), ``barriers`` (``first``, ``last``, numbered from 1) and,
        optionally, ``grouping`` (`upscale.analysis.layers.LayerChoice.summary`).
    unit : str
        Permeability unit, for the x axis.
    name : str
        The field, named in the title.

    Returns
    -------
    Figure
        One panel. Its artists carry ids (``gid``): ``kx mean`` and ``kz
        mean`` (lines), ``kx band`` and ``kz band``, ``barrier`` (one span per
        run), ``boundary barrier`` and ``boundary contrast`` (one line each);
        kz is left out when it equals kx in every layer, and kx is then
        labelled "kx = kz".
    """
    rows = layers["layers"]
    depth = np.concatenate([[0.0], np.cumsum([row["thickness_m"] for row in rows])])
    fig = Figure(figsize=(6.2, 7.4), layout="constrained")
    ax = fig.subplots()
    same = all(row[f"ln_kx_{key}"] == row[f"ln_kz_{key}"] for row in rows for key in ("mean", "std"))
    series = [("kx", "kx = kz")] if same else [("kx", "kx"), ("kz", "kz")]
    low, high = math.inf, -math.inf
    for i, (prop, label) in enumerate(series):
        mean, spread = _column(rows, f"ln_{prop}_mean"), _column(rows, f"ln_{prop}_std")
        _draw_series(ax, depth, mean, spread, PALETTE[i], label, prop)
        known = np.isfinite(mean)
        if known.any():
            low = min(low, float(np.min((mean - spread)[known])))
            high = max(high, float(np.max((mean + spread)[known])))
    for i, run in enumerate(layers["barriers"]):
        ax.axhspan(depth[run["first"] - 1], depth[run["last"]], color=MISSING_LINE, alpha=0.3, linewidth=0,
                   zorder=0, gid="barrier", label=_once("barrier (tight kz)", i == 0))  # fmt: skip
    grouping = layers.get("grouping")
    if grouping is not None:
        _draw_boundaries(ax, depth, grouping["boundaries"])
    if np.isfinite(low):
        pad = 0.05 * max(high - low, 1.0)
        room = LABEL_ROOM / (1 - LABEL_ROOM) * (high - low + pad)  # free on the right for the reasons
        ax.set_xlim(math.exp(low - pad), math.exp(high + pad + room))
    ax.set_xscale("log")
    ax.set_ylim(float(depth[-1]), 0.0)  # depth grows downwards
    ax.set_xlabel(f"{symbol(unit)} ({unit}, log scale)")
    ax.set_ylabel("depth below the top of the model (m)")
    _layer_numbers(ax, depth)
    title(fig, _title(name, len(rows), grouping))
    legend_below(fig, ax)
    page_sizes(fig)
    return fig


def _column(rows: list[dict[str, Any]], key: str) -> np.ndarray:
    """One column of the profile's rows, None as NaN: shape (L,)."""
    return np.array([np.nan if row[key] is None else row[key] for row in rows], dtype=np.float64)


def _steps(depth: np.ndarray, values: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Each layer's value over its depth interval: (value, depth) at its top and its base, shape (2L,)."""
    return np.repeat(values, 2), np.column_stack([depth[:-1], depth[1:]]).ravel()


def _draw_series(ax: Axes, depth: np.ndarray, mean: np.ndarray, spread: np.ndarray, colour: str,
                 label: str, prop: str) -> None:  # fmt: skip
    """The geometric mean of one property per layer and the band of ± one sd of ln k around it."""
    x, y = _steps(depth, np.exp(mean))
    below, _ = _steps(depth, np.exp(mean - spread))
    above, _ = _steps(depth, np.exp(mean + spread))
    ax.fill_betweenx(y, below, above, color=colour, alpha=0.25, linewidth=0, gid=f"{prop} band",
                     label=f"{label}: ± 1 sd of ln k")  # fmt: skip
    ax.plot(x, y, color=colour, linewidth=1.6, gid=f"{prop} mean", label=f"{label}: geometric mean")


def _draw_boundaries(ax: Axes, depth: np.ndarray, boundaries: list[dict[str, Any]]) -> None:
    """A line at each boundary between coarse layers, in its reason's style; the reason written where room."""
    at_right = blended_transform_factory(ax.transAxes, ax.transData)
    written, seen = -math.inf, set()
    for boundary in boundaries:
        reason, level = boundary["reason"], float(depth[boundary["after_layer"]])
        ax.axhline(level, linewidth=1.3, gid=f"boundary {reason}", **BOUNDARY_STYLES[reason],
                   label=_once(f"coarse-layer boundary: {reason}", reason not in seen))  # fmt: skip
        seen.add(reason)
        if level - written >= LABEL_GAP * depth[-1]:
            ax.text(0.99, level, reason, transform=at_right, ha="right", va="bottom", fontsize=LABEL,
                    color=BOUNDARY_STYLES[reason]["color"])  # fmt: skip
            written = level


def _layer_numbers(ax: Axes, depth: np.ndarray) -> None:
    """The right axis: fine layer numbers at the layers' centres, every 1st, 2nd, 5th, 10th ... layer."""
    count = depth.size - 1
    step = next(s for s in _steps_of_ten() if count / s <= LAYER_TICKS)
    numbers = np.arange(step, count + 1, step)
    if step != 2:  # the top layer too, unless it would crowd layer 2
        numbers = np.unique(np.concatenate([[1], numbers]))
    right = ax.secondary_yaxis("right")
    right.set_yticks(0.5 * (depth[numbers - 1] + depth[numbers]), [str(n) for n in numbers])
    right.tick_params(labelsize=TICK)
    right.set_ylabel("fine layer (1 = top)", fontsize=LABEL)  # a secondary axis is not among fig.axes


def _steps_of_ten() -> list[int]:
    """1, 2, 5, 10, 20, 50, ... up to 5e6."""
    return [m * 10**e for e in range(7) for m in (1, 2, 5)]


def _once(label: str, first: bool) -> str:
    """`label` for the first of several artists of one kind; matplotlib's legend leaves out the rest ("_")."""
    return label if first else f"_{label}"


def _title(name: str, count: int, grouping: dict[str, Any] | None) -> str:
    """The figure's title: the field, its layer count and the grouping drawn with what it keeps."""
    head = f"Layer profile{' of ' + name if name else ''}: {count} layers"
    if grouping is None:
        return head
    groups = len(grouping["sizes"])
    plural = "s" if groups > 1 else ""
    return (f"{head}\n{grouping['request']} groups them into {groups} coarse layer{plural}, "
            f"keeping {100 * (1 - grouping['loss']):.3g} % of the between-layer variance")  # fmt: skip
