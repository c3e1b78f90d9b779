"""Charts (`upscale.report.charts`, `upscale.report.spread`) as drawn: tick labels, panels, warnings.

What is tested
--------------
* Check errors read in plain percent on every error axis — also the
  symmetric-log one used when errors pass 50 %: tick labels such as
  ``−100 %``, ``−10 %``, ``0``, ``10 %``, never powers of ten ("10¹"), in
  the check-error chart of a comparison and in the spread chart of an
  ensemble.
* The effective permeabilities of an ensemble are read on labelled ticks
  whatever their range: at least three labelled ticks inside the axis over
  78–125 mD (less than a decade), and over 1–1000 mD.
* Every ensemble figure says its reading of the percentiles: the titles of
  the spread charts name the bar's ends, the panels of the per-block maps
  their percentiles, in either reading (P10 exceeded = the 90th percentile).
* Histograms as small multiples: one panel per method, each with the fine
  cells' histogram (grey) behind that method's coarse blocks, readable with
  twelve candidates.
* When no method is within the ±5 % band, the check-error chart says so
  (and does not when one is).
* Error against block size (``upscale plan``): one line per method through
  its largest error at each block, on a log axis of the fine cells per block
  labelled with the blocks, the largest error accepted drawn as a line, the
  errors in plain percent on a symmetric-log axis; a warning when no method
  passes at any block. Blocks whose layers are grouped stand beside the
  uniform block as coarse: one tick names both, and each method's grouped
  blocks get a dotted line of their own with open markers.

Data come from real comparisons (`compare_methods`) or, for the ensemble
charts, from hand-built records of ``ensemble.json``.
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np
import pytest
from affine import Affine
from comparison_records import comparison, method
from matplotlib.backends.backend_agg import FigureCanvasAgg

from upscale import Field
from upscale.analysis.compare import candidates, compare_methods
from upscale.analysis.comparison_record import ComparisonRecord
from upscale.analysis.ensemble import (
    QUANTITIES,
    EnsembleSummary,
    RealizationCheck,
    method_spread,
    spread,
)
from upscale.analysis.ensemble_maps import block_spread
from upscale.analysis.percentiles import PERCENTILES, bar_text, label
from upscale.analysis.summary import MethodUsed
from upscale.field import Grid
from upscale.gallery.problems import uncorrelated_lognormal
from upscale.report.charts import bounds_chart, error_bars, histograms
from upscale.report.maps import block_spread_maps
from upscale.report.spread import ensemble_chart, method_spread_chart

#: Rows of 1 and 1000 mD: the means miss badly across the layers (errors far beyond 50 %).
LAYERS = np.tile(np.array([1.0, 1000.0])[:, None], (8, 16))


def _shown_labels(ax, which="major"):
    """(tick value, label) of the labelled ticks inside the y axis after a draw."""
    FigureCanvasAgg(ax.figure).draw()
    low, high = sorted(ax.get_ylim())
    ticks = ax.yaxis.get_major_ticks() if which == "major" else ax.yaxis.get_minor_ticks()
    return [(t.get_loc(), t.label1.get_text()) for t in ticks
            if low <= t.get_loc() <= high and t.label1.get_visible() and t.label1.get_text()]  # fmt: skip


def _assert_plain_percent(labels):
    assert len(labels) >= 3, labels
    for value, text in labels:
        assert "$" not in text and "^" not in text and "e" not in text, text
        expected = "0" if value == 0 else f"{value:g} %".replace("-", "−")
        assert text == expected, (value, text)


@pytest.mark.parametrize("contrast", [1000.0, 5.0])
def test_error_axis_reads_in_plain_percent_on_a_symmetric_log_scale(contrast):
    """Layers of 1 and `contrast` mD, with errors far past the band.

    The arithmetic mean across them is off by 80 % at a contrast of 5
    ((1 + 5)² / (4 × 5) − 1, common practice), by 24 950 % at 1000.
    """
    layers = np.where(LAYERS > 1.0, contrast, 1.0)
    comparison = compare_methods(Field.from_arrays(layers), "4x4", candidates(["arithmetic", "harmonic"]))
    assert max(e.worst_error for e in comparison.ranked) > 0.5  # the symmetric-log case
    (ax,) = error_bars(comparison).axes
    assert ax.get_yscale() == "symlog"
    labels = _shown_labels(ax)
    _assert_plain_percent(labels)
    assert {"0", "10 %", "−10 %"} <= {text for _, text in labels}
    # every bar is read against a label near it: at most a factor 2.5 past the largest one
    # (the log part of the axis carries no other scale; a 33 % bar looked like 15 % before)
    largest = 100 * max(e.worst_error for e in comparison.ranked)
    assert largest <= 2.5 * max(abs(value) for value, _ in labels), (largest, labels)


def _comparison(errors: dict[str, tuple[float, float]]) -> ComparisonRecord:
    """One realization's comparison: per method its check errors along x and y."""
    ranked = sorted(errors, key=lambda n: max(map(abs, errors[n])))
    return comparison([method(n, ranked.index(n) + 1, {"x": ex, "y": ey}) for n, (ex, ey) in errors.items()])


