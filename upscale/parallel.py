"""Apply a per-chunk block kernel to a NumPy or a dask array.

The kernels in `upscale.methods` reduce an in-memory chunk holding whole
blocks. `apply_blocks` runs them on NumPy arrays directly and on dask arrays
chunk by chunk, after aligning the chunks to whole blocks. Because every
block lies inside one chunk and is reduced by the same code, the result is
bit-for-bit the same whatever the chunking.
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

import numpy as np


def is_dask(array: Any) -> bool:
    """True for a dask array (checked without importing dask)."""
    return type(array).__module__.startswith("dask.")


def align_chunks(array: Any, block: tuple[int, int, int]) -> Any:
    """Rechunk a dask array so every chunk holds whole blocks (the last may be smaller).

    Chunks already aligned are left alone; otherwise each axis gets chunks of
    the block multiple nearest its current typical chunk size.
    """
    new = []
    for chunks, b in zip(array.chunks, block):
        if all(c % b == 0 for c in chunks[:-1]):
            new.append(chunks)
            continue
        size = max(b, round(max(chunks) / b) * b)
        n = sum(chunks)
        new.append((size,) * (n // size) + ((n % size,) if n % size else ()))
    new = tuple(new)
    return array if new == array.chunks else array.rechunk(new)


def _run_chunk(
    chunk: np.ndarray,
    *,
    kernel: Callable[..., np.ndarray],
    dz: np.ndarray,
    block: tuple[int, int, int],
    axis: int,
    options: dict,
    block_info: dict | None = None,
) -> np.ndarray:
    start, stop = block_info[0]["array-location"][0]
    return kernel(chunk, dz[start:stop], block, axis, **options)


def apply_blocks(
    kernel: Callable[..., np.ndarray],
    k: Any,
    dz: np.ndarray,
    block: tuple[int, int, int],
    axis: int = 2,
    **options: Any,
) -> Any:
    """Reduce every block of `k` with `kernel`.

    Parameters
    ----------
    kernel : callable
        ``kernel(chunk, dz, block, axis, **options)`` as in `upscale.methods.averages`.
    k : ndarray or dask array of shape (L, M, N)
        Fine values; NaN marks inactive cells.
    dz : ndarray of shape (L,)
        Layer thicknesses in m.
    block : (int, int, int)
        Cells per block ``(layers, rows, columns)``.
    axis : int
        Flow axis in array order (0 = z, 1 = y, 2 = x).
    **options
        Passed to `kernel`.

    Returns
    -------
    ndarray or dask array of shape (ceil(L/bz), ceil(M/by), ceil(N/bx))
        NumPy for NumPy input, a lazy dask array for dask input.

    Examples
    --------
    >>> import numpy as np, dask.array as da
    >>> from upscale.methods.averages import arithmetic_mean
    >>> k = np.arange(1.0, 17.0).reshape(1, 4, 4)
    >>> lazy = apply_blocks(arithmetic_mean, da.from_array(k, chunks=(1, 2, 2)), np.ones(1), (1, 2, 2))
    >>> np.array_equal(lazy.compute(), apply_blocks(arithmetic_mean, k, np.ones(1), (1, 2, 2)))
    True
    """
    if not is_dask(k):
        return kernel(np.asarray(k), dz, block, axis, **options)
    import dask.array as da

    k = align_chunks(k, block)
    out_chunks = tuple(tuple(-(-c // b) for c in cs) for cs, b in zip(k.chunks, block))
    return da.map_blocks(
        _run_chunk,
        k,
        kernel=kernel,
        dz=dz,
        block=block,
        axis=axis,
        options=options,
        chunks=out_chunks,
        dtype=np.float64,
        meta=np.empty((0, 0, 0), dtype=np.float64),
    )


def compute_together(lazy: dict[str, Any]) -> dict[str, Any]:
    """Compute several lazy results in one pass over their shared chunks.

    NumPy arrays and finished values pass through; each array result is a
    writable copy of its own.
    """
    names = [name for name, value in lazy.items() if is_dask(value) or _is_delayed(value)]
    done = dict(lazy)
    if names:
        import dask

        done.update(zip(names, dask.compute(*(lazy[n] for n in names))))
    return {k: np.array(v) if isinstance(v, np.ndarray) else v for k, v in done.items()}


def _is_delayed(value: Any) -> bool:
    return type(value).__module__.startswith("dask.delayed")
