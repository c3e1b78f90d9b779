"""Coarse blocks: how many fine cells each coarse block holds along each axis.

Blocks are written x first on the command line (``8x4`` is 8 columns by 4
rows; ``8x8x2`` adds 2 layers) and stored in array order ``(L, M, N)``
inside the package. When the grid does not divide into whole blocks, the
remainder policy decides: ``stop`` refuses, ``crop`` drops the last cells
(east columns, last rows, bottom layers), ``keep`` keeps smaller edge blocks
whose true sizes are used in every computation.

The z part may also group the layers unevenly (`upscale.grid.layers`):
``8x8x2,2,4,8`` lists the fine layers of each coarse layer, top down, and
``8x8xauto:4`` asks for the 4 coarse layers that keep the most of the
contrast between layers (chosen from the field, `upscale.analysis.layers`).
A grouping covers every layer, so the remainder policy applies along x and
y only. Inside, a block's size along an axis is a whole number (blocks of
that many cells, the last one possibly smaller) or the tuple of the sizes
of every block along it (`Size`); `axis_edges` turns either into edges.

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
from dataclasses import dataclass, replace

import numpy as np
from affine import Affine

from .._checks import check_fraction
from ..errors import InputError
from ..field import Grid
from .layers import LayerRequest, check_sizes, group_edges, parse_sizes

REMAINDER_POLICIES = ("stop", "crop", "keep")
ZERO_RULES = ("auto", "inactive", "floor", "keep")
#: The floor of ``floor`` and ``auto`` without a value, relative to the tightest flowing block.
RELATIVE_FLOOR = 1e-3
_SYNTAX = re.compile(r"^\s*(\d+)\s*x\s*(\d+)\s*(?:x\s*([^x]+?))?\s*$", re.IGNORECASE)
#: Fine cells per block along one axis: a whole number (the last block may be smaller), or every block's size.
Size = int | tuple[int, ...]


def axis_edges(size: Size, n: int) -> np.ndarray:
    """Fine-cell indices where the blocks of one axis of `n` cells start, and the end.

    Parameters
    ----------
    size : int or tuple of int
        Cells per block (the last block takes what is left), or the size of
        every block (adding up to `n`).
    n : int
        Cells along the axis.

    Returns
    -------
    ndarray of shape (blocks + 1,)

    Examples
    --------
    >>> axis_edges(4, 10).tolist(), axis_edges((1, 3, 6), 10).tolist()
    ([0, 4, 8, 10], [0, 1, 4, 10])
    """
    if isinstance(size, tuple):
        return group_edges(size)
    return np.append(np.arange(0, n, size), n)


def span(size: Size) -> int:
    """Cells a chunk must hold whole along an axis: the block size, or the whole grouping.

    A grouping adds up to the axis, so a chunk that holds it whole spans the
    axis: chunks then never split a coarse layer (our choice, the simplest
    correct rule).

    Examples
    --------
    >>> span(8), span((2, 2, 4))
    (8, 8)
    """
    return sum(size) if isinstance(size, tuple) else size


@dataclass(frozen=True)
class BlockSpec:
    """Coarse block size in fine cells, with the remainder and activity rules.

    Parameters
    ----------
    nx, ny, nz : int
        Fine cells per block along x (columns), y (rows) and z (layers).
    remainder : {'stop', 'crop', 'keep'}
        What to do when the grid does not divide into whole blocks (along x
        and y only with a grouping of the layers, which covers them all).
    min_active : float
        A block whose active volume fraction is below this becomes inactive.
        With 0, a block is active as soon as one of its cells is.
    zero_k : str
        What becomes of blocks with k = 0 along some axis: ``auto``,
        ``inactive``, ``floor``, ``floor:VALUE`` (unit of k) or ``keep`` (see
        the module docstring).
    groups : tuple of int or None
        Fine layers of each coarse layer, top down (then `nz` is 1): coarse
        layers of unequal thickness.
    request : LayerRequest or None
        The automatic grouping asked for (``auto:N``, ``auto:P%``); `groups`
        is None until it is chosen from the field (`resolved`).

    Examples
    --------
    >>> spec = BlockSpec.parse("8x4")
    >>> spec.cells
    (1, 4, 8)
    >>> spec.coarse_shape((1, 16, 32))
    (1, 4, 4)
    >>> layered = BlockSpec.parse("8x8x2,2,4")
    >>> layered.cells, layered.coarse_shape((8, 16, 16)), str(layered)
    (((2, 2, 4), 8, 8), (3, 2, 2), '8x8x2,2,4')
    """

    nx: int
    ny: int
    nz: int = 1
    remainder: str = "stop"
    min_active: float = 0.0
    zero_k: str = "auto"
    groups: tuple[int, ...] | None = None
    request: LayerRequest | None = None

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
        if self.groups is not None:
            check_sizes(self.groups, sum(self.groups))
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
        """Read a block: ``NXxNY``, ``NXxNYxNZ``, ``NXxNYxS1,S2,...`` or ``NXxNYxauto:N`` / ``auto:P%``.

        Examples
        --------
        >>> BlockSpec.parse("8x8xauto:4").request, BlockSpec.parse("8x8x3").nz
        (LayerRequest(count=4, keep=None), 3)
        """
        match = _SYNTAX.match(text)
        z = match.group(3) if match else None
        sizes = parse_sizes(z) if z is not None else None
        request = LayerRequest.parse(z) if z is not None and sizes is None else None
        if not match or (z is not None and sizes is None and request is None):
            raise InputError(
                f"block {text!r} is not of the form NXxNY or NXxNYxNZ, with NZ a number of layers, "
                "the layers of each coarse layer (2,2,4) or auto:N / auto:P% "
                "(fine cells per block, x first, e.g. 8x8, 8x8x2 or 8x8x2,2,4)"
            )
        nx, ny = int(match.group(1)), int(match.group(2))
        rules = {"remainder": remainder, "min_active": min_active, "zero_k": zero_k}
        if sizes is not None and len(sizes) > 1:
            return cls(nx, ny, groups=sizes, **rules)
        if request is not None:
            return cls(nx, ny, request=request, **rules)
        return cls(nx, ny, sizes[0] if sizes else 1, **rules)

    def resolved(self, groups: tuple[int, ...]) -> BlockSpec:
        """The same block with its layers grouped by `groups` (an automatic request stays, for the record)."""
        return replace(self, nz=1, groups=tuple(int(g) for g in groups))

    @property
    def label(self) -> str:
        """The block for people: as written, with the grouping chosen beside an automatic request.

        Examples
        --------
        >>> BlockSpec.parse("8x8xauto:3").resolved((2, 1, 2)).label, BlockSpec.parse("8x8x2").label
        ('8x8xauto:3 (= 8x8x2,1,2)', '8x8x2')
        """
        if self.request is None or self.groups is None:
            return str(self)
        return f"{self.nx}x{self.ny}x{self.request} (= {self})"

    def summary(self) -> dict[str, int | float | str | list[int]]:
        """The partition as plain data, as outputs record it (x first, like the command line).

        ``z`` is the layers per block, or the list of the layers of each
        coarse layer; ``layers`` records an automatic request.
        """
        z: int | list[int] | str = list(self.groups) if self.groups is not None else self.nz
        if self.groups is None and self.request is not None:
            z = str(self.request)
        found = {"x": self.nx, "y": self.ny, "z": z, "remainder": self.remainder,
                 "min_active": self.min_active, "zero_k": self.zero_k}  # fmt: skip
        if self.request is not None:
            found["layers"] = str(self.request)
        return found

    @classmethod
    def from_summary(cls, block: dict) -> BlockSpec:
        """The block that `summary` recorded (runs recorded before the zero-k rule kept their zeros)."""
        z = block["z"]
        groups = tuple(z) if isinstance(z, list) else None
        request = LayerRequest.parse(block["layers"]) if "layers" in block else None
        nz = z if isinstance(z, int) else 1
        return cls(block["x"], block["y"], nz, block["remainder"], block["min_active"],
                   block.get("zero_k", "keep"), groups=groups, request=request)  # fmt: skip

    @property
    def cells(self) -> tuple[Size, int, int]:
        """Fine cells per block in array order ``(layers, rows, columns)``; layers may be grouped (`Size`)."""
        return (self._z, self.ny, self.nx)

    @property
    def chunk_cells(self) -> tuple[int, int, int]:
        """Cells along ``(layers, rows, columns)`` that every chunk of the data must hold whole (`span`).

        Layers still to be chosen (``auto``) ask for none: the chunks are
        aligned to the grouping when it is applied.
        """
        if self.groups is None and self.request is not None:
            return (1, self.ny, self.nx)
        return (span(self._z), self.ny, self.nx)

    @property
    def _z(self) -> Size:
        if self.groups is not None:
            return self.groups
        if self.request is not None:
            raise InputError(f"block {self}: the automatic layers are chosen from the field first "
                             "(upscale run does; in Python, upscale.analysis.layers.resolve_layers)")
        return self.nz

    def __str__(self) -> str:
        if self.groups is not None:
            z = "x" + ",".join(map(str, self.groups))
        elif self.request is not None:
            z = f"x{self.request}"
        else:
            z = f"x{self.nz}" if self.nz > 1 else ""
        return f"{self.nx}x{self.ny}{z}"

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
        if ndim == 2 and (self.groups is not None or self.request is not None):
            raise InputError(f"block {self} has a grouping of the layers but the field is a 2D map; "
                             "use NXxNY")  # fmt: skip
        if self.groups is not None:
            check_sizes(self.groups, shape[0])
        count = self.request.count if self.request is not None and self.groups is None else None
        if count is not None and count > shape[0]:
            raise InputError(f"block {self}: {count} coarse layers asked for but the model has "
                             f"{shape[0]} fine layers")  # fmt: skip
        names = ("z (layers)", "y (rows)", "x (columns)")
        along = [(n, b, name) for n, b, name in zip(shape, (self.nz, self.ny, self.nx), names)
                 if not (name.startswith("z") and (self.groups or self.request))]  # fmt: skip
        for n, b, name in along:
            if b > n:
                raise InputError(f"block {self} is larger than the grid along {name}: {b} > {n}")
        if self.remainder == "stop":
            odd = [f"{name}: {n} cells = {n // b} blocks + {n % b}" for n, b, name in along if n % b]
            if odd:
                raise InputError(
                    f"the grid does not divide into whole {self} blocks ({'; '.join(odd)}); "
                    "choose another block or a remainder policy: crop or keep"
                )

    def used_shape(self, shape: tuple[int, int, int]) -> tuple[int, int, int]:
        """Fine cells used per axis: the whole grid, or only whole blocks with ``crop``.

        Grouped layers are all used: a grouping covers them.
        """
        if self.remainder == "crop":
            whole = (1 if self.groups or self.request else self.nz, self.ny, self.nx)
            return tuple(n - n % b for n, b in zip(shape, whole))  # type: ignore[return-value]
        return tuple(shape)  # type: ignore[return-value]

    def coarse_shape(self, shape: tuple[int, int, int]) -> tuple[int, int, int]:
        """Number of coarse blocks per axis for a fine grid of `shape`."""
        return tuple(self.edges(n, axis).size - 1 for axis, n in enumerate(shape))  # type: ignore[return-value]

    def edges(self, n: int, axis: int) -> np.ndarray:
        """Fine-cell indices where the coarse blocks start and end along `axis`.

        Returns
        -------
        ndarray of shape (n_blocks + 1,)
            ``edges[i]:edges[i+1]`` are the fine cells of block ``i``.
        """
        size = self.cells[axis]
        used = self.used_shape((n, n, n))[axis]
        return axis_edges(size, used)

    def coarse_index(self, fine: int, n: int, axis: int) -> int:
        """The coarse block along `axis` holding fine cell `fine` (of `n` cells; the last block if past it).

        Examples
        --------
        >>> BlockSpec.parse("2x2x1,3").coarse_index(2, 4, 0), BlockSpec(2, 2, 2).coarse_index(2, 4, 0)
        (1, 1)
        """
        edges = self.edges(n, axis)
        return int(min(np.searchsorted(edges, fine, side="right") - 1, edges.size - 2))

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
