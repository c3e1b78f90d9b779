"""Generators of synthetic permeability fields.

The correlated Gaussian fields use the FFT moving-average method of
Le Ravalec, Noetinger & Hu (2000, "The FFT moving average (FFT-MA)
generator: an efficient numerical method for generating and conditioning
Gaussian simulations", Mathematical Geology 32(6)): white noise is
convolved with the square root of the covariance, the convolution done by
FFT on a grid padded so the periodic wrap-around does not correlate
opposite edges.

All generators take a ``seed`` and return the same field for the same seed.
Arrays are ``(L, M, N)``: layers, rows, columns.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
from scipy import fft

#: Covariance models: correlation as a function of the scaled lag r = |h / a|.
COVARIANCES = {
    "exponential": lambda r: np.exp(-r),
    "gaussian": lambda r: np.exp(-(r**2)),
}


def gaussian_field(
    shape: Sequence[int],
    correlation_lengths: Sequence[float],
    *,
    variance: float = 1.0,
    covariance: str = "exponential",
    seed: int,
) -> np.ndarray:
    """Stationary zero-mean Gaussian random field by FFT-MA.

    Parameters
    ----------
    shape : sequence of int
        Output shape, e.g. ``(L, M, N)`` or ``(M, N)``.
    correlation_lengths : sequence of float
        Correlation length ``a`` per axis, in cells (anisotropy by giving
        different values). The covariance is ``variance * rho(|h/a|)``.
    variance : float
        Variance of the field.
    covariance : {'exponential', 'gaussian'}
        Correlation model ``rho(r)``: ``exp(-r)`` or ``exp(-r**2)``.
    seed : int
        Seed of the white noise.

    Returns
    -------
    ndarray of float64 with the given shape

    Examples
    --------
    >>> g = gaussian_field((64, 64), (4.0, 4.0), seed=20260917)
    >>> g.shape, bool(abs(g.mean()) < 0.5)
    ((64, 64), True)
    """
    shape = tuple(int(n) for n in shape)
    lengths = np.asarray(correlation_lengths, dtype=float)
    if lengths.size != len(shape) or np.any(lengths <= 0):
        raise ValueError("correlation_lengths needs one positive value per axis")
    rho = COVARIANCES[covariance]
    # pad by enough correlation lengths that the wrapped covariance is negligible
    reach = 10.0 if covariance == "exponential" else 4.0
    padded = tuple(fft.next_fast_len(int(n + np.ceil(reach * a))) for n, a in zip(shape, lengths))
    lags = np.meshgrid(
        *[np.minimum(np.arange(p), p - np.arange(p)) / a for p, a in zip(padded, lengths)],
        indexing="ij",
        sparse=True,
    )
    r = np.sqrt(sum(lag**2 for lag in lags))
    spectrum = fft.rfftn(variance * rho(r), s=padded).real
    amplitude = np.sqrt(np.clip(spectrum, 0.0, None))
    noise = np.random.default_rng(seed).standard_normal(padded)
    field = fft.irfftn(amplitude * fft.rfftn(noise), s=padded)
    return np.ascontiguousarray(field[tuple(slice(0, n) for n in shape)])


def lognormal_field(
    shape: Sequence[int],
    correlation_lengths: Sequence[float],
    *,
    geometric_mean: float,
    sigma_ln: float,
    covariance: str = "exponential",
    seed: int,
) -> np.ndarray:
    """Lognormal permeability: ``k = geometric_mean * exp(sigma_ln * g)``, g from `gaussian_field`.

    Parameters
    ----------
    shape, correlation_lengths, covariance, seed
        As in `gaussian_field`.
    geometric_mean : float
        Geometric mean of k (any permeability unit).
    sigma_ln : float
        Standard deviation of ln k.

    Returns
    -------
    ndarray of float64
    """
    g = gaussian_field(shape, correlation_lengths, covariance=covariance, seed=seed)
    return geometric_mean * np.exp(sigma_ln * g)


def channel_field(
    shape: tuple[int, int],
    *,
    channels: int,
    width: float,
    k_sand: float,
    k_shale: float,
    sigma_ln: float = 0.3,
    seed: int,
) -> np.ndarray:
    """Binary sand/shale map with sinuous sand channels running along x.

    Each channel follows ``y = y0 + A sin(2 pi x / wavelength + phase)`` with a
    random centre, amplitude, wavelength and phase; cells within ``width/2``
    of the centreline (across y) are sand. Each facies carries a mild
    lognormal variability of ``sigma_ln`` around its value.

    Parameters
    ----------
    shape : (int, int)
        Rows and columns ``(M, N)``.
    channels : int
        Number of channels.
    width : float
        Channel width in cells.
    k_sand, k_shale : float
        Geometric-mean permeability of each facies.
    sigma_ln : float
        Standard deviation of ln k within a facies.
    seed : int
        Random seed.

    Returns
    -------
    ndarray of float64, shape (1, M, N)
    """
    rows, cols = shape
    rng = np.random.default_rng(seed)
    y, x = np.mgrid[0:rows, 0:cols].astype(float)
    sand = np.zeros(shape, dtype=bool)
    for _ in range(channels):
        centre = rng.uniform(0.1, 0.9) * rows
        amplitude = rng.uniform(0.03, 0.12) * rows
        wavelength = rng.uniform(0.4, 1.0) * cols
        phase = rng.uniform(0, 2 * np.pi)
        line = centre + amplitude * np.sin(2 * np.pi * x / wavelength + phase)
        sand |= np.abs(y - line) <= width / 2
    noise = gaussian_field(shape, (3.0, 6.0), seed=seed + 1)
    k = np.where(sand, k_sand, k_shale) * np.exp(sigma_ln * noise)
    return k[None]


def layered_field(
    shape: tuple[int, int, int],
    *,
    layer_k: Sequence[float],
    barrier_every: int,
    k_barrier: float,
    sigma_ln: float = 0.2,
    seed: int,
) -> np.ndarray:
    """Layer-cake model with thin low-permeability barriers.

    Parameters
    ----------
    shape : (int, int, int)
        ``(L, M, N)``.
    layer_k : sequence of float
        Geometric-mean permeability of the layers, cycled from the top.
    barrier_every : int
        Every this-many layers, one layer is a barrier of `k_barrier`.
    k_barrier : float
        Barrier permeability.
    sigma_ln : float
        Lateral variability (standard deviation of ln k) within each layer.
    seed : int
        Random seed.

    Returns
    -------
    ndarray of float64, shape (L, M, N)
    """
    layers = shape[0]
    base = np.array([layer_k[i % len(layer_k)] for i in range(layers)], dtype=float)
    base[barrier_every - 1 :: barrier_every] = k_barrier
    noise = gaussian_field(shape, (0.5, 8.0, 8.0), seed=seed)
    return base[:, None, None] * np.exp(sigma_ln * noise)
