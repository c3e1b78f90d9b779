"""Tests of the connected high-k bodies of a field (`upscale.analysis.connectivity`).

What is tested
--------------
* A straight sand channel of the gallery spans the map along it and not
  across it; all its cells belong to the spanning body, whose cross-section
  is the channel's width; a plug of shale across it ends the span.
* The gallery's isolated lenses span neither axis, whatever their share of
  the cells; the same lenses joined by a thread of sand along x span x only.
* Labelling is by faces: two sand cells meeting at a corner do not connect.
* In 3D a channel in every layer spans x and z (stacked, the layers join).
* The warning: the gallery's staircase channels (seed 0: one channel joins
  both faces through the overlaps of its shifted segments, 4.4 cells across
  on average) are winding and thinner than 8 x 8 blocks; the straight
  channel and the lenses are not warned of, nor blocks thinner than the body.
* ``upscale info`` on real GeoTIFFs of those maps reports the spans, as text
  and in ``--json``; ``upscale run`` writes the warning on stderr for the
  staircase channels and nothing for the others.
"""

from __future__ import annotations

import json

import numpy as np
import pytest

from upscale.analysis.connectivity import CONTRAST, connectivity, span, struggle
from upscale.field import Field
from upscale.gallery.problems import lenses, staircase_channels, straight_channel, uncorrelated_lognormal
from upscale.grid import BlockSpec

SHAPE = (40, 64)
SAND, SHALE = 800.0, 2.0


def _channel(gap=None):
    return straight_channel(SHAPE, slice(17, 20), k_sand=SAND, k_shale=SHALE, gap=gap)


def _lenses():
    return lenses(SHAPE, size=5, spacing=8, k_sand=SAND, k_shale=SHALE)


def test_a_straight_channel_spans_along_not_across():
    along, across = span(_channel()[None], "x"), span(_channel()[None], "y")
    assert (along.spans, along.bodies, along.spanning_fraction, along.straight) == (True, 1, 1.0, True)
    assert along.cross_section == 3.0  # the channel's width in cells
    assert along.high_fraction == pytest.approx(3 / SHAPE[0])
    assert (across.spans, across.spanning_fraction, across.cross_section) == (False, 0.0, None)


def test_a_plug_of_shale_ends_the_span():
    assert not span(_channel(gap=slice(30, 31))[None], "x").spans


def test_isolated_lenses_span_no_axis_whatever_their_share():
    k = _lenses()
    spans = {axis: span(k[None], axis) for axis in "xy"}
    assert {a: s.spans for a, s in spans.items()} == {"x": False, "y": False}
    assert spans["x"].high_fraction == pytest.approx(25 * 5 * 8 / k.size)  # 5 x 8 lenses of 5 x 5 cells
    k[19, :] = SAND  # a thread of sand through a row of lenses, along x
    assert {a: span(k[None], a).spans for a in "xy"} == {"x": True, "y": False}
    assert span(k[None], "x").spanning_fraction == pytest.approx((8 * 25 + 64 - 8 * 5) / (k > SHALE).sum())


def test_cells_meeting_at_a_corner_do_not_connect():
    k = np.ones((1, 4, 4))
    k[0, [0, 1, 2, 3], [0, 1, 2, 3]] = 50.0  # a diagonal: joined only by corners
    assert not span(k, "x").spans and not span(k, "y").spans


def test_a_channel_in_every_layer_spans_x_and_z():
    k = np.repeat(_channel()[None], 4, axis=0)
    fine = Field.from_arrays(k, cell_size=(5.0, 5.0), dz=np.ones(4))
    spans = connectivity(fine)
    assert {a: s.spans for a, s in spans.items()} == {"x": True, "y": False, "z": True}
    assert spans["x"].cross_section == 12.0 and spans["z"].cross_section == 3.0 * SHAPE[1]
    assert connectivity(fine, max_cells=k.size - 1) is None


