"""A plain per-block loop of flow-based upscaling with scipy's spsolve: the baseline of bench_startup.py.

Run as its own process, as a user would run a short script::

    python tests/benchmarks/loop_spsolve.py FIELD.tif NX NY OUT.tif

Reads a one-band permeability GeoTIFF with rasterio (every cell active,
projected CRS, square or rectangular cells), cuts it into blocks of NX x NY
cells, and solves each block's sealed-side problem along x and along y with
``scipy.sparse.linalg.spsolve``: pressure 1 on the inlet face and 0 on the
outlet face (half a cell from the boundary cell centres), the other faces
closed, two-point fluxes with harmonic face transmissibilities; k_eff is the
outflow times the block's length over its cross-section. Writes kx and ky
as the two bands of a GeoTIFF on the coarse grid. Nothing of the package is
imported: this is the loop a user could write without the tool.
"""

from __future__ import annotations

import sys

import numpy as np
import rasterio
from rasterio.transform import Affine
from scipy import sparse
from scipy.sparse.linalg import spsolve


def block_k(k: np.ndarray, dx: float, dy: float) -> tuple[float, float]:
    """Sealed-side k_eff of one block along x and y.

    Parameters
    ----------
    k : ndarray of shape (M, N)
        Permeability of the block's cells (rows along y, columns along x).
    dx, dy : float
        Cell size along x and y in m.

    Returns
    -------
    kx, ky : float
        In the unit of `k`.
    """
    m, n = k.shape
    index = np.arange(m * n).reshape(m, n)
    t_x = k * dy / (dx / 2.0)  # half-cell transmissibilities per unit thickness
    t_y = k * dx / (dy / 2.0)
    face_x = t_x[:, :-1] * t_x[:, 1:] / (t_x[:, :-1] + t_x[:, 1:])
    face_y = t_y[:-1, :] * t_y[1:, :] / (t_y[:-1, :] + t_y[1:, :])
    i = np.concatenate([index[:, :-1].ravel(), index[:-1, :].ravel()])
    j = np.concatenate([index[:, 1:].ravel(), index[1:, :].ravel()])
    t = np.concatenate([face_x.ravel(), face_y.ravel()])
    inside = np.bincount(i, t, minlength=m * n) + np.bincount(j, t, minlength=m * n)
    cells = np.arange(m * n)
    out = []
    for inlet, outlet, t_in, t_out, length, across in (
        (index[:, 0], index[:, -1], t_x[:, 0], t_x[:, -1], n * dx, m * dy),
        (index[0, :], index[-1, :], t_y[0, :], t_y[-1, :], m * dy, n * dx),
    ):
        rhs = np.bincount(inlet, t_in, minlength=m * n)
        diagonal = inside + rhs + np.bincount(outlet, t_out, minlength=m * n)
        A = sparse.csc_matrix((np.concatenate([diagonal, -t, -t]),
                               (np.concatenate([cells, i, j]), np.concatenate([cells, j, i]))),
                              shape=(m * n, m * n))  # fmt: skip
        p = spsolve(A, rhs)
        out.append(float(np.sum(t_out * p[outlet]) * length / across))
    return out[0], out[1]


def main(path: str, nx: int, ny: int, out: str) -> None:
    with rasterio.open(path) as source:
        k = source.read(1).astype(np.float64)
        transform, crs = source.transform, source.crs
    dx, dy = abs(transform.a), abs(transform.e)
    rows, columns = k.shape[0] // ny, k.shape[1] // nx
    coarse = np.empty((2, rows, columns))
    for r in range(rows):
        for c in range(columns):
            coarse[:, r, c] = block_k(k[r * ny:(r + 1) * ny, c * nx:(c + 1) * nx], dx, dy)
    profile = {"driver": "GTiff", "width": columns, "height": rows, "count": 2, "dtype": "float64",
               "crs": crs, "transform": transform * Affine.scale(nx, ny)}  # fmt: skip
    with rasterio.open(out, "w", **profile) as target:
        target.write(coarse)


if __name__ == "__main__":
    main(sys.argv[1], int(sys.argv[2]), int(sys.argv[3]), sys.argv[4])
