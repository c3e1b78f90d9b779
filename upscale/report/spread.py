"""Figures of an ensemble: how the results and the check errors spread over the realizations."""

from __future__ import annotations

import numpy as np
from matplotlib.axes import Axes
from matplotlib.figure import Figure

from ..analysis.ensemble import EnsembleSummary, MethodSpread
from ..analysis.percentiles import PERCENTILES, bar_text
from ..analysis.records import check_flows
from ..check.axis import flow_label, flow_order
from ..units import quantity_name
from .charts import error_band, readable_k_axis, warn_in
from .layout import LABEL, MAX_WIDTH, page_sizes, title
from .style import PALETTE
from .verdict import outside_band


def _spread_marks(ax: Axes, x: float, values: np.ndarray, color: str, label: str | None,
                  half: float = 0.2) -> None:  # fmt: skip
    """One realization per dot (spread sideways), a bar from the 10th to the 90th percentile, a median tick.

    The tick reaches `half` to either side.
    """
    values = values[np.isfinite(values)]
    if values.size == 0:
        return
    jitter = np.linspace(-0.6 * half, 0.6 * half, values.size) if values.size > 1 else np.zeros(1)
    ax.plot(x + jitter, values, "o", color=color, alpha=0.45, markersize=3.5, label=label)
    low, median, high = np.percentile(values, PERCENTILES)
    ax.plot([x, x], [low, high], color=color, linewidth=3.0, solid_capstyle="butt")
    ax.plot([x - half, x + half], [median, median], color="black", linewidth=1.6)


def method_spread_chart(methods: tuple[MethodSpread, ...], axes: str, realizations: int,
                        convention: str = "nonexceedance") -> Figure:  # fmt: skip
    """Check error of every method over the realizations, per axis and held-out flow, in ranked order.

    Parameters
    ----------
    methods : tuple of MethodSpread
        From `upscale.analysis.ensemble.method_spread` (methods that ran somewhere are drawn).
    axes : str
        The flow axes, e.g. ``"xy"``.
    realizations : int
        How many realizations, for the title.
    convention : {'nonexceedance', 'exceedance'}
        How the title names the percentiles (`upscale.analysis.percentiles`).
    """
    ran = [m for m in methods if m.rank is not None]
    alone = len(methods) == 1
    axes = check_flows(axes, {name for m in methods for name in m.rel_error})  # with the held-out flows
    fig = Figure(figsize=(min(MAX_WIDTH, max(6.5, 0.9 * len(ran) + 2.5)), 4.6), layout="constrained")
    ax = fig.subplots()
    width = 0.8 / len(axes)
    largest = 0.0
    for i, axis in enumerate(axes):
        offset = (i - (len(axes) - 1) / 2) * width
        for j, m in enumerate(ran):
            values = np.array([100 * r.rel_error[axis] if r and r.rel_error.get(axis) is not None
                               else np.nan for r in m.by_realization.values()])  # fmt: skip
            if np.isfinite(values).any():
                largest = max(largest, float(np.nanmax(np.abs(values))))
            _spread_marks(ax, j + offset, values, PALETTE[i], flow_label(axis) if j == 0 else None,
                          half=0.4 * width)  # fmt: skip
    error_band(ax, largest)
    ax.set_xticks(range(len(ran)), [m.name if alone else f"{m.rank}. {m.name}" for m in ran],
                  rotation=30, ha="right")  # fmt: skip
    ax.set_ylabel("check error (k_coarse − k_fine) / k_fine")
    if ran:
        warn_in(ax, outside_band(ran[0].name, ran[0].worst_error.q50, several=not alone,
                                 measure="median largest check error", where="over these realizations"))
    ax.legend(fontsize=LABEL, loc="best")
    title(fig, f"Check error over {realizations} realizations: dots, {bar_text(convention)}")
    page_sizes(fig)
    return fig


def ensemble_chart(ensemble: EnsembleSummary, unit: str) -> Figure:
    """One method over the realizations: fine and coarse k_eff per axis, and the check errors.

    Parameters
    ----------
    ensemble : EnsembleSummary
        From `upscale.analysis.ensemble.ensemble_summary` (with the check run).
    unit : str
        Permeability unit for labels.
    """
    rows = ensemble.realizations
    axes = sorted(ensemble.statistics["k_fine"], key=flow_order)  # the axes, then the held-out flows
    fig = Figure(figsize=(9.0, 4.6), layout="constrained")
    left, right = fig.subplots(1, 2)
    for i, axis in enumerate(axes):
        for j, (quantity, name) in enumerate((("k_fine", "fine"), ("k_coarse", "coarse"))):
            values = np.array([getattr(r, quantity).get(axis) for r in rows], dtype=float)
            _spread_marks(left, 2 * i + 0.8 * j, values, PALETTE[j], name if i == 0 else None)
        errors = np.array([r.rel_error.get(axis) for r in rows], dtype=float) * 100
        _spread_marks(right, i, errors, PALETTE[i], None)
    readable_k_axis(left)
    left.set_xticks([2 * i + 0.4 for i in range(len(axes))], [flow_label(a) for a in axes])
    left.set_ylabel(f"effective {quantity_name(unit)} ({unit})")
    left.set_title("k_eff of the fine and the coarse model")
    left.legend(fontsize=LABEL, loc="best")
    errors = np.array([r.rel_error.get(a) for r in rows for a in axes], dtype=float) * 100
    error_band(right, float(np.nanmax(np.abs(errors))) if np.isfinite(errors).any() else 0.0)
    right.set_xticks(range(len(axes)), [flow_label(a) for a in axes])
    right.set_ylabel("check error (k_coarse − k_fine) / k_fine")
    medians = [s.q50 for s in ensemble.statistics["rel_error"].values() if s]
    right.set_title("Check error")
    if medians:
        warn_in(right, outside_band(ensemble.method.name, max(medians, key=abs), several=False,
                                    measure="median check error", where="over these realizations"))
    right.legend(fontsize=LABEL, loc="best")
    title(fig, f"Over {len(rows)} realizations: dots, {bar_text(ensemble.convention)}")
    page_sizes(fig)
    return fig
