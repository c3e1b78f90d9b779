"""Tests of the report figures (`upscale.report`) and the coarse-face flux mismatch.

What is tested
--------------
* `build_figures` on small 2D and 3D comparisons: the expected figures in
  order (maps, [section,] errors, bounds, histograms, mismatch_x, mismatch_y,
  pressure), each with a title and a caption, and what each must show:
  one panel per method beside "fine" on one shared log colour scale with one
  colour bar stating the unit; check-error bars equal to the checks, with the
  ±5 % band and ticks in percent; the fine k_eff between the Wiener (1912)
  and Cardwell–Parsons (1945) bounds (log axes over a decade or more);
  histograms on a log axis, one panel per method; maps drawn on the cells'
  edges in map coordinates; mismatch maps centred on 0 with their faces
  drawn from block centre to block centre; pressures on [0, 1].
* Colour maps are the colour-blind-safe ones the style promises: cividis
  (Nuñez, Anderton & Renslow 2018, "Optimizing colormaps with consideration
  for color vision deficiency"), viridis, and ColorBrewer PuOr (Harrower &
  Brewer 2003).
* `rendered` gives PNG and SVG bytes, the same bytes for the same comparison
  (as figures.py promises: fixed metadata and SVG ids).
* `coarse_face_mismatch` (common practice for judging upscaled
  transmissibilities): zero on a homogeneous field; on layers, negative where
  the coarse model passes too little flow and positive where too much; summed
  over one plane of coarse faces it is (coarse − fine total flow) / fine total
  flow, since the flow through every cross-section is the total (mass
  conservation).

Figures are `matplotlib.figure.Figure` objects on the Agg canvas: nothing
here needs a display.
"""

from __future__ import annotations

import math
import warnings

import matplotlib
import numpy as np
import pytest
from conftest import ORIGIN, write_raster
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.collections import QuadMesh
from matplotlib.colors import LogNorm, TwoSlopeNorm

import upscale
from upscale import Field, coarsen
from upscale.analysis.compare import candidates, compare_methods
from upscale.check.axis import check_flow
from upscale.gallery.problems import Layers, uncorrelated_lognormal
from upscale.report.charts import BAND, domain_bounds, error_bars
from upscale.report.figures import Plot, build_figures, rendered
from upscale.report.flux import coarse_face_mismatch
from upscale.report.style import MISSING_HATCH, missing_background, with_missing

matplotlib.use("Agg")  # no display, ever

FIGURES_2D = ["maps", "errors", "bounds", "histograms", "mismatch_x", "mismatch_y", "pressure"]
FIGURES_3D = ["maps", "section", "errors", "bounds", "histograms", "mismatch_x", "mismatch_y", "pressure"]
#: Colour-blind-safe maps (see the module docstring).
SAFE_MAPS = {"cividis", "viridis", "PuOr"}
CELL = 10.0  # m
BLOCK = 8  # cells


@pytest.fixture(scope="module")
def comparison_2d(tmp_path_factory):
    """Three methods on a georeferenced 32x32 lognormal map (10 m cells), 8x8 blocks."""
    path = write_raster(tmp_path_factory.mktemp("fig") / "map.tif", uncorrelated_lognormal((32, 32), seed=21),
                        cell_size=CELL)  # fmt: skip
    field = upscale.read_field(path)
    return compare_methods(
        field, f"{BLOCK}x{BLOCK}", candidates(["geometric", "harmonic", "flow"], bc="sealed")
    )


@pytest.fixture(scope="module")
def comparison_3d():
    """Two methods on a 4 x 16 x 16 model without georeference (dz 2 m), 8x8x2 blocks."""
    k = np.concatenate([uncorrelated_lognormal((2, 16, 16), seed=22, mean_ln=1.0),
                        uncorrelated_lognormal((2, 16, 16), seed=23)])
    field = Field.from_arrays(k, dz=2.0, cell_size=(5.0, 5.0))
    return compare_methods(field, "8x8x2", candidates(["arithmetic", "harmonic"]))


