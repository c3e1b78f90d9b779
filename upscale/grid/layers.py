"""Coarse layers of unequal thickness: which fine layers each coarse layer holds.

A grouping is a list of group sizes, top down: ``2,2,4,8`` puts the first
two fine layers in the first coarse layer, the next two in the second, and
so on. It is given by hand (the z part of a block, ``8x8x2,2,4,8``) or
chosen by `optimal_groups` from a profile of the field's layers.

The loss of a grouping
----------------------
Every fine layer l carries a weight w_l (its thickness times its active
fraction, m) and two numbers: x_l, the mean of ln kx over its active cells,
and z_l, the mean of ln kz. A coarse layer that merges layers replaces them
by one value; what the merge loses is their weighted spread about the group
means, the within-group sum of squares::

    loss(g) = sum_{l in g} w_l [(x_l - x_g)^2 + (z_l - z_g)^2],   x_g = sum w_l x_l / sum w_l

and the loss of a grouping is the sum over its groups. It is reported as a
fraction of the loss of one group holding every layer (the whole
between-layer variance), so 0 keeps every contrast between layers and 1
keeps none. This is the criterion of zonation by the ratio of within- to
between-zone variance (Testerman 1962, "A statistical reservoir-zonation
technique") and of variance-based layer grouping (Li & Beckner 2000); both
from memory, written out here as we use it.

Barriers
--------
A barrier is a run of consecutive layers whose z_l lies at least
``ln BARRIER_CONTRAST`` below the typical layer's (the w-weighted median of
z_l): a shale that holds vertical flow back, inside the model or at its top
or base (there it controls the flow across the model as much). A barrier is
*kept* when its layers make coarse layers of their own; a group that holds
some of its layers together with other layers *merges* it, and the averages
of a merged block let flow through the barrier (measured: a 0.01 mD shale
at the edge of a group of 100-200 mD sands turns a z check error of 0.01 %
into 10^4 % with the geometric mean). `optimal_groups` merges as few
barriers as the number of groups allows, and among those groupings it
returns one of least loss (lexicographic order, our choice).

The optimum over every contiguous grouping is found exactly by dynamic
programming over the layer sequence (Bellman 1957; the optimal partition of
a sequence into k segments, e.g. Fisher 1958, "On grouping for maximum
homogeneity"): O(k L^2) operations for L layers and k groups.
"""

from __future__ import annotations

import re
from dataclasses import dataclass

import numpy as np

from ..errors import InputError

#: kz contrast (ratio) below the typical layer from which a run of layers is a barrier.
BARRIER_CONTRAST = 100.0
_SIZES = re.compile(r"^\s*-?\d+\s*(,\s*-?\d+\s*)*$")  # signs are read, to be refused by name
_AUTO = re.compile(r"^\s*auto\s*:\s*(?:(\d+)|(\d+(?:\.\d*)?)\s*%)\s*$", re.IGNORECASE)


@dataclass(frozen=True)
class LayerRequest:
    """How the coarse layers are to be chosen automatically: a count, or the share of contrast to keep.

    Parameters
    ----------
    count : int or None
        Number of coarse layers (``auto:N``).
    keep : float or None
        Fraction of the between-layer variance to keep, in (0, 1]
        (``auto:P%``): the fewest coarse layers whose loss is at most ``1 - keep``.
    """

    count: int | None = None
    keep: float | None = None

    @classmethod
    def parse(cls, text: str) -> LayerRequest | None:
        """Read ``auto:N`` or ``auto:P%``; None if `text` is not of that form.

        Examples
        --------
        >>> LayerRequest.parse("auto:4"), LayerRequest.parse("auto:90%")
        (LayerRequest(count=4, keep=None), LayerRequest(count=None, keep=0.9))
        >>> LayerRequest.parse("2,2") is None
        True
        """
        match = _AUTO.match(text)
        if not match:
            return None
        count, percent = match.groups()
        if count is not None:
            if int(count) < 1:
                raise InputError(f"automatic layers {text!r}: the number of coarse layers must be at least 1")
            return cls(count=int(count))
        if not 0.0 < float(percent) <= 100.0:
            raise InputError(f"automatic layers {text!r}: the share of contrast to keep must be in "
                             "(0, 100] %")
        return cls(keep=float(percent) / 100.0)

    def __str__(self) -> str:
        return f"auto:{self.count}" if self.count is not None else f"auto:{100 * self.keep:g}%"


def parse_sizes(text: str) -> tuple[int, ...] | None:
    """Group sizes written ``2,2,4,8`` (fine layers per coarse layer, top down); None if not of that form.

    Examples
    --------
    >>> parse_sizes("2, 2,4,8"), parse_sizes("8"), parse_sizes("2,-1"), parse_sizes("auto:3")
    ((2, 2, 4, 8), (8,), (2, -1), None)
    """
    if not _SIZES.match(text):
        return None
    return tuple(int(part) for part in text.split(","))


