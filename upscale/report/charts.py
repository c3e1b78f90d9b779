"""Charts: check errors per method, effective k against the bounds, histograms of log k."""

from __future__ import annotations

import numpy as np
from matplotlib.figure import Figure

from ..compare import Comparison
from ..field import AXES, PERMEABILITY
from ..methods import averages, bounds
from .style import PALETTE, style_of

#: The band of check errors drawn as acceptable (±5 %): a common engineering tolerance.
BAND = 5.0


def error_bars(comparison: Comparison) -> Figure:
    """Check error per method and axis (%), with the ±5 % band marked."""
    ran = comparison.ranked
    axes_names = list(comparison.fine.axes)
    fig = Figure(figsize=(max(6.0, 0.9 * len(ran) + 2.5), 4.2), layout="constrained")
    ax = fig.subplots()
    width = 0.8 / len(axes_names)
    x = np.arange(len(ran))
    ax.axhspan(-BAND, BAND, color="#d9d9d9", alpha=0.6, label=f"±{BAND:g} %")
    largest = 0.0
    for i, axis in enumerate(axes_names):
        errors = np.array([100 * e.checks[axis].rel_error for e in ran])
        largest = max(largest, float(np.nanmax(np.abs(errors))) if errors.size else 0.0)
        offset = (i - (len(axes_names) - 1) / 2) * width
        ax.bar(x + offset, errors, width, color=PALETTE[i], hatch=("", "//", "..")[i],
               edgecolor="black", linewidth=0.4, label=f"along {axis}")  # fmt: skip
    ax.axhline(0.0, color="black", linewidth=0.6)
    if largest > 10 * BAND:
        ax.set_yscale("symlog", linthresh=2 * BAND)
    ax.set_xticks(x, [f"{e.rank}. {e.candidate.label}" for e in ran], rotation=30, ha="right",
                  fontsize=8)  # fmt: skip
    ax.set_ylabel("check error (k_coarse − k_fine) / k_fine (%)")
    ax.set_title("Flow check error per method and axis")
    ax.legend(fontsize=8, loc="best")
    return fig


def bounds_chart(comparison: Comparison, unit: str) -> Figure:
    """Each method's coarse k_eff per axis against the fine k_eff, the Wiener and Cardwell–Parsons bounds."""
    fine = comparison.fine
    ran = comparison.ranked
    axes_names = list(fine.axes)
    fig = Figure(figsize=(4.2 * len(axes_names) + 1.5, 4.4), layout="constrained")
    panels = fig.subplots(1, len(axes_names), squeeze=False)[0]
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
        ax.set_yscale("log")
        ax.set_xticks(range(len(ran)), [str(e.rank) for e in ran])
        ax.set_xlabel("method (rank)")
        ax.set_ylabel(f"effective k along {axis} ({unit})")
        ax.set_title(f"along {axis}")
    handles, labels = panels[0].get_legend_handles_labels()
    fig.legend(handles, labels, loc="outside right center", fontsize=7)
    fig.suptitle("Coarse effective permeability against the fine one and the bounds")
    return fig


def domain_bounds(fine, axis: str) -> dict[str, float]:
    """Wiener (1912) and Cardwell–Parsons (1945) bounds of the whole fine domain along `axis`.

    Inactive cells count as impermeable, as in the check: the Wiener lower
    bound (harmonic mean) is then 0 and is left out.
    """
    a = AXES[axis]
    k = np.asarray(getattr(fine, PERMEABILITY[axis]) if getattr(fine, PERMEABILITY[axis]) is not None
                   else fine.kx, dtype=float)  # fmt: skip
    dz, whole = fine.grid.dz, k.shape
    closed = np.nan_to_num(k, nan=0.0)
    found = {"Wiener upper (arithmetic)": float(averages.arithmetic_mean(closed, dz, whole).item())}
    if not np.isnan(k).any() and (k > 0).all():
        found["Wiener lower (harmonic)"] = float(averages.harmonic_mean(k, dz, whole).item())
    found["Cardwell–Parsons upper"] = float(bounds.slabs_bound(k, dz, whole, a).item())
    found["Cardwell–Parsons lower"] = float(bounds.tubes_bound(k, dz, whole, a).item())
    return found


def histograms(comparison: Comparison, unit: str) -> Figure:
    """Distribution of kx: fine cells against the coarse blocks of each method (log scale)."""
    fine = np.asarray(comparison.fine.kx, dtype=float)
    fine = fine[np.isfinite(fine) & (fine > 0)]
    ran = comparison.ranked
    coarse = [e.result.coarse.kx[np.isfinite(e.result.coarse.kx) & (e.result.coarse.kx > 0)] for e in ran]
    everything = np.concatenate([fine, *coarse])
    bins = np.logspace(np.log10(everything.min()), np.log10(everything.max()), 41)
    fig = Figure(figsize=(7.5, 4.4), layout="constrained")
    ax = fig.subplots()
    ax.hist(fine, bins=bins, density=False, weights=np.full(fine.size, 1.0 / fine.size),
            color="#bdbdbd", label="fine cells")  # fmt: skip
    for i, (entry, values) in enumerate(zip(ran, coarse)):
        if values.size:
            ax.hist(values, bins=bins, weights=np.full(values.size, 1.0 / values.size), histtype="step",
                    linewidth=1.4, label=entry.candidate.label, **style_of(i))  # fmt: skip
    ax.set_xscale("log")
    ax.set_xlabel(f"kx ({unit}, log scale)")
    ax.set_ylabel("fraction of cells or blocks per bin")
    ax.set_title("Spread of kx: fine cells against coarse blocks")
    ax.legend(fontsize=7, loc="best")
    return fig
