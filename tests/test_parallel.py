"""Tests of `upscale.parallel`: the same answer in memory and chunk by chunk.

What is tested
--------------
* `is_dask` and `align_chunks` (aligned chunks left alone, others rechunked
  to whole blocks, the last chunk possibly smaller).
* `apply_blocks` on dask arrays gives results bit-for-bit identical
  (``np.array_equal``) to the NumPy path for every registered method, along
  every axis, for several chunkings including chunks not aligned to blocks,
  edge blocks (shapes that do not divide), 3D blocks with non-uniform dz and
  float32 input.
* The same through `upscale.coarsen` on fields built from dask arrays, with
  porosity, edge blocks kept or cropped, and ``min_active``.
* `compute_together` gives every name its own result when delayed values and
  dask arrays are mixed in any order, and `map_regions` gives every chunk's
  result with its place in the whole array.
"""

from __future__ import annotations

import dask
import dask.array as da
import numpy as np
import pytest

import upscale
from upscale.methods.averages import active_volume, bulk_mean
from upscale.methods.registry import METHODS
from upscale.parallel import align_chunks, apply_blocks, compute_together, is_dask, map_regions

# renormalization takes powers-of-two blocks only; it has its own tests (test_flow_based.py)
ANY_BLOCK = [n for n in METHODS if n != "renormalization"]

OPTIONS = {"power": {"exponent": 0.57}}
SHAPE = (5, 23, 31)


@pytest.fixture(scope="module", autouse=True)
def _synchronous():
    # one thread keeps the many small graphs quick; the results do not depend on it
    with dask.config.set(scheduler="synchronous"):
        yield


def _field(dtype=np.float64, seed=406_873_219):
    rng = np.random.default_rng(seed)
    k = np.exp(rng.normal(3.0, 2.0, SHAPE))
    k[rng.random(SHAPE) < 0.12] = np.nan
    k[:2, :3, :4] = np.nan  # a whole inactive block for the (2, 3, 4) blocks
    dz = rng.uniform(0.2, 6.0, SHAPE[0])
    return k.astype(dtype), dz


def test_is_dask():
    assert is_dask(da.ones((2, 2)))
    assert not is_dask(np.ones((2, 2)))
    assert not is_dask([1.0])


def test_align_chunks_leaves_aligned_arrays_alone():
    lazy = da.ones((4, 12, 20), chunks=(2, 6, 8))
    assert align_chunks(lazy, (2, 3, 4)) is lazy
    # only the last chunk may be a partial block
    lazy = da.ones((5, 13, 21), chunks=(2, 6, 8))
    assert align_chunks(lazy, (2, 3, 4)) is lazy


def test_align_chunks_rechunks_to_whole_blocks():
    lazy = da.ones((5, 23, 31), chunks=(3, 7, 10))
    aligned = align_chunks(lazy, (2, 3, 4))
    assert aligned.shape == lazy.shape
    for chunks, b in zip(aligned.chunks, (2, 3, 4)):
        assert all(c % b == 0 for c in chunks[:-1])
    assert tuple(map(sum, aligned.chunks)) == lazy.shape
    # block multiple nearest the typical chunk: 3 -> 4, 7 -> 6, 10 -> 8 (10/4 rounds to 2)
    assert aligned.chunks == ((4, 1), (6, 6, 6, 5), (8, 8, 8, 7))
    # a chunk smaller than half a block grows to one block
    tiny = align_chunks(da.ones((1, 10, 10), chunks=(1, 1, 1)), (1, 5, 5))
    assert tiny.chunks == ((1,), (5, 5), (5, 5))


CHUNKINGS = [(1, 4, 5), (2, 6, 8), (5, 23, 31), (3, 7, 11), (5, 1, 31)]
BLOCKS = [(2, 3, 4), (1, 5, 7), (5, 23, 31), (3, 1, 1)]


