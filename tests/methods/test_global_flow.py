"""Tests of ``global``: coarse transmissibilities fitted to the fine model's global flows.

What is tested
--------------
* Layered media (2D rows as layers; 3D layers in z of unequal thickness):
  the coarse model of ``global`` passes exactly the fine flow along the
  layers (arithmetic mean) and across them (harmonic mean) to 1e-10, and its
  faces along the layers are the arithmetic block value's k A / L (Bear 1972).
* A field that is already coarse (every block uniform) and varies along one
  axis: the faces and outer faces are the harmonic half-block ones to 1e-10;
  varying along both axes, they are not (the fine flow inside a uniform block
  is then not one-dimensional) and the coarse model passes the fine flow
  closer than the harmonic rule does.
* Correlated lognormal fields (σ(ln k) 1 and 2): the coarse model reproduces
  the fine flow of each axis flow it was fitted on within 1.5 % (measured
  0.03-0.99 % on these seeds, 8x8 blocks), and better than
  ``flow-transmissibility`` (1.1-6.0 % on them).
* Faces with a negligible pressure difference in every flow (a dead-end
  pocket) take the harmonic value and are counted in ``replaced_faces``;
  faces no conducting fine face crosses are closed.
* The flows: given flows are used as given (bit-identical to solving them
  inside `coarsen`), a held-out flow beside them is ignored, flows of another
  grid are refused.
"""

from __future__ import annotations

import numpy as np
import pytest

from upscale import Field, coarsen
from upscale.check.axis import coarse_check, fine_solves
from upscale.errors import InputError
from upscale.flow import transmissibilities
from upscale.gallery.fields import lognormal_field
from upscale.gallery.problems import random_layers

SEED = 736_219_405


def _check(result, flows):
    """Errors of the coarse model under the axis flows `result` was fitted on (not the held-out ones)."""
    checks = coarse_check(flows, result.transmissibilities())
    return {axis: c.rel_error for axis, c in checks.items() if axis in result.fine.axes}


def test_layers_in_a_map_pass_the_arithmetic_and_harmonic_means_exactly():
    # Bear 1972, "Dynamics of Fluids in Porous Media": flow along layers sees the
    # thickness-weighted arithmetic mean, across them the harmonic mean
    layers = random_layers(16, seed=SEED)
    fine = Field.from_arrays(layers.rows(24), cell_size=(2.0, 1.0))  # rows are the layers, along x
    result = coarsen(fine, "4x4", "global")
    flows = fine_solves(result.fine, fine.axes, solver="direct")
    for axis, expected in (("x", layers.along), ("y", layers.across)):
        coarse = coarse_check(flows, result.transmissibilities(), solver="direct")[axis].coarse.k_eff
        assert coarse == pytest.approx(expected, rel=1e-10)
    # inner faces along x: the arithmetic mean of each block's four rows, times A / L
    blocks = layers.k.reshape(4, 4).mean(axis=1)
    along = blocks[:, None] * (4 * 1.0) / (4 * 2.0)  # k (rows 4 x 1 m high, 1 m thick) / (4 cells of 2 m)
    np.testing.assert_allclose(result.transmissibilities().faces[2][0], np.broadcast_to(along, (4, 5)),
                               rtol=1e-10)  # fmt: skip
    assert result.replaced_faces == 0


def test_layers_of_a_model_pass_the_means_along_and_across_exactly():
    # Bear 1972: layers in z of unequal thickness, kz = kx / 10
    layers = random_layers(8, seed=SEED + 1, thickness=(0.5, 3.0))
    k = layers.stack(8, 8)
    fine = Field.from_arrays(k, kz=k / 10, dz=layers.thickness, cell_size=(5.0, 5.0))
    result = coarsen(fine, "4x4x2", "global")
    checks = coarse_check(fine_solves(result.fine, fine.axes), result.transmissibilities())
    assert checks["x"].coarse.k_eff == pytest.approx(layers.along, rel=1e-10)
    assert checks["y"].coarse.k_eff == pytest.approx(layers.along, rel=1e-10)
    across = layers.thickness.sum() / np.sum(layers.thickness / (layers.k / 10))
    assert checks["z"].coarse.k_eff == pytest.approx(across, rel=1e-10)


