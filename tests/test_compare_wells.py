"""``compare`` with wells: every method also checked by the wells, and ranked on them too.

* The fine well solve is done once and shared by every method (the cost
  the issue allows: one extra fine solve per wells file), each method's
  coarse well solve is its own.
* The rank follows the largest |error| over the axes, the corner flow and
  the wells' total rate (the rule recorded in compare.json), so a method
  whose axis errors are small but whose wells are far off ranks below one
  whose errors are all moderate.
* Without wells, compare.json is as before (no ``well_check``; the digests
  of tests/test_reference_outputs.py hold it bit for bit); with them, every
  method records its well check, the CLI prints its error, and the report
  gains the column and the bar chart of the well rates fine vs coarse.
* The map of the pressure the wells drive (``well_pressure``), drawn only
  with wells: the fine pressure beside the coarse pressure of the method
  (a run) or of the best and the worst (compare), every panel on one colour
  scale from the lowest to the highest cell pressure, each well's marker at its
  x, y inside the cell (fine panel) or block (coarse panels) the check
  connected it to, injectors and producers told apart by the marker, and
  every text — the wells' names too — on the canvas and readable.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest
from conftest import ORIGIN, write_raster
from report.test_layout import PAGE_PX, SMALLEST, _drawn_texts  # the checks of every other figure

from upscale import Field, read_field
from upscale.analysis.compare import candidates, compare_methods
from upscale.analysis.comparison_record import RANKING_WELLS, comparison_record
from upscale.check.wells import fine_wells
from upscale.flow.wells import Well
from upscale.gallery.fields import lognormal_field
from upscale.report.coordinates import plan_edges
from upscale.report.figures import build_figures
from upscale.report.layout import DPI

SEED = 4_417_092_336


def _field() -> np.ndarray:
    return lognormal_field((32, 32), (6.0, 6.0), geometric_mean=100.0, sigma_ln=1.0, seed=SEED)


WELLS = [Well("I", 25.0, -25.0, None, "pressure", 1.0, 0.1),
         Well("P", 295.0, -295.0, None, "pressure", 0.0, 0.1)]  # fmt: skip


def test_methods_are_ranked_on_the_wells_too() -> None:
    field = Field.from_arrays(_field(), cell_size=(10.0, 10.0))
    shared = fine_wells(field, WELLS)
    chosen = candidates(["arithmetic", "harmonic", "geometric", "flow"])
    found = compare_methods(field, "8x8", chosen, wells=shared)
    for entry in found.ranked:
        assert entry.wells.fine is shared.flow  # one fine solve for every method
        axes = max(abs(c.rel_error) for c in entry.checks.values())
        assert entry.worst_error == max(axes, abs(entry.wells.rel_error))
    worst = [e.worst_error for e in found.ranked]
    assert worst == sorted(worst)
    record = comparison_record(found).to_dict()
    assert record["ranking"] == RANKING_WELLS
    assert all(m["well_check"]["total_rate"]["rel_error"] is not None for m in record["methods"])
    plain = comparison_record(compare_methods(field, "8x8", candidates(["geometric"]))).to_dict()
    assert "well_check" not in plain["methods"][0]
    # the bar chart of the well rates: every text on the canvas, readable at the page's width
    (plot,) = [p for p in build_figures(found, "mD") if p.name == "wells"]
    texts, canvas = _drawn_texts(plot.figure)
    for text, box in texts:
        assert canvas.x0 - 1 <= box.x0 and box.x1 <= canvas.x1 + 1, text.get_text()
        assert canvas.y0 - 1 <= box.y0 and box.y1 <= canvas.y1 + 1, text.get_text()
    scale = min(1.0, PAGE_PX / (plot.figure.get_figwidth() * DPI))
    assert min(t.get_fontsize() for t, _ in texts) * DPI / 96 * scale >= SMALLEST
    # the error chart ranks on the wells too, so it draws their error beside the flows' (one bar per method)
    (errors,) = [p for p in build_figures(found, "mD") if p.name == "errors"]
    assert "and of the wells' total rate" in errors.caption
    labels = errors.figure.legends[0].get_texts()
    assert [t.get_text() for t in labels][-1] == "wells (total rate)"
    (ax,) = errors.figure.axes
    drawn = [b.get_height() for c in ax.containers if c.get_label() == "wells (total rate)" for b in c]
    assert drawn == pytest.approx([100 * e.wells.rel_error for e in found.ranked])


def test_well_rates_of_sand_and_shale_are_read_on_a_log_axis() -> None:
    # a producer in shale passes a hundredth of one in sand: on a linear axis its bars were invisible
    k = _field()
    k[22:29, 22:29] /= 300.0  # a shale lens around Q
    field = Field.from_arrays(k, cell_size=(10.0, 10.0))
    wells = [*WELLS, Well("Q", 255.0, -255.0, None, "pressure", 0.0, 0.1)]
    found = compare_methods(field, "8x8", candidates(["geometric"]), wells=fine_wells(field, wells))
    rates = [abs(r) for r in found.ranked[0].wells.fine.rates.values()]
    assert max(rates) > 10 * min(rates)
    (plot,) = [p for p in build_figures(found, "mD") if p.name == "wells"]
    assert plot.figure.axes[0].get_yscale() == "log"


@pytest.mark.slow  # about 7 s: the figures and the page of a comparison
def test_compare_cli_with_wells(run_cli, tmp_path: Path) -> None:
    path = write_raster(tmp_path / "k.tif", _field(), cell_size=10.0)
    x0, y0 = ORIGIN
    wells = tmp_path / "wells.csv"
    wells.write_text(f"name,x,y,control,value,radius\nI,{x0 + 25},{y0 - 25},pressure,1,0.1\n"
                     f"P,{x0 + 295},{y0 - 295},pressure,0,0.1\n")  # fmt: skip
    code, stdout, stderr = run_cli("compare", path, "--block", "8x8", "--methods", "geometric,flow",
                                   "--wells", wells, "--out", tmp_path / "cmp")  # fmt: skip
    assert code == 0, stderr
    assert "error wells" in stdout and "and the wells)" in stdout
    record = json.loads((tmp_path / "cmp" / "compare.json").read_text())
    assert record["ranking"] == RANKING_WELLS and all("well_check" in m for m in record["methods"])
    # the report: the wells' column in the ranking, and the bar chart of the well rates
    page = (tmp_path / "cmp" / "report.html").read_text()
    assert "<th>error wells</th>" in page and '<figure id="wells">' in page
    assert (tmp_path / "cmp" / "figures" / "wells.png").stat().st_size > 0
    assert '<figure id="well_pressure">' in page
    assert (tmp_path / "cmp" / "figures" / "well_pressure.png").stat().st_size > 0


def _layout_checked(figure) -> list:
    """Every text of `figure` on its canvas and readable at the page's width, as in every figure."""
    texts, canvas = _drawn_texts(figure)
    renderer = figure.canvas.get_renderer()
    texts += [(t, t.get_window_extent(renderer)) for ax in figure.axes for t in ax.texts]  # the wells' names
    for text, box in texts:
        assert canvas.x0 - 1 <= box.x0 and box.x1 <= canvas.x1 + 1, text.get_text()
        assert canvas.y0 - 1 <= box.y0 and box.y1 <= canvas.y1 + 1, text.get_text()
    scale = min(1.0, PAGE_PX / (figure.get_figwidth() * DPI))
    assert min(t.get_fontsize() for t, _ in texts) * DPI / 96 * scale >= SMALLEST
    return texts


