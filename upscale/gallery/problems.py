"""Model problems with a known answer: layers, checkerboards, lognormal fields, channels, lenses, a well.

Each generator returns plain arrays ``(M, N)`` or ``(L, M, N)`` (rows as the
array's second-to-last axis, x along the last) and is reproducible from its
``seed``; where the effective permeability is known, a function beside it
gives the value and a comment names its source. The tests, the docs and the
benchmarks draw their model problems from here, as pyamg keeps its own in
``pyamg.gallery``; the correlated random fields are in `upscale.gallery.fields`.

A ``seed`` may also be a `numpy.random.Generator`: the problem then draws from
it, and the caller's next draws continue the same stream.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

Seed = int | np.random.Generator

#: Site-percolation thresholds with face neighbours: the share of open sites beyond which an
#: uncorrelated lattice holds a cluster spanning it, as the lattice grows (square lattice in 2D,
#: simple cubic in 3D). Stauffer & Aharony 1994, "Introduction to Percolation Theory", 2nd ed.,
#: Table 2.
SITE_PERCOLATION = {2: 0.592746, 3: 0.3116}


@dataclass(frozen=True)
class Layers:
    """Parallel layers of uniform permeability, and their exact effective permeability.

    Attributes
    ----------
    k : ndarray of shape (n,)
        Permeability of each layer (any unit), from the first row (or layer) on.
    thickness : ndarray of shape (n,)
        Thickness of each layer in m.

    Notes
    -----
    Along the layers the effective permeability is the thickness-weighted
    arithmetic mean, across them the weighted harmonic mean; the two-point
    flux scheme reproduces both exactly (Bear 1972, "Dynamics of Fluids in
    Porous Media", §5.10; Cardwell & Parsons 1945, "Average permeabilities of
    heterogeneous oil sands").

    Examples
    --------
    >>> layers = Layers(np.array([1.0, 4.0]), np.array([1.0, 1.0]))
    >>> float(layers.along), float(layers.across)
    (2.5, 1.6)
    >>> layers.rows(3).tolist()
    [[1.0, 1.0, 1.0], [4.0, 4.0, 4.0]]
    """

    k: np.ndarray
    thickness: np.ndarray

    @property
    def along(self) -> float:
        """Effective permeability along the layers: the thickness-weighted arithmetic mean (unit of k)."""
        return np.sum(self.k * self.thickness) / self.thickness.sum()

    @property
    def across(self) -> float:
        """Effective permeability across the layers: the thickness-weighted harmonic mean (unit of k)."""
        return self.thickness.sum() / np.sum(self.thickness / self.k)

    def rows(self, columns: int) -> np.ndarray:
        """A map ``(n, columns)`` whose rows are the layers (layers along x)."""
        return np.broadcast_to(self.k[:, None], (self.k.size, columns)).copy()

    def stack(self, rows: int, columns: int) -> np.ndarray:
        """A model ``(n, rows, columns)`` whose model layers are the layers."""
        return np.broadcast_to(self.k[:, None, None], (self.k.size, rows, columns)).copy()


def random_layers(n: int, *, seed: Seed, mean_ln: float = 0.0, sigma_ln: float = 2.0,
                  thickness: tuple[float, float] | None = None) -> Layers:  # fmt: skip
    """`n` layers of lognormal permeability, of uniform random thickness if a range is given.

    Parameters
    ----------
    n : int
        Number of layers.
    seed : int or numpy.random.Generator
        The thicknesses are drawn first (when `thickness` is given), then the
        permeabilities.
    mean_ln, sigma_ln : float
        Mean and standard deviation of ln k.
    thickness : (float, float), optional
        Range of the thicknesses in m; 1 m each without it.

    Returns
    -------
    Layers

    Examples
    --------
    >>> layers = random_layers(5, seed=918_273_645, thickness=(0.2, 3.0))
    >>> bool(layers.across < layers.along)
    True
    """
    rng = np.random.default_rng(seed)
    sizes = rng.uniform(*thickness, n) if thickness is not None else np.ones(n)
    return Layers(np.exp(rng.normal(mean_ln, sigma_ln, n)), sizes)


def checkerboard(squares: int, k1: float, k2: float, *, cells_per_square: int = 1) -> np.ndarray:
    """A square board of two materials, `k1` on the squares whose row and column sum to an even number.

    Parameters
    ----------
    squares : int
        Squares per side.
    k1, k2 : float
        Permeabilities of the two materials.
    cells_per_square : int
        Cells per side of each square.

    Returns
    -------
    ndarray of shape (squares * cells_per_square,) * 2

    Examples
    --------
    >>> checkerboard(2, 1.0, 9.0, cells_per_square=2).tolist()[:2]
    [[1.0, 1.0, 9.0, 9.0], [1.0, 1.0, 9.0, 9.0]]
    """
    i = np.arange(squares * cells_per_square) // cells_per_square
    return np.where((i[:, None] + i[None, :]) % 2 == 0, k1, k2)


def checkerboard_k_eff(k1: float, k2: float) -> float:
    """Effective permeability of a 2D checkerboard: √(k1 k2).

    Dykhne 1970, "Conductivity of a two-dimensional two-phase system", Sov.
    Phys. JETP 32; Keller 1964, "A theorem on the conductivity of a composite
    medium", J. Math. Phys. 5. The two-point scheme converges to it slowly,
    from below, as the squares are resolved by more cells.

    Examples
    --------
    >>> checkerboard_k_eff(2.0, 8.0)
    4.0
    """
    return math.sqrt(k1 * k2)


def uncorrelated_lognormal(shape: Sequence[int], seed: Seed, mean_ln: float = 3.0, sigma_ln: float = 1.0,
                           *, inactive: float | None = None) -> np.ndarray:  # fmt: skip
    """Lognormal permeabilities with no spatial correlation, each cell drawn on its own.

    Parameters
    ----------
    shape : sequence of int
        ``(M, N)`` or ``(L, M, N)``.
    seed : int or numpy.random.Generator
        Random seed or generator.
    mean_ln, sigma_ln : float
        Mean and standard deviation of ln k (3 and 1: a geometric mean of about 20).
    inactive : float, optional
        Share of cells made NaN (inactive), drawn after the values. When given,
        the mask is drawn even for 0, so the draws that follow do not depend on it.

    Returns
    -------
    ndarray of float64 with the given shape

    Notes
    -----
    On a cell-scale field the two-point scheme gives an effective permeability
    well below the continuum values of `lognormal_k_eff`: the tests use
    correlated fields (`upscale.gallery.fields.lognormal_field`) for those.

    Examples
    --------
    >>> k = uncorrelated_lognormal((4, 5), seed=20260917, inactive=0.5)
    >>> k.shape, bool(np.isnan(k).any())
    ((4, 5), True)
    """
    rng = np.random.default_rng(seed)
    k = rng.lognormal(mean_ln, sigma_ln, size=tuple(shape))
    if inactive is not None:
        k[rng.random(k.shape) < inactive] = np.nan
    return k


def lognormal_k_eff(geometric_mean: float, sigma_ln: float, dims: int) -> float:
    """Effective permeability of a statistically isotropic lognormal medium in 2D or 3D.

    ``k_G exp(σ² (1/2 − 1/d))``: in 2D the geometric mean k_G, exactly
    (Matheron 1967, "Éléments pour une théorie des milieux poreux"); in 3D
    ``k_G exp(σ²/6)``, exact to first order in σ² (Landau & Lifshitz 1960,
    "Electrodynamics of Continuous Media"; Matheron 1967).

    Parameters
    ----------
    geometric_mean : float
        k_G, in any unit (the result is in the same).
    sigma_ln : float
        Standard deviation of ln k.
    dims : {2, 3}
        Dimensions of the medium.

    Examples
    --------
    >>> lognormal_k_eff(50.0, 1.0, 2)
    50.0
    >>> round(lognormal_k_eff(20.0, 1.0, 3), 4)
    23.6272
    """
    if dims not in (2, 3):
        raise ValueError(f"dims must be 2 or 3, not {dims}")
    return geometric_mean * math.exp(sigma_ln**2 * (0.5 - 1.0 / dims))


def straight_channel(shape: tuple[int, int], rows: slice, *, k_sand: float, k_shale: float,
                     gap: slice | None = None) -> np.ndarray:  # fmt: skip
    """A map of shale crossed along x by one straight sand channel, perhaps broken by a plug of shale.

    Parameters
    ----------
    shape : (int, int)
        ``(M, N)``.
    rows : slice
        The channel's rows.
    k_sand, k_shale : float
        Permeabilities of the channel and of the rock around it.
    gap : slice, optional
        Columns where shale cuts the channel (a broken channel).

    Returns
    -------
    ndarray of shape (M, N)

    Notes
    -----
    Unbroken, the map is layered: `Layers` gives its effective permeability
    along and across the channel.

    Examples
    --------
    >>> straight_channel((3, 4), slice(1, 2), k_sand=5.0, k_shale=1.0, gap=slice(2, 3))[1].tolist()
    [5.0, 5.0, 1.0, 5.0]
    """
    k = np.full(shape, float(k_shale))
    k[rows] = k_sand
    if gap is not None:
        k[rows, gap] = k_shale
    return k


def lenses(shape: tuple[int, int], *, size: int, spacing: int, k_sand: float, k_shale: float) -> np.ndarray:
    """A map of shale holding square sand lenses, each apart from the others and from the edges.

    Parameters
    ----------
    shape : (int, int)
        ``(M, N)``.
    size : int
        Cells per side of a lens.
    spacing : int
        Cells from one lens to the next, along both axes (more than `size`);
        each lens is centred in its `spacing` × `spacing` tile (cells past the
        last whole tile are shale).
    k_sand, k_shale : float
        Permeabilities of the lenses and of the rock around them.

    Returns
    -------
    ndarray of shape (M, N)

    Notes
    -----
    No lens touches another or a face of the map, so no high-k body spans
    it, whatever the share of sand: the counterpart of `straight_channel`.

    Examples
    --------
    >>> lenses((4, 8), size=2, spacing=4, k_sand=9.0, k_shale=1.0)[1].tolist()
    [1.0, 9.0, 9.0, 1.0, 1.0, 9.0, 9.0, 1.0]
    """
    if not 0 < size < spacing:
        raise ValueError(f"a lens of {size} cells does not fit apart from the others in {spacing} cells")
    start = (spacing - size + 1) // 2
    inside = [(i % spacing >= start) & (i % spacing < start + size) & (i < n - n % spacing)
              for n in shape for i in [np.arange(n)]]  # whole tiles only: no lens at an edge
    return np.where(inside[0][:, None] & inside[1][None, :], float(k_sand), float(k_shale))


def staircase_channels(seed: Seed, rows: int = 32, columns: int = 64, block: int = 8, width: int = 3,
                       channels: int = 3, step: int = 5) -> np.ndarray:  # fmt: skip
    """Sand channels (1000) in shale (1) along x, shifted by up to `step` rows at each block face.

    A shift larger than the width disconnects the channel at that face; a
    smaller one leaves a narrow overlap. Block by block each segment is
    straight, so a block value sees a through-going channel whether or not the
    next segment connects: the problem on which transmissibilities of the
    coarse faces from two-block solves beat the harmonic rule (Romeu &
    Noetinger 1995, "Calculation of internodal transmissivities in finite
    difference models of flow in heterogeneous porous media"). There is no
    closed-form effective permeability.

    Returns
    -------
    ndarray of shape (rows, columns)
    """
    rng = np.random.default_rng(seed)
    k = np.ones((rows, columns))
    for _ in range(channels):
        y = int(rng.integers(0, rows - width))
        for j in range(columns // block):
            k[y : y + width, j * block : (j + 1) * block] = 1000.0
            y = int(np.clip(y + rng.integers(-step, step + 1), 0, rows - width))
    return k


def square_outer_radius(side: float, *, near: float = 1e-3, terms: int = 20_000) -> float:
    """Equivalent outer radius r_e (m) of a square whose sides hold one pressure, for a well at its centre.

    A well of radius r_w ≪ `side` at the centre then passes the radial
    (Dupuit–Thiem) rate ``q = 2π k h Δp / (μ ln(r_e / r_w))`` (Peaceman 1978,
    "Interpretation of well-block pressures in numerical reservoir
    simulation", with r_e for the circle's radius). r_e is the
    square's conformal radius: the Green's function of the square
    (−∇²G = δ at the centre, G = 0 on the sides) tends to ``ln(r_e / r) / 2π``
    near the source. It is evaluated here from the Green's function's sine
    series along x, solved exactly along y (separation of variables, common
    practice), at a distance `near` (a fraction of the side) from the source:
    ``G = Σ 2 sin²(nπ/2) sinh(nπ y<) sinh(nπ (1 − y>)) / (nπ sinh nπ)`` on the
    unit square.

    Examples
    --------
    >>> round(square_outer_radius(1.0), 5)   # between the inscribed circle (0.5) and the equal area (0.564)
    0.53935
    """
    n = np.arange(1, terms + 1) * np.pi
    a, b = n * 0.5, n * (0.5 - near)  # the source at y = 1/2, the point at y = 1/2 + near
    # sinh(a) sinh(b) / sinh(n), written with exponentials that do not overflow
    ratio = np.exp(a + b - n) * np.expm1(-2 * a) * np.expm1(-2 * b) / -np.expm1(-2 * n) / 2
    g = float(np.sum(2 * np.sin(n / 2) ** 2 * ratio / n))
    return side * near * math.exp(2 * math.pi * g)
