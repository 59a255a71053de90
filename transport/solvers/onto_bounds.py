"""Values moved onto the physical bounds of a run where they lie outside them by no more
than their error bound: a change within the stated error, so that a reader never meets
a concentration or a mass the model cannot produce (a negative concentration of a clean
column, a stored mass of -3e-18 kg/m2). Larger violations are refused by
:func:`transport.solvers.checks.choose`. ``bounds`` is a
:class:`transport.solvers.checks.Bounds`.
"""
from __future__ import annotations

import numpy as np

__all__ = ["clip_to_bounds", "budget_onto_bounds"]


def clip_to_bounds(column, bounds, depths, conc, error):
    """C moved onto its physical bounds where it lies outside them by no more than its
    error bound (rounding-level negatives of a clean column become 0): a change within
    the stated error, so a reader never meets a negative concentration the model cannot
    produce.  Larger violations were already rejected by :func:`choose`."""
    if bounds is None:
        return conc
    depths = np.asarray(depths, float)
    lay = np.clip(np.searchsorted(column.interfaces, depths, side="right") - 1, 0,
                  bounds.kappa.size - 1)
    kap = bounds.kappa[lay][None, :]
    err = np.asarray(error, float)[:, None]
    out = conc.copy()
    if bounds.lo is not None:
        lo = bounds.lo * kap
        out = np.where((out < lo) & (out >= lo - err), lo, out)
    if bounds.hi is not None:
        hi = bounds.hi * kap
        out = np.where((out > hi) & (out <= hi + err), hi, out)
    return out


def budget_onto_bounds(bounds, budget: dict, error) -> dict:
    """The budget with its stored and decayed masses moved onto 0 where they are
    negative by no more than their error bound (``error``, kg m-2 per time), when the
    run's concentrations cannot be negative (``bounds.lo`` >= 0: neither can the mass
    they hold or the mass that decays from them); the residual follows the change (both
    enter it with a plus sign: stored - initial - entered + left + decayed - produced +
    removed)."""
    if bounds is None or bounds.lo is None or bounds.lo < 0:
        return budget
    out = dict(budget)
    err = np.asarray(error, float)
    for key in ("stored", "decayed"):
        if key not in out:
            continue
        value = np.asarray(out[key], float)
        moved = np.where((value < 0) & (value >= -err), 0.0, value)
        if "residual" in out:
            out["residual"] = np.asarray(out["residual"], float) + (moved - value)
        out[key] = moved
    return out