@pytest.fixture(scope="module")
def mapped(tmp_path_factory):
    """Three methods checked by an injector and two producers on a georeferenced raster with a hole."""
    k = _field()
    k[22:29, 22:29] /= 300.0  # a shale lens around Q
    k[0:8, 24:32] = np.nan  # one inactive block, north-east
    path = write_raster(tmp_path_factory.mktemp("wells") / "k.tif", k, cell_size=10.0, nodata=-1.0)
    field = read_field(path)
    x0, y0 = ORIGIN
    wells = [Well("I", x0 + 23.0, y0 - 27.0, None, "pressure", 200.0, 0.1),
             Well("P", x0 + 296.0, y0 - 133.0, None, "pressure", 100.0, 0.1),
             Well("Q", x0 + 254.0, y0 - 258.0, None, "pressure", 120.0, 0.1)]  # fmt: skip
    chosen = candidates(["arithmetic", "harmonic", "geometric"])
    return field, compare_methods(field, "8x8", chosen, wells=fine_wells(field, wells))


def _well_maps(comparison):
    return [p for p in build_figures(comparison, "mD") if p.name == "well_pressure"]


def test_the_well_pressure_maps_exist_only_with_wells(mapped) -> None:
    field, found = mapped
    assert len(_well_maps(found)) == 1
    assert _well_maps(compare_methods(field, "8x8", candidates(["geometric"]))) == []


