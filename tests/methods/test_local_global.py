"""Tests of the local–global method (`upscale.methods.local_global`, `upscale.flow.extended`).

What is tested
--------------
* The linear functionals of an extended region reproduce a direct solve of
  the same region under any boundary pressures (linearity, superposition).
* Layered fields: the coarse model passes exactly the fine flow along
  (arithmetic mean) and across (harmonic mean) the layers (Bear 1972).
* A field already coarse (every block uniform) gives the harmonic
  half-block transmissibilities with closed sides.
* The iteration converges with bounded iterations on lognormal and channel
  fields with contrasts up to 1e4; summary.json records it.
* On binary channel maps local–global beats flow-transmissibility in most
  seeds, and `compare` ranks it beside the others.
* The faces are the same from one chunk or many, and the fine field is never
  held whole: no task of the dask graph returns an array as large as it.
* An iteration that does not converge stops with one message naming the last change.
"""

from __future__ import annotations

import json

import numpy as np
import pytest
from click.testing import CliRunner

from upscale import Field, coarsen
from upscale.check.axis import check_flow
from upscale.cli.main import cli
from upscale.flow.extended import outer_faces, region_functionals
from upscale.flow.local import band_order
from upscale.flow.solvers import ConvergenceError
from upscale.gallery.fields import channel_field, lognormal_field
from upscale.gallery.problems import random_layers


def _direct_region(t: np.ndarray, b: np.ndarray, shape: tuple, mid: int) -> tuple[float, float, float]:
    """Flux through the face before column `mid` and the two halves' mean pressures, by one sparse solve.

    The region is a map (z left out) with every outer face at the pressures `b` (order of `outer_faces`).
    """
    from scipy.sparse import lil_matrix
    from scipy.sparse.linalg import spsolve

    _, rows, cols = shape
    n = rows * cols
    A, rhs = lil_matrix((n, n)), np.zeros(n)
    cell, axis, _ = outer_faces(shape, np.array([False, True, True]))
    for f in range(cell.size):
        c = cell[f]
        A[c, c] += t[axis[f], c]
        rhs[c] += t[axis[f], c] * b[f]
    for a, step in ((1, cols), (2, 1)):
        for c in range(n):
            m = c + step
            if (a == 1 and m < n) or (a == 2 and (c % cols) + 1 < cols):
                T = t[a, c] * t[a, m] / (t[a, c] + t[a, m])
                A[c, c] += T
                A[m, m] += T
                A[c, m] -= T
                A[m, c] -= T
    p = spsolve(A.tocsr(), rhs).reshape(rows, cols)
    tx = t[2].reshape(rows, cols)
    T = tx[:, mid - 1] * tx[:, mid] / (tx[:, mid - 1] + tx[:, mid])
    return float(np.sum(T * (p[:, mid - 1] - p[:, mid]))), p[:, :mid].mean(), p[:, mid:].mean()


def test_functionals_agree_with_a_direct_solve_under_any_boundary_pressures():
    # linearity of the steady pressure equation (superposition): common practice
    rng = np.random.default_rng(734_112_901)
    shape, mid, axes = (1, 5, 6), 3, np.array([False, True, True])
    t = np.exp(rng.normal(0.0, 1.5, (3, 30)))
    t[0] = 0.0
    order, width = band_order(shape, False)
    fixed = np.ones((1, 2, 3), bool)
    coefficients = region_functionals(t[None], np.ones((1, 3, 6)), np.array(shape), np.zeros((1, 3), int),
                                      np.array([mid]), np.array([[1, 5, 6]]), 2, fixed, order, width, axes)
    for _ in range(3):
        b = rng.uniform(-1.0, 2.0, coefficients.shape[2])
        want = _direct_region(t, b, shape, mid)
        np.testing.assert_allclose(coefficients[0] @ b, want, rtol=1e-10, atol=1e-12)


