"""Coarse blocks with zero permeability: the zero-k rule of the block partition.

A block can come out of upscaling with k = 0 along an axis: the flow-based
methods, King's renormalization and the tubes bound give 0 where no path of
active cells crosses the block (typically the fringe of a nodata area, or a
continuous barrier), and every average does so for a block of zeros. The
coarse model is right to pass no flow there, but many simulators refuse an
active cell with k = 0. The rule of `upscale.grid.BlockSpec.zero_k` decides
what becomes of such blocks; `apply_zero_rule` applies it and says what it
touched, including the pore volume of the blocks it made inactive.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from ..errors import InputError
from ..grid import BlockSpec
from ..grid.blocks import RELATIVE_FLOOR


@dataclass(frozen=True)
class ZeroOutcome:
    """What the zero-k rule did.

    Attributes
    ----------
    rule : str
        The rule as given (``auto``, ``inactive``, ``floor``, ``floor:VALUE``, ``keep``).
    inactive_blocks : int
        Active blocks the rule made inactive.
    floored : dict of str to int
        Per permeability, active blocks whose 0 became the floor.
    floor : dict of str to float
        Per permeability, the floor (unit of k); empty when the rule raises nothing.
    pore_volume_removed : float
        Pore volume (m³) of the blocks made inactive; 0 without porosity.
    found : dict of str to int
        Per permeability, the active blocks the method gave k = 0, before the rule.
    touched : ndarray of bool or None
        The blocks the rule made inactive or floored (shape of the coarse grid).
    """

    rule: str
    inactive_blocks: int = 0
    floored: dict[str, int] = field(default_factory=dict)
    floor: dict[str, float] = field(default_factory=dict)
    pore_volume_removed: float = 0.0
    found: dict[str, int] = field(default_factory=dict)
    touched: np.ndarray | None = field(default=None, repr=False)

    def summary(self) -> dict:
        """As plain data for ``summary.json``."""
        return {
            "rule": self.rule,
            "blocks_made_inactive": self.inactive_blocks,
            "pore_volume_removed_m3": self.pore_volume_removed,
            "blocks_floored": self.floored,
            "floor": self.floor,
            "blocks_left_at_zero": self.kept,
        }

    @property
    def kept(self) -> dict[str, int]:
        """Per permeability, active blocks left with k = 0 (rule ``keep``; empty otherwise)."""
        return self.found if self.rule == "keep" else {}

    def line(self, unit: str) -> str | None:
        """What the rule touched, in one line (None when it touched nothing).

        Examples
        --------
        >>> ZeroOutcome("auto", 2, {"kx": 1}, {"kx": 1e-4}, 12.5).line("mD")
        '2 blocks made inactive (pore volume 12.5 m³ taken out); 1 block floored at 0.0001 mD along x'
        """
        parts = []
        if self.inactive_blocks:
            removed = self.pore_volume_removed
            removed = f" (pore volume {removed:.4g} m³ taken out)" if removed else ""
            parts.append(f"{_blocks(self.inactive_blocks)} made inactive{removed}")
        parts += [f"{_blocks(n)} floored at {self.floor[name]:.4g} {unit} along {name[1]}"
                  for name, n in self.floored.items() if n]  # fmt: skip
        parts += [f"{_blocks(n)} left at k = 0 along {name[1]}" for name, n in self.kept.items() if n]
        return "; ".join(parts) or None


def _blocks(n: int) -> str:
    return f"{n} block" + ("" if n == 1 else "s")


def apply_zero_rule(
    spec: BlockSpec,
    permeabilities: dict[str, np.ndarray],
    inactive: np.ndarray,
    pore_volume: np.ndarray | None,
) -> tuple[dict[str, np.ndarray], np.ndarray, ZeroOutcome]:
    """Apply the block partition's zero-k rule to the coarse permeabilities.

    Parameters
    ----------
    spec : BlockSpec
        Its ``zero_k`` is the rule.
    permeabilities : dict of str to ndarray of shape (L', M', N')
        The coarse permeability along each flow axis (``kx``, ``ky``, and ``kz``
        in 3D; unit of k), before inactive blocks are set to NaN.
    inactive : ndarray of bool, shape (L', M', N')
        Blocks already inactive (no active cell, or below ``min_active``).
    pore_volume : ndarray of shape (L', M', N') or None
        Pore volume of each block (m³), if porosity was given.

    Returns
    -------
    permeabilities : dict of str to ndarray
        New arrays, floored where the rule says so.
    inactive : ndarray of bool
        The inactive blocks, with those the rule made inactive.
    outcome : ZeroOutcome

    Examples
    --------
    >>> k = {"kx": np.array([[[0.0, 5.0, 0.0]]]), "ky": np.array([[[0.0, 0.0, 2.0]]])}
    >>> new, off, outcome = apply_zero_rule(BlockSpec(2, 2), k, np.zeros((1, 1, 3), bool), None)
    >>> off.tolist(), new["kx"].tolist(), new["ky"].tolist()   # floors: 5 / 1000 and 2 / 1000
    ([[[True, False, False]]], [[[0.0, 5.0, 0.005]]], [[[0.0, 0.002, 2.0]]])

    Raises
    ------
    InputError
        If a zero is to be raised to a floor relative to the coarse model
        and no active block passes flow along any axis.
    """
    rule, floor = spec.zero_rule
    zero = {name: (values == 0) & ~inactive for name, values in permeabilities.items()}
    found = {name: int(where.sum()) for name, where in zero.items()}
    if rule == "keep":
        return dict(permeabilities), inactive, ZeroOutcome(spec.zero_k, found=found)
    if rule == "auto":  # no flow along any axis: nothing to keep the block for
        dropped = np.logical_and.reduce(list(zero.values()))
    elif rule == "inactive":
        dropped = np.logical_or.reduce(list(zero.values()))
    else:
        dropped = np.zeros_like(inactive)
    raised = {name: where & ~dropped for name, where in zero.items()}
    floors = {name: floor if floor is not None else RELATIVE_FLOOR * _tightest(permeabilities, name, inactive)
              for name, where in raised.items() if where.any()}  # fmt: skip
    floored = {name: np.where(raised[name], floors[name], values) if name in floors else values
               for name, values in permeabilities.items()}  # fmt: skip
    removed = float(pore_volume[dropped].sum()) if pore_volume is not None else 0.0
    touched = np.logical_or.reduce([dropped, *raised.values()])
    outcome = ZeroOutcome(spec.zero_k, int(dropped.sum()), {n: int(raised[n].sum()) for n in floors}, floors,
                          pore_volume_removed=removed, found=found, touched=touched)  # fmt: skip
    return floored, inactive | dropped, outcome


def _tightest(permeabilities: dict[str, np.ndarray], name: str, inactive: np.ndarray) -> float:
    """The smallest positive k of the active blocks along `name`'s axis, else along any axis.

    A minimum does not depend on the order of summation, so the floor is the
    same bit for bit however the field was chunked (a mean would not be).
    """
    for values in (permeabilities[name], *permeabilities.values()):
        flowing = values[~inactive & (values > 0)]
        if flowing.size:
            return float(flowing.min())
    raise InputError(
        "no active block passes flow along any axis, so the zero-k rule has no floor to take; "
        "give one (floor:VALUE) or keep the zeros (keep)"
    )
