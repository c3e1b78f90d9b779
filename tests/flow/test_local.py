"""Tests of `upscale.flow.local` and `upscale.flow.banded`: the local solves of flow-based upscaling.

References: layered blocks, whose effective permeability is exact (the
thickness-weighted arithmetic mean along the layers, the harmonic mean
across them: Bear 1972, *Dynamics of Fluids in Porous Media*, §5.10);
scipy's sparse direct solver (SuperLU) on the same two-point system, block
by block, its pressures refined with residuals summed in extended precision
(Higham 2002, *Accuracy and Stability of Numerical Algorithms*, ch. 12); and
the values of the code before issue 18 (its kernels were made faster without
changing one operation), recorded in ``tests/data/local_solves_before.npz``.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
from scipy import sparse
from scipy.sparse.csgraph import connected_components
from scipy.sparse.linalg import spsolve

from upscale import coarsen
from upscale.field import Field, Grid
from upscale.flow import banded
from upscale.flow.local import band_order, block_tensors, pair_fluxes
from upscale.flow.transmissibility import half_cell, harmonic_faces

BEFORE = Path(__file__).resolve().parents[1] / "data" / "local_solves_before.npz"
CELL = (10.0, 10.0)  # column width and row height in m


def _coarse(k: np.ndarray, dz: np.ndarray, block: str) -> dict[str, np.ndarray]:
    """kx, ky, kz of the blocks of a 3D field (mD), flow-based with sealed sides, no border."""
    field = Field.from_arrays(k, cell_size=CELL, dz=dz, three_d=True)
    coarse = coarsen(field, block, "flow", bc="sealed", border=0).coarse
    return {name: np.asarray(getattr(coarse, name)) for name in ("kx", "ky", "kz")}


def test_layered_blocks_are_exact() -> None:
    """Layers of uneven thickness: arithmetic mean along them, harmonic across (Bear 1972).

    To 1e-12 relative: across layers of contrasts near 1e7 the solves give
    the harmonic mean to about 3e-13 (the code before issue 18 gave the same
    values, `test_same_values_as_before_bit_for_bit`).
    """
    rng = np.random.default_rng(18)
    dz = rng.uniform(0.5, 4.0, 8)
    layers = np.exp(rng.uniform(-8.0, 8.0, 8))  # contrasts to about 1e7 between layers
    k = np.broadcast_to(layers[:, None, None], (8, 16, 16)).copy()
    got = _coarse(k, dz, "8x8x4")
    for top in (0, 4):
        h, kl = dz[top : top + 4], layers[top : top + 4]
        along = np.sum(h * kl) / np.sum(h)
        across = np.sum(h) / np.sum(h / kl)
        for name, expected in (("kx", along), ("ky", along), ("kz", across)):
            values = got[name][top // 4]
            np.testing.assert_allclose(values, expected, rtol=1e-12, err_msg=name)


def _k_eff_reference(k: np.ndarray, dz: np.ndarray, a: int) -> float:
    """k_eff of one block along array axis `a` (sealed sides) from spsolve, refined.

    p = 1 on the first face across a and 0 on the last, half a cell from the
    boundary cells' centres; cells that no path joins to a fixed face are left
    out (their pressure is undefined and carries no flow); the pressures get
    three refinement steps with residuals in extended precision; k_eff is the
    outflow times the length over the cross-section.
    """
    shape, n = k.shape, k.size
    grid = Grid(dz=dz, dy=np.full(shape[1], CELL[1]), dx=np.full(shape[2], CELL[0]))
    index = np.arange(n).reshape(shape)
    t = [half_cell(k, grid, b) for b in range(3)]
    i, j, T = [], [], []
    for b in range(3):
        i.append(np.take(index, np.arange(shape[b] - 1), axis=b).ravel())
        j.append(np.take(index, np.arange(1, shape[b]), axis=b).ravel())
        T.append(harmonic_faces(t[b], b).ravel())
    i, j, T = np.concatenate(i), np.concatenate(j), np.concatenate(T)
    inlet, outlet = np.take(index, 0, axis=a).ravel(), np.take(index, -1, axis=a).ravel()
    t_in, t_out = np.take(t[a], 0, axis=a).ravel(), np.take(t[a], -1, axis=a).ravel()
    rhs = np.bincount(inlet, t_in, minlength=n)
    diagonal = (np.bincount(i, T, minlength=n) + np.bincount(j, T, minlength=n) + rhs
                + np.bincount(outlet, t_out, minlength=n))  # fmt: skip
    A = sparse.csr_matrix((np.r_[diagonal, -T, -T], (np.r_[np.arange(n), i, j], np.r_[np.arange(n), j, i])),
                          shape=(n, n))  # fmt: skip
    # keep the cells joined to a fixed face: ground node n linked to every cell with a fixed face
    fixed = np.flatnonzero(np.bincount(inlet, t_in, minlength=n) + np.bincount(outlet, t_out, minlength=n))
    joined = T > 0
    ends = (np.r_[i[joined], fixed], np.r_[j[joined], np.full(fixed.size, n)])
    graph = sparse.coo_matrix((np.ones(ends[0].size), ends), shape=(n + 1, n + 1))
    _, label = connected_components(graph, directed=False)
    keep = np.flatnonzero(label[:n] == label[n])
    A = A[keep][:, keep].tocsc()
    # refinement in extended precision against the residual written in face fluxes, whose
    # differences of close pressures are exact (written as b - A p it would lose eps |A| |p|)
    ld = np.longdouble
    p = np.zeros(n, ld)
    boundary = (np.bincount(inlet, t_in, minlength=n) + np.bincount(outlet, t_out, minlength=n)).astype(ld)
    for _ in range(6):
        residual = rhs.astype(ld) - boundary * p
        flux = T.astype(ld) * (p[i] - p[j])
        np.subtract.at(residual, i, flux)
        np.add.at(residual, j, flux)
        p[keep] += spsolve(A, residual[keep].astype(np.float64))
    sizes = [dz.sum(), shape[1] * CELL[1], shape[2] * CELL[0]]
    others = [s for b, s in enumerate(sizes) if b != a]
    return float(np.sum(t_out * p[outlet]) * sizes[a] / (others[0] * others[1]))


@pytest.mark.parametrize("contrast", [1.0, 1e4, 1e8])
def test_agrees_with_spsolve_block_by_block(contrast: float) -> None:
    """Lognormal blocks with inactive cells and two-valued contrasts, against refined spsolve.

    To 1e-12 relative, or 4 eps x contrast where that is larger: the tool
    averages the flux over every plane of the block, and the flux between
    two cells of a permeable patch is T (p_i - p_j) with pressures known to
    eps |p| only, so a contrast c costs up to about eps c of the flux
    (measured on such blocks: 2e-10 at c = 1e8, 1e-12 at 1e6, 4e-14 at 1e4;
    the code before issue 18 gave the same values).
    """
    rng = np.random.default_rng(int(contrast) % 1000 + 5)
    shape = (8, 16, 16)  # 2 x 2 x 2 blocks of 4 x 8 x 8 cells
    k = np.exp(rng.standard_normal(shape))
    k[rng.random(shape) < 0.3] *= contrast
    k[rng.random(shape) < 0.15] = np.nan
    dz = rng.uniform(1.0, 3.0, shape[0])
    got = _coarse(k, dz, "8x8x4")
    for name, a in (("kz", 0), ("ky", 1), ("kx", 2)):
        for bz, by, bx in np.ndindex(2, 2, 2):
            cells = k[bz * 4 : bz * 4 + 4, by * 8 : by * 8 + 8, bx * 8 : bx * 8 + 8]
            expected = _k_eff_reference(cells, dz[bz * 4 : bz * 4 + 4], a)
            value = got[name][bz, by, bx]
            tolerance = max(1e-12, 4 * np.finfo(float).eps * contrast)
            assert abs(value - expected) <= tolerance * abs(expected), (name, (bz, by, bx), value, expected)


def _band(rng: np.random.Generator, n: int, width: int) -> np.ndarray:
    """Upper band of a random symmetric positive-definite matrix, with some zeros in it."""
    ab = rng.uniform(-1.0, 0.0, (n, width + 1)) * (rng.random((n, width + 1)) < 0.7)
    for i in range(n):
        ab[i, n - i :] = 0.0
    ab[:, 0] = 2.0 * (width + 1)
    return ab


def test_solve_three_is_solve_three_times() -> None:
    """The interleaved back substitution gives each system exactly what `solve` gives it (common practice)."""
    rng = np.random.default_rng(3)
    for n, width in [(1, 0), (2, 1), (7, 3), (40, 12), (256, 32)]:
        bands = [_band(rng, n, width) for _ in range(3)]
        for ab in bands:
            banded.factor(ab)
        rhs = rng.standard_normal((3, n))
        one = rhs.copy()
        for ab, x in zip(bands, one):
            banded.solve(ab, x)
        three = rhs.copy()
        banded.solve_three(*bands, *three)
        np.testing.assert_array_equal(three, one)
        dense = np.zeros((n, n))
        ab = _band(np.random.default_rng(3 + n), n, width)
        for i in range(n):
            dense[i, i : i + width + 1] = ab[i, : min(width + 1, n - i)]
        dense = np.triu(dense) + np.triu(dense, 1).T
        banded.factor(ab)
        x = rhs[0].copy()
        banded.solve(ab, x)
        np.testing.assert_allclose(dense @ x, rhs[0], rtol=0, atol=1e-12 * np.abs(rhs[0]).max())


def before_cases() -> dict[str, np.ndarray]:
    """`block_tensors` and `pair_fluxes` of fixed random boxes: every condition, border, shape.

    Run with the code of before issue 18 to record ``local_solves_before.npz``
    (``python tests/flow/test_local.py``); the test compares the code of now.
    """
    rng = np.random.default_rng(7)
    out = {}
    count = 12
    cases = [((4, 8, 8), None), ((4, 8, 8), 1e8), ((6, 10, 10), 1e4), ((1, 16, 16), None),
             ((1, 12, 16), 1e6), ((3, 5, 7), 1e8)]  # fmt: skip
    for shape, contrast in cases:
        for dead in (0.0, 0.2):
            n = int(np.prod(shape))
            k = np.exp(1.5 * rng.standard_normal((count, n)))
            if contrast:
                k[rng.random((count, n)) < 0.3] *= contrast
            k[rng.random((count, n)) < dead] = 0.0
            t = np.stack([k * rng.uniform(0.5, 2.0) for _ in range(3)], axis=1)
            if shape[0] == 1:
                t[:, 0] = 0.0
            h = np.stack([np.r_[rng.uniform(1, 3, shape[a]), np.zeros(16 - shape[a])] for a in range(3)])
            h = np.repeat(h[None], count, axis=0)
            axes = np.array([shape[0] > 1, True, True])
            size = np.array(shape)
            lo = np.tile([1 if s > 4 else 0 for s in shape], (count, 1))
            name = f"{'x'.join(map(str, shape))} contrast {contrast} inactive {dead}"
            for bc in (0, 1, 2):
                order, width = band_order(shape, bc == 2)
                U, G = block_tensors(t, h, size, lo, size - lo, order, width, bc, axes)
                out[f"{name} bc {bc} U"], out[f"{name} bc {bc} G"] = U, G
            order, width = band_order(shape, False)
            for a in np.flatnonzero(axes):
                mid = np.full(count, shape[a] // 2)
                first, last = np.zeros((count, 3), int), np.tile(size, (count, 1))
                out[f"{name} pairs {a}"] = pair_fluxes(
                    t, h, size, first, mid, last, int(a), order, width, axes
                )
    return out


def test_same_values_as_before_bit_for_bit() -> None:
    """Every local solve gives the values of the code before issue 18, to the last bit."""
    before = np.load(BEFORE)
    now = before_cases()
    assert sorted(now) == sorted(before.files)
    for name in before.files:
        np.testing.assert_array_equal(now[name], before[name], err_msg=name)


if __name__ == "__main__":
    np.savez_compressed(BEFORE, **before_cases())
