"""Stage 4: the flow engine, steady single-phase two-point flux on Cartesian grids.

The flow-based methods (stage 3), the coarse transmissibilities and the
fine-versus-coarse check (stage 5) build on the same pieces:

* ``transmissibility`` — half-cell and face transmissibilities (harmonic rule);
* ``islands``         — which cells connect to a fixed-pressure face;
* ``solvers``         — algebraic multigrid or direct sparse solves;
* ``steady``          — a pressure drop along one axis: pressures, flow rate, k_eff.
"""

from .solvers import ConvergenceError, make_solver
from .steady import AxisFlow, pressure_drop
from .transmissibility import Transmissibilities, transmissibilities

__all__ = [
    "AxisFlow",
    "ConvergenceError",
    "Transmissibilities",
    "make_solver",
    "pressure_drop",
    "transmissibilities",
]
