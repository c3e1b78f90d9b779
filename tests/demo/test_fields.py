"""Tests of the synthetic field generators in `upscale.gallery.fields`.

What is tested
--------------
* `gaussian_field` (FFT-MA, Le Ravalec, Noetinger & Hu 2000): sample
  variance close to the target, empirical covariance at lag a close to
  exp(-1) times the variance for the exponential and Gaussian models,
  anisotropy (different a per axis), reproducibility by seed, shapes and
  argument checks.
* `lognormal_field`: geometric mean and standard deviation of ln k.
* `channel_field`: two facies around k_sand and k_shale, reproducible.
* `layered_field`: layers cycle through layer_k with barrier layers of
  k_barrier every `barrier_every` layers.

Tolerances
----------
For a field of n cells with an exponential covariance of range a in 2D,
the variance of the sample variance (and of the sample covariance at a
short lag) is about ``2 sigma**4 * (pi a**2 / 2) / n`` (the integral of
rho**2 over the plane, common practice for the variance of sample moments
of a correlated field). For 512 x 512 cells and a = 8 that is a standard
deviation of about 0.028 sigma**2 per field (0.024 measured over 30
seeds); averaging 4 seeds halves it to ~0.014. The tolerances below,
0.06 sigma**2, are therefore about 4 standard deviations: a correct
generator fails them with probability ~1e-4, while a wrong range (a -> 2a
moves the lag-a correlation from 0.37 to 0.61) or a wrong variance
normalisation is caught.
"""

from __future__ import annotations

import numpy as np
import pytest

from upscale.gallery.fields import COVARIANCES, channel_field, gaussian_field, layered_field, lognormal_field

SEEDS = (730_118_245, 918_337_402, 264_905_771, 583_126_094)


def lag_covariance(g, lag, axis):
    """Empirical covariance of `g` at `lag` cells along `axis` (mean removed)."""
    g = g - g.mean()
    n = g.shape[axis]
    head = np.take(g, np.arange(n - lag), axis=axis)
    tail = np.take(g, np.arange(lag, n), axis=axis)
    return float(np.mean(head * tail))


@pytest.mark.parametrize("covariance", ["exponential", "gaussian"])
def test_gaussian_field_variance_and_covariance_at_the_range(covariance):
    # Le Ravalec, Noetinger & Hu 2000, The FFT moving average (FFT-MA) generator,
    # Mathematical Geology 32(6): the field has covariance variance * rho(|h/a|);
    # at h = a both models give rho = exp(-1). Tolerance: see the module docstring.
    variance, a = 1.0, 8.0
    variances, at_range = [], []
    for seed in SEEDS:
        g = gaussian_field((512, 512), (a, a), variance=variance, covariance=covariance, seed=seed)
        assert g.shape == (512, 512) and g.dtype == np.float64
        variances.append(g.var())
        at_range.append((lag_covariance(g, 8, 0) + lag_covariance(g, 8, 1)) / 2)
    assert np.mean(variances) == pytest.approx(variance, abs=0.06)
    assert np.mean(at_range) == pytest.approx(np.exp(-1.0) * variance, abs=0.06)
    # the field is not white: neighbours are strongly correlated
    rho1 = float(COVARIANCES[covariance](np.array(1.0 / a)))
    assert lag_covariance(g, 1, 1) == pytest.approx(rho1 * variance, abs=0.08)


def test_gaussian_field_anisotropy():
    # Le Ravalec, Noetinger & Hu 2000: one range per axis, rho(|h / a|) with h/a per axis.
    # Ranges 4 (rows) and 16 (columns), variance 2: lag a along each axis -> 2 exp(-1).
    # The integral of rho**2 is pi * 4 * 16 / 2, as for a = 8, so the same tolerance
    # (scaled by the variance) applies.
    variance = 2.0
    along_rows, along_cols, cross = [], [], []
    for seed in SEEDS:
        g = gaussian_field((512, 512), (4.0, 16.0), variance=variance, seed=seed)
        along_rows.append(lag_covariance(g, 4, 0))
        along_cols.append(lag_covariance(g, 16, 1))
        cross.append(lag_covariance(g, 4, 1))
    assert np.mean(along_rows) == pytest.approx(variance * np.exp(-1.0), abs=0.12)
    assert np.mean(along_cols) == pytest.approx(variance * np.exp(-1.0), abs=0.12)
    # lag 4 along the columns is only a quarter range: exp(-1/4)
    assert np.mean(cross) == pytest.approx(variance * np.exp(-0.25), abs=0.12)


