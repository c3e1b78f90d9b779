"""Global upscaling: coarse face transmissibilities fitted to the fine model's own global flows.

Local methods solve each block (or pair of blocks) under boundary conditions
of their own choosing, which cannot know how a channel connects beyond the
box. Global upscaling takes the fine model's solutions of the whole field
instead — here the pressure drops along every axis that the flow check
solves anyway (`upscale.flow.pressure_drop`: p = 1 on the inlet face, p = 0
on the outlet face, other faces closed) — and chooses each coarse face's
transmissibility so that the coarse two-point flux matches the fine flux
through that face (Holden & Nielsen 2000, "Global upscaling of permeability
in heterogeneous reservoirs; the output least squares (OLS) method"; cited
from memory). For a face between blocks I and J and each flow f:

* ``q_f`` — the fine flux through the face: the sum over the fine faces on
  it of the fine T times the fine pressure difference across it;
* ``Δp_f = p̄_I - p̄_J`` — the difference of the blocks' volume-averaged fine
  pressures (over the cells the flow solved: active and connected to a
  fixed-pressure face).

The face gets the least-squares fit of ``q_f = T Δp_f`` over the flows,
``T = Σ q_f Δp_f / Σ Δp_f²``: each flow weighs by its pressure difference,
so the flow along the face's own axis leads and the cross flows correct it.
The half transmissibility of a block to an outer face is fitted the same way
against the face's fixed pressure, ``T = q / (p_face - p̄)``, from the one
flow that fixes it (the flow along that axis).

Only the axis flows are fitted (a held-out flow in the same dictionary is
left alone). A face whose ``|Δp_f|`` is at most `NEGLIGIBLE` in every flow
(or whose flux is at most `NEGLIGIBLE` of the flow's rate: rounding, as in a
flow that does not connect its two faces), or whose fit is not positive
(the fine flux runs against the coarse pressure difference), is left
undefined and takes the harmonic half-block value of the block
permeabilities (the fallback, counted in ``replaced_faces``). A face that no
conducting fine face crosses gets 0. The block permeabilities (``kx``,
``ky``, ``kz``) are those of the ``flow`` method with sealed sides.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from ..errors import InputError
from ..field import AXES, Field
from ..flow import AxisFlow, pressure_drop, transmissibilities
from ..grid.blocks import Size, axis_edges
from .flow_based import flow_properties

#: A flow's coarse pressure difference at a face counts only above this fraction of the flow's
#: whole pressure drop (1 for the axis flows): ten thousand times the solves' default relative
#: residual, so rounding of the fine pressures never decides a face (our choice).
NEGLIGIBLE = 1e-6


def global_properties(field: Field, cells: tuple[Size, int, int], *,
                      flows: dict[str, AxisFlow] | None = None) -> dict[str, Any]:  # fmt: skip
    """Sealed flow-based block tensors, and face transmissibilities fitted to global fine flows.

    Parameters
    ----------
    field, cells
        As in `upscale.methods.flow_based.flow_properties`.
    flows : dict of str to AxisFlow, optional
        The fine pressure-drop solves along the field's axes (the flow
        check's, `upscale.check.fine_solves`), on the same grid; other keys
        (held-out flows) are ignored. An axis without one is solved here.

    Returns
    -------
    dict
        ``"tensor"`` as in `upscale.methods.flow_based.flow_properties`
        (sealed sides, no border), lazy; ``"faces"``: an ndarray of shape
        (6, L', M', N') laid out as in
        `upscale.methods.flow_based.face_transmissibility_chunk`, in
        (unit of k) · m, NaN where the fit is undefined.

    Raises
    ------
    InputError
        If a flow was solved on another grid than `field`'s.

    Examples
    --------
    >>> layers = np.tile([[1.0], [4.0]], (2, 4))   # rows of 1 and 4 (1 m cells): layers along x
    >>> faces = global_properties(Field.from_arrays(layers), (1, 2, 2))["faces"]
    >>> faces[2, 0].round(12).tolist()   # along x: to the inlet face, then between the blocks
    [[5.0, 2.5], [5.0, 2.5]]
    """
    properties = flow_properties(field, cells)
    properties["faces"] = fitted_faces(_axis_flows(field, flows), cells)
    return properties


def _axis_flows(field: Field, flows: dict[str, AxisFlow] | None) -> list[AxisFlow]:
    """The axis flows of `field`: the given ones, and a solve for each axis without one."""
    flows = flows or {}
    for name, flow in flows.items():
        if name in field.axes and flow.pressure.shape != field.shape:
            raise InputError(
                f"the fine flow along {name} was solved on a grid of {flow.pressure.shape} cells, the "
                f"field has {field.shape}; solve the flows on the field as upscaled (cropped)"
            )
    missing = [axis for axis in field.axes if axis not in flows]
    trans = transmissibilities(field) if missing else None
    return [flows[axis] if axis in flows else pressure_drop(trans, axis) for axis in field.axes]


def fitted_faces(flows: list[AxisFlow], cells: tuple[Size, int, int]) -> np.ndarray:
    """Coarse face transmissibilities, least-squares fits of the fine fluxes to coarse pressure drops.

    Parameters
    ----------
    flows : list of AxisFlow
        Pressure-drop solves along the axes of one fine grid (p = 1 on the
        inlet face, p = 0 on the outlet face).
    cells : (Size, int, int)
        Cells per block (layers, rows, columns); layers may be a grouping
        (`upscale.grid.blocks.Size`).

    Returns
    -------
    ndarray of shape (6, L', M', N')
        ``[a]``: T of the face before each block along array axis a (for the
        first block, its half transmissibility to the domain's first face);
        ``[3 + a]``: the last blocks' half transmissibilities to the last
        face; NaN elsewhere, where the fit is undefined, and along axes no
        flow runs.
    """
    trans = flows[0].trans
    shape = trans.shape
    starts = [axis_edges(b, n)[:-1] for n, b in zip(shape, cells)]
    counts = [len(s) for s in starts]
    volume = trans.grid.dz[:, None, None]  # cell volume over dx dy (uniform), broadcast
    means = [_block_means(flow.pressure, volume, starts) for flow in flows]
    faces = np.full((6, *counts), np.nan)
    for a in sorted(AXES[flow.axis] for flow in flows):
        inner = [(*_inner_samples(trans, flow.pressure, mean, starts, a), _rate(flow))
                 for flow, mean in zip(flows, means)]  # fmt: skip
        crossed = _block_sums(_inner_faces(trans.faces[a], starts, a), starts, a) > 0
        faces[a][_index(a, slice(1, None))] = _fit(inner, crossed)
        drop = next(i for i, flow in enumerate(flows) if AXES[flow.axis] == a)  # fixes a's outer faces
        inlet, outlet = _outer_samples(trans, flows[drop].pressure, means[drop], starts, a)
        t_in, t_out = (_block_sums(t, starts, a) > 0 for t in trans.boundary[a])
        faces[a][_index(a, slice(0, 1))] = _fit([(*inlet, _rate(flows[drop]))], t_in)
        faces[3 + a][_index(a, slice(-1, None))] = _fit([(*outlet, _rate(flows[drop]))], t_out)
    return faces


def _index(a: int, part: slice) -> tuple[slice, ...]:
    """`part` along array axis `a`, everything along the others."""
    index = [slice(None)] * 3
    index[a] = part
    return tuple(index)


def _block_sums(values: np.ndarray, starts: list[np.ndarray], skip: int | None = None) -> np.ndarray:
    """Sums of `values` (L, M, N) over each block, along every axis but `skip` (already coarse)."""
    for axis, first in enumerate(starts):
        if axis != skip:
            values = np.add.reduceat(values, first, axis=axis)
    return values


def _block_means(pressure: np.ndarray, volume: np.ndarray, starts: list[np.ndarray]) -> np.ndarray:
    """Volume-averaged pressure (L', M', N') of each block over its solved cells; NaN for none."""
    solved = np.isfinite(pressure)
    weight = _block_sums(np.where(solved, volume, 0.0), starts)
    total = _block_sums(np.where(solved, pressure * volume, 0.0), starts)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(weight > 0, total / weight, np.nan)


def _inner_faces(values: np.ndarray, starts: list[np.ndarray], a: int) -> np.ndarray:
    """The fine faces along axis `a` (values laid out as `Transmissibilities.faces`) on block borders."""
    return np.take(values, starts[a][1:] - 1, axis=a)


def _inner_samples(trans: Any, pressure: np.ndarray, mean: np.ndarray, starts: list[np.ndarray],
                   a: int) -> tuple[np.ndarray, np.ndarray]:  # fmt: skip
    """Fine flux through each inner coarse face along `a`, and the coarse pressure difference across it."""
    before = np.take(pressure, starts[a][1:] - 1, axis=a)
    after = np.take(pressure, starts[a][1:], axis=a)
    flux = np.nan_to_num(_inner_faces(trans.faces[a], starts, a) * (before - after))
    return _block_sums(flux, starts, a), -np.diff(mean, axis=a)


def _outer_samples(trans: Any, pressure: np.ndarray, mean: np.ndarray, starts: list[np.ndarray],
                   a: int) -> tuple[tuple[np.ndarray, ...], tuple[np.ndarray, ...]]:  # fmt: skip
    """Flux through the inlet and outlet faces of each outer block along `a`.

    In through the inlet face (p = 1) and out through the outlet face
    (p = 0), each with the pressure difference between the face and the block.
    """
    t_in, t_out = trans.boundary[a]
    n = pressure.shape[a]
    inflow = np.nan_to_num(t_in * (1.0 - np.take(pressure, [0], axis=a)))
    outflow = np.nan_to_num(t_out * np.take(pressure, [n - 1], axis=a))
    first, last = np.take(mean, [0], axis=a), np.take(mean, [mean.shape[a] - 1], axis=a)
    return (_block_sums(inflow, starts, a), 1.0 - first), (_block_sums(outflow, starts, a), last)


def _rate(flow: AxisFlow) -> float:
    """The flow's whole rate, (unit of k) · m: the scale of its fluxes.

    Infinite for a flow that does not connect its two faces: it carries
    rounding alone, and no sample of it counts.
    """
    return max(flow.inflow, flow.outflow, 0.0) if flow.connected else np.inf


def _fit(samples: list[tuple[np.ndarray, np.ndarray, float]], conducting: np.ndarray) -> np.ndarray:
    """``T = Σ q Δp / Σ Δp²`` over the samples ``(q, Δp, rate)`` that count.

    A sample counts where ``|Δp|`` exceeds `NEGLIGIBLE` and ``|q|`` exceeds
    `NEGLIGIBLE` times its flow's rate. 0 where no fine face conducts; NaN
    where no sample counts or the fit is not positive.
    """
    num = np.zeros(conducting.shape)
    den = np.zeros(conducting.shape)
    for q, dp, rate in samples:
        counts = (np.abs(np.nan_to_num(dp)) > NEGLIGIBLE) & (np.abs(q) > NEGLIGIBLE * rate)
        num += np.where(counts, q * dp, 0.0)
        den += np.where(counts, dp * dp, 0.0)
    with np.errstate(invalid="ignore", divide="ignore"):
        T = np.where(den > 0, num / den, np.nan)
    T[~(T > 0)] = np.nan
    return np.where(conducting, T, 0.0)
