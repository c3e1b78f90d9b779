"""Every figure of a comparison, each with a one-line caption saying what to look for."""

from __future__ import annotations

import io
from dataclasses import dataclass

from matplotlib import rc_context
from matplotlib.figure import Figure

from ..analysis.compare import Comparison
from ..units import property_label, quantity_name
from .charts import bounds_chart, error_bars, histograms, well_rates
from .layout import DPI
from .maps import field_maps, mismatch_maps, pressure_maps, well_pressure_maps
from .style import MISSING_LABEL
from .verdict import BAND, one_method


@dataclass(frozen=True, eq=False)
class Plot:
    """A figure, the file stem it is saved under, and its caption."""

    name: str
    figure: Figure
    caption: str


def build_figures(comparison: Comparison, unit: str, *, layer: int | None = None) -> list[Plot]:
    """The figures of a comparison (or of one method: a comparison of one).

    Parameters
    ----------
    comparison : Comparison
        With at least one method that ran.
    unit : str
        Permeability unit for labels.
    layer : int, optional
        Fine layer drawn in plan for a 3D model (default: the middle one).

    Returns
    -------
    list of Plot
    """
    fine = comparison.fine
    if layer is None:
        layer = fine.shape[0] // 2
    alone = one_method(comparison)
    scale = (f"Values beyond the colour scale (and zero k) take its end colours, marked by the colour "
             f"bar's triangles; hatched cells have {MISSING_LABEL}.")  # fmt: skip
    kx = property_label("kx", unit)
    plots = [
        Plot("maps", field_maps(comparison, unit, layer=layer),
             f"Fine {kx} beside {'the' if alone else 'each'} method's coarse {kx} on one colour scale: look "
             f"for channels and barriers that vanish or smear in the coarse map{'' if alone else 's'}. "
             + scale),
    ]  # fmt: skip
    if fine.ndim == 3:
        row = fine.shape[1] // 2
        plots.append(Plot("section", field_maps(comparison, unit, row=row),
                          f"Vertical section through fine row {row}, on the true layer thicknesses: "
                          "look for thin layers and shale breaks that the coarse layers lose. "
                          + scale))  # fmt: skip
    plots += [
        Plot("errors", error_bars(comparison),
             f"Check error {'of the method' if alone else 'per method'} per axis and corner to corner "
             "(the held-out flow)" + (", and of the wells' total rate" if _with_wells(comparison) else "")
             + "; bars inside the grey "
             f"±{BAND:g} % band pass the fine model's flow closely, long bars mark "
             f"{'a coarse model' if alone else 'the methods'} to distrust on this field."),
        Plot("bounds", bounds_chart(comparison, unit),
             f"Coarse effective {quantity_name(unit)} of {'the' if alone else 'each'} method against "
             "the fine one (solid line) and the bounds: a method outside the Cardwell–Parsons bounds "
             "is suspect."),
        Plot("histograms", histograms(comparison, unit),
             f"Spread of {property_label('kx', unit)}, one panel per method over the fine cells (grey): "
             "coarse blocks always spread less than fine cells; a method that narrows it much more than "
             "the others smooths away extremes that carry flow."),
    ]  # fmt: skip
    rates = well_rates(comparison)
    if rates is not None:
        whose = "the method" if alone else "the methods (the best and the worst beyond four)"
        plots.append(Plot("wells", rates,
                          f"Rate of each pressure-controlled well on the fine grid beside the coarse grid "
                          f"of {whose} (Peaceman's well index in each fine cell, the coarse blocks "
                          "connected as the check says; docs/wells.md), on a log scale when the rates "
                          "span more than a decade: "
                          "unequal bars show how far the coarse model's wells are off, a difference "
                          "no axis check sees."))  # fmt: skip
    pressures = well_pressure_maps(comparison, layer=layer)
    if pressures is not None:
        plots.append(Plot("well_pressure", pressures,
                          f"Pressure driven by the wells on the fine grid beside the coarse grid of "
                          f"{'the method' if alone else 'the best and the worst method'}, on one colour "
                          "scale from the lowest to the highest cell pressure, each well marked at its "
                          "position (triangle up: injector, down: producer): the coarse "
                          f"map{'' if alone else 's'} should carry the fine map's fall of pressure from "
                          "the injectors to the producers; where the colours differ, the coarse model "
                          "sends the wells' flow another way."))  # fmt: skip
    for axis in fine.axes[:2]:
        plots.append(Plot(f"mismatch_{axis}", mismatch_maps(comparison, axis=axis, layer=layer),
                          f"Where {'the' if alone else 'each'} method errs under flow along {axis}: "
                          "coarse-face flux minus the fine flux through the same face; strong colours "
                          "sit on the paths a method misses (orange: too little flow, purple: too "
                          "much, white: none missed); hatched faces are beside inactive "
                          "blocks."))  # fmt: skip
    plots.append(Plot("pressure", pressure_maps(comparison, layer=layer),
                      "Fine pressure under a drop along x beside the coarse pressure of the method: it "
                      "should follow the fine contours." if alone else
                      "Fine pressure under a drop along x beside the coarse pressures of the best "
                      "and the worst method: the best should follow the fine contours."))  # fmt: skip
    return plots


def rendered(plot: Plot, dpi: int = DPI) -> tuple[bytes, bytes]:
    """The figure as PNG and as SVG bytes (for files and for embedding in a page)."""
    return figure_bytes(plot.figure, "png", dpi), figure_bytes(plot.figure, "svg", dpi)


def figure_bytes(figure: Figure, kind: str, dpi: int = DPI) -> bytes:
    """`figure` as the bytes of a ``png`` or ``svg`` file, the same bytes for the same figure."""
    buffer = io.BytesIO()
    with rc_context({"svg.hashsalt": "upscale"}):
        figure.savefig(buffer, format=kind, dpi=dpi, metadata=_METADATA[kind])
    return buffer.getvalue()


# fixed metadata and SVG ids, so the same figure gives the same bytes
_METADATA = {"png": {"Software": None}, "svg": {"Date": None, "Creator": None}}


def _with_wells(comparison: Comparison) -> bool:
    """Whether the methods were also checked by wells."""
    return any(e.wells is not None for e in comparison.ranked)