def check_sizes(sizes: tuple[int, ...], layers: int) -> None:
    """Raise `InputError` unless `sizes` are positive and add up to `layers`.

    Examples
    --------
    >>> check_sizes((2, 3), 6)
    Traceback (most recent call last):
    ...
    upscale.errors.InputError: the layer groups 2,3 hold 5 fine layers but the model has 6; they ...
    """
    written = ",".join(map(str, sizes))
    if any(size < 1 for size in sizes):
        raise InputError(f"the layer groups {written} hold a group of {min(sizes)} layers; every group "
                         "needs at least 1")
    if sum(sizes) != layers:
        raise InputError(f"the layer groups {written} hold {sum(sizes)} fine layers but the model has "
                         f"{layers}; they must add up to {layers}")  # fmt: skip


def group_edges(sizes: tuple[int, ...]) -> np.ndarray:
    """Fine-layer index where each group starts, and the end: shape (groups + 1,).

    Examples
    --------
    >>> group_edges((2, 2, 4)).tolist()
    [0, 2, 4, 8]
    """
    return np.concatenate([[0], np.cumsum(sizes)]).astype(np.int64)


def barrier_runs(weight: np.ndarray, z: np.ndarray) -> list[tuple[int, int]]:
    """The barriers of a layer profile: runs ``[start, stop)`` of tight layers.

    Parameters
    ----------
    weight : ndarray of shape (L,)
        Active thickness of each layer (m); 0 for a layer without active cells.
    z : ndarray of shape (L,)
        Mean ln kz of each layer (any unit of k); ignored where `weight` is 0.

    Returns
    -------
    list of (int, int)
        Fine-layer ranges, top down. A layer without active cells is neither
        tight nor open: it does not end a run, and a run does not end with it.

    Examples
    --------
    >>> z = np.log([100.0, 100.0, 0.01, 0.01, 100.0, 100.0, 0.01])
    >>> barrier_runs(np.ones(7), z)
    [(2, 4), (6, 7)]
    """
    present = weight > 0
    if not present.any():
        return []
    tight = present & (z <= _weighted_median(z[present], weight[present]) - np.log(BARRIER_CONTRAST))
    open_ = present & ~tight
    runs, start = [], None
    for layer in range(z.size + 1):
        if layer < z.size and tight[layer] and start is None:
            start = layer
        elif start is not None and (layer == z.size or open_[layer]):
            runs.append((start, _last(tight, layer) + 1))
            start = None
    return runs


def _last(flags: np.ndarray, stop: int) -> int:
    """Index of the last True of ``flags[:stop]``."""
    return int(np.flatnonzero(flags[:stop])[-1])


def _weighted_median(values: np.ndarray, weights: np.ndarray) -> float:
    """The value at which the cumulative weight first reaches half the total (lower weighted median)."""
    order = np.argsort(values, kind="stable")
    cumulative = np.cumsum(weights[order])
    return float(values[order][np.searchsorted(cumulative, 0.5 * cumulative[-1])])


@dataclass(frozen=True)
class Grouping:
    """A grouping of the fine layers and what it keeps.

    Attributes
    ----------
    sizes : tuple of int
        Fine layers per coarse layer, top down.
    loss : float
        Loss of the grouping as a fraction of the whole between-layer
        variance (0 keeps every contrast; 0 also when the layers do not differ).
    merged : int
        Barriers whose layers share a coarse layer with other layers, counted
        once per such coarse layer.
    barriers : list of (int, int)
        Every barrier of the profile, ``[start, stop)`` fine layers.
    apart : int
        The fewest coarse layers that keep every barrier apart: one per
        barrier and one per stretch of other layers above, between and below.
    """

    sizes: tuple[int, ...]
    loss: float
    merged: int
    barriers: list[tuple[int, int]]
    apart: int


def group_costs(weight: np.ndarray, x: np.ndarray, z: np.ndarray) -> np.ndarray:
    """Loss of every contiguous group: ``cost[i, j]`` for the layers ``[i, j)``, shape (L + 1, L + 1).

    Entries with ``j <= i`` are infinite. Computed from prefix sums of w, w x,
    w x^2, w z and w z^2, so each entry costs O(1).

    Examples
    --------
    >>> c = group_costs(np.ones(3), np.array([0.0, 2.0, 2.0]), np.zeros(3))
    >>> float(c[0, 2]), float(c[1, 3]), float(c[0, 3])
    (2.0, 0.0, 2.666666666666667)
    """
    x, z = np.where(weight > 0, x, 0.0), np.where(weight > 0, z, 0.0)  # empty layers add nothing
    sums = [np.concatenate([[0.0], np.cumsum(term)]) for term in
            (weight, weight * x, weight * x * x, weight * z, weight * z * z)]  # fmt: skip
    w, wx, wxx, wz, wzz = (s[None, :] - s[:, None] for s in sums)  # [i, j]: layers [i, j)
    with np.errstate(divide="ignore", invalid="ignore"):
        cost = (wxx - np.where(w > 0, wx * wx / w, 0.0)) + (wzz - np.where(w > 0, wz * wz / w, 0.0))
    cost = np.maximum(cost, 0.0)  # round-off below zero for groups of equal layers
    single = np.arange(weight.size)
    cost[single, single + 1] = 0.0  # a layer alone loses nothing (the prefix sums would leave round-off)
    cost[np.tril_indices(weight.size + 1)] = np.inf
    return cost