def test_gaussian_field_three_d_and_reproducible():
    a = gaussian_field((6, 20, 30), (1.0, 3.0, 5.0), seed=481_220_637)
    b = gaussian_field((6, 20, 30), (1.0, 3.0, 5.0), seed=481_220_637)
    c = gaussian_field((6, 20, 30), (1.0, 3.0, 5.0), seed=481_220_638)
    assert a.shape == (6, 20, 30)
    assert a.flags.c_contiguous
    assert np.array_equal(a, b)
    assert not np.allclose(a, c)
    assert np.isfinite(a).all()


def test_gaussian_field_argument_checks():
    with pytest.raises(ValueError, match="one positive value per axis"):
        gaussian_field((10, 10), (3.0,), seed=555_013_882)
    with pytest.raises(ValueError, match="one positive value per axis"):
        gaussian_field((10, 10), (3.0, 0.0), seed=555_013_882)
    with pytest.raises(KeyError):
        gaussian_field((10, 10), (3.0, 3.0), covariance="spherical", seed=555_013_882)


def test_lognormal_field_geometric_mean_and_sigma():
    # k = g_mean * exp(sigma g): ln k has mean ln g_mean and std sigma. Per the module
    # docstring, std(mean of g) ~ sqrt(2 pi a**2 / n) = 0.02 here and std(var g) ~ 0.014:
    # tolerances 0.12 on ln(geometric mean) (4 std of sigma * mean g) and 5% on sigma.
    target, sigma = 150.0, 1.5
    k = lognormal_field((512, 512), (4.0, 4.0), geometric_mean=target, sigma_ln=sigma,
                        seed=640_997_215)
    assert (k > 0).all()
    assert np.log(np.exp(np.log(k).mean()) / target) == pytest.approx(0.0, abs=0.12)
    assert np.log(k).std() == pytest.approx(sigma, rel=0.05)
    same = lognormal_field((512, 512), (4.0, 4.0), geometric_mean=target, sigma_ln=sigma,
                           seed=640_997_215)
    assert np.array_equal(k, same)
    # the same noise as gaussian_field with the same seed
    g = gaussian_field((512, 512), (4.0, 4.0), seed=640_997_215)
    np.testing.assert_allclose(k, target * np.exp(sigma * g), rtol=1e-14)


def test_channel_field_has_two_facies():
    k_sand, k_shale, sigma = 500.0, 0.5, 0.3
    k = channel_field((128, 256), channels=4, width=10.0, k_sand=k_sand, k_shale=k_shale,
                      sigma_ln=sigma, seed=302_558_461)
    assert k.shape == (1, 128, 256)
    ln_k = np.log(k[0])
    # every cell lies within 5 sigma (ln) of one facies value: P(|g| > 5) ~ 6e-7 per cell
    sand = np.abs(ln_k - np.log(k_sand)) < 5 * sigma
    shale = np.abs(ln_k - np.log(k_shale)) < 5 * sigma
    assert not (sand & shale).any()
    assert (sand | shale).all()
    fraction = sand.mean()
    assert 0.05 < fraction < 0.6
    # channels run along x: sand cells touch sand cells left and right far more than at random
    along = (sand[:, 1:] & sand[:, :-1]).mean() / sand[:, 1:].mean()
    assert along > 0.8
    again = channel_field((128, 256), channels=4, width=10.0, k_sand=k_sand, k_shale=k_shale,
                          sigma_ln=sigma, seed=302_558_461)
    assert np.array_equal(k, again)


def test_layered_field_has_barrier_layers():
    layer_k, k_barrier = (100.0, 20.0, 300.0), 0.01
    k = layered_field((12, 64, 64), layer_k=layer_k, barrier_every=4, k_barrier=k_barrier,
                      sigma_ln=0.2, seed=118_076_443)
    assert k.shape == (12, 64, 64)
    geo = np.exp(np.log(k).mean(axis=(1, 2)))
    for layer in range(12):
        want = k_barrier if layer % 4 == 3 else layer_k[layer % 3]
        # lateral noise sigma 0.2 with range 8 on 64 x 64 cells: mean of ln within ~0.07
        assert np.log(geo[layer] / want) == pytest.approx(0.0, abs=0.3), layer
    barriers = geo[3::4]
    assert barriers.max() < 0.1 * geo[[0, 1, 2, 4, 5, 6, 8, 9, 10]].min()
    again = layered_field((12, 64, 64), layer_k=layer_k, barrier_every=4, k_barrier=k_barrier,
                          sigma_ln=0.2, seed=118_076_443)
    assert np.array_equal(k, again)