@pytest.mark.parametrize("name", [n for n, m in METHODS.items() if not m.local])
@pytest.mark.parametrize("dtype", [np.float64, np.float32], ids=["f64", "f32"])
def test_apply_blocks_dask_is_bitwise_identical(name, dtype):
    k, dz = _field(dtype)
    method = METHODS[name]
    options = OPTIONS.get(name, {})
    axes = (0, 1, 2) if method.directional else (2,)
    cases, lazies = [], []
    for block in BLOCKS:
        for axis in axes:
            want = apply_blocks(method.kernel.rule, k, dz, block, axis, **options)
            assert isinstance(want, np.ndarray) and want.dtype == np.float64
            assert want.shape == tuple(-(-n // b) for n, b in zip(SHAPE, block))
            for chunks in CHUNKINGS:
                lazy = apply_blocks(
                    method.kernel.rule, da.from_array(k, chunks=chunks), dz, block, axis, **options
                )
                assert is_dask(lazy)
                cases.append((block, axis, chunks, want))
                lazies.append(lazy)
    for (block, axis, chunks, want), got in zip(cases, dask.compute(*lazies)):
        assert got.dtype == np.float64
        assert np.array_equal(got, want, equal_nan=True), (block, axis, chunks)


@pytest.mark.parametrize("kernel", [bulk_mean, active_volume])
def test_apply_blocks_porosity_and_volume_bitwise(kernel):
    k, dz = _field(seed=902_331_457)
    phi = np.clip(k / np.nanmax(k), 0.0, 1.0)
    for block in BLOCKS:
        want = apply_blocks(kernel, phi, dz, block)
        for chunks in CHUNKINGS:
            got = apply_blocks(kernel, da.from_array(phi, chunks=chunks), dz, block).compute()
            assert np.array_equal(got, want, equal_nan=True)


def _coarse_arrays(result):
    return {n: np.asarray(a) for n, a in result.coarse.properties().items()}


@pytest.mark.parametrize("name", ANY_BLOCK)
@pytest.mark.parametrize(
    "block, chunks",
    [
        (upscale.BlockSpec(4, 3, 2, remainder="keep"), (3, 7, 10)),
        (upscale.BlockSpec(4, 3, 2, remainder="crop"), (2, 6, 8)),
        (upscale.BlockSpec(4, 3, 2, remainder="keep", min_active=0.6), (1, 5, 31)),
        (upscale.BlockSpec(8, 8, 5, remainder="keep"), (5, 9, 9)),
    ],
)
def test_coarsen_dask_field_is_bitwise_identical(name, block, chunks):
    kx, dz = _field(seed=318_004_762)
    rng = np.random.default_rng(129_775_046)
    ky = kx * np.exp(rng.normal(0.0, 0.5, SHAPE))
    kz = (kx * 0.1).astype(np.float32)
    phi = np.clip(0.05 * np.log(kx), 0.01, 0.4)
    memory = upscale.Field.from_arrays(kx, ky=ky, kz=kz, porosity=phi, dz=dz, cell_size=(25, 10))
    lazy = upscale.Field.from_arrays(
        da.from_array(kx, chunks=chunks),
        ky=da.from_array(ky, chunks=chunks),
        kz=da.from_array(kz, chunks=chunks),
        porosity=da.from_array(phi, chunks=chunks),
        dz=dz,
        cell_size=(25, 10),
    )
    options = OPTIONS.get(name, {})
    want = upscale.coarsen(memory, block, name, **options)
    got = upscale.coarsen(lazy, block, name, **options)
    a, b = _coarse_arrays(want), _coarse_arrays(got)
    assert a.keys() == b.keys() == {"kx", "ky", "kz", "porosity"}
    for prop in a:
        assert isinstance(b[prop], np.ndarray)
        assert np.array_equal(a[prop], b[prop], equal_nan=True), prop
    assert np.array_equal(want.active_fraction, got.active_fraction)
    assert want.dropped_cells == got.dropped_cells
    assert want.lost_pore_volume == got.lost_pore_volume
    for prop, scan in want.fine_stats.items():
        other = got.fine_stats[prop]
        assert (scan.cells, scan.active, scan.negative, scan.zero, scan.infinite) == (
            other.cells, other.active, other.negative, other.zero, other.infinite,
        )  # fmt: skip
        assert scan.minimum == other.minimum and scan.maximum == other.maximum


def test_coarsen_2d_dask_map_shared_arrays():
    rng = np.random.default_rng(557_120_904)
    k = np.exp(rng.normal(0.0, 1.5, (37, 41)))
    k[rng.random(k.shape) < 0.1] = np.nan
    spec = upscale.BlockSpec(6, 5, remainder="keep")
    for name in ANY_BLOCK:
        options = OPTIONS.get(name, {})
        want = upscale.coarsen(upscale.Field.from_arrays(k), spec, name, **options).coarse
        got = upscale.coarsen(
            upscale.Field.from_arrays(da.from_array(k, chunks=(7, 9))), spec, name, **options
        ).coarse
        assert got.kz is None and got.porosity is None
        assert np.array_equal(want.kx, got.kx, equal_nan=True)
        assert np.array_equal(want.ky, got.ky, equal_nan=True)


def test_compute_together_keeps_each_result_with_its_name_in_any_order():
    # dask 2026.8 returns the array results of a mixed dask.compute call before the delayed ones
    k = da.ones((4, 4), chunks=2)
    lazy = {"sum": k.sum(), "delayed": dask.delayed(sum)([1, 5]), "mean": (3 * k).mean(),
            "list": dask.delayed([dask.delayed(len)("ab"), dask.delayed(len)("abc")])}  # fmt: skip
    assert compute_together(lazy) == {"sum": 16.0, "delayed": 6, "mean": 3.0, "list": [2, 3]}


def _where(*chunks, dz, core, block, offset):
    return {"offset": offset, "core": core, "shape": chunks[0].shape, "layers": dz.size}


def test_map_regions_gives_each_chunk_its_place_and_border():
    k = da.zeros((3, 12, 16), chunks=(3, 4, 8))
    found = dask.compute(map_regions(_where, [k], np.ones(3), (1, 4, 4), (0, 4, 4)))[0]
    for f in found:
        (z0, z1), (y0, y1), (x0, x1) = f["core"]
        own = (f["offset"][1] + y0, f["offset"][2] + x0)
        assert own[0] % 4 == 0 and own[1] % 8 == 0  # the chunk's own cells start where dask's chunk does
        assert f["shape"][1] - (y1 - y0) <= 8 and f["shape"][2] - (x1 - x0) <= 8  # a border of 4 each side
        assert f["layers"] == 3
    assert sorted((f["offset"][1] + f["core"][1][0], f["offset"][2] + f["core"][2][0]) for f in found) == [
        (0, 0), (0, 8), (4, 0), (4, 8), (8, 0), (8, 8)]
    whole = map_regions(_where, [np.zeros((3, 12, 16))], np.ones(3), (1, 4, 4), (0, 4, 4))
    assert [w["shape"] for w in whole] == [(3, 12, 16)]