def _mergers(size: int, runs: list[tuple[int, int]]) -> np.ndarray:
    """``count[i, j]``: barriers the group of layers ``[i, j)`` merges with other layers, (L + 1, L + 1)."""
    first, end = np.arange(size + 1)[:, None], np.arange(size + 1)[None, :]
    count = np.zeros((size + 1, size + 1))
    for start, stop in runs:
        count += (first < stop) & (end > start) & ((first < start) | (end > stop))
    return count


def optimal_groups(weight: np.ndarray, x: np.ndarray, z: np.ndarray, request: LayerRequest) -> Grouping:
    """The grouping of the layers that merges the fewest barriers and then loses the least.

    Parameters
    ----------
    weight : ndarray of shape (L,)
        Active thickness of each layer (m).
    x, z : ndarray of shape (L,)
        Mean ln kx and ln kz of each layer (any one unit of k).
    request : LayerRequest
        ``count`` coarse layers, or the fewest that keep ``keep`` of the
        between-layer variance and merge no barrier.

    Returns
    -------
    Grouping

    Raises
    ------
    InputError
        If more coarse layers are asked for than there are fine layers.

    Examples
    --------
    >>> x = np.log([100.0, 120.0, 0.01, 90.0, 110.0, 500.0])
    >>> optimal_groups(np.ones(6), x, x, LayerRequest(count=3)).sizes  # the shale alone
    (2, 1, 3)
    """
    layers = weight.size
    if request.count is not None and request.count > layers:
        raise InputError(f"{request.count} coarse layers asked for but the model has {layers} fine layers")
    runs = barrier_runs(weight, z)
    cost = group_costs(weight, x, z)
    total = float(cost[0, layers])
    # lexicographic: a merged barrier outweighs any loss (every grouping loses at most `total`)
    key = cost + _mergers(layers, runs) * (2.0 * total + 1.0)
    most = request.count if request.count is not None else layers
    best = key[0].copy()  # best[j]: least key of layers [0, j) in one group
    choices = []
    for groups in range(1, most + 1):
        if groups > 1:
            candidates = best[:, None] + key  # [i, j]: layers [0, i) in groups - 1, then [i, j)
            choices.append(np.argmin(candidates, axis=0))
            best = candidates[choices[-1], np.arange(layers + 1)]
        if request.keep is not None and _loss(best[layers], total) <= 1.0 - request.keep + 1e-12:
            break
    sizes = _traced(choices, layers)
    edges = group_edges(sizes)
    found = sum(float(cost[a, b]) for a, b in zip(edges[:-1], edges[1:]))
    merged = int(sum(_mergers(layers, runs)[a, b] for a, b in zip(edges[:-1], edges[1:])))
    return Grouping(sizes=sizes, loss=_loss(found, total), merged=merged, barriers=runs,
                    apart=_fewest_apart(layers, runs))  # fmt: skip


def _fewest_apart(layers: int, runs: list[tuple[int, int]]) -> int:
    """Coarse layers needed to keep every barrier run apart: the runs and the stretches between them.

    Examples
    --------
    >>> _fewest_apart(16, [(8, 10)]), _fewest_apart(20, [(4, 5), (9, 10), (19, 20)]), _fewest_apart(3, [])
    (3, 6, 1)
    """
    bounds = [0, *(edge for run in runs for edge in run), layers]
    stretches = sum(b > a for a, b in zip(bounds[::2], bounds[1::2]))
    return max(len(runs) + stretches, 1)


def _loss(found: float, total: float) -> float:
    return found / total if total > 0 else 0.0


def _traced(choices: list[np.ndarray], layers: int) -> tuple[int, ...]:
    """Group sizes from the DP's argmin tables, walked back from the last layer."""
    edges, end = [layers], layers
    for choice in reversed(choices):
        end = int(choice[end])
        edges.append(end)
    edges.append(0)
    return tuple(int(b - a) for a, b in zip(edges[::-1][:-1], edges[::-1][1:]))
