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

from .grid.blocks import Size, axis_edges, span


def is_dask(array: Any) -> bool:
    """True for a dask array (checked without importing dask)."""
    return type(array).__module__.startswith("dask.")


def align_chunks(array: Any, block: tuple[Size, int, int], least: tuple[int, int, int] = (0, 0, 0)) -> Any:
    """Rechunk a dask array so every chunk holds whole blocks (the last may be smaller).

    A grouping of the layers (`upscale.grid.blocks.Size`) is held whole: one
    chunk along z.

    Chunks already aligned are left alone; otherwise each axis gets chunks of
    the block multiple nearest its current typical chunk size. With `least`,
    every chunk along an axis also holds at least that many cells (a last
    chunk that would be shorter joins the one before it), as overlapping
    chunks need.
    """
    new = []
    for chunks, b, m in zip(array.chunks, map(span, block), least):
        n = sum(chunks)
        if not (all(c % b == 0 for c in chunks[:-1]) and min(chunks) >= min(m, n)):
            size = max(b, round(max(chunks) / b) * b, -(-m // b) * b)
            chunks = (size,) * (n // size) + ((n % size,) if n % size else ())
            if len(chunks) > 1 and chunks[-1] < m:
                chunks = chunks[:-2] + (chunks[-2] + chunks[-1],)
        new.append(tuple(chunks))
    new = tuple(new)
    return array if new == array.chunks else array.rechunk(new)


def _run_chunk(
    chunk: np.ndarray,
    *,
    kernel: Callable[..., np.ndarray],
    dz: np.ndarray,
    block: tuple[Size, int, int],
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
    block: tuple[Size, int, int],
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
    block : (Size, int, int)
        Cells per block ``(layers, rows, columns)``; layers may be a grouping
        (`upscale.grid.blocks.Size`).
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
    out_chunks = _coarse_chunks(k.chunks, block)
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


def _coarse_chunks(chunks: tuple[tuple[int, ...], ...], block: tuple[Size, int, int]
                   ) -> tuple[tuple[int, ...], ...]:  # fmt: skip
    """Coarse blocks of each chunk of aligned `chunks` (a grouping's axis is one chunk)."""
    return tuple(tuple(axis_edges(b, c).size - 1 for c in cs) for cs, b in zip(chunks, block))


def _place(location: tuple[int, ...], core_chunks: tuple[tuple[int, ...], ...],
           depth: tuple[int, int, int]) -> tuple[list[int], tuple[tuple[int, int], ...]]:  # fmt: skip
    """First cell of an overlapping chunk in the whole array, and its own cells ``core`` within it."""
    starts, before = [], []
    for axis, (i, sizes) in enumerate(zip(location, core_chunks)):
        starts.append(sum(sizes[:i]) - (depth[axis] if i > 0 else 0))
        before.append(depth[axis] if i > 0 else 0)
    core = tuple((b, b + sizes[i]) for b, i, sizes in zip(before, location, core_chunks))
    return starts, core


def _run_region_chunk(
    *chunks: np.ndarray,
    function: Callable[..., np.ndarray],
    dz: np.ndarray,
    depth: tuple[int, int, int],
    core_chunks: tuple[tuple[int, ...], ...],
    block: tuple[Size, int, int],
    options: dict,
    block_info: dict | None = None,
) -> np.ndarray:
    starts, core = _place(block_info[None]["chunk-location"][-3:], core_chunks, depth)
    layers = dz[starts[0] : starts[0] + chunks[0].shape[0]]
    return function(*chunks, dz=layers, core=core, block=block, **options)


def _overlapping(arrays: list[Any], block: tuple[int, int, int], depth: tuple[int, int, int]) -> tuple:
    """Dask arrays chunked to whole blocks, each chunk widened by `depth` cells of its neighbours.

    Returns the widened arrays, the chunks of the cells each chunk owns, and
    the depth used along each axis (0 along an axis held in one chunk).
    """
    import dask.array as da

    template = next(a for a in arrays if is_dask(a))
    template = align_chunks(template, block, depth)
    aligned = [
        (a if is_dask(a) else da.from_array(a)).rechunk(template.chunks) for a in arrays
    ]
    core_chunks = template.chunks
    sides = {axis: d if max(core_chunks[axis]) < sum(core_chunks[axis]) else 0
             for axis, d in enumerate(depth)}  # fmt: skip
    widened = [da.overlap.overlap(a, depth=sides, boundary="none") for a in aligned]
    expected = tuple(
        tuple(c + (sides[axis] if i > 0 else 0) + (sides[axis] if i < len(cs) - 1 else 0)
              for i, c in enumerate(cs))
        for axis, cs in enumerate(core_chunks)
    )  # fmt: skip
    if widened[0].chunks != expected:
        raise RuntimeError(f"overlapping chunks {widened[0].chunks} differ from {expected}")
    return widened, core_chunks, tuple(sides[a] for a in range(3))


def apply_regions(
    function: Callable[..., np.ndarray],
    arrays: list[Any],
    dz: np.ndarray,
    block: tuple[Size, int, int],
    depth: tuple[int, int, int],
    outputs: int,
    **options: Any,
) -> Any:
    """Compute `outputs` values per block from several arrays and a border around each block.

    Parameters
    ----------
    function : callable
        ``function(*chunks, dz, core, block, **options) -> ndarray of shape (outputs, l, m, n)``
        for the blocks of ``core`` (``((z0, z1), (y0, y1), (x0, x1))``, cells of the
        chunk that are its own) — the chunk also holds up to `depth` cells on every
        side that belong to its neighbours (fewer at the edges of the domain).
    arrays : list of ndarray or dask array of shape (L, M, N)
        Inputs on the same grid (NaN marks inactive cells).
    dz : ndarray of shape (L,)
        Layer thicknesses in m (the chunk's own slice is passed on).
    block : (Size, int, int)
        Cells per block ``(layers, rows, columns)``; layers may be a grouping
        (`upscale.grid.blocks.Size`).
    depth : (int, int, int)
        Cells of the neighbouring chunks each chunk sees along each axis.
    outputs : int
        Values per block.
    **options
        Passed to `function`.

    Returns
    -------
    ndarray or dask array of shape (outputs, ceil(L/bz), ceil(M/by), ceil(N/bx))
        The same values whatever the chunking: every block sees the same cells.
    """
    if not any(is_dask(a) for a in arrays):
        core = tuple((0, n) for n in np.shape(arrays[0]))
        return function(*(np.asarray(a) for a in arrays), dz=dz, core=core, block=block, **options)
    import dask.array as da

    widened, core_chunks, sides = _overlapping(arrays, block, depth)
    out_chunks = ((outputs,),) + _coarse_chunks(core_chunks, block)
    return da.map_blocks(
        _run_region_chunk,
        *widened,
        function=function,
        dz=dz,
        depth=sides,
        core_chunks=core_chunks,
        block=block,
        options=options,
        chunks=out_chunks,
        new_axis=0,
        dtype=np.float64,
        meta=np.empty((0, 0, 0, 0), dtype=np.float64),
    )


def map_regions(
    function: Callable[..., Any],
    arrays: list[Any],
    dz: np.ndarray,
    block: tuple[Size, int, int],
    depth: tuple[int, int, int],
    **options: Any,
) -> Any:
    """Apply `function` to every chunk and a border around it, for results of any kind.

    Parameters
    ----------
    function : callable
        ``function(*chunks, dz, core, block, offset, **options) -> object``, as in
        `apply_regions`, and ``offset``: the first cell of the chunk (border
        included) in the whole array, along z, y, x.
    arrays, dz, block, depth, **options
        As in `apply_regions`.

    Returns
    -------
    list or dask.delayed.Delayed
        One result per chunk; for dask input a lazy list (computed with the
        other results of a pass by `compute_together`, on whatever scheduler
        or cluster dask uses), for NumPy input the list itself.
    """
    if not any(is_dask(a) for a in arrays):
        core = tuple((0, n) for n in np.shape(arrays[0]))
        return [function(*(np.asarray(a) for a in arrays), dz=dz, core=core, block=block, offset=(0, 0, 0),
                         **options)]  # fmt: skip
    import dask

    widened, core_chunks, sides = _overlapping(arrays, block, depth)
    pieces = [a.to_delayed() for a in widened]
    tasks = []
    for location in np.ndindex(pieces[0].shape):
        starts, core = _place(location, core_chunks, sides)
        layers = dz[starts[0] : starts[0] + widened[0].chunks[0][location[0]]]
        chunks = (p[location] for p in pieces)
        tasks.append(dask.delayed(function, pure=True)(*chunks, dz=layers, core=core, block=block,
                                                       offset=tuple(starts), **options))  # fmt: skip
    return dask.delayed(tasks)


def compute_together(lazy: dict[str, Any]) -> dict[str, Any]:
    """Compute several lazy results in one pass over their shared chunks.

    NumPy arrays and finished values pass through; each array result is a
    writable copy of its own.
    """
    # dask arrays first, then delayed values: dask 2026.8 returns a mixed call's array results before its
    # delayed ones whatever their order (measured; tests/test_parallel.py holds the case)
    names = [name for name, value in lazy.items() if is_dask(value) and not _is_delayed(value)]
    names += [name for name, value in lazy.items() if _is_delayed(value)]
    done = dict(lazy)
    if names:
        import dask

        done.update(zip(names, dask.compute(*(lazy[n] for n in names))))
    return {k: np.array(v) if isinstance(v, np.ndarray) else v for k, v in done.items()}


def _is_delayed(value: Any) -> bool:
    return type(value).__module__.startswith("dask.delayed")
