"""Directional bounds of Cardwell and Parsons (1945).

For flow along one axis, the effective permeability of a block lies
between two compositions of series (harmonic) and parallel (arithmetic)
averages (Cardwell & Parsons 1945, "Average permeabilities of heterogeneous
oil sands", Trans. AIME 160):

* ``tubes`` — lower bound: impermeable walls parallel to the flow split the
  block into tubes of cells in series (harmonic mean along the axis), and
  the tubes carry flow in parallel (arithmetic mean across). Walls can only
  hinder flow.
* ``slabs`` — upper bound: perfectly conducting planes across the flow split
  the block into slabs of cells in parallel (arithmetic mean across), and
  the slabs sit in series (harmonic mean along the axis). Such planes can
  only help flow.

For a layered block both bounds coincide with the exact answer. Inactive
cells are treated as impermeable (they pass no flow), so the bounds bracket
the flow through the block's whole cross-section: a tube with an inactive
cell carries nothing.
"""

from __future__ import annotations

import numpy as np

from ..grid.blocks import Size, axis_edges
from . import _kernels as kern


def _along(block: tuple[int, int, int], axis: int) -> tuple[int, int, int]:
    return tuple(b if a == axis else 1 for a, b in enumerate(block))  # type: ignore[return-value]


def _across(block: tuple[int, int, int], axis: int) -> tuple[int, int, int]:
    return tuple(1 if a == axis else b for a, b in enumerate(block))  # type: ignore[return-value]


def _weights_after(dz: np.ndarray, first_stage: tuple[Size, int, int]) -> np.ndarray:
    # Layer weights still matter after the first stage only where it kept the layers apart.
    layers = axis_edges(first_stage[0], dz.size).size - 1
    return dz if first_stage[0] == 1 else np.ones(layers)


def tubes_bound(
    k: np.ndarray, dz: np.ndarray, block: tuple[int, int, int], axis: int = 2
) -> np.ndarray:
    """Cardwell–Parsons lower bound: harmonic along `axis` per tube, arithmetic across tubes.

    Parameters
    ----------
    k : ndarray of shape (L, M, N)
        Permeability along `axis` (any unit); NaN marks inactive (impermeable) cells.
    dz : ndarray of shape (L,)
        Layer thicknesses in m.
    block : (int, int, int)
        Cells per block ``(layers, rows, columns)``.
    axis : int
        Flow axis in array order: 0 = z (layers), 1 = y (rows), 2 = x (columns).

    Returns
    -------
    ndarray of shape (ceil(L/bz), ceil(M/by), ceil(N/bx))
        Lower bound of the block permeability along `axis`, unit of `k`.

    Examples
    --------
    >>> import numpy as np
    >>> k = np.array([[[1.0, 1.0], [9.0, 9.0]]])   # two rows: layers along x
    >>> tubes_bound(k, np.ones(1), (1, 2, 2), axis=2)
    array([[[5.]]])
    """
    first = _along(block, axis)
    S, W = kern.block_sums(k, dz, first, kern.RECIPROCAL, False)
    with np.errstate(divide="ignore"):
        tube = W / S
    S2, W2 = kern.block_sums(tube, _weights_after(dz, first), _across(block, axis), kern.LINEAR, False)
    return S2 / W2


def slabs_bound(
    k: np.ndarray, dz: np.ndarray, block: tuple[int, int, int], axis: int = 2
) -> np.ndarray:
    """Cardwell–Parsons upper bound: arithmetic across `axis` per slab, harmonic along.

    Parameters and returns as `tubes_bound` (here the upper bound).

    Examples
    --------
    >>> import numpy as np
    >>> k = np.array([[[1.0, 4.0], [1.0, 4.0]]])   # two columns in series along x
    >>> slabs_bound(k, np.ones(1), (1, 2, 2), axis=2)
    array([[[1.6]]])
    """
    first = _across(block, axis)
    S, W = kern.block_sums(k, dz, first, kern.LINEAR, False)
    slab = S / W
    S2, W2 = kern.block_sums(slab, _weights_after(dz, first), _along(block, axis), kern.RECIPROCAL, False)
    with np.errstate(divide="ignore"):
        return W2 / S2
