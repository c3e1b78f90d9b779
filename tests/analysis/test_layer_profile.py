"""Tests of the layer profile and the grouping it suggests (`upscale.analysis.layers`).

What is tested
--------------
* Per-layer statistics against NumPy on the same cells: active fraction,
  mean and spread of ln kx and ln kz, zeros counted at the floor, a layer
  without active cells; the same from a dask array in chunks.
* The demo layer cake (0.01 mD shales every fifth layer): the interior
  shales are found as barriers and, from 8 coarse layers up, every one is
  kept as coarse layers of their own (none merged), each boundary at a barrier saying so.
"""

from __future__ import annotations

import dask.array as da
import numpy as np
import pytest

from upscale.analysis.layers import choose_groups, layer_profile
from upscale.field import Field
from upscale.grid.layers import LayerRequest
from upscale.io import read_field


def _field(chunks=None):
    rng = np.random.default_rng(5)
    k = np.exp(rng.normal(4.0, 1.0, (5, 6, 7)))
    k[1, :2] = np.nan  # a layer partly inactive
    k[3] = np.nan  # a layer without active cells
    k[2, 0, 0] = 0.0  # an impermeable cell
    kz = 0.1 * k
    if chunks:
        k, kz = da.from_array(k, chunks=chunks), da.from_array(kz, chunks=chunks)
    field = Field.from_arrays(k, kz=kz, dz=[1.0, 2.0, 1.0, 1.0, 3.0], three_d=True)
    return field, np.asarray(k), np.asarray(kz)


@pytest.mark.parametrize("chunks", [None, (2, 3, 4)])
def test_profile_matches_numpy(chunks):
    field, k, kz = _field(chunks)
    profile = layer_profile(field)
    for layer in range(5):
        cells = k[layer][k[layer] == k[layer]]
        assert profile.active[layer] == cells.size / k[layer].size
        if not cells.size:
            assert np.isnan(profile.ln_kx[layer]) and np.isnan(profile.spread_kz[layer])
            continue
        for values, whole, mean, spread in ((cells, k, profile.ln_kx, profile.spread_kx),
                                            (0.1 * cells, kz, profile.ln_kz, profile.spread_kz)):  # fmt: skip
            floor = 1e-3 * np.nanmin(np.where(whole > 0, whole, np.nan))  # --zero-k's relative floor
            ln = np.log(np.where(values > 0, values, floor))
            assert mean[layer] == pytest.approx(ln.mean(), rel=1e-12)
            assert spread[layer] == pytest.approx(ln.std(), rel=1e-9, abs=1e-12)
    assert profile.thickness.tolist() == [1.0, 2.0, 1.0, 1.0, 3.0]


def test_layer_cake_keeps_its_shales():
    fine = read_field("demo-fields/marrowfen_layered.tif", dz=1.0, kv_kh=0.1)
    profile = layer_profile(fine)
    # the story of the demo: a 0.01 mD shale every fifth layer, the last one at the base
    assert profile.barriers == [(4, 5), (9, 10), (14, 15), (19, 20)]
    for count in range(8, 13):  # three inner shales need two boundaries each, the base one
        grouping, boundaries = choose_groups(profile, LayerRequest(count=count))
        assert grouping.merged == 0 and len(grouping.sizes) == count
        kept = {b.after for b in boundaries if b.reason == "barrier"}
        for start, stop in profile.barriers:
            assert {start, stop} - {20} <= kept
    assert choose_groups(profile, LayerRequest(count=7))[0].merged == 1
    summary = profile.summary()
    assert len(summary["layers"]) == 20 and summary["barriers"][0] == {"first": 5, "last": 5}