@pytest.fixture(scope="module")
def plots_2d(comparison_2d):
    return {p.name: p for p in build_figures(comparison_2d, "mD")}


@pytest.fixture(scope="module")
def plots_3d(comparison_3d):
    return {p.name: p for p in build_figures(comparison_3d, "mD", layer=2)}


def _panels(figure):
    """Visible axes that are not colour bars."""
    return [ax for ax in figure.axes if ax.get_visible() and not hasattr(ax, "_colorbar")]


def _colorbars(figure):
    return [ax._colorbar for ax in figure.axes if hasattr(ax, "_colorbar")]


def _images(figure):
    """The cells drawn in each panel (one QuadMesh per map panel)."""
    return [mesh for ax in _panels(figure) for mesh in ax.collections if isinstance(mesh, QuadMesh)]


def _edges(mesh):
    """The x edges (west to east) and the y edges (first row first) of a mesh."""
    corners = mesh.get_coordinates()
    return corners[0, :, 0], corners[:, 0, 1]


# --- the set of figures --------------------------------------------------------------------------


def test_2d_figures_in_order_each_with_title_and_caption(comparison_2d):
    plots = build_figures(comparison_2d, "mD")
    assert [p.name for p in plots] == FIGURES_2D
    for plot in plots:
        titles = [ax.get_title() for ax in _panels(plot.figure)]
        assert plot.figure.get_suptitle() or all(titles), plot.name
        assert len(plot.caption) > 40 and plot.caption.endswith("."), plot.name


def test_3d_figures_add_a_section(plots_3d, comparison_3d):
    assert list(plots_3d) == FIGURES_3D
    for plot in plots_3d.values():
        assert plot.figure.get_suptitle() or all(ax.get_title() for ax in _panels(plot.figure)), plot.name
    assert plots_3d["maps"].figure.get_suptitle() == "Fine and coarse kx, layer 3"  # layer=2 is the third
    section = plots_3d["section"].figure
    assert section.get_suptitle() == "Fine and coarse kx, section through row 8"  # the middle row
    fine, coarse, _ = _images(section)
    assert _panels(section)[0].get_ylabel() == "depth below top (m)"
    # x across the model, depth from the top (0) down to the total thickness (4 layers of 2 m)
    x, depth = _edges(fine)
    np.testing.assert_allclose(x, np.arange(17) * 5.0)
    np.testing.assert_allclose(depth, [0.0, 2.0, 4.0, 6.0, 8.0])
    assert fine.get_array().shape == (4, 16) and coarse.get_array().shape == (2, 2)
    np.testing.assert_allclose(_edges(coarse)[1], [0.0, 4.0, 8.0])


def test_figures_use_colour_blind_safe_maps(plots_2d, plots_3d):
    used = {image.get_cmap().name for plots in (plots_2d, plots_3d) for p in plots.values()
            for image in _images(p.figure)}  # fmt: skip
    assert used == SAFE_MAPS
    assert {i.get_cmap().name for i in _images(plots_2d["maps"].figure)} == {"cividis"}
    assert {i.get_cmap().name for i in _images(plots_2d["pressure"].figure)} == {"viridis"}
    assert {i.get_cmap().name for i in _images(plots_2d["mismatch_x"].figure)} == {"PuOr"}


# --- each figure ---------------------------------------------------------------------------------


