"""Shared flow engine: steady single-phase two-point flux on Cartesian grids.

Stages 3b–5 (flow-based upscaling, coarse transmissibilities, the
fine-versus-coarse check) build on the same pieces:

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