@pytest.mark.parametrize("axis", [1, 2])
def test_blocks_uniform_along_one_axis_get_the_harmonic_half_block_faces(axis):
    # already coarse: the fine flow in each uniform block is one-dimensional, the two-point
    # harmonic rule is then exact (docs/discretisation.md; common practice)
    values = np.exp(np.random.default_rng(SEED).normal(0.0, 1.5, 6))
    blocks = np.broadcast_to(values[:, None] if axis == 1 else values[None, :5], (6, 5))
    fine = Field.from_arrays(np.kron(blocks, np.ones((4, 4))), cell_size=(3.0, 2.0))
    result = coarsen(fine, "4x4", "global")
    found, harmonic = result.transmissibilities(), transmissibilities(result.coarse)
    for a in (1, 2):
        np.testing.assert_allclose(found.faces[a], harmonic.faces[a], rtol=1e-10)
        for side, rule in zip(found.boundary[a], harmonic.boundary[a]):
            np.testing.assert_allclose(side, rule, rtol=1e-10)


def test_blocks_uniform_in_two_dimensions_pass_the_fine_flow_better_than_the_harmonic_rule():
    blocks = np.exp(np.random.default_rng(SEED + 2).normal(0.0, 1.5, (6, 5)))
    fine = Field.from_arrays(np.kron(blocks, np.ones((4, 4))))
    flows = fine_solves(fine, fine.axes)
    found = _check(coarsen(fine, "4x4", "global", flows=flows), flows)
    harmonic = _check(coarsen(fine, "4x4", "arithmetic"), flows)  # the uniform blocks' own values
    assert max(map(abs, found.values())) < max(map(abs, harmonic.values()))


@pytest.mark.parametrize("sigma", [1.0, 2.0])
@pytest.mark.parametrize("seed", [SEED, 5_521_093])
def test_lognormal_fields_pass_the_flows_they_were_fitted_on(sigma, seed):
    # the tolerance is ours, measured: 0.03-0.99 % on these fields (8 x 8 blocks, correlation
    # length 16 cells, 128 x 128 cells; the largest at σ = 2); the two-block values: 1.1-6.0 %
    k = lognormal_field((128, 128), (16, 16), geometric_mean=100.0, sigma_ln=sigma, seed=seed)
    fine = Field.from_arrays(k)
    flows = fine_solves(fine, fine.axes)
    found = _check(coarsen(fine, "8x8", "global", flows=flows), flows)
    local = _check(coarsen(fine, "8x8", "flow-transmissibility"), flows)
    assert max(map(abs, found.values())) < 0.015
    assert max(map(abs, found.values())) < max(map(abs, local.values()))


def _pocket() -> np.ndarray:
    """A 32 x 32 map of k = 1 with a closed ring (k = 0) round cells 8-23, open at one cell."""
    k = np.ones((32, 32))
    k[7, 7:25] = k[24, 7:25] = k[7:25, 7] = k[7:25, 24] = 0.0
    k[7, 12] = 1.0  # the opening: the pocket is a dead end, at one pressure in every flow
    return k


def test_faces_without_a_pressure_difference_fall_back_and_are_counted():
    result = coarsen(_pocket(), "4x4", "global")
    # the 4 x 4 blocks inside the pocket: 3 x 4 faces along x and as many along y, each with
    # no pressure difference in either flow, and the opening, through which nothing flows into
    # the dead end (a fit of 0), take the harmonic value of their blocks
    assert result.replaced_faces == 24 + 1
    found, harmonic = result.transmissibilities(), transmissibilities(result.coarse)
    inside = (0, slice(2, 6), slice(2, 5))
    np.testing.assert_array_equal(found.faces[2][inside], harmonic.faces[2][inside])
    assert not result.direct_faces[2][inside].any() and result.direct_faces[2][0, 0].all()
    assert found.faces[1][0, 1, 3] == harmonic.faces[1][0, 1, 3] and not result.direct_faces[1][0, 1, 3]
    # across the ring, where no fine face conducts: closed
    assert found.faces[1][0, 1, 2] == 0.0 and found.faces[2][0, 3, 1] == 0.0

def test_given_flows_are_used_and_a_held_out_one_is_ignored():
    k = lognormal_field((64, 64), (8, 8), geometric_mean=10.0, sigma_ln=1.5, seed=SEED)
    fine = Field.from_arrays(k)
    flows = fine_solves(fine, fine.axes)
    alone = coarsen(fine, "8x8", "global")
    given = coarsen(fine, "8x8", "global", flows={**flows, "corner": flows["x"]})
    for a in (1, 2):
        got, want = given.transmissibilities().faces[a], alone.transmissibilities().faces[a]
        np.testing.assert_array_equal(got, want)


def test_flows_of_another_grid_are_refused():
    k = lognormal_field((64, 64), (8, 8), geometric_mean=10.0, sigma_ln=1.0, seed=SEED)
    other = Field.from_arrays(k[:32])
    with pytest.raises(InputError, match="solved on a grid of"):
        coarsen(k, "8x8", "global", flows=fine_solves(other, other.axes))