@pytest.mark.parametrize(("border", "sides"), [(0, "pressure"), (2, "pressure"), (0, "closed")])
def test_layered_fields_pass_the_exact_flow_along_and_across(border, sides):
    # Bear 1972, "Dynamics of Fluids in Porous Media", §5.10: arithmetic along, harmonic across
    layers = random_layers(32, seed=561_204_877, sigma_ln=2.0)
    field = Field.from_arrays(layers.rows(32))
    result = coarsen(field, "8x8", "local-global", border=border, sides=sides)
    check = check_flow(field, result.transmissibilities())
    assert check["x"].coarse.k_eff == pytest.approx(layers.along, rel=1e-10)
    assert check["y"].coarse.k_eff == pytest.approx(layers.across, rel=1e-10)
    assert result.coupling.iterations <= 3


def test_layered_model_passes_the_exact_flow_in_3d():
    # Bear 1972, "Dynamics of Fluids in Porous Media", §5.10: arithmetic along, harmonic across
    layers = random_layers(16, seed=771_203_455, sigma_ln=2.0)
    field = Field.from_arrays(layers.stack(16, 16), dz=1.0)
    result = coarsen(field, "4x4x4", "local-global", border=1)
    check = check_flow(field, result.transmissibilities())
    assert check["x"].coarse.k_eff == pytest.approx(layers.along, rel=1e-10)
    assert check["z"].coarse.k_eff == pytest.approx(layers.across, rel=1e-10)


def test_a_field_already_coarse_gives_the_harmonic_half_block_rule_with_closed_sides():
    # harmonic half-block rule of two-point flux: Aziz & Settari 1979, "Petroleum Reservoir Simulation"
    # (with pressure on the sides the faces move away from it, towards the fine flow: docs/methods.md)
    rng = np.random.default_rng(298_113_645)
    k = np.kron(np.exp(rng.normal(0.0, 2.0, (6, 5))), np.ones((4, 4)))
    field = Field.from_arrays(k, cell_size=(2.0, 3.0))
    found = coarsen(field, "4x4", "local-global", sides="closed").transmissibilities()
    harmonic = coarsen(field, "4x4", "harmonic").transmissibilities()
    for a in (1, 2):
        np.testing.assert_allclose(found.faces[a], harmonic.faces[a], rtol=1e-10)


@pytest.mark.slow
@pytest.mark.parametrize("contrast", [1e2, 1e4])
def test_the_iteration_converges_on_lognormal_and_channel_fields(contrast):
    # Chen, Durlofsky, Gerritsen & Wen 2003: the iteration settles in a few steps
    # (from memory; bounded here)
    sigma = np.log(contrast) / 4  # about 95 % of ln k within ±2σ: max/min about the contrast
    fields = [lognormal_field((64, 64), (8.0, 16.0), geometric_mean=10.0, sigma_ln=sigma,
                              seed=645_019_337)[None],
              channel_field((64, 64), channels=4, width=5, k_sand=contrast, k_shale=1.0, seed=871_552_903)]
    for k in fields:
        result = coarsen(Field.from_arrays(k), "8x8", "local-global", border=2)
        assert result.coupling.iterations <= 100
        assert result.coupling.change < 1e-2


def test_summary_records_the_iteration_and_one_that_does_not_converge_stops_with_one_line(tmp_path):
    k = channel_field((64, 64), channels=4, width=5, k_sand=100.0, k_shale=1.0, seed=871_552_903)[0]
    source = tmp_path / "k.npy"
    np.save(source, k)
    out = tmp_path / "run"
    done = CliRunner().invoke(cli, ["run", str(source), "--block", "8x8", "--method", "local-global",
                                    "--border", "2", "--cell-size", "1", "--out", str(out)])  # fmt: skip
    assert done.exit_code == 0, done.output
    faces = json.loads((out / "summary.json").read_text())["transmissibility"]
    assert faces["iterations"] >= 1 and faces["last_change"] < 1e-2 and faces["kept_faces"] >= 0
    with pytest.raises(ConvergenceError, match="still changed by"):
        coarsen(Field.from_arrays(k), "8x8", "local-global", border=2, max_iterations=1, max_change=1e-12)