def test_spread_error_axis_reads_in_plain_percent():
    realizations = [_comparison({"geometric": (-0.08 - 0.01 * i, 0.02), "arithmetic": (0.4, 1.9 + i)})
                    for i in range(4)]  # fmt: skip
    methods = method_spread([f"r{i}" for i in range(4)], realizations)
    (ax,) = [a for a in method_spread_chart(methods, "xy", 4).axes if a.get_visible()]
    assert ax.get_yscale() == "symlog"
    _assert_plain_percent(_shown_labels(ax))


def _ensemble(k_fine: list[float], k_coarse: list[float]) -> EnsembleSummary:
    """One method over realizations along x, with the check errors of its k."""
    rows = tuple(RealizationCheck(f"r{i}", (), {"x": f}, {"x": c}, {"x": (c - f) / f})
                 for i, (f, c) in enumerate(zip(k_fine, k_coarse)))  # fmt: skip
    statistics = {q: {"x": spread([getattr(r, q)["x"] for r in rows])} for q in QUANTITIES}
    return EnsembleSummary(rows, statistics, "nonexceedance", MethodUsed("flow", {"bc": "sealed"}),
                           {"x": 4, "y": 4, "z": 1}, [], None)  # fmt: skip


@pytest.mark.parametrize("k_fine, k_coarse", [
    ([78.0, 96.0, 110.0, 125.0], [80.0, 95.0, 112.0, 121.0]),  # under a decade
    ([1.0, 30.0, 400.0, 1000.0], [1.1, 28.0, 390.0, 980.0]),  # three decades
])  # fmt: skip
def test_ensemble_k_eff_axis_has_labelled_ticks_whatever_the_range(k_fine, k_coarse):
    left = ensemble_chart(_ensemble(k_fine, k_coarse), "mD").axes[0]
    labels = _shown_labels(left) + _shown_labels(left, "minor")
    assert len(labels) >= 3, labels
    for value, text in labels:
        assert float(text.replace("−", "-")) == pytest.approx(value, rel=1e-6), (value, text)


@pytest.fixture(scope="module")
def every():
    """Every candidate of the default comparison on a 32 x 32 lognormal map."""
    field = Field.from_arrays(uncorrelated_lognormal((32, 32), seed=8123), cell_size=(10.0, 10.0))
    return compare_methods(field, "8x8", candidates())


def test_bounds_chart_ranks_stay_apart_with_every_method(every):
    # with thirteen methods the two-digit ranks ran together ("10111213") in a panel of fixed width
    figure = bounds_chart(every, "mD")
    FigureCanvasAgg(figure).draw()
    renderer = figure.canvas.get_renderer()
    for ax in figure.axes:
        boxes = [t.get_window_extent(renderer) for t in ax.get_xticklabels() if t.get_text()]
        assert len(boxes) == len(every.ranked) >= 13
        # left to right, apart by a third of their height at least (1.8 px, ranks run together, before)
        assert all(b.x0 - a.x1 > a.height / 3 for a, b in zip(boxes, boxes[1:]))


