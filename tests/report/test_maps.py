"""Map figures (`upscale.report.maps`) drawn as a reviewer reads them: colours, coordinates, no-value cells.

What is tested
--------------
* Low but valid values are not drawn as missing: a few cells far below the
  0.5th percentile of the colour scale take its lowest colour, and the
  colour bar carries a triangle (``extend``) on each clipped side; cells
  with no value show a hatched background — in the rendered pixels, a
  pattern, never the colour of any value. Zero k is a value: it is drawn
  in the lowest colour, with the lower triangle.
* True coordinates (``pcolormesh`` on the cells' edges): the depths of a
  section are the cumulative layer thicknesses, fine and coarse (the
  ``--dz`` of a run goes into ``Grid.dz`` unchanged); with ``--remainder
  keep`` the smaller edge blocks are drawn on their true edges.
* Map coordinates written in full: with a northing of about 6.5e6 m no
  axis has an offset ("1e6") or a power of ten, and every tick label is the
  plain number of its tick.
* In a 3D model's plan maps, each coarse panel's title names the coarse
  layer it shows and the fine layers that coarse layer holds (numbered from
  1, top down), for a grouping of unequal coarse layers and a uniform one.
* Mismatch maps: a face beside an inactive block has no value (hatched),
  unlike a face where fine and coarse agree (the white centre of PuOr).

Pixels come from the Agg canvas (no display); data coordinates are turned
into pixel positions through each panel's own transform.
"""

from __future__ import annotations

import numpy as np
import pytest
from conftest import north_up, write_raster
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.collections import QuadMesh

import upscale
from upscale import Field
from upscale.analysis.compare import candidates, compare_methods
from upscale.gallery.problems import uncorrelated_lognormal
from upscale.grid import BlockSpec
from upscale.report.maps import field_maps, mismatch_maps, pressure_maps

CELL = 10.0  # m
#: A north-west corner with a northing of about 6.5e6 m (far from the equator in UTM).
FAR_NORTH = (512_340.0, 6_512_300.0)


def _mesh(ax):
    """The cells drawn in a panel (a QuadMesh since the fix; an image before it)."""
    meshes = [c for c in ax.collections if isinstance(c, QuadMesh)]
    return meshes[0] if meshes else ax.get_images()[0]


def _panels(figure):
    return [ax for ax in figure.axes if ax.get_visible() and not hasattr(ax, "_colorbar")]


def _pixels(figure) -> np.ndarray:
    """The figure rendered by Agg: RGB, shape (height, width, 3), row 0 at the top."""
    canvas = FigureCanvasAgg(figure)
    canvas.draw()
    return np.asarray(canvas.buffer_rgba())[:, :, :3].copy()


def _region(figure, pixels, ax, x0, x1, y0, y1) -> np.ndarray:
    """The pixels (n, 3) strictly inside the data rectangle [x0, x1] x [y0, y1] of panel `ax`."""
    corners = ax.transData.transform([(x0, y0), (x1, y1)])
    height = pixels.shape[0]
    (c0, c1), (r1, r0) = np.sort(corners[:, 0]), height - np.sort(corners[:, 1])
    return pixels[int(r0) + 2: int(r1) - 1, int(c0) + 2: int(c1) - 1].reshape(-1, 3)


def _rgb(colour) -> np.ndarray:
    return np.round(255 * np.asarray(colour)[:3])


# --- low values, zeros and no value --------------------------------------------------------------


@pytest.fixture(scope="module")
def holed():
    """A 24 x 24 lognormal map (mD) with two shale cells 1000 times below the rest, a zero and a hole."""
    k = uncorrelated_lognormal((24, 24), seed=4091, mean_ln=4.0, sigma_ln=0.5)
    k[20, 3] = k[21, 3] = 1e-3 * k.min()  # far below the 0.5th percentile of the scale
    k[2, 20] = 0.0  # a value: no flow through this cell
    k[8:16, 8:16] = np.nan  # a hole of no value (a whole block, so the coarse block is inactive too)
    field = Field.from_arrays(k, cell_size=(CELL, CELL))
    return k, compare_methods(field, "8x8", candidates(["arithmetic"]))