@pytest.mark.slow
def test_local_global_beats_two_block_transmissibilities_on_channel_maps_in_most_seeds():
    # Chen, Durlofsky, Gerritsen & Wen 2003 report local–global closer to the fine flow than local
    # methods on channelized layers. Measured here (128x128, 6 channels, border 2, 5 seeds each of
    # 100:1 and 1000:1 with 8x8 and 16x16 blocks): better on the largest-axis error in 19 of 20 cases
    # (docs/methods.md); this test takes the 100:1, 8x8 seeds (5 of 5 there: 8-22 % against 47-54 %).
    wins = 0
    seeds = (20_231, 38_117, 51_473, 77_711, 90_001)
    for seed in seeds:
        field = Field.from_arrays(channel_field((128, 128), channels=6, width=5, k_sand=100.0, k_shale=1.0,
                                                seed=seed))  # fmt: skip
        errors = []
        for method in ("flow-transmissibility", "local-global"):
            check = check_flow(field, coarsen(field, "8x8", method, border=2).transmissibilities())
            errors.append(max(abs(c.rel_error) for c in check.values()))
        wins += errors[1] < errors[0]
    assert wins > len(seeds) / 2


def test_compare_ranks_local_global_beside_the_others_on_a_channel_map():
    # the ranking's own rule (largest check error first); on 100:1 channel maps local–global is the
    # better of the two here (docs/methods.md: 10 of 10 such maps)
    from upscale.analysis.compare import candidates, compare_methods

    field = Field.from_arrays(channel_field((128, 128), channels=6, width=5, k_sand=100.0, k_shale=1.0,
                                            seed=77_711))  # fmt: skip
    found = compare_methods(field, "8x8", candidates(["flow-transmissibility", "local-global"], border=2))
    assert [e.candidate.label for e in found.ranked] == ["local-global (sealed, border 2)",
                                                         "flow-transmissibility (sealed, border 2)"]
    alone = coarsen(field, "8x8", "local-global", border=2)
    check = check_flow(field, alone.transmissibilities())
    assert found.ranked[0].checks["x"].rel_error == pytest.approx(check["x"].rel_error, rel=1e-9)


def test_the_same_faces_from_one_chunk_or_many():
    # chunking never changes results (DEVELOPERS.md: kernels on chunks, bit for bit the same)
    import dask.array as da

    k = channel_field((64, 64), channels=4, width=5, k_sand=100.0, k_shale=1.0, seed=871_552_903)
    whole = coarsen(Field.from_arrays(k), "8x8", "local-global", border=2).transmissibilities()
    chunked = coarsen(Field.from_arrays(da.from_array(k, chunks=(1, 32, 32))), "8x8", "local-global",
                      border=2).transmissibilities()  # fmt: skip
    for a in (1, 2):
        assert np.array_equal(whole.faces[a], chunked.faces[a])


def test_the_fine_field_is_never_held_whole():
    # out of core: every task works on a chunk and its border (DEVELOPERS.md: memory bounded by the chunk)
    import dask
    import dask.array as da
    from dask.callbacks import Callback

    k = lognormal_field((256, 256), (8.0, 8.0), geometric_mean=10.0, sigma_ln=1.0, seed=310_577_201)[None]
    largest = []

    class Sizes(Callback):
        def _posttask(self, key, result, dsk, state, id):
            largest.append(result.nbytes if isinstance(result, np.ndarray) else 0)

    with Sizes(), dask.config.set(scheduler="threads"):
        chunked = coarsen(Field.from_arrays(da.from_array(k, chunks=(1, 32, 32))), "8x8", "local-global",
                          border=2)  # fmt: skip
    assert chunked.coupling.iterations >= 1
    assert 0 < max(largest) <= k.nbytes / 4  # a chunk of 32 x 32 with its border of 3 blocks: 80 x 80 cells
    whole = coarsen(Field.from_arrays(k), "8x8", "local-global", border=2).transmissibilities()
    for a in (1, 2):
        assert np.array_equal(whole.faces[a], chunked.transmissibilities().faces[a])
