"""Tests of the method registry `upscale.methods.registry`.

What is tested
--------------
* `METHODS` names the nine methods with the right kernels, directional flags,
  zero-permeability rules and option defaults.
* `get_method` refuses unknown methods, unknown options and missing required
  options, drops options given as None and keeps only the method's own.
* Every registered average follows the common call convention and leaves a
  constant field unchanged, edge blocks and (for the averages) inactive
  cells included (the local-solve methods are tested in test_flow_based.py).
"""

from __future__ import annotations

import numpy as np
import pytest

from upscale import METHODS as PUBLIC_METHODS
from upscale.errors import InputError
from upscale.methods import averages, bounds
from upscale.methods.registry import METHODS, Method, get_method

OPTIONS = {"power": {"exponent": 0.57}}


def test_method_names_and_kernels():
    assert PUBLIC_METHODS is METHODS
    assert list(METHODS) == ["arithmetic", "harmonic", "geometric", "power", "tubes", "slabs", "flow",
                             "flow-transmissibility", "global", "renormalization",
                             "local-global"]  # fmt: skip
    assert {n for n, m in METHODS.items() if m.local} == {
        "flow", "flow-transmissibility", "global", "renormalization", "local-global"}  # fmt: skip
    assert {n for n, m in METHODS.items() if m.global_flows} == {"global"}
    assert METHODS["arithmetic"].kernel.rule is averages.arithmetic_mean
    assert METHODS["harmonic"].kernel.rule is averages.harmonic_mean
    assert METHODS["geometric"].kernel.rule is averages.geometric_mean
    assert METHODS["power"].kernel.rule is averages.power_mean
    assert METHODS["tubes"].kernel.rule is bounds.tubes_bound
    assert METHODS["slabs"].kernel.rule is bounds.slabs_bound
    for name, method in METHODS.items():
        assert isinstance(method, Method)
        assert method.name == name
        assert method.summary


def test_only_the_bounds_are_directional():
    assert {n for n, m in METHODS.items() if m.directional} == {"tubes", "slabs"}


def test_options_declared():
    assert METHODS["power"].options == ("exponent",)
    assert METHODS["flow"].options == METHODS["flow-transmissibility"].options == ("bc", "border")
    assert METHODS["local-global"].options == ("bc", "border", "sides", "max_change", "max_iterations")
    others = {"power", "flow", "flow-transmissibility", "local-global"}
    assert all(m.options == () for n, m in METHODS.items() if n not in others)


def test_local_methods_fill_in_their_defaults():
    assert get_method("flow")[1] == {"bc": "sealed", "border": 0}
    assert get_method("flow", {"border": 3, "bc": None})[1] == {"bc": "sealed", "border": 3}
    assert get_method("flow-transmissibility", {"bc": "periodic"})[1] == {"bc": "periodic", "border": 0}
    with pytest.raises(InputError, match="takes no option border"):
        get_method("renormalization", {"border": 2})


@pytest.mark.parametrize(
    "name, options, accepted",
    [
        ("arithmetic", {}, True),
        ("tubes", {}, True),
        ("slabs", {}, True),
        ("harmonic", {}, False),
        ("geometric", {}, False),
        ("power", {"exponent": 0.5}, True),
        ("power", {"exponent": 1e-9}, True),
        ("power", {"exponent": 0.0}, False),
        ("power", {"exponent": -0.5}, False),
    ],
)
def test_takes_zeros(name, options, accepted):
    # A zero cell makes the harmonic, geometric and ω <= 0 power averages zero
    # whatever the other cells hold (common practice).
    assert METHODS[name].takes_zeros(options) is accepted


def test_get_method_returns_method_and_its_options():
    method, options = get_method("power", {"exponent": -0.25})
    assert method is METHODS["power"]
    assert options == {"exponent": -0.25}
    method, options = get_method("tubes")
    assert method is METHODS["tubes"] and options == {}
    # options given as None count as not given
    assert get_method("geometric", {"exponent": None}) == (METHODS["geometric"], {})


def test_get_method_unknown_name_lists_the_choices():
    with pytest.raises(InputError, match=r"unknown method 'median'; choose one of arithmetic, "):
        get_method("median")
    with pytest.raises(ValueError, match="slabs"):  # InputError is also a ValueError
        get_method("Arithmetic")


def test_get_method_refuses_options_it_does_not_take():
    with pytest.raises(InputError, match=r"method 'harmonic' takes no option exponent"):
        get_method("harmonic", {"exponent": 0.5})
    with pytest.raises(InputError, match=r"method 'power' takes no option alpha, beta"):
        get_method("power", {"exponent": 0.5, "beta": 1, "alpha": 2})


def test_get_method_needs_required_options():
    with pytest.raises(InputError, match=r"method 'power' needs `exponent`"):
        get_method("power")
    with pytest.raises(InputError, match=r"needs `exponent`"):
        get_method("power", {"exponent": None})


def _constant_field(shape, c, nan_fraction, seed):
    rng = np.random.default_rng(seed)
    k = np.full(shape, c)
    k[rng.random(shape) < nan_fraction] = np.nan
    return k


@pytest.mark.parametrize("name", [n for n, m in METHODS.items() if not m.local])
@pytest.mark.parametrize("axis", [0, 1, 2])
def test_every_method_leaves_a_constant_field_unchanged(name, axis):
    # Edge blocks: the shape (5, 11, 13) does not divide into (2, 4, 5) blocks.
    c = 37.25
    dz = np.array([0.5, 3.0, 1.0, 2.0, 0.1])
    k = np.full((5, 11, 13), c)
    got = METHODS[name].kernel.rule(k, dz, (2, 4, 5), axis, **OPTIONS.get(name, {}))
    assert got.shape == (3, 3, 3)
    np.testing.assert_allclose(got, c, rtol=1e-13)


@pytest.mark.parametrize("name", [n for n, m in METHODS.items() if not (m.directional or m.local)])
def test_every_average_leaves_a_constant_field_with_inactive_cells_unchanged(name):
    c = 0.042
    dz = np.array([0.5, 3.0, 1.0, 2.0, 0.1])
    k = _constant_field((5, 11, 13), c, 0.3, 505_061_772)
    got = METHODS[name].kernel.rule(k, dz, (2, 4, 5), 2, **OPTIONS.get(name, {}))
    active = ~np.isnan(got)
    assert active.sum() > 20
    np.testing.assert_allclose(got[active], c, rtol=1e-13)


@pytest.mark.parametrize("name", [n for n, m in METHODS.items() if m.directional])
def test_bounds_of_a_constant_field_with_inactive_cells_only_lose_flow(name):
    # Inactive cells are impermeable for the bounds: a constant field with holes
    # passes at most c (and exactly c in blocks without holes).
    c = 5.0
    dz = np.array([0.5, 3.0, 1.0])
    k = np.full((3, 8, 8), c)
    k[1, 2, 6] = k[0, 5, 1] = k[2, 7, 7] = np.nan
    got = METHODS[name].kernel.rule(k, dz, (3, 4, 4), 2)
    holes = np.isnan(k).reshape(1, 3, 2, 4, 2, 4).any(axis=(1, 3, 5))
    assert holes.any() and not holes.all()
    np.testing.assert_allclose(got[~holes], c, rtol=1e-13)
    assert np.all(got[holes] < c)
