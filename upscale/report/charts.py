"""Charts: check errors per method, effective k against the bounds, histograms of log k, error by block."""

from __future__ import annotations

import numpy as np
from matplotlib.axes import Axes
from matplotlib.figure import Figure
from matplotlib.ticker import (
    FixedLocator,
    FuncFormatter,
    LogLocator,
    MaxNLocator,
    NullLocator,
    ScalarFormatter,
    SymmetricalLogLocator,
)

from ..analysis.compare import Comparison
from ..analysis.plan_record import PlanRecord
from ..check.axis import check_names, flow_label
from ..field import AXES, PERMEABILITY
from ..methods import averages, bounds
from ..units import property_label, quantity_name, symbol
from .layout import LABEL, MAX_WIDTH, legend_below, outer_labels, page_sizes, panel_grid, title
from .style import PALETTE, style_of
from .verdict import BAND, entry_name, no_block_warning, one_method, outside_band

#: Colour of warnings in figures (the page's colour for methods that failed).
WARNING = "#8a1c1c"


def percent(value: float, position: int | None = None) -> str:
    """A tick label in plain percent: ``−100 %``, ``0``, ``12.5 %`` (never powers of ten).

    Examples
    --------
    >>> [percent(v) for v in (-100.0, -10.0, 0.0, 2.5, 1e6)]
    ['−100 %', '−10 %', '0', '2.5 %', '1000000 %']
    """
    if value == 0:
        return "0"
    return np.format_float_positional(value, precision=6, trim="-").replace("-", "−") + " %"


def error_band(ax: Axes, largest: float) -> None:
    """The ±`BAND` % band and the zero line behind check errors (in %); ticks in plain percent.

    Errors beyond ten times the band get a symmetric-log axis, linear within
    twice the band, so the band stays visible beside errors of 100 % or more;
    its ticks at 1, 2 and 5 times the powers of ten, so that a bar between
    two decades (33 %) is read against labels next to it, not against 10 %.
    """
    ax.axhspan(-BAND, BAND, color="#d9d9d9", alpha=0.6, label=f"±{BAND:g} %", zorder=0)
    ax.axhline(0.0, color="black", linewidth=0.6)
    if largest > 10 * BAND:
        ax.set_yscale("symlog", linthresh=2 * BAND)
        ax.yaxis.set_major_locator(SymmetricalLogLocator(linthresh=2 * BAND, base=10, subs=(1.0, 2.0, 5.0)))
    ax.yaxis.set_major_formatter(FuncFormatter(percent))


def readable_k_axis(ax: Axes) -> None:
    """The y axis of effective permeabilities (or well rates) drawn on `ax`, labelled whatever their range.

    Linear while the largest value is under ten times the smallest (a log
    axis over less than a decade may carry no labelled tick at all); log
    beyond, with the powers of ten labelled as numbers, and 2 and 5 between
    them too over less than two decades.
    """
    low, high = sorted(ax.dataLim.intervaly)
    if low > 0 and high < 10 * low:
        ax.yaxis.set_major_locator(MaxNLocator(6))
        numbers = ScalarFormatter(useOffset=False)
        numbers.set_powerlimits((-4, 6))
        ax.yaxis.set_major_formatter(numbers)
        return
    ax.set_yscale("log")
    plain = FuncFormatter(lambda value, position: f"{value:g}")
    ax.yaxis.set_major_formatter(plain)
    if low > 0 and high < 100 * low:
        ax.yaxis.set_minor_locator(LogLocator(subs=(2.0, 5.0)))
        ax.yaxis.set_minor_formatter(plain)


def warn_in(ax: Axes, text: str | None) -> None:
    """`text` (a warning, if any) as the panel's title, in the warning colour."""
    if text:
        ax.set_title(text, color=WARNING, wrap=True)


