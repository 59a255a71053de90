"""Defaults of the finite-volume engine, in a module of their own so that the other
engines and the command line can name them without loading the engine (and
``scipy.integrate``) when no finite-volume run is asked for."""
from __future__ import annotations

__all__ = ["DEFAULT_TOLERANCE", "MAX_CELLS"]

#: Default relative tolerance of C (of the largest |C| in the column at each time).
DEFAULT_TOLERANCE = 1e-3
#: Default cap on the cells of the finest mesh of the refinement.
MAX_CELLS = 20000