def _spans(k):
    return connectivity(Field.from_arrays(k, cell_size=(5.0, 5.0)))


def test_the_warning_is_for_a_winding_body_thinner_than_the_blocks():
    stairs = _spans(staircase_channels(0))
    assert not stairs["x"].straight and stairs["x"].cross_section == pytest.approx(4.375)
    told = struggle(stairs, BlockSpec(8, 8))
    assert told.startswith("local methods will struggle: a connected high-k body spans the field along x "
                           "(4.38 fine cells in its cross-section on average, 8 in a block's)")  # fmt: skip
    assert struggle(stairs, BlockSpec(8, 4)) is None  # blocks 4 rows tall: thinner than the body
    assert not _spans(staircase_channels(2))["x"].spans  # a shift past the width breaks every channel
    assert struggle(_spans(staircase_channels(2)), BlockSpec(8, 8)) is None
    assert struggle(_spans(_channel()), BlockSpec(8, 8)) is None  # straight: averages along it are exact
    assert struggle(_spans(_lenses()), BlockSpec(8, 8)) is None


@pytest.fixture
def maps(write_tif):
    return {"channel": write_tif("channel.tif", _channel()), "lenses": write_tif("lenses.tif", _lenses()),
            "stairs": write_tif("stairs.tif", staircase_channels(0))}  # fmt: skip


def test_info_tells_the_spans(run_cli, maps):
    code, out, err = run_cli("info", maps["channel"])
    assert (code, err) == (0, "")
    assert "along x    7.5 % of the active cells; 1 body spans the field, holding 100.0 % of them" in out
    assert "along y    7.5 % of the active cells; no body spans the field" in out
    code, out, err = run_cli("info", maps["lenses"], "--json")
    found = json.loads(out)["connectivity"]
    assert (code, err) == (0, "")
    assert [found["axes"][a]["spans"] for a in "xy"] == [False, False]
    assert found["axes"]["x"]["high_fraction"] == pytest.approx(1000 / 2560)


def test_run_warns_of_a_winding_body_thinner_than_the_blocks(run_cli, maps, tmp_path):
    code, _, err = run_cli("run", maps["stairs"], "--block", "8x8", "--method", "geometric",
                           "--out", tmp_path / "a", "--no-check")  # fmt: skip
    assert code == 0
    assert err.startswith(f"upscale: {maps['stairs']}: local methods will struggle: a connected high-k "
                          "body spans the field along x (4.38 fine cells")  # fmt: skip
    for field, block in (("lenses", "8x8"), ("channel", "8x8"), ("stairs", "8x4")):
        code, _, err = run_cli("run", maps[field], "--block", block, "--method", "geometric",
                               "--out", tmp_path / f"{field}{block}", "--no-check")  # fmt: skip
        assert (code, "struggle" in err) == (0, False)


def test_a_uniform_field_has_no_high_cells():
    k = np.full((1, 2, 6), 20.0)  # exp(mean(ln 20)) rounds below 20: every cell was high
    k[0, 0, 1:3] = k[0, 1, [1, 4, 5]] = np.nan
    assert float(np.exp(np.log(k[~np.isnan(k)]).mean())) < 20.0
    found = span(k, "x")
    assert (found.high_fraction, found.spans) == (0.0, False)


def test_an_uncorrelated_field_that_happens_to_span_is_not_warned_of():
    """A lognormal 16 x 16 field spans y by chance, with too little contrast for a warning.

    Its contrast is about exp(1.6) = 4.9 for an ln-k deviation of 1, below `CONTRAST`.
    """
    k = uncorrelated_lognormal((1, 16, 16), 5)
    along_y = span(k, "y")
    assert along_y.spans and not along_y.straight and along_y.cross_section < 8 * 8
    assert 3.0 < along_y.contrast < CONTRAST
    assert struggle({"y": along_y}, BlockSpec(8, 8)) is None
