"""`describe_field` (``upscale info``) reads every chunk of a lazy field once.

The scans of every property, the layer profile of a 3D model and the
connected high-k bodies each need the whole field; computed apart, a field
read window by window from its file was read three times. The count is taken
on a real dask graph: each chunk of the source array passes through a
function that counts its calls (common practice: counting a task's
executions to test that a graph shares its work).
"""

from __future__ import annotations

import threading
from collections import Counter

import dask.array as da
import numpy as np
import pytest

from upscale.analysis.describe import describe_field
from upscale.analysis.layers import layer_profile
from upscale.field import Field

CHUNKS = (3, 4, 5)


def _counted(values: np.ndarray) -> tuple[da.Array, Counter]:
    """`values` as a dask array whose chunks count how often each is computed, and the counter."""
    reads: Counter = Counter()
    lock = threading.Lock()

    def read(block: np.ndarray, block_info: dict | None = None) -> np.ndarray:
        if block_info is not None and None in block_info:  # dask's dry run for the output type has none
            with lock:
                reads[tuple(block_info[None]["chunk-location"])] += 1
        return block

    return da.from_array(values, chunks=CHUNKS).map_blocks(read, dtype=values.dtype), reads


def _values() -> np.ndarray:
    rng = np.random.default_rng(19)
    k = np.exp(rng.normal(4.0, 1.0, (9, 8, 10)))
    k[4] = 0.01  # a barrier layer
    k[0, :2, :3] = np.nan
    return k


@pytest.mark.parametrize("vertical", ["kx itself", "a multiple of kx"])
def test_every_chunk_is_read_once(vertical):
    k, reads = _counted(_values())
    kz = k if vertical == "kx itself" else 0.1 * k
    fine = Field.from_arrays(k, kz=kz, dz=np.linspace(0.5, 2.0, 9), three_d=True)
    description, _ = describe_field(fine, "counted")
    chunks = int(np.prod(k.numblocks))
    assert len(reads) == chunks and set(reads.values()) == {1}
    # and the results are those of the profile and of the scans read apart
    reads.clear()
    profile = {key: value for key, value in description["layers"].items() if key != "grouping"}
    assert profile == layer_profile(fine).summary()
    assert description["connectivity"] is not None and description["active_cells"] == 9 * 8 * 10 - 6


def test_a_map_is_read_once_too():
    k, reads = _counted(_values()[:1])
    description, _ = describe_field(Field.from_arrays(k[0], cell_size=(2.0, 3.0)), "counted")
    assert "layers" not in description and set(reads.values()) == {1}
