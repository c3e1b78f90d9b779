"""Volume-weighted averages of the cells of each coarse block.

All four are members of the power-average family (Journel, Deutsch &
Desbarats 1986, "Power averaging for block effective permeability")::

    k_w = ( sum(v_i * k_i**w) / sum(v_i) ) ** (1/w)

with v_i the cell volume: w = 1 is the arithmetic mean (exact for flow
along layers), w = -1 the harmonic mean (exact for flow across layers),
and the limit w -> 0 the geometric mean ``exp(sum(v_i ln k_i) / sum(v_i))``
(exact for a 2D isotropic lognormal field, Matheron 1967). The averages are
nodata-aware: inactive cells are left out of both sums. A block without an
active cell gets NaN.

Each function works on one in-memory chunk of whole blocks; see
`upscale.parallel.apply_blocks` for dask arrays.
"""

from __future__ import annotations

import numpy as np

from . import _kernels as kern


def _ratio(top: np.ndarray, bottom: np.ndarray) -> np.ndarray:
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(bottom > 0, top / bottom, np.nan)


def arithmetic_mean(
    k: np.ndarray, dz: np.ndarray, block: tuple[int, int, int], axis: int = 2
) -> np.ndarray:
    """Volume-weighted arithmetic mean of each block.

    Parameters
    ----------
    k : ndarray of shape (L, M, N)
        Cell permeabilities (any unit); NaN marks inactive cells.
    dz : ndarray of shape (L,)
        Layer thicknesses in m (the cell volume weights within a layer are equal).
    block : (int, int, int)
        Cells per block ``(layers, rows, columns)``; edge blocks may be smaller.
    axis : int
        Flow axis; unused (the rule is the same along every axis).

    Returns
    -------
    ndarray of shape (ceil(L/bz), ceil(M/by), ceil(N/bx))
        Block permeabilities in the unit of `k`.

    Examples
    --------
    >>> import numpy as np
    >>> k = np.array([[[1.0, 3.0], [5.0, 7.0]]])
    >>> arithmetic_mean(k, np.ones(1), (1, 2, 2))
    array([[[4.]]])
    """
    S, W = kern.block_sums(k, dz, block, kern.LINEAR, True)
    return _ratio(S, W)


def harmonic_mean(
    k: np.ndarray, dz: np.ndarray, block: tuple[int, int, int], axis: int = 2
) -> np.ndarray:
    """Volume-weighted harmonic mean of each block.

    Parameters and returns as `arithmetic_mean`. A zero cell makes the block zero.

    Examples
    --------
    >>> import numpy as np
    >>> harmonic_mean(np.array([[[1.0, 4.0]]]), np.ones(1), (1, 1, 2))
    array([[[1.6]]])
    """
    S, W = kern.block_sums(k, dz, block, kern.RECIPROCAL, True)
    return _ratio(W, S)


def geometric_mean(
    k: np.ndarray, dz: np.ndarray, block: tuple[int, int, int], axis: int = 2
) -> np.ndarray:
    """Volume-weighted geometric mean of each block.

    Parameters and returns as `arithmetic_mean`; active cells must be > 0.

    Examples
    --------
    >>> import numpy as np
    >>> geometric_mean(np.array([[[1.0, 100.0]]]), np.ones(1), (1, 1, 2))
    array([[[10.]]])
    """
    S, W = kern.block_log_sums(k, dz, block)
    return np.exp(_ratio(S, W))


def power_mean(
    k: np.ndarray,
    dz: np.ndarray,
    block: tuple[int, int, int],
    axis: int = 2,
    *,
    exponent: float,
) -> np.ndarray:
    """Volume-weighted power average of each block with exponent ω.

    Parameters
    ----------
    k, dz, block, axis
        As in `arithmetic_mean`.
    exponent : float
        ω; 1 gives the arithmetic mean, -1 the harmonic, 0 the geometric (the
        limit). Values between -1 and 1 are usual; Journel et al. (1986) found
        ω ≈ 0.57 for sand with scattered shales in 3D. Active cells must be > 0
        when ω <= 0.

    Returns
    -------
    ndarray
        As in `arithmetic_mean`.

    Examples
    --------
    >>> import numpy as np
    >>> power_mean(np.array([[[1.0, 9.0]]]), np.ones(1), (1, 1, 2), exponent=0.5)
    array([[[4.]]])
    """
    if exponent == 0:
        return geometric_mean(k, dz, block)
    S, W = kern.block_sums(k, dz, block, kern.POWER, True, float(exponent))
    # zero or huge means with a negative exponent arise only from refused input
    with np.errstate(divide="ignore", over="ignore"):
        return _ratio(S, W) ** (1.0 / exponent)


def bulk_mean(
    values: np.ndarray, dz: np.ndarray, block: tuple[int, int, int], axis: int = 2
) -> np.ndarray:
    """Bulk-volume mean of each block, inactive cells counting as zero.

    Used for porosity: the block value times the block's bulk volume is the
    pore volume of its active cells, so pore volume is conserved exactly.

    Parameters and returns as `arithmetic_mean`, `values` a fraction.

    Examples
    --------
    >>> import numpy as np
    >>> bulk_mean(np.array([[[0.2, np.nan]]]), np.ones(1), (1, 1, 2))
    array([[[0.1]]])
    """
    S, W = kern.block_sums(values, dz, block, kern.LINEAR, False)
    return _ratio(S, W)


def active_volume(
    k: np.ndarray, dz: np.ndarray, block: tuple[int, int, int], axis: int = 2
) -> np.ndarray:
    """Active volume of each block, in units of (cell area × m): the sum of dz over active cells.

    Blocks one layer thick (every 2D map) are counted with NumPy, not the
    compiled `_kernels.block_counts`, which a run would compile for nothing
    else: the active cells of each block are counted (exactly) and multiplied
    by the layer's dz, the kernel's one rounding. Thicker blocks keep the
    kernel: it adds layer after layer with fused multiply-adds, whose
    roundings NumPy does not reproduce.

    Parameters and returns as `arithmetic_mean`.

    Examples
    --------
    >>> k = np.array([[[1.0, np.nan, 2.0], [3.0, 4.0, np.nan]]])
    >>> active_volume(k, np.array([2.0]), (1, 2, 2))
    array([[[6., 2.]]])
    """
    if block[0] != 1:
        return kern.block_counts(k, dz, block)
    layers, rows, columns = k.shape
    _, sy, sx = block
    down, across = -(-rows // sy), -(-columns // sx)
    active = np.zeros((layers, down * sy, across * sx), dtype=bool)
    active[:, :rows, :columns] = ~np.isnan(k)
    counts = active.reshape(layers, down, sy, across, sx).sum(axis=(2, 4))
    return dz[:, None, None] * counts
