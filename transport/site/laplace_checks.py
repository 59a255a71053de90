"""A Monte Carlo column's receptor metrics checked by the Laplace engine, and the window
before the earliest output time read on its curve.

:func:`verified_metrics` checks the breakthrough and the peak read on the receptor curve
(the modal series where it serves) against the Laplace engine at those times;
:func:`early_metrics` reads the window from the release (time 0) to the earliest output
time, where the modal series is not sized, on the Laplace engine's curve
(:func:`transport.site.curves.with_early_window`). Both refuse a column whose metrics
neither engine can vouch for within the tolerance. :func:`stays_below` reads, on the
Laplace engine alone, a column whose curve cannot fall and ends below the level.
"""
from __future__ import annotations

import math

import numpy as np

from transport.analysis.metrics import refuse_unvouched
from transport.site.curves import SCAN_SAMPLES, curve_metrics, with_early_window
from transport.solvers.checks import (UnreliableResultError, clip_to_bounds,
                                      concentration_bounds, good_enough)
from transport.solvers.laplace.engine import laplace_concentration, laplace_lone_times
from transport.solvers.modal.projection import initial_profile
from transport.solvers.monotone import nondecreasing_in_time

__all__ = ["laplace_curve", "verified_metrics", "early_metrics", "laplace_largest",
           "onto_bounds", "vouch_read_times", "stays_below"]


def laplace_curve(col, depth, initial, enough):
    """The Laplace engine's concentration at ``depth`` as a curve C(t) (a realization's
    receptor; its concentration alone, :func:`laplace_concentration`); at t <= 0 the
    initial state."""
    def laplace_at(t):
        t = np.atleast_1d(np.asarray(t, dtype=float))
        if t.size and t.min() > 0:
            return laplace_concentration(col, t, [depth], initial=initial,
                                         enough=enough, compiled=True)[0][:, 0]
        out = np.full(t.size, float(initial_profile(col, initial, np.array([depth]))[0]))
        if (t > 0).any():
            out[t > 0] = laplace_at(t[t > 0])
        return out

    def bound(t):
        """The engine's own error bound of those values (0 at t <= 0, the state)."""
        t = np.atleast_1d(np.asarray(t, dtype=float))
        out = np.zeros(t.size)
        if (t > 0).any():
            out[t > 0] = laplace_lone_times(col, t[t > 0], depth, initial=initial,
                                            enough=enough)[1]
        return out
    laplace_at.laplace_bound = bound
    return laplace_at


def vouch_read_times(curve, col, depth, read, limit) -> None:
    """Refuse a boring whose receptor metrics ``read`` ((what, time), ...) lie where the
    Laplace engine serves its curve (before the earliest output time; between output
    times before the modal series takes over) unless that engine's own error bound of C
    there (``curve.laplace_bound``, 0 where the series serves) is within ``limit`` (the
    tolerance times the scale of C): the output times were vouched for by the
    cross-check, the times between them by this
    (:func:`transport.analysis.metrics.refuse_unvouched`)."""
    bound = getattr(curve, "laplace_bound", None)
    if bound is not None:
        refuse_unvouched(bound, read, limit, f"at the receptor ({depth:g} m)",
                         f"boring column of {col.length:g} m: ")


def _vouch(col, initial, depth, at, enough, tol, scale):
    """Refuse the column unless the Laplace engine's own bound meets the tolerance at
    the times ``at`` (the metrics read on its curve)."""
    at = [t for t in at if np.isfinite(t) and t > 0]
    if not at:
        return
    err = laplace_lone_times(col, at, depth, initial=initial, enough=enough)[1]
    with np.errstate(invalid="ignore"):
        vouched = np.all(err <= tol * scale)
    if not vouched:
        raise UnreliableResultError(
            f"Monte Carlo column of {col.length:g} m: neither the modal series nor "
            f"the Laplace engine can vouch for the receptor's breakthrough and peak "
            f"within the tolerance {tol:g} (Laplace error bound up to "
            f"{float(np.nanmax(err)) / scale:.2g} of the scale); loosen [output] "
            "tolerance, or narrow the distributions that give this column", at)