def test_low_values_take_the_lowest_colour_and_no_value_looks_like_no_value(holed):
    k, comparison = holed
    figure = field_maps(comparison, "mD")
    fine = _panels(figure)[0]
    mesh = _mesh(fine)
    lowest = _rgb(mesh.cmap(0.0))
    pixels = _pixels(figure)
    # the shale cell (row 20, column 3) in map metres: x from 30 to 40, y from -200 to -210
    shale = _region(figure, pixels, fine, 3 * CELL, 4 * CELL, -21 * CELL, -20 * CELL)
    assert shale.size and np.abs(shale - lowest).max() <= 2, "a low value is not in the lowest colour"
    hole = _region(figure, pixels, fine, 8 * CELL, 16 * CELL, -16 * CELL, -8 * CELL)
    colours = np.unique(hole, axis=0)
    assert len(colours) > 2, "no value is drawn as one flat colour"  # a hatch: lines over white
    assert not (np.abs(hole - lowest).max(axis=1) <= 2).any()
    # no colour of the hole is one the colour map gives to a value
    scale = np.round(255 * mesh.cmap(np.linspace(0.0, 1.0, 256))[:, :3])
    distances = np.abs(colours[:, None, :] - scale[None, :, :]).max(axis=2).min(axis=1)
    assert (distances > 6).mean() > 0.5, colours


def test_the_colour_bar_marks_the_clipped_ends_and_zero_is_the_lowest_colour(holed):
    k, comparison = holed
    figure = field_maps(comparison, "mD")
    (bar,) = [ax._colorbar for ax in figure.axes if hasattr(ax, "_colorbar")]
    assert bar.extend in ("min", "both")  # the shales (and the zero) lie below the scale
    mesh = _mesh(_panels(figure)[0])
    drawn = np.ma.getdata(mesh.get_array()).reshape(k.shape)
    colour = mesh.cmap(mesh.norm(drawn[2, 20]))
    assert colour == pytest.approx(mesh.cmap(0.0)), "zero k is not drawn in the lowest colour"
    assert colour != pytest.approx(mesh.cmap.get_bad())


# --- true coordinates ----------------------------------------------------------------------------


def test_section_depths_are_the_cumulative_layer_thicknesses():
    dz = np.array([1.0, 1.0, 2.0, 0.5, 2.0, 3.0, 1.0, 2.0])  # m, as with --dz 1,1,2,0.5,2,3,1,2
    k = uncorrelated_lognormal((8, 16, 16), seed=5713)
    k[3] = 0.01  # a 0.5 m shale from 4.0 to 4.5 m below the top
    field = Field.from_arrays(k, dz=dz, cell_size=(5.0, 5.0))
    comparison = compare_methods(field, "8x8x2", candidates(["harmonic"]))
    figure = field_maps(comparison, "mD", row=8)
    fine, coarse = (_mesh(ax) for ax in _panels(figure))
    depths = fine.get_coordinates()[:, 0, 1]
    np.testing.assert_allclose(depths, np.concatenate([[0.0], np.cumsum(dz)]))
    shale = np.ma.getdata(fine.get_array()).reshape(8, 16)[3]
    assert (shale == 0.01).all() and depths[3:5].tolist() == [4.0, 4.5]
    # coarse layers of two fine layers each: breaks at 2, 4.5, 9.5 and 12.5 m
    np.testing.assert_allclose(coarse.get_coordinates()[:, 0, 1], [0.0, 2.0, 4.5, 9.5, 12.5])
    assert _panels(figure)[0].get_ylim() == (12.5, 0.0)  # depth grows downwards
    np.testing.assert_allclose(fine.get_coordinates()[0, :, 0], np.arange(17) * 5.0)