def test_histograms_are_small_multiples_with_the_fine_cells_behind(every):
    ran = every.ranked
    assert len(ran) == len(candidates()) >= 13
    figure = histograms(every, "mD")
    panels = [ax for ax in figure.axes if ax.get_visible()]
    assert len(panels) == len(ran)
    fine = np.asarray(every.fine.kx, dtype=float).ravel()
    for ax, entry in zip(panels, ran):
        assert entry.candidate.label in ax.get_title()
        assert ax.get_xscale() == "log"
        steps = [p for p in ax.patches if p.get_fill() is False]
        assert len(steps) == 1, "one method per panel"
        grey = [p for p in ax.patches if p.get_fill()]
        assert {p.get_facecolor() for p in grey} == {(0.7411764705882353, 0.7411764705882353,
                                                      0.7411764705882353, 1.0)}  # #bdbdbd
        assert sum(p.get_height() for p in grey) == pytest.approx(1.0)  # every fine cell, as fractions
        assert len(grey) == 40 and fine.size == 32 * 32


def test_error_chart_warns_when_no_method_is_within_the_band():
    comparison = compare_methods(Field.from_arrays(LAYERS), "4x4", candidates(["arithmetic", "harmonic"]))
    (ax,) = error_bars(comparison).axes
    texts = [t.get_text() for t in (ax.title, *ax.texts, *ax.figure.texts)]
    assert any("No method is within the ±5 % band" in t for t in texts), texts
    good = compare_methods(Field.from_arrays(np.full((8, 8), 5.0)), "4x4", candidates(["geometric"]))
    (ax,) = error_bars(good).axes
    assert not any("band" in t.get_text() for t in (ax.title, *ax.texts, *ax.figure.texts))


# --- error against block size (upscale plan) ---------------------------------------------------


def _plan_chart(field: np.ndarray, methods: list[str], blocks: list[str], max_error: float = 0.05):
    from upscale.analysis.plan import plan_blocks
    from upscale.analysis.plan_record import plan_record
    from upscale.grid import BlockSpec
    from upscale.report.charts import error_by_block_chart

    fine = Field.from_arrays(field, dz=1.0, three_d=True) if field.ndim == 3 else Field.from_arrays(field)
    plan = plan_blocks(fine, [BlockSpec.parse(b) for b in blocks], candidates(methods),
                       max_error=max_error)  # fmt: skip
    record = plan_record(plan)
    (ax,) = error_by_block_chart(record).axes
    return record, ax


def test_error_by_block_chart_has_one_line_per_method_on_a_log_axis_of_the_coarsening_factor():
    field = uncorrelated_lognormal((32, 32), seed=508_812_376, sigma_ln=1.0)
    record, ax = _plan_chart(field, ["geometric", "arithmetic", "harmonic"], ["2x2", "4x4", "8x8", "16x16"])
    assert ax.get_xscale() == "log" and ax.get_yscale() == "symlog"
    FigureCanvasAgg(ax.figure).draw()
    assert list(ax.get_xticks()) == [4, 16, 64, 256]  # fine cells per block
    labels = [t.get_text() for t in ax.get_xticklabels()]
    assert labels == ["2x2\n(4)", "4x4\n(16)", "8x8\n(64)", "16x16\n(256)"]
    lines = [line for line in ax.get_lines() if line.get_label() in {m.name for m in record.methods}]
    assert [line.get_label() for line in lines] == ["geometric", "arithmetic", "harmonic"]
    for line, planned in zip(lines, record.methods):
        assert list(line.get_ydata()) == pytest.approx([100 * b.largest_error for b in planned.blocks])
    [limit] = [line for line in ax.get_lines() if line.get_label().startswith("largest error accepted")]
    assert list(limit.get_ydata()) == [5.0, 5.0]
    _assert_plain_percent(_shown_labels(ax))
    # every point lies inside the axis
    low, high = ax.get_ylim()
    assert all(low <= 100 * b.largest_error <= high for m in record.methods for b in m.blocks)