def test_the_well_pressure_panels_share_one_scale_and_mark_each_well_in_its_cell(mapped) -> None:
    field, found = mapped
    (plot,) = _well_maps(found)
    figure = plot.figure
    _layout_checked(figure)
    panels = [ax for ax in figure.axes if not hasattr(ax, "_colorbar")]
    best, worst = found.ranked[0], found.ranked[-1]
    assert [ax.get_title() for ax in panels] == ["fine", f"best: {best.candidate.label}",
                                                 f"worst: {worst.candidate.label}"]  # fmt: skip
    # the cells drawn are the check's pressures: fine, then the best's and the worst's coarse ones
    meshes = [ax.collections[0] for ax in panels]
    drawn = [np.ma.filled(m.get_array(), np.nan).ravel() for m in meshes]
    expected = [best.wells.fine.pressure[0], best.wells.coarse.pressure[0], worst.wells.coarse.pressure[0]]
    for values, want in zip(drawn, expected):
        np.testing.assert_array_equal(values, want.ravel())
    # one colour scale: every panel's cells and the colour bar, from the lowest to the highest cell shown
    (bar,) = [ax for ax in figure.axes if hasattr(ax, "_colorbar")]
    for mesh in [*meshes, bar._colorbar.mappable]:
        every = np.concatenate(drawn)
        assert (mesh.norm.vmin, mesh.norm.vmax) == (np.nanmin(every), np.nanmax(every))
        assert mesh.cmap.name == meshes[0].cmap.name
    # each well's marker at its x, y, inside the cell (fine) or block (coarse) the check connected it to
    for ax, grid, cells in [(panels[0], field.grid, best.wells.fine_cells),
                            (panels[1], best.result.coarse.grid, best.wells.coarse_cells),
                            (panels[2], worst.result.coarse.grid, worst.wells.coarse_cells)]:  # fmt: skip
        x, y = plan_edges(grid)
        for well in best.wells.wells:
            (marker,) = [line for line in ax.get_lines() if line.get_label() == well.name]
            (mx,), (my,) = marker.get_xdata(), marker.get_ydata()
            assert (mx, my) == (well.x, well.y)
            ((_, row, column),) = cells[well.name]
            assert x[column] < mx < x[column + 1] and y[row + 1] < my < y[row]
            kind = "^" if best.wells.fine.rates[well.name] > 0 else "v"
            assert marker.get_marker() == kind
    # the legend names the two kinds of well, and the hatched key the inactive block
    labels = sorted(t.get_text() for legend in figure.legends for t in legend.get_texts())
    assert labels == ["injector", "no value (inactive)", "producer"]


def test_a_run_draws_the_well_pressure_of_its_one_method(mapped) -> None:
    field, found = mapped
    wells = found.ranked[0].wells
    shared = fine_wells(field, wells.wells)
    (plot,) = _well_maps(compare_methods(field, "8x8", candidates(["flow"], bc="periodic"), wells=shared))
    _layout_checked(plot.figure)
    assert [ax.get_title() for ax in plot.figure.axes[:2]] == ["fine", "flow (periodic)"]


def test_a_3d_well_pressure_map_shows_the_layer_of_the_other_maps() -> None:
    k = lognormal_field((4, 16, 16), (3.0, 3.0, 1.0), geometric_mean=100.0, sigma_ln=1.0, seed=SEED)
    field = Field.from_arrays(k, cell_size=(10.0, 10.0), dz=[1.0, 2.0, 0.5, 2.0])
    wells = [Well("I", 25.0, -25.0, None, "pressure", 1.0, 0.1),
             Well("P", 135.0, -135.0, (1, 1), "pressure", 0.0, 0.1)]  # fmt: skip
    found = compare_methods(field, "8x8x2", candidates(["arithmetic"]), wells=fine_wells(field, wells))
    (plot,) = _well_maps(found)
    _layout_checked(plot.figure)
    fine, coarse = (ax.collections[0] for ax in plot.figure.axes[:2])
    check = found.ranked[0].wells
    drawn = [np.ma.filled(mesh.get_array(), np.nan).ravel() for mesh in (fine, coarse)]
    np.testing.assert_array_equal(drawn[0], check.fine.pressure[2].ravel())  # the middle layer, 3 of 4
    np.testing.assert_array_equal(drawn[1], check.coarse.pressure[1].ravel())  # the coarse layer holding it
    names = sorted(t.get_text() for t in plot.figure.axes[0].texts)
    assert names == ["I", "P (layer 1)"]  # P is completed in the top layer only, not in layer 3 shown
    assert plot.figure._suptitle.get_text().endswith("layer 3")
