"""Columns whose concentration cannot fall in time: the peak of a window is its end.

A column whose data do not change in time (no schedules, no depleting source zone,
steady flow), that starts clean and whose data only put solute in (boundary
concentrations >= 0, a top flux into the column >= 0, a bottom flux out of it <= 0,
layer sources >= 0, and no end that withdraws solute at a prescribed rate), has a
concentration C(z, t) that is nondecreasing in t at every depth.  The argument is the
comparison principle: u(t + h) solves the same problem as u(t) with the initial state
u(h), which is >= 0 = u(0) by positivity (:func:`transport.solvers.checks.concentration_bounds`
vouches for the lower bound 0); the difference of the two has zero data and a
nonnegative start, so it stays >= 0 (Protter and Weinberger 1967, *Maximum Principles in
Differential Equations*, ch. 3; the "start from a subsolution, rise monotonically" form
is Sattinger 1972, Indiana Univ. Math. J. 21:979, from memory).  The zero state is a
subsolution exactly when the data only put solute in.

A Monte Carlo realization's receptor then peaks, over the design life, at the design
life itself (:func:`transport.site.boring.curve_metrics` with ``nondecreasing``), and the
early samples of its curve can only matter for the first crossing of the screening level.
"""
from __future__ import annotations

from transport.solvers.checks import concentration_bounds

__all__ = ["nondecreasing_in_time"]

_VALUED = ("concentration", "inlet", "mass-transfer")  # kinds whose value is a C outside


def nondecreasing_in_time(column, initial=None) -> bool:
    """True when the column's concentration cannot decrease in time at any depth (see
    the module's text); False when that is not established (not that it falls)."""
    if initial is not None and (callable(initial)
                                or getattr(initial, "kind", "clean") != "clean"):
        return False
    for end, bc in (("top", column.top), ("bottom", column.bottom)):
        if bc.schedule is not None or bc.kind == "source-zone":
            return False
        if bc.kind in _VALUED and not bc.value >= 0:
            return False
        if bc.kind == "flux" and not (bc.value >= 0 if end == "top" else bc.value <= 0):
            return False
    for lay in column.layers:
        if lay.source_schedule is not None or not lay.source_rate >= 0:
            return False
    # positivity (an inlet that water leaves with C_in > 0 withdraws solute: no bound)
    lo = concentration_bounds(column, initial, 1.0).lo
    return lo is not None and lo >= 0
