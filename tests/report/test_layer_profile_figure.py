"""The layer-profile figure (`upscale.report.layer_profile`) draws the profile it is given.

What is tested
--------------
The data drawn, read back from the matplotlib Figure:

* On the demo's layer cake (20 layers of 1 m; 0.01 mD shales at layers 5,
  10, 15 and 20, kz = 0.1 kx: the demo scenario's construction), the kx and
  kz lines are each layer's geometric mean over its cells (NumPy on the
  raster's values), drawn over the layer's depth interval; the bands are
  exp(mean ± sd of ln k); the barrier spans are the shales, 4-5, 9-10, 14-15
  and 19-20 m; the boundary lines sit at the edges of the grouping chosen,
  in metres, and with 8 coarse layers or more every boundary is a barrier's.
* On a model of unequal layers (dz 1, 2, 0.5, 3, 1.5 m) the depths are the
  sums of the true thicknesses (a 0.5 m shale from 3.0 to 3.5 m).
* A field whose kz is kx gets one line (kx = kz); the right axis numbers
  the fine layers readably for 20 and for 200 layers (at most 20 numbers).
"""

from __future__ import annotations

import numpy as np
import pytest
from conftest import read_raster

from upscale.analysis.describe import describe_field
from upscale.field import Field
from upscale.grid.layers import LayerRequest, group_edges
from upscale.io import read_field
from upscale.report.layer_profile import LAYER_TICKS, layer_profile_figure


def _gid(figure, gid):
    """The artists of `figure`'s panel carrying id `gid`."""
    ax = figure.axes[0]
    return [a for a in [*ax.lines, *ax.patches, *ax.collections] if a.get_gid() == gid]


@pytest.fixture(scope="module")
def cake(demo_dir):
    """The layer cake (kz = 0.1 kx), its description with auto:8, and its values as read by rasterio."""
    path = demo_dir / "marrowfen_layered.tif"
    fine = read_field(path, dz=1.0, kv_kh=0.1)
    description, _ = describe_field(fine, str(path), LayerRequest(count=8))
    return description["layers"], read_raster(path).astype(np.float64)


def test_lines_and_bands_are_the_geometric_means_and_spreads_of_each_layer(cake):
    layers, k = cake
    figure = layer_profile_figure(layers, "mD")
    depth = np.arange(21.0)  # 20 layers of 1 m
    steps = np.column_stack([depth[:-1], depth[1:]]).ravel()  # each layer's top and base
    for name, values in (("kx", k), ("kz", 0.1 * k)):
        ln = np.log(values.reshape(20, -1))
        (line,) = _gid(figure, f"{name} mean")
        np.testing.assert_allclose(line.get_ydata(), steps)
        np.testing.assert_allclose(line.get_xdata(), np.repeat(np.exp(ln.mean(axis=1)), 2), rtol=1e-6)
        (band,) = _gid(figure, f"{name} band")
        # the outline: a start, the lower edge top down, the upper edge's end, the upper edge bottom up
        vertices = band.get_paths()[0].vertices
        below, above = vertices[1:41], vertices[42:82][::-1]
        np.testing.assert_allclose(below[:, 1], steps)
        np.testing.assert_allclose(above[:, 1], steps)
        np.testing.assert_allclose(below[:, 0], np.repeat(np.exp(ln.mean(1) - ln.std(1)), 2), rtol=1e-5)
        np.testing.assert_allclose(above[:, 0], np.repeat(np.exp(ln.mean(1) + ln.std(1)), 2), rtol=1e-5)


def test_barrier_spans_and_boundaries_are_the_shales_and_the_grouping_edges(cake):
    layers, _ = cake
    figure = layer_profile_figure(layers, "mD")
    spans = sorted((p.get_y(), p.get_y() + p.get_height()) for p in _gid(figure, "barrier"))
    assert spans == [(4.0, 5.0), (9.0, 10.0), (14.0, 15.0), (19.0, 20.0)]  # shales at layers 5, 10, 15, 20
    grouping = layers["grouping"]
    assert grouping["request"] == "auto:8" and len(grouping["sizes"]) == 8
    drawn = sorted(line.get_ydata()[0] for line in _gid(figure, "boundary barrier"))
    assert drawn == group_edges(tuple(grouping["sizes"]))[1:-1].tolist()  # dz = 1 m: metres = layers
    assert drawn == [4.0, 5.0, 9.0, 10.0, 14.0, 15.0, 19.0]  # every shale a coarse layer of its own
    assert _gid(figure, "boundary contrast") == []


def test_depths_are_the_true_thicknesses():
    k = np.full((5, 3, 4), 200.0)
    k[2] = 0.01  # a shale 0.5 m thick
    k[3] = 20.0
    dz = [1.0, 2.0, 0.5, 3.0, 1.5]
    description, _ = describe_field(Field.from_arrays(k, dz=dz, cell_size=(10.0, 10.0)), "unequal",
                                    LayerRequest(count=4))  # fmt: skip
    figure = layer_profile_figure(description["layers"], "mD")
    (line,) = _gid(figure, "kx mean")  # kz is kx: one line
    assert _gid(figure, "kz mean") == [] and line.get_label() == "kx = kz: geometric mean"
    np.testing.assert_allclose(line.get_ydata(), [0, 1, 1, 3, 3, 3.5, 3.5, 6.5, 6.5, 8])
    np.testing.assert_allclose(line.get_xdata(), np.repeat([200.0, 200.0, 0.01, 20.0, 200.0], 2), rtol=1e-12)
    (span,) = _gid(figure, "barrier")
    assert (span.get_y(), span.get_y() + span.get_height()) == (3.0, 3.5)
    boundaries = sorted(line.get_ydata()[0] for line in _gid(figure, "boundary barrier")
                        + _gid(figure, "boundary contrast"))  # fmt: skip
    sizes = tuple(description["layers"]["grouping"]["sizes"])
    edges = np.concatenate([[0.0], np.cumsum(dz)])[group_edges(sizes)]
    assert boundaries == edges[1:-1].tolist() and {3.0, 3.5} <= set(boundaries)
    assert figure.axes[0].get_ylim() == (8.0, 0.0)  # depth grows downwards


@pytest.mark.parametrize(("count", "numbers"), [(20, list(range(1, 21))), (200, [1, *range(10, 201, 10)])])
def test_the_right_axis_numbers_the_layers_readably(count, numbers):
    k = np.exp(np.random.default_rng(count).normal(3.0, 1.0, (count, 2, 2)))
    description, _ = describe_field(Field.from_arrays(k, dz=0.5, cell_size=(1.0, 1.0), three_d=True), "many")
    figure = layer_profile_figure(description["layers"], "mD")
    (right,) = figure.axes[0].child_axes
    ticks = right.get_yticks()
    assert [t.get_text() for t in right.get_yticklabels()] == [str(n) for n in numbers]
    np.testing.assert_allclose(ticks, 0.5 * np.array(numbers) - 0.25)  # the layers' centres
    assert len(numbers) <= LAYER_TICKS + 1
