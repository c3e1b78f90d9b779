"""Connected regions of a grid, so no solve meets a singular system.

Cells connect through faces with a positive transmissibility. A region of
cells that touches no fixed-pressure face has no defined pressure (its
equations are singular) and carries no flow; it is left out of the solve
and counted. Whether any region touches both fixed-pressure faces decides
whether there is a flow path at all.
"""

from __future__ import annotations

import numpy as np
from scipy import sparse
from scipy.sparse import csgraph


def regions(n: int, first: np.ndarray, second: np.ndarray) -> np.ndarray:
    """Label the connected regions of a graph of `n` cells.

    Parameters
    ----------
    n : int
        Number of cells.
    first, second : ndarray of int
        The two cells of every connecting face (faces with T > 0 only).

    Returns
    -------
    ndarray of int, shape (n,)
        Region label of every cell; an unconnected cell is a region of its own.

    Examples
    --------
    >>> regions(4, np.array([0, 2]), np.array([1, 3])).tolist()
    [0, 0, 1, 1]
    """
    graph = sparse.coo_matrix((np.ones(first.size, np.int8), (first, second)), shape=(n, n))
    return csgraph.connected_components(graph, directed=False)[1]


def anchored(labels: np.ndarray, inlet: np.ndarray, outlet: np.ndarray) -> tuple[np.ndarray, bool]:
    """Cells whose region touches a fixed-pressure face, and whether a path joins the two.

    Parameters
    ----------
    labels : ndarray of int, shape (n,)
        Region labels from `regions`.
    inlet, outlet : ndarray of int
        Cells with a positive transmissibility to the inlet and to the outlet face.

    Returns
    -------
    keep : ndarray of bool, shape (n,)
        True for cells in a region that touches the inlet or the outlet.
    connected : bool
        True if some region touches both, so flow can pass.
    """
    at_inlet = np.unique(labels[inlet])
    at_outlet = np.unique(labels[outlet])
    keep = np.isin(labels, np.union1d(at_inlet, at_outlet))
    return keep, bool(np.intersect1d(at_inlet, at_outlet).size)
