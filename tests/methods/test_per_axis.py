"""Tests of a method per axis (`upscale.methods.registry.find_method`, `coarsen(method=...)`).

What is tested
--------------
* Layers of uniform permeability and unequal thickness upscaled with the
  arithmetic mean along them and the harmonic mean across them pass the
  fine model's flow on all three axes (Bear 1972).
* Each axis's coarse permeability is, bit for bit, what its method gives on
  its own (averages, bounds, flow with sealed sides, renormalization), with
  the options going to the methods that take them; text and mapping agree.
* The refusals, one line each: a malformed text, an axis given twice, left
  out or lacking, a method that upscales transmissibilities directly, flow
  with a full-tensor condition, an option no method of the mix takes.
"""

from __future__ import annotations

import numpy as np
import pytest

from upscale import Field, coarsen
from upscale.check import check_flow
from upscale.errors import InputError
from upscale.gallery.problems import random_layers, uncorrelated_lognormal
from upscale.methods.registry import METHODS, find_method, get_method

SEED = 730_519_864


def test_layers_are_exact_on_every_axis_with_arithmetic_along_and_harmonic_across():
    # Layers in parallel along x and y, in series along z: the thickness-weighted arithmetic and
    # harmonic means are the exact effective permeabilities (Bear 1972, "Dynamics of Fluids in
    # Porous Media", §5.10), so each coarse block with them passes the fine flow on every axis.
    layers = random_layers(6, seed=SEED, thickness=(0.5, 4.0))
    fine = Field.from_arrays(layers.stack(8, 8), cell_size=(10.0, 10.0), dz=layers.thickness)
    result = coarsen(fine, "4x4x3", "xy=arithmetic,z=harmonic")
    checks = check_flow(result.fine, result.transmissibilities(), axes=("x", "y", "z"))
    for axis in "xyz":
        assert abs(checks[axis].rel_error) < 1e-9, axis
    np.testing.assert_allclose(checks["x"].fine.k_eff, layers.along, rtol=1e-9)
    np.testing.assert_allclose(checks["z"].fine.k_eff, layers.across, rtol=1e-9)
    # one method alone fits two axes at most (common practice: why the trade mixes them)
    for alone in ("arithmetic", "harmonic"):
        single = coarsen(fine, "4x4x3", alone)
        errors = check_flow(single.fine, single.transmissibilities(), axes=("x", "y", "z"))
        assert max(abs(c.rel_error) for c in errors.values()) > 0.1


MIXES = [
    ("xy=arithmetic,z=harmonic", {}),
    ("x=geometric,y=power,z=slabs", {"exponent": 0.37}),
    ("xz=tubes,y=flow", {"border": 1}),
    ("xy=flow,z=harmonic", {"bc": "sealed"}),
    ("x=renormalization,yz=arithmetic", {}),
]


@pytest.mark.parametrize("text, options", MIXES)
def test_each_axis_is_bit_equal_to_its_method_alone(text, options):
    k = uncorrelated_lognormal((4, 8, 8), seed=SEED, sigma_ln=1.5)
    fine = Field.from_arrays(k, ky=0.5 * k, kz=0.1 * k, cell_size=(5.0, 5.0),
                             dz=np.array([1.0, 2.0, 0.5, 3.0]))  # fmt: skip
    mixed = coarsen(fine, "4x4x2", text, **options)
    assert mixed.method == find_method(text).name
    assert not mixed.tensor  # the diagonal terms only
    for group in text.split(","):
        axes, name = group.split("=")
        taken = {o: v for o, v in options.items() if o in METHODS[name].options}
        alone = coarsen(fine, "4x4x2", name, **taken)
        for axis in axes:
            name_k = f"k{axis}"
            np.testing.assert_array_equal(getattr(mixed.coarse, name_k), getattr(alone.coarse, name_k))


def test_a_mapping_and_any_order_name_the_same_method():
    k = uncorrelated_lognormal((2, 4, 4), seed=SEED)
    fine = Field.from_arrays(k, dz=1.0)
    by_text = coarsen(fine, "2x2x2", "z = harmonic, xy = arithmetic")
    by_mapping = coarsen(fine, "2x2x2", {"xy": "arithmetic", "z": "harmonic"})
    assert by_text.method == by_mapping.method == "xy=arithmetic,z=harmonic"
    np.testing.assert_array_equal(by_text.coarse.kz, by_mapping.coarse.kz)
    # one method for every axis is that method
    assert coarsen(fine, "2x2x2", "xyz=geometric").method == "geometric"


def test_the_mix_is_a_bound_only_when_all_its_methods_are_the_same_bound():
    assert find_method("xy=arithmetic,z=slabs").bound == "upper"
    assert find_method("xy=arithmetic,z=harmonic").bound is None
    assert find_method("xy=arithmetic,z=harmonic").takes_zeros({}) is False
    assert find_method("xy=arithmetic,z=tubes").takes_zeros({}) is True


@pytest.mark.parametrize(
    "text, options, message",
    [
        ("xy=arithmetic,q=harmonic", {}, r"method per axis 'xy=arithmetic,q=harmonic': write groups of axes"),
        ("xy=arithmetic,z", {}, r"write groups of axes and a method, as xy=arithmetic,z=harmonic"),
        ("xy=arithmetic,yz=harmonic", {}, r"axis y is given twice"),
        ("xy=arithmetic,z=median", {}, r"unknown method 'median'"),
        ("xy=arithmetic,z=flow-transmissibility", {}, r"'flow-transmissibility' cannot serve some axes only"),
        ("xy=global,z=harmonic", {}, r"'global' cannot serve some axes only: it upscales the coarse"),
        ("xy=arithmetic,z=local-global", {}, r"'local-global' cannot serve some axes only"),
        ("xy=arithmetic,z=flow", {"bc": "periodic"},
         r"`bc` periodic gives a full tensor, whose cross terms couple the axes; .* `bc=sealed` only"),
        ("xy=arithmetic,z=harmonic", {"exponent": 0.5}, r"takes no option exponent"),
        ("xy=arithmetic,z=power", {}, r"needs `exponent`"),
    ],
)
def test_refusals_are_one_line(text, options, message):
    with pytest.raises(InputError, match=message) as caught:
        get_method(text, options)
    assert "\n" not in str(caught.value)


def test_every_axis_of_the_field_and_no_other():
    k = uncorrelated_lognormal((2, 4, 4), seed=SEED)
    message = r"'xy=arithmetic' names no method for axis z; name one for every axis"
    with pytest.raises(InputError, match=message):
        coarsen(Field.from_arrays(k, dz=1.0), "2x2x2", "xy=arithmetic")
    with pytest.raises(InputError, match=r"names axis z, which the field lacks \(its axes: x, y\)"):
        coarsen(k[0], "2x2", "x=arithmetic,y=harmonic,z=harmonic")
