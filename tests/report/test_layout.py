"""Every figure of a report, read at the page's width: no text off the canvas, none too small.

What is tested
--------------
* Every drawn text of every figure (titles, axis and tick labels, legends,
  colour bars) lies inside the canvas: for a comparison of one method (the
  figures of ``upscale run --plot``, whose one-panel titles were clipped at
  both ends), of three, of all twelve candidates (a 3 x 4 grid of maps), of
  a 3D model, and of one method on a 3D model (whose error chart's legend
  ran off both sides in one row).
* Every drawn text is at least 8 points on the report page. The page shows
  a figure at most 1100 CSS pixels wide (``max-width`` in
  ``upscale/report/html.py``) and the PNG is rendered at 130 dpi
  (``upscale.report.figures.rendered``), so a text of s points in a figure
  W inches wide is ``s * 130 / 96 * min(1, 1100 / (130 W))`` points on the
  page (96 CSS pixels and 72 points per inch). 8 points is about the
  smallest print size commonly recommended for figure text (common
  practice).

Texts are measured on the Agg canvas after a draw, at the figure's own dpi
(the extent relative to the canvas does not depend on it).
"""

from __future__ import annotations

import numpy as np
import pytest
from matplotlib.backends.backend_agg import FigureCanvasAgg

from upscale import Field
from upscale.analysis.compare import candidates, compare_methods
from upscale.gallery.problems import uncorrelated_lognormal
from upscale.report.figures import build_figures

#: The report page's widest figure (CSS px) and the figures' resolution (dpi); see the module docstring.
PAGE_PX, DPI = 1100, 130
SMALLEST = 8.0  # points on the page


def _comparison(methods: list[str] | None, seed: int, shape=(32, 32), block="8x8", dz=None, **options):
    k = uncorrelated_lognormal(shape, seed=seed)
    field = Field.from_arrays(k, cell_size=(10.0, 10.0), **({"dz": dz} if dz is not None else {}))
    return compare_methods(field, block, candidates(methods, **options))


@pytest.fixture(scope="module",
                params=["one method", "three methods", "twelve candidates", "3D", "one method, 3D"])
def plots(request):
    """The figures of a comparison: what ``upscale run --plot`` and ``upscale compare`` draw."""
    cases = {
        "one method": lambda: _comparison(["flow"], 7411, shape=(40, 40), block="10x10", bc="linear",
                                          border=2),
        "three methods": lambda: _comparison(["geometric", "harmonic", "slabs"], 7412),
        "twelve candidates": lambda: _comparison(None, 7413),
        "3D": lambda: _comparison(["arithmetic", "flow"], 7414, shape=(4, 16, 16), block="8x8x2",
                                  dz=[1.0, 2.0, 0.5, 2.0]),
        # a narrow chart with five legend entries (band, x, y, z, corner): in one row they ran off both sides
        "one method, 3D": lambda: _comparison(["arithmetic"], 7415, shape=(4, 16, 16), block="8x8x2",
                                              dz=[1.0, 2.0, 0.5, 2.0]),
    }  # fmt: skip
    comparison = cases[request.param]()
    if request.param.startswith("one method"):  # one candidate: the figures of a run
        assert len(comparison.candidates) == 1
    return build_figures(comparison, "mD")


def _drawn_texts(figure):
    """(text, its extent in pixels) of every non-empty text the canvas drew, and the canvas size."""
    canvas = FigureCanvasAgg(figure)
    canvas.draw()
    renderer = canvas.get_renderer()
    texts = [figure._suptitle] + list(figure.texts)
    for legend in figure.legends:
        texts += legend.get_texts()
    for ax in figure.axes:
        if not ax.get_visible():
            continue
        texts += [ax.title, ax._left_title, ax._right_title]
        if ax.get_legend():
            texts += ax.get_legend().get_texts()
        for axis in (ax.xaxis, ax.yaxis):
            texts += [axis.label, axis.get_offset_text()]
            low, high = sorted(axis.get_view_interval())
            span = (high - low) * 1e-9
            for tick in axis.get_major_ticks() + axis.get_minor_ticks():
                if low - span <= tick.get_loc() <= high + span:
                    texts += [tick.label1, tick.label2]
    found = [(t, t.get_window_extent(renderer)) for t in texts
             if t is not None and t.get_visible() and t.get_text().strip()]  # fmt: skip
    return found, figure.bbox


def test_every_text_lies_inside_the_canvas(plots):
    for plot in plots:
        texts, canvas = _drawn_texts(plot.figure)
        assert texts, plot.name
        for text, box in texts:
            inside = (box.x0 >= canvas.x0 - 1 and box.x1 <= canvas.x1 + 1
                      and box.y0 >= canvas.y0 - 1 and box.y1 <= canvas.y1 + 1)  # fmt: skip
            assert inside, (plot.name, text.get_text(), box.bounds, canvas.bounds)


def test_every_text_is_readable_at_the_page_width(plots):
    for plot in plots:
        figure = plot.figure
        scale = min(1.0, PAGE_PX / (figure.get_figwidth() * DPI))
        texts, _ = _drawn_texts(figure)
        smallest = min(texts, key=lambda t: t[0].get_fontsize())[0]
        on_page = smallest.get_fontsize() * DPI / 96 * scale
        assert on_page >= SMALLEST, (plot.name, smallest.get_text(), round(on_page, 2))


def test_the_page_constants_are_those_of_the_report():
    from upscale.report import layout

    assert (layout.PAGE_WIDTH_PX, layout.DPI) == (PAGE_PX, DPI)
    assert "max-width: 1100px" in __import__("upscale.report.html", fromlist=["_STYLE"])._STYLE
    on_page = [layout.on_page_points(p.figure, layout.TICK) for p in build_figures(
        _comparison(["geometric"], 7415), "mD")]  # fmt: skip
    assert min(on_page) >= SMALLEST and np.isfinite(on_page).all()
