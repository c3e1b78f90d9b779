"""Two-point flux transmissibilities of a Cartesian grid.

For cells i and j that share a face along one axis, the flow rate between
them is ``q = T (p_i - p_j) / mu`` with the face transmissibility

    T = 1 / (1/t_i + 1/t_j),   t = k A / (Δ / 2),

where ``t`` is the half-cell transmissibility of each cell: its permeability
along the axis times the face area, over the distance from its centre to the
face. This harmonic combination is what makes the flux continuous across
the face (the derivation is in ``docs/discretisation.md``). An inactive cell
(NaN) or a zero permeability has ``t = 0`` and blocks the face.

Units: with k in the user's unit and sizes in m, T is in (unit of k) · m.
Dividing a flow rate ``Q = T Δp`` by ``A Δp / L`` gives back a permeability
in the user's unit, which is how `upscale.flow.steady` reports k_eff.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import cached_property

import numpy as np

from ..field import AXES, PERMEABILITY, Field, Grid
from .islands import regions


@dataclass(frozen=True, eq=False)
class Transmissibilities:
    """Face and boundary transmissibilities of a grid, in (unit of k) · m.

    Attributes
    ----------
    grid : Grid
        Cell sizes of the grid.
    faces : tuple of 3 ndarray
        ``faces[a]`` holds T between neighbours along array axis a (0 = z,
        1 = y, 2 = x): the shape of the grid with that axis one shorter.
    boundary : tuple of 3 (ndarray, ndarray)
        ``boundary[a]`` holds the half-cell t of the first and of the last cell
        along axis a, towards the outer faces of the domain; each has the grid's
        shape with axis a of length 1.
    active : ndarray of bool, shape (L, M, N)
        Cells that exist (not NaN).
    volume_ratio : float
        True bulk volume of the grid over that of `grid`: 1 for a flat grid;
        for a field with a geometry (`upscale.geometry`), whose
        transmissibilities are those of its reference field on the flat
        `grid`, the factor that turns the flat grid's k_eff into the true
        one (divided along x and y, multiplied along z).
    """

    grid: Grid
    faces: tuple[np.ndarray, np.ndarray, np.ndarray]
    boundary: tuple[tuple[np.ndarray, np.ndarray], ...]
    active: np.ndarray
    volume_ratio: float = 1.0

    @property
    def shape(self) -> tuple[int, int, int]:
        """``(L, M, N)``."""
        return self.grid.shape

    @cached_property
    def connections(self) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Flat indices of the two cells of every face with T > 0, and its T (computed once)."""
        index = np.arange(np.prod(self.shape)).reshape(self.shape)
        firsts, seconds, values = [], [], []
        for axis, T in enumerate(self.faces):
            n = self.shape[axis]
            conducting = T > 0
            firsts.append(np.take(index, np.arange(n - 1), axis=axis)[conducting])
            seconds.append(np.take(index, np.arange(1, n), axis=axis)[conducting])
            values.append(T[conducting])
        return np.concatenate(firsts), np.concatenate(seconds), np.concatenate(values)

    @cached_property
    def regions(self) -> np.ndarray:
        """Connected-region label of every cell, flat (computed once; see `upscale.flow.islands`)."""
        first, second, _ = self.connections
        return regions(int(np.prod(self.shape)), first, second)


def half_cell(k: np.ndarray, grid: Grid, axis: int) -> np.ndarray:
    """Half-cell transmissibility ``t = k A / (Δ/2)`` along `axis` for every cell.

    Parameters
    ----------
    k : ndarray of shape (L, M, N)
        Permeability along `axis` (any unit); NaN (inactive) gives t = 0.
    grid : Grid
        Cell sizes in m.
    axis : int
        Array axis: 0 = z (layers), 1 = y (rows), 2 = x (columns).

    Returns
    -------
    ndarray of shape (L, M, N)
        t in (unit of k) · m.

    Examples
    --------
    >>> import numpy as np
    >>> from upscale.field import Grid
    >>> grid = Grid(dz=[2.0], dy=[10.0], dx=[5.0, 5.0])
    >>> half_cell(np.array([[[100.0, np.nan]]]), grid, axis=2)   # 100 * (10 * 2) / 2.5
    array([[[800.,   0.]]])
    """
    sizes = [grid.dz[:, None, None], grid.dy[None, :, None], grid.dx[None, None, :]]
    length = sizes.pop(axis)
    area = sizes[0] * sizes[1]
    t = np.asarray(k, dtype=np.float64) * area / (0.5 * length)
    return np.where(np.isnan(t), 0.0, t)


def harmonic_faces(t: np.ndarray, axis: int) -> np.ndarray:
    """Face transmissibilities ``1 / (1/t_i + 1/t_j)`` between neighbours along `axis`.

    Written as ``t_i t_j / (t_i + t_j)``, which is 0 when either side is 0.

    Examples
    --------
    >>> import numpy as np
    >>> harmonic_faces(np.array([[[2.0, 2.0, 0.0]]]), axis=2)
    array([[[1., 0.]]])
    """
    first = np.take(t, np.arange(t.shape[axis] - 1), axis=axis)
    second = np.take(t, np.arange(1, t.shape[axis]), axis=axis)
    total = first + second
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(total > 0, first * second / total, 0.0)


def transmissibilities(field: Field) -> Transmissibilities:
    """Two-point transmissibilities of a field (fine or coarse) by the harmonic rule.

    Parameters
    ----------
    field : Field
        Permeabilities (NumPy or dask; dask arrays are computed) on any grid,
        including coarse grids with smaller edge blocks. A 2D map gets z faces
        too (for its single layer there are none). A field with a geometry
        gets those of its reference field (`upscale.geometry`).

    Returns
    -------
    Transmissibilities
    """
    ratio = 1.0
    if field.geometry is not None:
        ratio = float(np.asarray(field.cell_volumes()).sum() / field.grid.cell_volumes().sum())
        field = field.reference()
    # read each distinct array once: kx, ky and kz are often the same (lazy) array
    loaded: dict[int, np.ndarray] = {}
    for array in (field.kx, field.ky, field.kz):
        if array is not None and id(array) not in loaded:
            loaded[id(array)] = np.asarray(array, dtype=np.float64)
    faces, boundary = [None, None, None], [None, None, None]
    for name, axis in AXES.items():
        array = getattr(field, PERMEABILITY[name])
        # a map has no vertical permeability; with one layer it has no z faces either
        t = half_cell(loaded[id(field.kx if array is None else array)], field.grid, axis)
        faces[axis] = harmonic_faces(t, axis)
        last = t.shape[axis] - 1
        boundary[axis] = (np.take(t, [0], axis=axis), np.take(t, [last], axis=axis))
    active = ~np.isnan(loaded[id(field.kx)])
    return Transmissibilities(field.grid, tuple(faces), tuple(boundary), active, ratio)
