"""Coarse blocks: how many fine cells each coarse block holds along each axis.

Blocks are written x first on the command line (``8x4`` is 8 columns by 4
rows; ``8x8x2`` adds 2 layers) and stored in array order ``(L, M, N)``
inside the package. When the grid does not divide into whole blocks, the
remainder policy decides: ``stop`` refuses, ``crop`` drops the last cells
(east columns, last rows, bottom layers), ``keep`` keeps smaller edge blocks
whose true sizes are used in every computation.

Two rules decide which coarse blocks stay active: ``min_active`` (the
smallest active volume fraction of a block) and the zero-k rule, for blocks
whose upscaled permeability is 0 along some axis — many simulators refuse an
active cell with k = 0 (applied by `upscale.methods.zeros`):

* ``auto`` (default): a block with k = 0 along every flow axis carries no
  flow in the coarse model at all and becomes inactive; a zero along some
  axes only is raised to the floor (below), so the block keeps its flow
  along the others;
* ``inactive``: a block with k = 0 along any axis becomes inactive;
* ``floor`` or ``floor:VALUE``: every zero becomes VALUE (unit of k; positive
  values are left as they are); without VALUE, a thousandth of the
  smallest positive k of the active blocks along that axis — tighter than
  every block that carries flow, and a value that scales with the unit of k
  and does not depend on how the field was chunked (our choice);
* ``keep``: zeros stay (for simulators that accept them).
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass

import numpy as np
from affine import Affine

from .._checks import check_fraction
from ..errors import InputError
from ..field import Grid

REMAINDER_POLICIES = ("stop", "crop", "keep")
ZERO_RULES = ("auto", "inactive", "floor", "keep")
#: The floor of ``floor`` and ``auto`` without a value, relative to the tightest flowing block.
RELATIVE_FLOOR = 1e-3
_SYNTAX = re.compile(r"^\s*(\d+)\s*x\s*(\d+)\s*(?:x\s*(\d+))?\s*$", re.IGNORECASE)


@dataclass(frozen=True)
class BlockSpec:
    """Coarse block size in fine cells, with the remainder and activity rules.

    Parameters
    ----------
    nx, ny, nz : int
        Fine cells per block along x (columns), y (rows) and z (layers).
    remainder : {'stop', 'crop', 'keep'}
        What to do when the grid does not divide into whole blocks.
    min_active : float
        A block whose active volume fraction is below this becomes inactive.
        With 0, a block is active as soon as one of its cells is.
    zero_k : str
        What becomes of blocks with k = 0 along some axis: ``auto``,
        ``inactive``, ``floor``, ``floor:VALUE`` (unit of k) or ``keep`` (see
        the module docstring).

    Examples
    --------
    >>> spec = BlockSpec.parse("8x4")
    >>> spec.cells
    (1, 4, 8)
    >>> spec.coarse_shape((1, 16, 32))
    (1, 4, 4)
    """

    nx: int
    ny: int
    nz: int = 1
    remainder: str = "stop"
    min_active: float = 0.0
    zero_k: str = "auto"

    def __post_init__(self) -> None:
        for name in ("nx", "ny", "nz"):
            value = getattr(self, name)
            if int(value) != value or value < 1:
                raise InputError(f"block: {name} must be a whole number >= 1, got {value}")
        if self.remainder not in REMAINDER_POLICIES:
            raise InputError(
                f"remainder must be one of {', '.join(REMAINDER_POLICIES)}, got {self.remainder!r}"
            )
        check_fraction(self.min_active, "min_active")
        self.zero_rule  # noqa: B018 - refuses a bad rule at construction

    @property
    def zero_rule(self) -> tuple[str, float | None]:
        """The zero-k rule's name and its floor (unit of k; None: relative to the fine field).

        Examples
        --------
        >>> BlockSpec(8, 8, zero_k="floor:0.001").zero_rule
        ('floor', 0.001)
        >>> BlockSpec(8, 8).zero_rule
        ('auto', None)
        """
        name, colon, value = self.zero_k.partition(":")
        floor = _positive(value) if colon and name == "floor" else None
        if name not in ZERO_RULES or (colon and floor is None):
            raise InputError(
                "zero-k rule must be auto, inactive, floor, floor:VALUE (a permeability > 0 in the "
                f"field's unit) or keep, got {self.zero_k!r}"
            )
        return name, floor

    @classmethod
    def parse(cls, text: str, *, remainder: str = "stop", min_active: float = 0.0,
              zero_k: str = "auto") -> BlockSpec:  # fmt: skip
        """Read a block written as ``NXxNY`` or ``NXxNYxNZ`` (fine cells, x first)."""
        match = _SYNTAX.match(text)
        if not match:
            raise InputError(
                f"block {text!r} is not of the form NXxNY or NXxNYxNZ "
                "(fine cells per block, x first, e.g. 8x8 or 8x8x2)"
            )
        nx, ny, nz = (int(g) if g else 1 for g in match.groups())
        return cls(nx, ny, nz, remainder=remainder, min_active=min_active, zero_k=zero_k)

    def summary(self) -> dict[str, int | float | str]:
        """The partition as plain data, as outputs record it (x first, like the command line)."""
        return {"x": self.nx, "y": self.ny, "z": self.nz, "remainder": self.remainder,
                "min_active": self.min_active, "zero_k": self.zero_k}  # fmt: skip

    @property
    def cells(self) -> tuple[int, int, int]:
        """Fine cells per block in array order ``(layers, rows, columns)``."""
        return (self.nz, self.ny, self.nx)

    def __str__(self) -> str:
        return f"{self.nx}x{self.ny}" + (f"x{self.nz}" if self.nz > 1 else "")

    def check(self, shape: tuple[int, int, int], ndim: int) -> None:
        """Raise `InputError` if this block cannot partition a grid of `shape`.

        Parameters
        ----------
        shape : (int, int, int)
            Fine grid shape ``(L, M, N)``.
        ndim : int
            2 for a map, 3 for a 3D model.
        """
        if ndim == 2 and self.nz > 1:
            raise InputError(f"block {self} has a z size but the field is a 2D map; use NXxNY")
        names = ("z (layers)", "y (rows)", "x (columns)")
        for n, b, name in zip(shape, self.cells, names):
            if b > n:
                raise InputError(f"block {self} is larger than the grid along {name}: {b} > {n}")
        if self.remainder == "stop":
            odd = [
                f"{name}: {n} cells = {n // b} blocks + {n % b}"
                for n, b, name in zip(shape, self.cells, names)
                if n % b
            ]
            if odd:
                raise InputError(
                    f"the grid does not divide into whole {self} blocks ({'; '.join(odd)}); "
                    "choose another block or a remainder policy: crop or keep"
                )

    def used_shape(self, shape: tuple[int, int, int]) -> tuple[int, int, int]:
        """Fine cells used per axis: the whole grid, or whole blocks only with ``crop``."""
        if self.remainder == "crop":
            return tuple(n - n % b for n, b in zip(shape, self.cells))  # type: ignore[return-value]
        return tuple(shape)  # type: ignore[return-value]

    def coarse_shape(self, shape: tuple[int, int, int]) -> tuple[int, int, int]:
        """Number of coarse blocks per axis for a fine grid of `shape`."""
        used = self.used_shape(shape)
        return tuple(-(-n // b) for n, b in zip(used, self.cells))  # type: ignore[return-value]

    def edges(self, n: int, axis: int) -> np.ndarray:
        """Fine-cell indices where the coarse blocks start and end along `axis`.

        Returns
        -------
        ndarray of shape (n_blocks + 1,)
            ``edges[i]:edges[i+1]`` are the fine cells of block ``i``.
        """
        b = self.cells[axis]
        used = n - n % b if self.remainder == "crop" else n
        return np.append(np.arange(0, used, b), used)

    def coarse_grid(self, grid: Grid) -> Grid:
        """The coarse grid: block sizes are the sums of their fine cell sizes (m).

        The coarse transform scales the fine one by the block size, so coarse
        pixel (0, 0) starts where fine pixel (0, 0) starts.
        """
        sizes = []
        for axis in range(3):
            edges = self.edges(grid.shape[axis], axis)
            sizes.append(np.add.reduceat(grid.sizes(axis)[: edges[-1]], edges[:-1]))
        transform = None
        if grid.transform is not None:
            transform = grid.transform @ Affine.scale(self.nx, self.ny)
        return Grid(dz=sizes[0], dy=sizes[1], dx=sizes[2], transform=transform, crs=grid.crs)


def _positive(text: str) -> float | None:
    """`text` as a finite number > 0, or None."""
    try:
        value = float(text)
    except ValueError:
        return None
    return value if 0 < value < math.inf else None