def test_maps_one_panel_per_method_and_one_shared_log_scale(plots_2d, comparison_2d):
    figure = plots_2d["maps"].figure
    ran = comparison_2d.ranked
    assert [ax.get_title() for ax in _panels(figure)] == ["fine"] + [
        f"{e.rank}. {e.candidate.label}" for e in ran
    ]
    bars = _colorbars(figure)
    assert len(bars) == 1
    label = bars[0].ax.get_ylabel()
    assert "mD" in label and "log" in label
    images = _images(figure)
    assert len(images) == 1 + len(ran)
    norm = images[0].norm
    assert isinstance(norm, LogNorm) and 0 < norm.vmin < norm.vmax
    assert all(image.norm is norm for image in images)  # one scale for all panels
    assert bars[0].norm is norm
    # the fine map is the fine kx, each coarse map that method's coarse kx
    np.testing.assert_array_equal(images[0].get_array(), np.asarray(comparison_2d.fine.kx)[0])
    for image, entry in zip(images[1:], ran):
        np.testing.assert_array_equal(image.get_array(), entry.result.coarse.kx[0])
    # drawn in map coordinates of the raster: cell edges west to east, north to south
    west, north = ORIGIN
    for image, cells in zip(images, [32] + [32 // BLOCK] * len(ran)):
        x, y = _edges(image)
        np.testing.assert_allclose(x, west + np.linspace(0.0, 32 * CELL, cells + 1))
        np.testing.assert_allclose(y, north - np.linspace(0.0, 32 * CELL, cells + 1))
    assert _panels(figure)[0].get_xlabel() == "x (m)" and _panels(figure)[0].get_ylabel() == "y (m)"


def test_error_bars_show_the_checks_and_the_five_percent_band(plots_2d, comparison_2d):
    (ax,) = _panels(plots_2d["errors"].figure)
    assert "k_coarse − k_fine" in ax.get_ylabel()
    FigureCanvasAgg(ax.figure).draw()
    assert all(t.get_text() == "0" or t.get_text().endswith(" %") for t in ax.get_yticklabels()
               if t.get_text())  # fmt: skip
    band = [p for p in ax.patches if p.get_label() == f"±{BAND:g} %"]
    assert len(band) == 1 and BAND == 5.0
    corners = band[0].get_transform().transform(band[0].get_path().vertices)
    y = ax.transData.inverted().transform(corners)[:, 1]
    x = ax.transAxes.inverted().transform(corners)[:, 0]
    assert min(y) == pytest.approx(-5.0, abs=1e-9) and max(y) == pytest.approx(5.0, abs=1e-9)
    assert min(x) == pytest.approx(0.0, abs=1e-12) and max(x) == pytest.approx(1.0, abs=1e-12)
    (box,) = ax.figure.legends
    legend = [t.get_text() for t in box.get_texts()]
    assert "along x" in legend and "along y" in legend and "±5 %" in legend
    # beside the panel, where it hides no bar (inside it, it once covered one)
    renderer = ax.figure.canvas.get_renderer()
    assert not box.get_window_extent(renderer).overlaps(ax.get_window_extent(renderer))
    # one bar per method and axis, as high as the check error in %
    ran = comparison_2d.ranked
    containers = {c.get_label(): c for c in ax.containers}
    for axis in ("x", "y"):
        heights = [bar.get_height() for bar in containers[f"along {axis}"]]
        np.testing.assert_allclose(heights, [100 * e.checks[axis].rel_error for e in ran], rtol=1e-12)
    assert [t.get_text() for t in ax.get_xticklabels()] == [f"{e.rank}. {e.candidate.label}" for e in ran]


def test_bounds_chart_log_scale_and_fine_k_eff_within_the_bounds(plots_2d, comparison_2d):
    figure = plots_2d["bounds"].figure
    panels = _panels(figure)
    assert [ax.get_title() for ax in panels] == ["along x", "along y"]
    for ax, axis in zip(panels, ("x", "y")):
        low, high = sorted(ax.dataLim.intervaly)  # log when the values span a decade or more
        assert ax.get_yscale() == ("log" if high >= 10 * low else "linear")
        assert ax.get_ylabel() == f"effective k along {axis} (mD)"
        lines = {line.get_label(): line for line in ax.get_lines()}
        k_fine = comparison_2d.fine_flows[axis].k_eff
        assert list(lines["fine k_eff"].get_ydata()) == [k_fine, k_fine]
        limits = domain_bounds(comparison_2d.fine, axis)
        for name, value in limits.items():
            assert list(lines[name].get_ydata()) == [value, value]
        # Wiener (1912) and Cardwell & Parsons (1945), "Average permeabilities of heterogeneous
        # oil sands": harmonic <= tubes (lower) <= k_eff <= slabs (upper) <= arithmetic
        chain = [limits["Wiener lower (harmonic)"], limits["Cardwell–Parsons lower"], k_fine,
                 limits["Cardwell–Parsons upper"], limits["Wiener upper (arithmetic)"]]  # fmt: skip
        assert all(a <= b * (1 + 1e-9) for a, b in zip(chain, chain[1:])), chain
        # one marker per method at its coarse k_eff
        for entry in comparison_2d.ranked:
            assert list(lines[entry.candidate.label].get_ydata()) == [entry.checks[axis].coarse.k_eff]


def test_domain_bounds_reference_values():
    # two columns of 1 and 4 mD (equal widths): flow along x crosses them in series
    field = Field.from_arrays(np.array([[1.0, 4.0], [1.0, 4.0]]))
    along_x = domain_bounds(field, "x")
    assert along_x["Wiener upper (arithmetic)"] == pytest.approx(2.5)
    assert along_x["Wiener lower (harmonic)"] == pytest.approx(1.6)
    assert along_x["Cardwell–Parsons lower"] == pytest.approx(1.6)  # series along each tube
    assert along_x["Cardwell–Parsons upper"] == pytest.approx(1.6)  # slabs of one k each, in series
    along_y = domain_bounds(field, "y")
    assert along_y["Cardwell–Parsons lower"] == pytest.approx(2.5)  # tubes of 1 and of 4 in parallel
    # an inactive cell counts as impermeable: no harmonic lower bound
    holed = Field.from_arrays(np.array([[1.0, np.nan], [1.0, 4.0]]))
    assert "Wiener lower (harmonic)" not in domain_bounds(holed, "x")


def test_domain_bounds_weigh_cells_by_true_volume():
    # an aquifer map of two columns, K = 1 and 4, 1 m and 3 m thick: flow along y passes them in
    # parallel, so k_eff = Σ K b / Σ b = 3.25 (Wiener 1912; the arithmetic bound is reached), not
    # the mean of 1 and 4 that cells of one reference thickness would give
    from upscale.geometry import Geometry

    field = Field.from_arrays(np.array([[1.0, 4.0], [1.0, 4.0]]),
                              geometry=Geometry(np.zeros((2, 2)), np.array([[[1.0, 3.0], [1.0, 3.0]]])))
    along_y = domain_bounds(field, "y")
    assert along_y["Wiener upper (arithmetic)"] == pytest.approx(3.25, rel=1e-14)
    assert along_y["Cardwell–Parsons lower"] == pytest.approx(3.25, rel=1e-14)
    assert check_flow(field, field)["y"].fine.k_eff == pytest.approx(3.25, rel=1e-12)


def test_histograms_on_a_log_axis_with_the_unit(plots_2d, comparison_2d):
    figure = plots_2d["histograms"].figure
    panels = _panels(figure)
    ranked = [f"{e.rank}. {e.candidate.label}" for e in comparison_2d.ranked]
    assert [ax.get_title() for ax in panels] == ranked
    for ax in panels:
        assert ax.get_xscale() == "log" and "mD" in ax.get_xlabel()
    assert "log scale" in figure.get_suptitle()
    (legend,) = figure.legends
    assert [t.get_text() for t in legend.get_texts()] == ["fine cells", "coarse blocks"]


@pytest.mark.parametrize("axis", ["x", "y"])
def test_mismatch_maps_centred_on_zero_where_the_faces_are(plots_2d, comparison_2d, axis):
    figure = plots_2d[f"mismatch_{axis}"].figure
    ran = comparison_2d.ranked
    assert [ax.get_title() for ax in _panels(figure)] == [f"{e.rank}. {e.candidate.label}" for e in ran]
    bars = _colorbars(figure)
    assert len(bars) == 1 and "% of the total flow" in bars[0].ax.get_ylabel()
    images = _images(figure)
    norm = images[0].norm
    assert isinstance(norm, TwoSlopeNorm) and norm.vcenter == 0.0 and norm.vmin == -norm.vmax
    assert all(image.norm is norm for image in images)
    a = {"x": 2, "y": 1}[axis]
    largest = 0.0
    for image, entry in zip(images, ran):
        expected = 100 * coarse_face_mismatch(comparison_2d.fine_flows[axis], entry.checks[axis].coarse,
                                              comparison_2d.block.cells, a)[0]  # fmt: skip
        np.testing.assert_allclose(image.get_array(), expected, rtol=1e-12, atol=1e-12)
        largest = max(largest, float(np.abs(expected).max()))
    assert norm.vmax == pytest.approx(largest)
    # faces between blocks: drawn from block centre to block centre across the flow axis
    west, north = ORIGIN
    centres = (np.arange(32 // BLOCK) + 0.5) * BLOCK * CELL
    edges = np.arange(32 // BLOCK + 1) * BLOCK * CELL
    for image in images:
        x, y = _edges(image)
        np.testing.assert_allclose(x - west, centres if axis == "x" else edges)
        np.testing.assert_allclose(north - y, edges if axis == "x" else centres)


def test_pressure_maps_on_zero_to_one_best_and_worst(plots_2d, comparison_2d):
    figure = plots_2d["pressure"].figure
    ran = comparison_2d.ranked
    assert [ax.get_title() for ax in _panels(figure)] == [
        "fine", f"best: {ran[0].candidate.label}", f"worst: {ran[-1].candidate.label}"
    ]  # fmt: skip
    (bar,) = _colorbars(figure)
    assert (bar.norm.vmin, bar.norm.vmax) == (0.0, 1.0)
    assert "pressure" in bar.ax.get_ylabel()
    fine = _images(figure)[0].get_array()
    assert 0.0 <= float(np.nanmin(fine)) and float(np.nanmax(fine)) <= 1.0
    # inlet on the west side: pressure falls along x
    assert float(np.nanmean(fine[:, 0])) > 0.9 and float(np.nanmean(fine[:, -1])) < 0.1


def test_a_comparison_of_one_method_draws_every_figure():
    field = Field.from_arrays(uncorrelated_lognormal((16, 16), seed=24))
    found = compare_methods(field, "8x8", candidates(["geometric"]))
    plots = build_figures(found, "D")
    assert [p.name for p in plots] == FIGURES_2D
    pressure = {p.name: p for p in plots}["pressure"].figure
    assert [ax.get_title() for ax in _panels(pressure)] == ["fine", "geometric"]  # one method: no "best"
    assert "D," in _colorbars({p.name: p for p in plots}["maps"].figure)[0].ax.get_ylabel()


# --- rendering and style -------------------------------------------------------------------------


def test_rendered_gives_png_and_svg_bytes(plots_2d):
    png, svg = rendered(plots_2d["errors"])
    assert png.startswith(b"\x89PNG\r\n\x1a\n")
    assert b"<svg" in svg[:2000] and svg.rstrip().endswith(b"</svg>")


def _errors_rendered_twice(comparison):
    """The errors figure of the same comparison, built and rendered twice (as two runs would)."""
    return [rendered(Plot("errors", error_bars(comparison), "")) for _ in range(2)]


def test_same_comparison_gives_the_same_png_bytes(comparison_2d):
    # figures.py: "fixed metadata, so the same figure gives the same bytes"
    first, second = _errors_rendered_twice(comparison_2d)
    assert first[0] == second[0]


def test_same_comparison_gives_the_same_svg_bytes(comparison_2d):
    first, second = _errors_rendered_twice(comparison_2d)
    assert first[1] == second[1]


def test_missing_values_show_the_hatched_background_and_values_beyond_the_scale_its_ends():
    for name in SAFE_MAPS:
        cmap = with_missing(name)
        assert cmap.name == name
        assert cmap.get_bad()[3] == 0.0  # transparent: the hatched background shows through
        assert cmap.get_under() == pytest.approx(cmap(0.0)) and cmap.get_over() == pytest.approx(cmap(1.0))
    figure = matplotlib.figure.Figure()
    ax = figure.subplots()
    missing_background(ax)
    assert ax.patch.get_hatch() == MISSING_HATCH


def test_colour_maps_use_no_pending_deprecated_api():
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        with_missing("cividis")


# --- coarse-face flux mismatch -------------------------------------------------------------------


def test_mismatch_is_zero_on_a_homogeneous_field():
    field = Field.from_arrays(np.full((4, 8, 12), 37.0), dz=1.5, cell_size=(3.0, 2.0))
    result = coarsen(field, "4x4x2", "arithmetic")
    checks = check_flow(result.fine, result.transmissibilities())
    for axis, a in (("x", 2), ("y", 1), ("z", 0)):
        mismatch = coarse_face_mismatch(checks[axis].fine, checks[axis].coarse, (2, 4, 4), a)
        shape = list(result.coarse.shape)
        shape[a] -= 1
        assert mismatch.shape == tuple(shape)
        assert np.abs(mismatch).max() < 1e-12, axis


def _layered_rows():
    """12 x 16 cells: rows of 1, 50 and 5 mD repeating (layers along x), not aligned with 2-row blocks."""
    return Field.from_arrays(Layers(np.tile([1.0, 50.0, 5.0], 4), np.ones(12)).rows(16))


def test_mismatch_on_layers_is_negative_where_the_coarse_model_passes_too_little():
    field = _layered_rows()
    result = coarsen(field, "4x2", "harmonic")  # wrong along the layers: too little flow
    check = check_flow(result.fine, result.transmissibilities())["x"]
    mismatch = coarse_face_mismatch(check.fine, check.coarse, (1, 2, 4), 2)
    assert mismatch.shape == (1, 6, 3)
    assert (mismatch < -1e-3).all()  # every block row holds two rows of different k
    # conservation: the flow through any plane of faces across x is the total flow of each model,
    # so the mismatch summed over one plane is the relative error of the total flow
    relative = (check.coarse.outflow - check.fine.outflow) / check.fine.outflow
    for j in range(mismatch.shape[2]):
        assert mismatch[0, :, j].sum() == pytest.approx(relative, rel=1e-9, abs=1e-12)
    assert relative == pytest.approx(check.rel_error, rel=1e-9)  # same geometry: Q is proportional to k_eff
    assert relative < -0.3


def test_mismatch_across_layers_is_zero_for_harmonic_and_positive_for_arithmetic():
    field = _layered_rows()
    for method, sign in (("harmonic", 0), ("arithmetic", 1)):
        result = coarsen(field, "4x2", method)
        check = check_flow(result.fine, result.transmissibilities())["y"]
        mismatch = coarse_face_mismatch(check.fine, check.coarse, (1, 2, 4), 1)
        assert mismatch.shape == (1, 5, 4)
        relative = (check.coarse.outflow - check.fine.outflow) / check.fine.outflow
        for i in range(mismatch.shape[1]):
            assert mismatch[0, i, :].sum() == pytest.approx(relative, rel=1e-9, abs=1e-12)
        if sign == 0:  # Bear (1972): the harmonic mean is exact across layers
            assert np.abs(mismatch).max() < 1e-12
        else:
            assert (mismatch > 1e-3).all() and math.isclose(relative, check.rel_error, rel_tol=1e-9)
