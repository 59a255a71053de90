"""Sizing of the modal series: its signals, the mode count, the earliest time to resolve.

The truncated series meets a tolerance from the time lambda_N t >= ln(1/tol) + ln N + 2
after a change of a signal (the tail bound); the count follows from the Weyl estimate
of the eigenvalues and is confirmed on the computed spectrum.
"""
from __future__ import annotations

import math
import warnings

import numpy as np

from transport.model.column import Column
from transport.model.schedules import Schedule
from transport.solvers.modal.operator import Operator
from transport.solvers.modal.spectrum import eigenvalues
from transport.units import YEAR

__all__ = ["DEFAULT_TOLERANCE", "ModeCapWarning", "AccuracyWarning", "column_signals",
           "required_modes", "mode_count", "earliest_time_after_change"]

#: Default relative tolerance of the modal series (of the tail bound).
DEFAULT_TOLERANCE = 1e-8


class ModeCapWarning(UserWarning):
    """The mode cap stops the series from meeting the tolerance at the earliest times."""


class AccuracyWarning(UserWarning):
    """Rounding error (high Peclet number, early time) exceeds the requested tolerance."""


def column_signals(column: Column, op: Operator):
    """Signals b_k(t) (Schedules) of the top, bottom and per-layer source responses."""
    def bc_signal(bc, gamma):
        if gamma == 0.0:
            return Schedule()
        sched = bc.schedule if bc.schedule is not None else Schedule.constant(bc.value)
        return sched.scaled(gamma)
    sig = [bc_signal(column.top, op.top_u[2]), bc_signal(column.bottom, op.bottom_u[2])]
    for lay in column.layers:
        if lay.source_rate == 0.0:
            sig.append(Schedule())
        else:
            sig.append(lay.source_schedule if lay.source_schedule is not None
                       else Schedule.constant(1.0))
    return tuple(sig)


def required_modes(op: Operator, t_min: float, tolerance: float, n_max: int) -> int:
    """Mode count with lambda_N t_min >= ln(1/tol) + ln N + 2 (tail bound), Weyl estimate."""
    weyl = float(np.sum(op.thickness * np.sqrt(op.a / op.k)))
    shift = float(np.min(op.s / op.a))
    n = 8
    for _ in range(60):
        target = (math.log(1 / tolerance) + math.log(n) + 2) / t_min
        n_new = int(math.ceil(weyl / math.pi * math.sqrt(max(target - shift, 0.0)))) + 4
        if n_new <= n:
            break
        n = min(n_new, n_max)
        if n == n_max:
            break
    return max(n, 8)


def mode_count(op, t_min, tolerance, max_modes, lam_floor=0.0, known=None):
    """Eigenvalues of enough modes that the tail bound meets ``tolerance`` at ``t_min``
    and lambda_N >= ``lam_floor``; :class:`ModeCapWarning` when ``max_modes`` stops it.

    ``known``: the first eigenvalues of ``op`` already computed (by
    :func:`~transport.solvers.modal.spectrum.eigenvalues_many`), used where they are
    exactly the ``required_modes`` first ones."""
    n_modes = required_modes(op, t_min, tolerance, max_modes)
    if known is not None and known.size == n_modes:
        lam = known
    else:
        lam = eigenvalues(op, n_modes)
    target = max((math.log(1 / tolerance) + math.log(n_modes) + 2) / t_min, lam_floor)
    while lam[-1] < target and n_modes < max_modes:
        n_modes = min(max_modes, int(n_modes * 1.5) + 8)
        lam = eigenvalues(op, n_modes)
    if lam[-1] < target:
        t_ok = (math.log(1 / tolerance) + math.log(n_modes) + 2) / lam[-1]
        warnings.warn(
            f"{n_modes} modes (the cap) do not meet the tolerance {tolerance:g} at the "
            f"earliest time {t_min / YEAR:.4g} yr after a change; results are accurate from "
            f"about {t_ok / YEAR:.4g} yr after it. Raise max_modes or use later output times.",
            ModeCapWarning, stacklevel=4)
    return lam


def earliest_time_after_change(column: Column, times) -> float | None:
    """Smallest positive (t - t_change) over output times and signal switch-on times."""
    times = np.asarray(times, dtype=float)
    changes = {0.0}
    for sched in (column.top.schedule, column.bottom.schedule,
                  *(lay.source_schedule for lay in column.layers)):
        if sched is not None:
            changes.update(sched.change_times)
    gaps = (times[:, None] - np.array(sorted(changes))[None, :]).ravel()
    gaps = gaps[gaps > 0]
    if not gaps.size:
        return None
    # resolve every change as finely as the run's start, so that continuous-time
    # metrics are accurate after each change, not only at the output times
    return min(float(gaps.min()), float(times[times > 0].min()))