def test_error_by_block_chart_labels_errors_below_the_accepted_one():
    # the linear part of the axis (0 to the accepted error) had no label between its two ends,
    # so a 2 % point could not be read; ticks at 1, 2 and 5 x 10^k there too (common practice)
    field = uncorrelated_lognormal((32, 32), seed=508_812_376, sigma_ln=1.0)
    _, ax = _plan_chart(field, ["geometric", "arithmetic"], ["2x2", "4x4", "8x8"], max_error=0.1)
    FigureCanvasAgg(ax.figure).draw()
    low, high = ax.get_ylim()
    shown = [t for t in ax.get_yticks() if low <= t <= high]
    assert {1.0, 2.0, 5.0, 10.0} <= set(shown) and 0.0 in shown


def test_error_by_block_chart_sets_grouped_layers_beside_uniform_ones():
    k = np.full((12, 4, 4), 100.0)
    k[5] = 0.01  # one continuous shale: uniform layers of 4 average it away, auto:3 keeps it alone
    record, ax = _plan_chart(k, ["geometric"], ["2x2x4", "2x2xauto:3"])
    FigureCanvasAgg(ax.figure).draw()
    assert list(ax.get_xticks()) == [16]  # 2 · 2 · 12/3 fine cells per block, both
    assert [t.get_text() for t in ax.get_xticklabels()] == ["2x2x4\n2x2xauto:3\n(16)"]
    (planned,) = record.methods
    uniform, grouped = [100 * b.largest_error for b in planned.blocks]
    solid, dotted = [line for line in ax.get_lines() if list(line.get_xdata()) == [16]]
    assert list(solid.get_ydata()) == pytest.approx([uniform]) and solid.get_linestyle() == "-"
    assert list(dotted.get_ydata()) == pytest.approx([grouped]) and dotted.get_linestyle() == ":"
    assert dotted.get_markerfacecolor() == "white" and grouped < 1e-6 < uniform
    labels = ax.figure.legends[0].get_texts()
    assert {"uniform layers", "grouped layers"} <= {t.get_text() for t in labels}


def test_error_by_block_chart_warns_when_no_method_passes_at_any_block():
    _, ax = _plan_chart(LAYERS, ["arithmetic", "harmonic"], ["2x2", "4x4"])
    assert "No method is within 5 % at any block listed" in ax.title.get_text()
    _, ax = _plan_chart(np.full((8, 8), 5.0), ["geometric"], ["2x2", "4x4"])
    assert ax.title.get_text() == ""


@pytest.mark.parametrize("reading", ["nonexceedance", "exceedance"])
def test_every_spread_figure_says_its_reading_of_the_percentiles(reading):
    ensemble = replace(_ensemble([78.0, 96.0, 110.0, 125.0], [80.0, 95.0, 112.0, 121.0]),
                       convention=reading)
    assert bar_text(reading) in ensemble_chart(ensemble, "mD").get_suptitle()
    realizations = [_comparison({"geometric": (-0.08 - 0.01 * i, 0.02)}) for i in range(4)]
    methods = method_spread([f"r{i}" for i in range(4)], realizations)
    assert bar_text(reading) in method_spread_chart(methods, "xy", 4, reading).get_suptitle()
    stack = np.stack([uncorrelated_lognormal((3, 4), seed=9_500 + r)[None] for r in range(4)])
    grid = Grid(dz=np.ones(1), dy=np.full(3, 10.0), dx=np.full(4, 10.0),
                transform=Affine(10, 0, 0, 0, -10, 30))
    figure = block_spread_maps(block_spread(stack), grid, "kx", "mD", convention=reading, realizations=4)
    titles = [ax.get_title() for ax in figure.axes if ax.get_title()]
    assert titles == [*(label(q, reading) for q in PERCENTILES), "std of ln kx"]
    # the exceedance reading names the 90th percentile P10
    named = "90th percentile" if reading == "nonexceedance" else "P10 (exceeded by 10 %)"
    assert label(90, reading) == named