def test_a_section_of_a_model_with_a_geometry_stands_on_its_true_elevations():
    # every column between its own surfaces (upscale.geometry): a tilted top, a layer pinched out
    # in the west half, which then has no height; the coarse blocks on the coarse surfaces
    k = uncorrelated_lognormal((3, 8, 8), seed=5714)
    x = np.arange(8)[None, :] * np.ones((8, 1))
    thickness = np.stack([np.full((8, 8), 2.0), np.where(x < 4, 0.0, 1.0), np.full((8, 8), 3.0)])
    top = 40.0 - 0.5 * x
    field = Field.from_arrays(k, cell_size=(5.0, 5.0), geometry=upscale.Geometry(top, thickness))
    comparison = compare_methods(field, "4x4x3", candidates(["harmonic"]))
    figure = field_maps(comparison, "mD", row=2)
    fine, coarse = (_mesh(ax) for ax in _panels(figure))
    corners = fine.get_coordinates()  # (L + 1, 2N, 2): each column's two edges carry its surfaces
    surfaces = field.geometry.surfaces()[:, 2, :]
    np.testing.assert_array_equal(corners[:, 0::2, 1], surfaces)
    np.testing.assert_array_equal(corners[:, 1::2, 1], surfaces)
    np.testing.assert_array_equal(corners[0, 0::2, 0], np.arange(8) * 5.0)
    heights = np.diff(corners[:, 0::2, 1], axis=0)
    assert (heights[1, :4] == 0).all() and (heights[1, 4:] == -1.0).all()  # the pinched cells
    # a coarse column is as thick as its bulk volume over its plan area: 5 m in the west, 6 m in the east
    np.testing.assert_allclose(-np.diff(coarse.get_coordinates()[[0, -1], 0::2, 1], axis=0)[0], [5.0, 6.0])
    assert _panels(figure)[0].get_ylabel() == "elevation (m)"
    assert _panels(figure)[0].get_ylim() == (float(surfaces.min()), float(surfaces.max()))
    # in the map of the pinched layer, the pinched cells hold no rock and show no value
    plan_figure = field_maps(comparison, "mD", layer=1)
    plan = _mesh(_panels(plan_figure)[0]).get_array()
    np.testing.assert_array_equal(np.ma.getmaskarray(plan).reshape(8, 8), x < 4)
    keys = [t.get_text() for t in plan_figure.legends[0].get_texts()]
    assert keys == ["no value (inactive or pinched out)"]


@pytest.mark.parametrize(("block", "layer", "held"), [
    ("8x8x2,2,4", 4, "coarse layer 3: fine 5–8"),  # fine layer 5 lies in the third group, layers 5 to 8
    ("8x8x2,2,4", 1, "coarse layer 1: fine 1–2"),
    ("8x8x1,7", 0, "coarse layer 1: fine 1"),
    ("8x8x2", 3, "coarse layer 2: fine 3–4"),  # uniform: two fine layers per coarse layer
])
def test_coarse_panel_titles_name_the_fine_layers_of_the_coarse_layer_shown(block, layer, held):
    k = uncorrelated_lognormal((8, 16, 16), seed=5713)
    field = Field.from_arrays(k, dz=[1.0, 1.0, 2.0, 0.5, 2.0, 3.0, 1.0, 2.0], cell_size=(5.0, 5.0))
    comparison = compare_methods(field, block, candidates(["geometric", "harmonic"]))
    panels = _panels(field_maps(comparison, "mD", layer=layer))
    assert panels[0].get_title() == "fine"
    assert [ax.get_title().split("\n")[1:] for ax in panels[1:]] == [[held], [held]]
    # a section shows every layer: its coarse panels keep the method's name alone
    section = _panels(field_maps(comparison, "mD", row=8))
    assert all("\n" not in ax.get_title() for ax in section)


@pytest.fixture(scope="module")
def far_north(tmp_path_factory):
    """A 36 x 20 map of 10 m cells whose north-west corner is at a northing of 6.5e6 m, 8x8 keep."""
    path = write_raster(tmp_path_factory.mktemp("north") / "north.tif",
                        uncorrelated_lognormal((20, 36), seed=6277),
                        transform=north_up(CELL, FAR_NORTH))  # fmt: skip
    field = upscale.read_field(path)
    spec = BlockSpec.parse("8x8", remainder="keep")
    return compare_methods(field, spec, candidates(["geometric", "harmonic"]))


