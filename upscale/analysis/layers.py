"""The vertical profile of a 3D model, layer by layer, and the grouping of its layers it suggests.

`layer_profile` reads every layer once: its active fraction and the mean
and spread of ln kx and ln kz over its active cells. A zero k counts as a
thousandth of the smallest positive value of that property (the floor of
``--zero-k``), so an impermeable layer is the tightest of the profile
rather than minus infinity. `choose_groups` passes the profile to the exact
optimal grouping of `upscale.grid.layers` and says, for every boundary it
keeps, why: the barrier it holds apart or the contrast between the groups.
`resolve_layers` does both for a block whose layers are ``auto:N`` or
``auto:P%`` and returns the block with the grouping chosen, and the record
of the choice (`LayerChoice`) that a run prints and keeps in summary.json.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np

from ..field import Field
from ..grid.blocks import RELATIVE_FLOOR, BlockSpec
from ..grid.layers import Grouping, LayerRequest, barrier_runs, group_edges, optimal_groups
from ..parallel import compute_together


@dataclass(frozen=True)
class LayerProfile:
    """Statistics of every fine layer, top down (arrays of shape (L,)).

    Attributes
    ----------
    thickness : ndarray
        Layer thickness (m).
    active : ndarray
        Active fraction of the layer's cells.
    ln_kx, ln_kz : ndarray
        Mean of ln k over the active cells (k in the field's unit); NaN for a
        layer without active cells.
    spread_kx, spread_kz : ndarray
        Standard deviation of ln k over the active cells; NaN without any.
    barriers : list of (int, int)
        Barrier runs ``[start, stop)`` (`upscale.grid.layers.barrier_runs`).
    """

    thickness: np.ndarray
    active: np.ndarray
    ln_kx: np.ndarray
    ln_kz: np.ndarray
    spread_kx: np.ndarray
    spread_kz: np.ndarray
    barriers: list[tuple[int, int]]

    @property
    def weight(self) -> np.ndarray:
        """Active thickness of each layer (m): the weight of a layer in the grouping loss."""
        return self.thickness * self.active

    def summary(self) -> dict[str, Any]:
        """The profile as plain data: one row per layer (numbered from 1) and the barriers."""
        columns = zip(self.thickness, self.active, self.ln_kx, self.spread_kx, self.ln_kz, self.spread_kz)
        rows = [
            {"layer": i + 1, "thickness_m": float(h), "active_fraction": float(a), "ln_kx_mean": _plain(x),
             "ln_kx_std": _plain(sx), "ln_kz_mean": _plain(z), "ln_kz_std": _plain(sz)}
            for i, (h, a, x, sx, z, sz) in enumerate(columns)
        ]  # fmt: skip
        return {"layers": rows, "barriers": [{"first": a + 1, "last": b} for a, b in self.barriers]}


def _plain(value: float) -> float | None:
    return float(value) if np.isfinite(value) else None


def _sums(k: Any) -> dict[str, Any]:
    """Per-layer counts and sums of ln k of one property, lazily for dask arrays."""
    active = k == k
    positive = k > 0
    ln = np.log(np.where(positive, k, 1.0).astype(np.float64))  # a float32 raster's ln in full precision
    return {
        "active": active.sum(axis=(1, 2)),
        "zero": (active & ~positive).sum(axis=(1, 2)),
        "smallest": np.where(positive, k, np.inf).min(axis=(1, 2)),
        "ln": ln.sum(axis=(1, 2), dtype=np.float64),
        "ln2": (ln * ln).sum(axis=(1, 2), dtype=np.float64),
    }


def _moments(sums: dict[str, np.ndarray]) -> tuple[np.ndarray, np.ndarray]:
    """Mean and standard deviation of ln k per layer, zeros counted at the property's floor."""
    smallest = float(np.min(sums["smallest"]))
    floor_ln = float(np.log(RELATIVE_FLOOR * smallest)) if np.isfinite(smallest) else 0.0
    count = sums["active"].astype(np.float64)
    s1 = sums["ln"] + sums["zero"] * floor_ln
    s2 = sums["ln2"] + sums["zero"] * floor_ln**2
    with np.errstate(divide="ignore", invalid="ignore"):
        mean = np.where(count > 0, s1 / count, np.nan)
        variance = np.where(count > 0, s2 / count - mean**2, np.nan)
    return mean, np.sqrt(np.maximum(variance, 0.0))


def layer_profile(field: Field) -> LayerProfile:
    """Per-layer statistics of `field`'s kx and kz, in one pass over the data.

    Parameters
    ----------
    field : Field
        A 3D model (kz from its band or from kv/kh); NumPy or dask arrays.

    Returns
    -------
    LayerProfile

    Examples
    --------
    >>> k = np.stack([np.full((2, 2), 100.0), np.full((2, 2), 0.01), np.full((2, 2), 100.0)])
    >>> profile = layer_profile(Field.from_arrays(k, dz=[1.0, 0.5, 1.0], three_d=True))
    >>> np.exp(profile.ln_kz).round(3).tolist(), profile.barriers
    ([100.0, 0.01, 100.0], [(1, 2)])
    """
    return profile_from_sums(field, compute_together(layer_sums(field)))


def layer_sums(field: Field) -> dict[str, Any]:
    """The per-layer sums a `LayerProfile` is made of, lazily for dask arrays, to compute with other reads.

    Returns
    -------
    dict of str to array of shape (L,)
        Keyed ``"kx.active"``, ``"kx.ln"``, ... (and ``"kz. ..."`` when kz is
        not kx itself); computed (`upscale.parallel.compute_together`, with
        any other results of the same field), they make the profile
        (`profile_from_sums`).
    """
    kz = field.kz if field.kz is not None else field.kx
    names = {"kx": field.kx} if kz is field.kx else {"kx": field.kx, "kz": kz}
    return {f"{name}.{key}": value for name, array in names.items() for key, value in _sums(array).items()}


def profile_from_sums(field: Field, computed: dict[str, Any]) -> LayerProfile:
    """The `LayerProfile` of `field` from its `layer_sums`, computed (same keys)."""
    sums: dict[str, dict[str, np.ndarray]] = {}
    for full, value in computed.items():
        name, key = full.split(".")
        sums.setdefault(name, {})[key] = np.asarray(value)
    ln_kx, spread_kx = _moments(sums["kx"])
    ln_kz, spread_kz = _moments(sums["kz"]) if "kz" in sums else (ln_kx, spread_kx)
    cells = field.shape[1] * field.shape[2]
    active = sums["kx"]["active"] / cells
    thickness = np.asarray(field.grid.dz, dtype=np.float64)
    return LayerProfile(thickness=thickness, active=active, ln_kx=ln_kx, ln_kz=ln_kz, spread_kx=spread_kx,
                        spread_kz=spread_kz, barriers=barrier_runs(thickness * active, ln_kz))  # fmt: skip


@dataclass(frozen=True)
class Boundary:
    """One boundary between coarse layers and why the grouping keeps it.

    Attributes
    ----------
    after : int
        The last fine layer above the boundary (numbered from 1).
    reason : str
        ``barrier`` (it bounds a barrier run) or ``contrast``.
    text : str
        One line for people: the barrier's layers and its kz contrast, or the
        ratios of the geometric-mean kx and kz of the groups on either side.
    """

    after: int
    reason: str
    text: str


def choose_groups(profile: LayerProfile, request: LayerRequest) -> tuple[Grouping, list[Boundary]]:
    """The optimal grouping of `profile`'s layers for `request`, and why each boundary is kept.

    Returns
    -------
    grouping : Grouping
    boundaries : list of Boundary
        Top down, one per boundary between coarse layers.
    """
    weight = profile.weight
    grouping = optimal_groups(weight, np.nan_to_num(profile.ln_kx), np.nan_to_num(profile.ln_kz), request)
    edges = group_edges(grouping.sizes)
    means = [_group_means(profile, a, b) for a, b in zip(edges[:-1], edges[1:])]
    boundaries = []
    for g, edge in enumerate(edges[1:-1]):
        run = next(((a, b) for a, b in profile.barriers if edge in (a, b)), None)
        if run is not None:
            contrast = np.exp(np.median(profile.ln_kz[weight > 0]) - np.mean(profile.ln_kz[run[0]:run[1]]))
            layers = f"layer {run[0] + 1}" if run[1] - run[0] == 1 else f"layers {run[0] + 1}-{run[1]}"
            side = "top" if edge == run[0] else "base"
            text = f"barrier: {side} of {layers}, kz {contrast:.3g} times below the typical layer"
            boundaries.append(Boundary(int(edge), "barrier", text))
        else:
            (x_above, z_above), (x_below, z_below) = means[g], means[g + 1]
            text = (f"contrast: kx {_ratio(x_above, x_below):.3g} times, kz {_ratio(z_above, z_below):.3g} "
                    "times between the groups above and below")  # fmt: skip
            boundaries.append(Boundary(int(edge), "contrast", text))
    return grouping, boundaries


def _group_means(profile: LayerProfile, start: int, stop: int) -> tuple[float, float]:
    """Weighted mean ln kx and ln kz of layers ``[start, stop)`` (NaN without active cells)."""
    w = profile.weight[start:stop]
    if not w.sum() > 0:
        return np.nan, np.nan
    return tuple(float(np.sum(w * np.nan_to_num(v[start:stop])) / w.sum())
                 for v in (profile.ln_kx, profile.ln_kz))  # type: ignore[return-value]  # fmt: skip


def _ratio(a: float, b: float) -> float:
    """exp|a - b|: how many times the larger geometric mean exceeds the smaller one."""
    return float(np.exp(abs(a - b)))


@dataclass(frozen=True)
class LayerChoice:
    """An automatic grouping of the layers as chosen, and why.

    Attributes
    ----------
    request : LayerRequest
        What was asked (``auto:N`` or ``auto:P%``).
    grouping : Grouping
        The grouping chosen, its loss and the barriers.
    boundaries : list of Boundary
        Every boundary between coarse layers and its reason.
    """

    request: LayerRequest
    grouping: Grouping
    boundaries: list[Boundary]

    def summary(self) -> dict[str, Any]:
        """As summary.json records it: layers numbered from 1; loss: share of the between-layer variance."""
        g = self.grouping
        return {"request": str(self.request), "sizes": list(g.sizes), "loss": g.loss,
                "merged_barriers": g.merged, "fewest_keeping_barriers": g.apart,
                "barriers": [{"first": a + 1, "last": b} for a, b in g.barriers],
                "boundaries": [{"after_layer": b.after, "reason": b.reason, "text": b.text}
                               for b in self.boundaries]}  # fmt: skip


def choice_lines(layers: dict[str, Any]) -> list[str]:
    """Lines for people from `LayerChoice.summary`: the grouping, its loss and each boundary's reason.

    Examples
    --------
    >>> choice_lines({"request": "auto:2", "sizes": [1, 2], "loss": 0.25, "merged_barriers": 0,
    ...               "fewest_keeping_barriers": 1,
    ...               "boundaries": [{"after_layer": 1, "text": "contrast: ..."}]})
    ... # doctest: +NORMALIZE_WHITESPACE
    ['auto:2 chose 1,2 fine layers per coarse layer (top down), losing 25 % of the between-layer variance',
     'after layer 1: contrast: ...']
    """
    sizes = ",".join(map(str, layers["sizes"]))
    head = (f"{layers['request']} chose {sizes} fine layers per coarse layer (top down), losing "
            f"{100 * layers['loss']:.3g} % of the between-layer variance")  # fmt: skip
    if layers["merged_barriers"]:
        head += (f"; {layers['merged_barriers']} barrier(s) share a coarse layer with other layers (keeping "
                 f"them all apart takes {layers['fewest_keeping_barriers']} coarse layers)")  # fmt: skip
    return [head] + [f"after layer {b['after_layer']}: {b['text']}" for b in layers["boundaries"]]


def resolve_layers(spec: BlockSpec, field: Field) -> tuple[BlockSpec, LayerChoice | None]:
    """`spec` with its automatic layers chosen from `field`; unchanged (and None) without a request.

    Parameters
    ----------
    spec : BlockSpec
        A block whose z part may be ``auto:N`` or ``auto:P%``.
    field : Field
        The fine 3D model.

    Returns
    -------
    (BlockSpec, LayerChoice or None)

    Raises
    ------
    InputError
        If `spec` does not fit the field (a 2D map, more coarse layers than fine ones...).

    Examples
    --------
    >>> k = np.stack([np.full((2, 2), v) for v in (100.0, 120.0, 0.01, 90.0, 110.0)])
    >>> field = Field.from_arrays(k, dz=1.0, three_d=True)
    >>> spec, choice = resolve_layers(BlockSpec.parse("2x2xauto:3"), field)
    >>> str(spec), [b.reason for b in choice.boundaries]
    ('2x2x2,1,2', ['barrier', 'barrier'])
    """
    if spec.request is None or spec.groups is not None:
        return spec, None
    spec.check(field.shape, field.ndim)
    grouping, boundaries = choose_groups(layer_profile(field), spec.request)
    return spec.resolved(grouping.sizes), LayerChoice(spec.request, grouping, boundaries)