def verified_metrics(col, initial, depth, t_start, t_end, level, tol, bt, pk_t, pk,
                     scale):
    """Check a realization's breakthrough and peak against the Laplace engine: the
    curve's value there is vouched for when its distance from the Laplace value plus
    the Laplace engine's own error bound is within the tolerance (the rule of
    :func:`transport.solvers.checks.choose`).  If not, both metrics are read from the
    Laplace curve instead, and its own bound must meet the tolerance at them, else
    :class:`UnreliableResultError`."""
    probe_t = [t for t in (bt, pk_t) if np.isfinite(t) and t > 0]
    if not probe_t:
        return bt, pk
    enough = good_enough(col, scale, tol)
    # each time on its own Talbot contours (not sharing a window)
    c, e = laplace_lone_times(col, probe_t, depth, initial=initial, enough=enough)
    want = ([level] if np.isfinite(bt) and bt > 0 else []) + [pk]
    with np.errstate(invalid="ignore"):
        if np.all(np.abs(c - np.array(want)) + e <= tol * scale):
            return bt, pk
    bt2, pk2_t, pk2 = curve_metrics(laplace_curve(col, depth, initial, enough), t_start,
                                    t_end, level, SCAN_SAMPLES)
    _vouch(col, initial, depth, (bt2, pk2_t), enough, tol, scale)
    return bt2, pk2


def early_metrics(col, initial, depth, t_start, level, tol, scale, bt, pk, rising):
    """(breakthrough, peak) over the window from the release, from those of the window
    from ``t_start`` (the earliest output time): the Laplace engine's curve before it read by
    :func:`transport.site.curves.with_early_window` (only where the level is already
    reached at ``t_start`` when the curve is ``rising``), its own bound checked at a
    crossing or peak found there (else :class:`UnreliableResultError`)."""
    if rising and not bt <= t_start:  # nothing can lie before t_start
        return bt, pk
    enough = good_enough(col, scale, tol)
    bt2, pk2_t, pk2 = with_early_window(laplace_curve(col, depth, initial, enough),
                                        t_start, level, (bt, math.nan, pk), rising,
                                        tol * scale)
    # the metrics read on the Laplace curve there (a NaN breakthrough is not one)
    moved = [t for t, changed in ((bt2, bt2 != bt), (pk2_t, pk2 != pk)) if changed]
    _vouch(col, initial, depth, moved, enough, tol, scale)
    return bt2, pk2


def laplace_largest(col, initial, t: float, n: int = 41) -> float:
    """The Laplace engine's largest |C| at time t over ``n`` evenly spaced depths and
    the layer faces, less its error bound, or 0: a lower estimate of the largest C
    (the scale of a column whose data bound nothing; :meth:`ModalSeries.largest_vouched`
    where the modal series serves)."""
    z = np.union1d(np.linspace(0.0, col.length, n), col.interfaces)
    c, err = laplace_concentration(col, [t], z, initial=initial, compiled=True)
    big = float(np.max(np.abs(c[0]))) - float(err[0])
    return big if np.isfinite(big) and big > 0 else 0.0


def onto_bounds(col, bounds, depth, values, error) -> list:
    """Receptor values (kg m-3) moved onto the physical ``bounds`` of C where they lie
    outside by no more than ``error`` (a plateau at the source concentration), as the
    fields are (:func:`transport.solvers.checks.clip_to_bounds`)."""
    v = np.asarray(values, dtype=float)[:, None]
    return [float(c) for c in clip_to_bounds(col, bounds, [depth], v,
                                             np.full(v.shape[0], float(error)))[:, 0]]


def stays_below(col, initial, depth, t_start, t_end, level, tol):
    """(NaN, peak concentration) of a Monte Carlo column whose receptor curve cannot
    fall (:func:`transport.solvers.monotone.nondecreasing_in_time`) and is below the
    screening ``level`` at the end of the window, read on the Laplace engine alone;
    None for any other column (its curve is then read in full).

    A curve that cannot fall peaks at the window's end ``t_end`` and stays below the
    level before it when it is below there: its breakthrough is "not reached" and its
    peak is C(t_end). The Laplace engine's value c there (the value the modal curve's
    peak is checked against, :func:`verified_metrics`) serves where its own error bound
    e is within the tolerance times the scale of C the data give and c + e is below the
    level; the peak is then moved onto the physical bounds as the other columns' are
    (:func:`onto_bounds`). The modal series and its scan are not needed for such a
    column (most of a site's realizations, where few reach the level)."""
    if not (level is not None and np.isfinite(level) and 0 < t_start < t_end
            and nondecreasing_in_time(col, initial)):
        return None
    bounds = concentration_bounds(col, initial, t_end)
    if not bounds.scale:
        return None
    limit = tol * bounds.scale
    c, e = laplace_lone_times(col, [t_end], depth, initial=initial,
                              enough=good_enough(col, bounds.scale, tol))
    c, e = float(c[0]), float(e[0])
    if not (e <= limit and c + e < level):
        return None
    pk, = onto_bounds(col, bounds, depth, [c], limit)
    return math.nan, pk