def test_remainder_keep_draws_the_smaller_edge_blocks_on_their_true_edges(far_north):
    west, north = FAR_NORTH
    figure = field_maps(far_north, "mD")
    fine, *coarse = (_mesh(ax) for ax in _panels(figure))
    np.testing.assert_allclose(fine.get_coordinates()[0, :, 0], west + CELL * np.arange(37))
    np.testing.assert_allclose(fine.get_coordinates()[:, 0, 1], north - CELL * np.arange(21))
    for mesh in coarse:  # 36 = 4 x 8 + 4 columns, 20 = 2 x 8 + 4 rows
        x, y = mesh.get_coordinates()[0, :, 0], mesh.get_coordinates()[:, 0, 1]
        np.testing.assert_allclose(x, west + CELL * np.array([0, 8, 16, 24, 32, 36]))
        np.testing.assert_allclose(y, north - CELL * np.array([0, 8, 16, 20]))


def test_coordinates_are_written_in_full_on_both_axes(far_north):
    figures = [field_maps(far_north, "mD"), mismatch_maps(far_north, axis="x"), pressure_maps(far_north)]
    for figure in figures:
        FigureCanvasAgg(figure).draw()
        for ax in _panels(figure):
            for axis in (ax.xaxis, ax.yaxis):
                assert axis.get_offset_text().get_text() == "", axis.get_offset_text().get_text()
                low, high = sorted(axis.get_view_interval())
                shown = [(t.get_loc(), t.label1.get_text()) for t in axis.get_major_ticks()
                         if low <= t.get_loc() <= high and t.label1.get_visible() and t.label1.get_text()]
                for loc, text in shown:
                    assert "e" not in text.lower() and "$" not in text, text
                    assert float(text.replace("−", "-")) == pytest.approx(loc, abs=1e-6), (loc, text)
        northings = [float(t.get_text().replace("−", "-")) for t in _panels(figure)[0].get_yticklabels()
                     if t.get_text()]  # fmt: skip
        assert northings and min(northings) > 6e6


# --- mismatch maps -------------------------------------------------------------------------------


def test_a_face_beside_an_inactive_block_has_no_value_unlike_a_face_without_mismatch():
    k = np.full((32, 32), 50.0)  # homogeneous: the coarse model is exact, no mismatch anywhere
    k[:8] = np.nan  # the northern row of blocks is inactive
    field = Field.from_arrays(k, cell_size=(CELL, CELL))
    comparison = compare_methods(field, "8x8", candidates(["geometric"]))
    figure = mismatch_maps(comparison, axis="x")
    (ax,) = _panels(figure)
    mesh = _mesh(ax)
    values = np.ma.masked_invalid(mesh.get_array()).reshape(4, 3)  # faces normal to x between 4 blocks
    assert values.mask.tolist() == [[True] * 3] + [[False] * 3] * 3  # beside the inactive blocks only
    assert np.abs(values.compressed()).max() < 1e-6
    pixels = _pixels(figure)
    # faces are drawn from block centre to block centre: x 40..280; the inactive row is y -80..0
    beside = _region(figure, pixels, ax, 4 * CELL, 28 * CELL, -8 * CELL, 0.0)
    agree = _region(figure, pixels, ax, 4 * CELL, 28 * CELL, -32 * CELL, -8 * CELL)
    centre = _rgb(mesh.cmap(mesh.norm(0.0)))
    assert np.abs(agree - centre).max() <= 2  # no mismatch: the centre colour of PuOr
    assert len(np.unique(beside, axis=0)) > 2, "a face with no value is drawn as a flat colour"
    assert (np.abs(beside - centre).max(axis=1) > 20).any()


# --- vector files --------------------------------------------------------------------------------


def test_maps_in_svg_hold_their_cells_as_one_image_per_panel():
    # A 256 x 256 fine map drawn cell by cell as SVG quads was 14 MB and took 8 s to write;
    # the cells are rasterized into the vector file, axes and text stay vectors.
    import io

    k = uncorrelated_lognormal((128, 128), seed=6029, mean_ln=4.0, sigma_ln=1.0)
    comparison = compare_methods(Field.from_arrays(k, cell_size=(CELL, CELL)), "8x8",
                                 candidates(["geometric"]))  # fmt: skip
    figure = field_maps(comparison, "mD")
    svg = io.BytesIO()
    figure.savefig(svg, format="svg", dpi=130)
    text = svg.getvalue().decode()
    assert text.count("<image") == 3  # the fine and the coarse panel, and the colour bar
    assert len(text) < 2_000_000 and text.count("<path") < 500
