"""Laplace-domain engine: exact layered transfer, numerical inversion on Talbot,
hyperbolic and parabolic contours.

The second, independent path of the project (beside the modal and finite-volume
engines).  It serves early times (where the modal series needs too many modes), high
column Peclet numbers (where the modal sum in v = e^{-A} u loses digits), a
semi-infinite bottom layer, and cross-checks.

Modules: :mod:`~transport.solvers.laplace.transfer` (the exact transformed solution of
the layered column for a batch of s), :mod:`~transport.solvers.laplace.contour` (the
contours, each sum with its error estimate), :mod:`~transport.solvers.laplace.inversion`
(which contour serves which time: windows of times share a hyperbola),
:mod:`~transport.solvers.laplace.engine`
(:func:`solve_laplace`: signals, components and the outputs).
"""
from transport.solvers.laplace.contour import (DEFAULT_NODES, companion_nodes, default_nodes,
                                               invert, parabola_nodes, talbot_nodes)
from transport.solvers.laplace.engine import solve_laplace
from transport.solvers.laplace.transfer import LaplaceTransfer, PiecewiseCubic

__all__ = ["PiecewiseCubic", "solve_laplace", "talbot_nodes", "invert", "LaplaceTransfer",
           "DEFAULT_NODES", "default_nodes", "companion_nodes", "parabola_nodes"]