def error_bars(comparison: Comparison) -> Figure:
    """Check error per method and flow (axes, corner to corner, then the wells' total rate if given; %).

    With the ±5 % band behind, and a warning if no method is within it.
    """
    ran = comparison.ranked
    axes_names = list(check_names(comparison.fine.axes))
    alone = one_method(comparison)
    fig = Figure(figsize=(min(MAX_WIDTH, max(4.5 if alone else 6.0, 0.8 * len(ran) + 2.5)), 4.4),
                 layout="constrained")  # fmt: skip
    ax = fig.subplots()
    x = np.arange(len(ran))
    largest = 0.0
    series = [(flow_label(axis), [100 * e.checks[axis].rel_error for e in ran]) for axis in axes_names]
    if any(e.wells is not None for e in ran):  # the wells' total rate, ranked on beside the flows
        series.append(("wells (total rate)", [100 * e.wells.rel_error if e.wells else np.nan for e in ran]))
    width = 0.8 / len(series)
    for i, (label, values) in enumerate(series):
        errors = np.array(values, dtype=float)
        largest = max(largest, float(np.nanmax(np.abs(errors), initial=0.0)))
        offset = (i - (len(series) - 1) / 2) * width
        ax.bar(x + offset, errors, width, color=PALETTE[i], hatch=("", "//", "..", "xx", "\\\\")[i],
               edgecolor="black", linewidth=0.4, label=label)  # fmt: skip
    error_band(ax, largest)
    ax.set_xticks(x, [entry_name(comparison, e) for e in ran], rotation=0 if alone else 30,
                  ha="center" if alone else "right")  # fmt: skip
    ax.set_ylabel("check error (k_coarse − k_fine) / k_fine")
    best = comparison.best
    warn_in(ax, best and outside_band(best.candidate.label, best.worst_error, several=not alone))
    # below the panel: inside it, "best" still hid bars once thirteen methods and three flows filled it
    legend_below(fig, ax)
    title(fig, f"Flow check error of {ran[0].candidate.label} per flow" if alone
          else "Flow check error per method and flow")  # fmt: skip
    page_sizes(fig)
    return fig


def well_rates(comparison: Comparison) -> Figure | None:
    """Each pressure well's |rate| on the fine grid and on each method's coarse grid (None: none such).

    Rate wells move their given rate on both grids and are left out. Among
    more than four methods, the best and the worst are drawn.
    """
    ran = [e for e in comparison.ranked if e.wells is not None]
    if not ran:
        return None
    shown = ran if len(ran) <= 4 else [ran[0], ran[-1]]
    check = shown[0].wells
    names = [w.name for w in check.wells if w.control == "pressure"]
    if not names:
        return None
    series = [("fine", [abs(check.fine.rates[n]) for n in names])]
    series += [(entry_name(comparison, e), [abs(e.wells.coarse.rates[n]) for n in names]) for e in shown]
    fig = Figure(figsize=(min(MAX_WIDTH, max(5.0, 0.9 * len(names) * len(series) + 2.5)), 4.4),
                 layout="constrained")  # fmt: skip
    ax = fig.subplots()
    width = 0.8 / len(series)
    x = np.arange(len(names))
    for i, (label, rates) in enumerate(series):
        offset = (i - (len(series) - 1) / 2) * width
        color = "#444444" if i == 0 else PALETTE[(i - 1) % len(PALETTE)]
        ax.bar(x + offset, rates, width, color=color, hatch=("", "//", "..", "xx", "\\\\")[i % 5],
               edgecolor="black", linewidth=0.4, label=label if i else "fine grid")  # fmt: skip
    readable_k_axis(ax)  # rates of wells in sand and in shale can differ by decades: log beyond one
    ax.set_xticks(x, names)
    ax.set_xlabel("well (bottom-hole pressure fixed)")
    ax.set_ylabel(f"|rate| · μ ({comparison.fine.unit}·m × unit of pressure)")
    legend_below(fig, ax)
    title(fig, "Well rates on the fine grid and on the coarse grid")
    page_sizes(fig)
    return fig


