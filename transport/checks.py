"""Checks inside every run: the smoke alarm of the engines.

Independent of the series that produced a result, cheap, and run in ``run``,
``compare``, ``site`` and the Python API.  (Filled in below.)
"""
from __future__ import annotations

__all__ = ["UnreliableResultError"]


class UnreliableResultError(RuntimeError):
    """No engine could deliver a quantity within the requested tolerance.

    ``times`` (s) lists the output times concerned and ``quantities`` what failed there
    (e.g. "concentration", "cumulative_mass", "budget").  The message says what was
    tried and what the user can do; the tool never returns such a number as a result.
    """

    def __init__(self, message: str, times=(), quantities=()):
        super().__init__(message)
        self.times = tuple(float(t) for t in times)
        self.quantities = tuple(quantities)
