"""How large a flow check may be: the cell limit, the memory it needs, and the refusals before any work.

A check solves the whole fine grid at once; beyond `DEFAULT_LIMIT` cells (or
``--check-limit``) it runs on sub-domain windows instead (`upscale.check.subdomains`),
and a check that would not fit in the memory available is refused before
anything is read or upscaled.
"""

from __future__ import annotations

import math

from ..errors import InputError
from ..field import Field
from ..io.windows import available_memory

#: Fine cells solved at once by the check at most, by default (about 13 GB of solver data in 2D).
DEFAULT_LIMIT = 20_000_000
#: Peak memory of the check per fine cell solved at once (multigrid set-up, pressures and fluxes
#: of every axis), measured on lognormal fields of 1-2 M cells: 2D 600-620 B, 3D 960 B, rounded up.
BYTES_PER_CELL = {2: 650, 3: 1000}


#: What to do about a refusal by `too_large`.
RAISE_LIMIT = "raise `check_limit` if the memory allows (about 0.65 kB per cell in 2D, 1 kB in 3D)"


def too_large(shape: tuple[int, int, int], max_cells: int) -> str | None:
    """Why a fine grid of `shape` is not solved whole under the limit, or None if it is."""
    cells = math.prod(shape)
    if cells <= max_cells:
        return None
    return f"the fine grid has {cells} cells, more than the check limit of {max_cells}"


def refuse_global_past_limit(shape: tuple[int, int, int], max_cells: int) -> None:
    """Refuse, before any work, the ``global`` method on a fine grid too large to solve whole.

    Raises
    ------
    InputError
        Saying that ``local-global`` needs no fine global solve.
    """
    reason = too_large(shape, max_cells)
    if reason:
        raise InputError(f"global fits the fine model's global flows, and {reason}; local-global works "
                         f"there (it needs no fine global solve), or {RAISE_LIMIT}")


def short_of_memory(shape: tuple[int, int, int], ndim: int, max_cells: int, available: int) -> str | None:
    """Why the check's largest solve would not fit in `available` bytes, or None if it would.

    The check solves at most `max_cells` fine cells at once (the whole grid,
    or each sub-domain window); it needs about `BYTES_PER_CELL` per cell.

    Examples
    --------
    >>> short_of_memory((1, 1000, 1000), 2, 20_000_000, 2**30) is None   # 0.65 GB of 1 GiB
    True
    >>> short_of_memory((1, 10_000, 10_000), 2, 20_000_000, 2**30)[:40]
    'the flow check would solve 20000000 fine'
    """
    cells = min(math.prod(shape), max_cells)
    need = cells * BYTES_PER_CELL[ndim]
    if need <= available:
        return None
    fits = available // BYTES_PER_CELL[ndim]
    return (f"the flow check would solve {cells} fine cells at once, about {need / 2**30:.1f} GiB, "
            f"more than the {available / 2**30:.1f} GiB available; give `check_limit={fits}` or less "
            "(beyond it the check runs on sub-domains of that size), or `check=False`")


def refuse_check_past_memory(fine: Field, max_cells: int) -> None:
    """Refuse, before any work, a flow check whose largest solve would not fit in memory.

    Raises
    ------
    InputError
        Saying how much the check would need and which ``--check-limit`` fits.
    """
    reason = short_of_memory(fine.shape, fine.ndim, max_cells, available_memory())
    if reason:
        raise InputError(reason)

