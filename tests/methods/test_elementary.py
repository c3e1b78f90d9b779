"""The vectorisable ``ln`` and ``exp`` of the compiled kernels agree with NumPy's.

NumPy's ``log`` and ``exp`` (the platform's correctly rounded-or-nearly
library functions) are the reference; the kernels' versions must stay
within a few units in the last place over the whole range a permeability
in any unit can take, and saturate like IEEE arithmetic at the ends.
"""

from __future__ import annotations

import numba as nb
import numpy as np
import pytest

from upscale._elementary import exp, ln


@nb.njit(error_model="numpy")
def _apply_ln(x):
    out = np.empty_like(x)
    for i in range(x.size):
        out[i] = ln(x[i])
    return out


@nb.njit(error_model="numpy")
def _apply_exp(x):
    out = np.empty_like(x)
    for i in range(x.size):
        out[i] = exp(x[i])
    return out


def test_ln_matches_numpy_from_1e_minus_300_to_1e_300():
    rng = np.random.default_rng(88_410_237)
    x = 10.0 ** rng.uniform(-300, 300, 200_000)
    x = np.concatenate([x, [1.0, 2.0, 0.5, np.sqrt(2.0), np.nextafter(1.0, 2.0), 1e-30, 1e30]])
    got, want = _apply_ln(x), np.log(x)
    # absolute error near ln = 0 (x near 1), relative error elsewhere: a few ulp
    assert np.all(np.abs(got - want) <= 4 * np.spacing(np.maximum(np.abs(want), 1.0)))


def test_exp_matches_numpy_over_the_float64_range():
    rng = np.random.default_rng(23_905_114)
    x = np.concatenate([rng.uniform(-708.3, 709.7, 200_000), np.linspace(709.0, 709.78, 500),
                        [0.0, 1.0, -1.0, 1e-12, -1e-12]])  # fmt: skip
    got, want = _apply_exp(x), np.exp(x)
    assert np.all(np.abs(got - want) <= 2 * np.spacing(want))


@pytest.mark.parametrize("x, expected", [(710.0, np.inf), (1e6, np.inf), (-710.0, 0.0), (-1e6, 0.0)])
def test_exp_saturates_like_ieee(x, expected):
    assert _apply_exp(np.array([x]))[0] == expected


def test_power_through_ln_and_exp_matches_numpy_power():
    rng = np.random.default_rng(71_554_902)
    k = rng.lognormal(3.0, 2.5, 100_000)
    for w in (-0.7, 1 / 3, 0.57, 2.0):
        got = _apply_exp(w * _apply_ln(k))
        np.testing.assert_allclose(got, k**w, rtol=2e-14)