def bounds_chart(comparison: Comparison, unit: str) -> Figure:
    """Each method's coarse k_eff per axis against the fine k_eff, the Wiener and Cardwell–Parsons bounds."""
    fine = comparison.fine
    ran = comparison.ranked
    axes_names = list(fine.axes)
    panel = max(2.8, 0.27 * len(ran) + 0.6)  # room for two-digit ranks side by side
    fig = Figure(figsize=(min(MAX_WIDTH, panel * len(axes_names) + 2.6), 4.6), layout="constrained")
    panels = fig.subplots(1, len(axes_names), squeeze=False)[0]
    alone = one_method(comparison)
    for ax, axis in zip(panels, axes_names):
        limits = domain_bounds(fine, axis)
        for (label, value), style in zip(limits.items(), ("--", ":", "-.", (0, (5, 1)))):
            if value > 0:
                ax.axhline(value, color="#555555", linestyle=style, linewidth=1.0, label=label)
        ax.axhline(comparison.fine_flows[axis].k_eff, color="black", linewidth=1.6, label="fine k_eff")
        for i, entry in enumerate(ran):
            k = entry.checks[axis].coarse.k_eff
            if k > 0:
                ax.plot([i], [k], marker="os^Dv<>"[(i + i // 7) % 7], color=style_of(i)["color"],
                        linestyle="none",
                        markersize=7, label=entry.candidate.label)  # fmt: skip
        readable_k_axis(ax)
        ax.set_xticks(range(len(ran)), [e.candidate.label if alone else str(e.rank) for e in ran])
        ax.set_xlabel("method" if alone else "method (rank)")
        ax.set_ylabel(f"effective {symbol(unit)} along {axis} ({unit})")
        ax.set_title(f"along {axis}")
    handles, labels = panels[0].get_legend_handles_labels()
    fig.legend(handles, labels, loc="outside right center", fontsize=LABEL)
    title(fig, f"Coarse effective {quantity_name(unit)} against the fine one and the bounds")
    page_sizes(fig)
    return fig


def domain_bounds(fine, axis: str) -> dict[str, float]:
    """Wiener (1912) and Cardwell–Parsons (1945) bounds of the whole fine domain along `axis`.

    Inactive cells count as impermeable, as in the check: the Wiener lower
    bound (harmonic mean) is then 0 and is left out. A field with a geometry
    is bounded as its flow is solved (`upscale.geometry`): on the reference
    field, the values turned back by the ratio of true to reference bulk
    volume (divided along x and y, multiplied along z), so the averages weigh
    cells by true volume.
    """
    a = AXES[axis]
    ratio = 1.0
    if fine.geometry is not None:
        ratio = float(np.asarray(fine.cell_volumes()).sum() / fine.grid.cell_volumes().sum())
        fine = fine.reference()
    k = np.asarray(getattr(fine, PERMEABILITY[axis]) if getattr(fine, PERMEABILITY[axis]) is not None
                   else fine.kx, dtype=float)  # fmt: skip
    dz, whole = fine.grid.dz, k.shape
    closed = np.nan_to_num(k, nan=0.0)
    found = {"Wiener upper (arithmetic)": float(averages.arithmetic_mean(closed, dz, whole).item())}
    if not np.isnan(k).any() and (k > 0).all():
        found["Wiener lower (harmonic)"] = float(averages.harmonic_mean(k, dz, whole).item())
    found["Cardwell–Parsons upper"] = float(bounds.slabs_bound(k, dz, whole, a).item())
    found["Cardwell–Parsons lower"] = float(bounds.tubes_bound(k, dz, whole, a).item())
    scale = ratio if a == 0 else 1.0 / ratio
    return {name: value * scale for name, value in found.items()}


def histograms(comparison: Comparison, unit: str) -> Figure:
    """Distribution of kx: one panel per method, its coarse blocks over the fine cells (grey), log scale."""
    fine = np.asarray(comparison.fine.kx, dtype=float)
    fine = fine[np.isfinite(fine) & (fine > 0)]
    ran = comparison.ranked
    coarse = [e.result.coarse.kx[np.isfinite(e.result.coarse.kx) & (e.result.coarse.kx > 0)] for e in ran]
    everything = np.concatenate([fine, *coarse])
    low, high = everything.min(), everything.max()
    if high <= low * (1 + 1e-9):  # one value everywhere: a narrow range around it
        low, high = low / 1.5, high * 1.5
    bins = np.geomspace(low, high, 41)  # exact ends: every value counted
    fig, panels = panel_grid(len(ran), width=2.4, height=1.7, share=True, extra=(0.6, 1.1))
    for ax, entry, values in zip(panels, ran, coarse):
        ax.hist(fine, bins=bins, weights=np.full(fine.size, 1.0 / fine.size), color="#bdbdbd",
                label="fine cells")  # fmt: skip
        if values.size:
            ax.hist(values, bins=bins, weights=np.full(values.size, 1.0 / values.size), histtype="step",
                    linewidth=1.4, color=PALETTE[0], label="coarse blocks")  # fmt: skip
        ax.set_xscale("log")
        ax.set_title(entry_name(comparison, entry))
        ax.set_xlabel(f"{property_label('kx', unit)} ({unit})")
        ax.set_ylabel("fraction per bin")
    outer_labels(panels)
    handles, labels = panels[0].get_legend_handles_labels()
    fig.legend(handles, labels, loc="outside lower center", ncols=2, fontsize=LABEL, frameon=False)
    title(fig, f"Spread of {property_label('kx', unit)} (log scale): fine cells against coarse blocks")
    page_sizes(fig)
    return fig


def _count(cells: float) -> str:
    """Fine cells per block in a label: whole numbers as such, a mean of grouped layers to 3 digits."""
    return str(int(cells)) if float(cells).is_integer() else f"{cells:.3g}"


def error_by_block_chart(plan: PlanRecord) -> Figure:
    """Largest check error of each method against the coarsening factor, with the largest error accepted.

    One line per method (and a dotted one with open markers through the
    blocks whose layers are grouped, at their mean fine cells per block,
    beside the uniform blocks as coarse); the x axis is the fine cells per
    block (log scale, labelled with the blocks), the y axis the largest check error over the
    checked flows in % (linear up to the accepted error, logarithmic beyond,
    so that errors of 1e-12 % and of 100 % share one axis; ticks at 1, 2 and
    5 × 10^k on both parts). A method that did not run at a block has no
    point there.
    """
    fig = Figure(figsize=(7.6, 4.8), layout="constrained")
    ax = fig.subplots()
    cells = np.array([b.cells for b in plan.blocks], dtype=float)
    grouped = np.array([isinstance(b.z, list) for b in plan.blocks])
    limit = 100 * plan.max_error
    ax.axhspan(0.0, limit, color="#d9d9d9", alpha=0.6, zorder=0, label=f"within {limit:g} %")
    ax.axhline(limit, color="black", linestyle="--", linewidth=1.0,
               label=f"largest error accepted: {limit:g} %")  # fmt: skip
    largest = limit
    for i, method in enumerate(plan.methods):
        errors = np.array([np.nan if b.largest_error is None else 100 * b.largest_error
                           for b in method.blocks])  # fmt: skip
        largest = max(largest, float(np.nanmax(errors)) if np.isfinite(errors).any() else 0.0)
        marker = "os^Dv<>"[(i + i // 7) % 7]
        ax.plot(cells[~grouped], errors[~grouped], marker=marker, markersize=6, linewidth=1.4,
                label=method.name, clip_on=False, **style_of(i))  # fmt: skip
        if grouped.any():  # the same method on grouped layers: its own dotted line, open markers
            ax.plot(cells[grouped], errors[grouped], marker=marker, markersize=6, linewidth=1.4,
                    clip_on=False, **{**style_of(i), "linestyle": ":"}, markerfacecolor="white")  # fmt: skip
    if grouped.any():
        ax.plot([], [], color="black", marker="o", linewidth=1.4, label="uniform layers")
        ax.plot([], [], color="black", marker="o", linestyle=":", linewidth=1.4, markerfacecolor="white",
                label="grouped layers")  # fmt: skip
    ax.set_xscale("log", base=2)
    ticks = sorted(set(cells.tolist()))
    names = ["\n".join(b.short for b, c in zip(plan.blocks, cells) if c == tick) for tick in ticks]
    ax.set_xticks(ticks, [f"{name}\n({_count(tick)})" for name, tick in zip(names, ticks)])
    ax.xaxis.set_minor_locator(NullLocator())
    ax.set_yscale("symlog", linthresh=limit, linscale=1.0)
    steps = [m * 10.0**k for k in range(-4, 7) for m in (1.0, 2.0, 5.0)]
    ax.yaxis.set_major_locator(FixedLocator([0.0, *(v for v in steps if limit / 10 <= v <= 1.5 * largest)]))
    ax.yaxis.set_major_formatter(FuncFormatter(percent))
    ax.set_ylim(0.0, 1.5 * largest)
    ax.set_xlabel("block (fine cells per block: the coarsening factor)")
    ax.set_ylabel("largest check error over the checked flows")
    warn_in(ax, no_block_warning(plan))
    fig.legend(*ax.get_legend_handles_labels(), loc="outside right center", fontsize=LABEL)
    title(fig, "How coarse can the field go? Largest check error against the block size")
    page_sizes(fig)
    return fig
