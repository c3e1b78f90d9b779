"""What a coarse permeability tensor looks like: anisotropy and off-diagonal weight.

A two-point flux scheme — the coarse check, and most simulators fed by a
coarse grid — uses the diagonal of each block's tensor only. The summary
here says how much that leaves out: the anisotropy ratio of each block
(largest over smallest eigenvalue of the symmetric part of its tensor) and
the size of each off-diagonal term relative to the diagonal,
``|k_ab| / sqrt(k_aa k_bb)``, which is 0 for a tensor aligned with the grid
and below 1 for any positive-definite one.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from ..field import Field
from ..methods.zeros import ZeroOutcome

#: Off-diagonal size (relative to the diagonal) above which a run carries a warning:
#: our choice, documented in docs/methods.md — a tenth of the diagonal changes fluxes
#: across a block by about as much as the typical errors of the coarse check.
OFF_DIAGONAL_WARNING = 0.1


def tensors(coarse: Field, off_diagonal: dict[str, np.ndarray], skip: np.ndarray | None = None) -> np.ndarray:
    """Full tensors of the active blocks, shape (B, d, d), axes in the order x, y (, z).

    Parameters
    ----------
    coarse : Field
        Coarse field (the diagonal terms kx, ky, kz).
    off_diagonal : dict of str to ndarray
        Off-diagonal terms by name (``kxy`` ...); missing ones are 0.
    skip : ndarray of bool, optional
        Blocks to leave out, shaped like the coarse grid.
    """
    axes = coarse.axes
    active = np.isfinite(coarse.kx) if skip is None else np.isfinite(coarse.kx) & ~skip
    K = np.zeros((int(active.sum()), len(axes), len(axes)))
    for i, b in enumerate(axes):
        for j, a in enumerate(axes):
            name = f"k{b}" if a == b else f"k{b}{a}"
            values = getattr(coarse, name) if a == b else off_diagonal.get(name)
            if values is not None:
                K[:, i, j] = np.asarray(values)[active]
    return K


def tensor_summary(coarse: Field, off_diagonal: dict[str, np.ndarray],
                   zeros: ZeroOutcome | None = None) -> dict[str, Any]:  # fmt: skip
    """Anisotropy and off-diagonal statistics over the active blocks.

    Blocks the zero-k rule floored are left out (their floor is no upscaled
    value); ``blocks_without_path`` counts what the method found before the rule.

    Returns
    -------
    dict
        ``anisotropy_median`` and ``anisotropy_max`` (λmax/λmin of the symmetric
        part; blocks with λmin <= 0 are counted in ``blocks_not_positive``),
        ``off_diagonal_max`` and ``off_diagonal_p95`` (largest relative
        off-diagonal term per block), ``blocks_above_warning`` and ``warning``
        (a sentence, or None), and ``blocks_without_path``: per axis, the active
        blocks with no flowing path along it (value 0).

    Examples
    --------
    >>> import numpy as np
    >>> coarse = Field.from_arrays(np.array([[4.0]]), ky=np.array([[1.0]]))
    >>> s = tensor_summary(coarse, {"kxy": np.array([[[1.0]]]), "kyx": np.array([[[1.0]]])})
    >>> round(s["off_diagonal_max"], 3), s["blocks_above_warning"]
    (0.5, 1)
    """
    K = tensors(coarse, off_diagonal, None if zeros is None else zeros.touched)
    if K.shape[0] == 0:
        return {"blocks": 0}
    without = {axis: int((K[:, i, i] == 0).sum()) for i, axis in enumerate(coarse.axes)}
    if zeros is not None and zeros.found:
        without = {axis: zeros.found[f"k{axis}"] for axis in coarse.axes}
    eig = np.linalg.eigvalsh(0.5 * (K + np.swapaxes(K, 1, 2)))
    positive = eig[:, 0] > 0
    ratio = eig[positive, -1] / eig[positive, 0]
    diag = np.sqrt(np.abs(np.einsum("bii->bi", K)))
    scale = diag[:, :, None] * diag[:, None, :]
    with np.errstate(divide="ignore", invalid="ignore"):
        relative = np.where(scale > 0, np.abs(K) / scale, 0.0)
    relative[:, np.arange(K.shape[1]), np.arange(K.shape[1])] = 0.0
    per_block = relative.max(axis=(1, 2))
    above = int((per_block > OFF_DIAGONAL_WARNING).sum())
    warning = None
    if above:
        warning = (
            f"off-diagonal permeability reaches {per_block.max():.0%} of the diagonal "
            f"({above} of {K.shape[0]} blocks above {OFF_DIAGONAL_WARNING:.0%}); the two-point "
            "check and any two-point simulator use the diagonal only and miss that cross-flow"
        )
    return {
        "blocks": int(K.shape[0]),
        "anisotropy_median": float(np.median(ratio)) if ratio.size else None,
        "anisotropy_max": float(ratio.max()) if ratio.size else None,
        "blocks_not_positive": int((~positive).sum()),
        "off_diagonal_max": float(per_block.max()),
        "off_diagonal_p95": float(np.percentile(per_block, 95)),
        "blocks_above_warning": above,
        "warning": warning,
        "blocks_without_path": without,
    }
