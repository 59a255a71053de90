"""One boring's column solved and checked: fields on the site grid and receptor metrics.

The column is built from SI floats (:mod:`transport.site.columns`) and its modal
series built once (:func:`site_series`: :func:`transport.solvers.modal.series.build_series`
without the quadrature a clean column does not need). Concentration and cumulative mass
are evaluated only on the written grid, in one pass with the receptor depth (depth
functions evaluated once), giving the numbers of :func:`transport.solvers.modal.series.solve`
on the same column, and vouched for by the Laplace engine (:func:`checked_fields`). At the
receptor depth, read from the release (time 0; before the earliest output time the curve
is the Laplace engine's): the first crossing of the screening level within the design life
(Brent's method on the continuous series after a bracketing scan; Brent 1973,
*Algorithms for Minimization without Derivatives*, ch. 4), the peak concentration and
its time (bounded Brent minimisation around the best scan sample), and the cumulative
mass per unit area through the receptor depth at the end of the design life (closed form
in time, :meth:`transport.solvers.modal.series.ModalSeries.cumulative_mass`). Monte Carlo
realizations need only the receptor curve (:func:`realization_metrics`).
"""
from __future__ import annotations

import functools
import math
import warnings

import numpy as np

from transport.analysis.metrics import (ReceptorMetrics, ReceptorViews, end_trend,
                                        time_above)
from transport.model.column import InitialState
from transport.site.curves import (SCAN_SAMPLES, TIME_RTOL, curve_metrics, scan_times,
                                   with_early_window)
from transport.site.laplace_checks import (early_metrics, laplace_curve, laplace_largest,
                                           onto_bounds, stays_below, verified_metrics,
                                           vouch_read_times)
from transport.units import YEAR
from transport.solvers.checks import (QUANTITIES, UnreliableResultError, choose,
                                      clip_to_bounds, concentration_bounds,
                                      describe_refusal, good_enough, own_errors,
                                      quantities, switched, vouched_from)
from transport.solvers.laplace import solve_laplace
from transport.solvers.modal.projection import initial_profile
from transport.solvers.monotone import nondecreasing_in_time
from transport.solvers.modal.series import (AccuracyWarning, build_series,
                                            earliest_time_after_change)
from transport.solvers.result import checked_arithmetic

__all__ = ["SCAN_SAMPLES", "MAX_MODES", "TIME_RTOL", "site_series", "receptor_metrics",
           "curve_metrics", "solve_boring", "window_views", "views_metrics", "checked_fields",
           "verified_metrics", "realization_metrics"]

MAX_MODES = 4000  # the mode cap of transport.solvers.modal.series.solve


# ------------------------------------------------------------------------ series
def site_series(column, t_min: float, tolerance: float, max_modes: int = MAX_MODES,
                initial=None, known=None):
    """The :class:`~transport.solvers.modal.series.ModalSeries` of a boring's column: for a clean
    column without the quadrature of the projections (zero) and of the layer masses (not
    written for sites): ``build_series(..., masses=False)``; with a measured ``initial``
    state its projections are computed as in a single-column run.  ``known``: the
    column's modes from a shared solve (:func:`transport.site.chunks.shared_modes`)."""
    return build_series(column, initial or InitialState.clean(), t_min, tolerance,
                        max_modes, masses=False, known_modes=known)


class _Probe:
    """Concentration and cumulative mass of a series at fixed depths, for any times,
    with the depth functions evaluated once (the sums of
    :meth:`ModalSeries.concentration` and :meth:`ModalSeries.cumulative_mass`)."""

    def __init__(self, series, z, _parent=None):
        self.series, self.z = series, np.atleast_1d(np.asarray(z, dtype=float))
        if _parent is None:
            self.c_modes, self.f_modes, self.c_lift, self.f_lift = series.fields(self.z)
        self.clean = not np.any(series.proj0)
        self._tail, self._parent = None, _parent

    def rows(self, sel: slice):
        """The probe at depths ``z[sel]`` only (the receptor row for the metrics, whose
        root finding calls it many times), sharing the evaluated depth functions."""
        sub = _Probe(self.series, self.z[sel], _parent=(self, sel))
        sub.c_modes, sub.f_modes, sub.c_lift, sub.f_lift = (
            m[sel] for m in (self.c_modes, self.f_modes, self.c_lift, self.f_lift))
        return sub

    def tail(self):
        if self._tail is None:
            if self._parent is not None:
                probe, sel = self._parent
                self._tail = {k: (v if k.startswith("D") else v[sel])
                              for k, v in probe.tail().items()}
            else:
                self._tail = self.series.tail_corrections(self.z)
        return self._tail

    def coefficients(self, t):
        return self.series.coefficients(t)

    def concentration(self, t):
        s = self.series
        out = (self.c_modes @ self.coefficients(t) + self.c_lift @ s.signal_values(t)).T
        drive = s.drive(t)
        if np.any(drive):
            out = out + (self.tail()["C"][:, 1:] @ drive).T
        return out

    def cumulative_mass(self, t):
        t = np.atleast_1d(np.asarray(t, dtype=float))
        out = self.series.integrated_rows(self.f_modes, self.f_lift, self.tail()["F_exact"],
                                          t)
        return np.where(t[:, None] == 0, 0.0, out)

    def roundoff_bound(self, t, rows=slice(None)):
        """:meth:`ModalSeries.roundoff_bound` at the probe's depths ``rows``, with the
        depth functions already evaluated."""
        return self.series.roundoff_bound(self.z[rows], t, c_modes=self.c_modes[rows])


def receptor_metrics(series, depth: float, level: float, t_start: float, t_end: float,
                     n_scan: int = SCAN_SAMPLES, probe=None):
    """(breakthrough time or NaN, peak time, peak concentration, cumulative mass).

    Times in s, concentration kg m-3, mass kg m-2; the window is [t_start, t_end]
    (earliest resolved output time to the end of the design life). A breakthrough equal
    to ``t_start`` means the level is already reached at the earliest resolved time.
    The crossing is polished by Brent's root finder and the peak by bounded Brent
    minimisation to a relative time tolerance TIME_RTOL, both on the continuous series.
    """
    probe = probe or _Probe(series, [depth])
    m = curve_metrics(lambda t: probe.concentration(t)[:, 0], t_start, t_end, level, n_scan)
    return m + (float(probe.cumulative_mass(np.array([t_end]))[0, 0]),)


@checked_arithmetic
def solve_boring(site, col, depth, times, grid, initial=None, known=None):
    """Fields on the grid (cut at the bottom), metrics and warnings of one column:
    the numbers of :func:`transport.solvers.modal.series.solve` on the same column and depths.

    Parameters
    ----------
    site : transport.site.config.Site
        Screening level, design life and tolerance.
    col : Column
        The boring's column.
    depth : float
        Receptor depth, m.
    times, grid : numpy.ndarray
        Output times (s) and the site's common depth grid (m).
    initial : InitialState, optional
        Measured initial profile; default clean.
    known : Modes, optional (the modes of :func:`transport.site.chunks.shared_modes`)

    Returns
    -------
    tuple
        (depths of the grid kept, concentration (time, depth), cumulative mass (time,
        depth), metrics in the order of ``METRIC_KEYS``, warning texts).
    """
    initial = initial or InitialState.clean()
    keep = grid <= col.length * (1 + 1e-12)
    z = np.minimum(grid[keep], col.length)
    t_end = site.design_life
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        t_min = earliest_time_after_change(col, times)
        series = site_series(col, t_min, site.tolerance, initial=initial, known=known)
        probe = _Probe(series, np.append(z, depth))
        conc = probe.concentration(times)
        cum = probe.cumulative_mass(np.append(times, t_end))
        positive = times > 0
        scale = max(float(np.max(np.abs(conc[:, :-1]))), 1e-300)
        bound = probe.roundoff_bound(times[positive], slice(0, z.size))
        if bound.max() > site.tolerance * scale:
            bad_t = times[positive][np.any(bound > site.tolerance * scale, axis=1)]
            warnings.warn(
                f"rounding error of the modal series (up to {bound.max():.3g} kg/m3, the "
                f"column Peclet number is about "
                f"{2 * (series.op.A.max() - series.op.A.min()):.0f}) exceeds the tolerance "
                f"at {bad_t.size} output time(s), the latest {bad_t.max() / YEAR:.4g} yr; "
                "use later "
                "output times or cross-check with another engine", AccuracyWarning)
    conc[times == 0] = initial_profile(col, initial, np.append(z, depth))  # the state itself
    receptor = probe.rows(slice(-1, None))
    conc, cum, conc_at = checked_fields(site, col, initial, times, np.append(z, depth), t_end,
                                        conc, cum, lambda t: receptor.concentration(t)[:, 0],
                                        lambda t: series.resolved(t, times))
    t_start = float(times[positive].min())
    served = conc_at
    conc_at = _Remember(conc_at)  # the same values; the later scans reuse its samples
    within = _error_bound(site, col, initial, times, conc)
    m = curve_metrics(conc_at, t_start, t_end, site.screening_level, SCAN_SAMPLES,
                      within=within)
    # the window from the release (the curve is the Laplace engine's before t_start)
    rising = nondecreasing_in_time(col, initial)
    m = with_early_window(conc_at, t_start, site.screening_level, m, rising, within)
    views = window_views(site, col, initial, depth, times, conc_at, m, cum, rising)
    # where the Laplace engine serves the curve, its own bound vouches for what is read
    run = views.whole_run
    vouch_read_times(served, col, depth, (("breakthrough", m[0]), ("peak", m[1]),
                                          ("whole run's breakthrough", run.first_exceedance),
                                          ("whole run's peak", run.peak_time)), within)
    # the design-life peak as the view has it: on the physical bounds (as the fields)
    m = m[:2] + (views.design_life.peak_concentration,)
    metrics = m + (float(cum[-1, -1]), depth, series.eigenvalues.size, col.length)
    return (keep, conc[:, :-1], cum[:-1, :-1], metrics + views_metrics(views),
            tuple(str(w.message) for w in caught))


def _error_bound(site, col, initial, times, conc) -> float:
    """The tolerance times the scale of C a boring's curve is read with (the bound the
    data give over the run, or the largest C written): a second peak or a crossing
    between scan samples that passes by less is a rounding bump."""
    t_run = max(float(np.max(times)), site.design_life)
    scale = concentration_bounds(col, initial, t_run).scale
    return site.tolerance * (scale or float(np.nanmax(np.abs(conc))))


class _Remember:
    """A curve C(t) that remembers the sample arrays it was asked for (the windows'
    scans share their samples)."""

    def __init__(self, conc):
        self.conc, self.seen = conc, {}

    def __call__(self, t):
        t = np.atleast_1d(np.asarray(t, float))
        key = t.tobytes()
        if key not in self.seen:
            self.seen[key] = np.asarray(self.conc(t), float)
        return self.seen[key]


def window_views(site, col, initial, depth, times, conc_at, design, cum, rising=False):
    """The receptor read from the release (time 0) over the design life and over the
    whole run (to the last output time, or the design life if later) as
    :class:`transport.analysis.metrics.ReceptorViews`: the design-life breakthrough and
    peak ``design`` (from :func:`curve_metrics`), the time above the level
    (:func:`transport.analysis.metrics.time_above`), the whole run's metrics, and
    whether C still rises at each window's end
    (:func:`transport.analysis.metrics.end_trend`, against twice the tolerance times the
    scale of C). ``cum`` holds the cumulative mass at the output times and the design
    life (last row), the receptor in the last column. ``rising``: the curve cannot fall
    (:func:`transport.site.curves.with_early_window`)."""
    curve = _Remember(conc_at)
    level, tol = site.screening_level, site.tolerance
    t_start = float(times[times > 0].min())
    t_life = site.design_life
    t_run = max(float(times.max()), t_life)
    bounds = concentration_bounds(col, initial, t_run)
    bounded = bounds.scale
    run = with_early_window(curve, t_start, level,
                            curve_metrics(curve, t_start, t_run, level, SCAN_SAMPLES,
                                          within=tol * (bounded or 0.0)),
                            rising, tol * (bounded or 0.0))
    mass_life = float(cum[-1, -1])
    mass_run = mass_life if t_run == t_life else float(cum[times.size - 1, -1])
    scale = bounded or max(abs(run[2]), 1e-300)
    bound = tol * scale
    out = []

    def at(d, t):  # the receptor curve in the (depth, times) form of analysis.metrics
        return curve(t)
    for (bt, pk_t, pk), t_end, mass in ((design, t_life, mass_life),
                                        (run, t_run, mass_run)):
        # from the release where the level is crossed before t_start (else no time
        # above lies there)
        above = time_above(at, depth, level, 0.0 if bt < t_start else t_start, t_end,
                           n=SCAN_SAMPLES)
        trend = end_trend(at, depth, t_start, t_end, bound, SCAN_SAMPLES)
        # as the fields: onto the physical bounds where outside within the error bound
        pk, c_end = onto_bounds(col, bounds, depth, [pk, curve(np.array([t_end]))[0]],
                                bound)
        first = None if np.isnan(bt) else bt
        out.append(ReceptorMetrics(depth, level, t_end, first, above, pk_t, pk, mass, None,
                                   None, first is None, c_end, trend, bound, 0.0))
    return ReceptorViews(out[0], out[1])


def views_metrics(views):
    """The site metrics of :data:`transport.site.chunks.METRIC_KEYS` after the first
    seven, from :func:`window_views`: time above the level over the design life, whether
    the peak lies after it (1/0), the whole run's breakthrough (NaN: not reached), time
    above, peak time and concentration, mass, whether its peak lies after its end (1/0),
    and the end of the run (s)."""
    d, w = views.design_life, views.whole_run
    return (d.time_above_level, float(views.peak_after_design_life),
            math.nan if w.first_exceedance is None else w.first_exceedance,
            w.time_above_level, w.peak_time, w.peak_concentration, w.cumulative_mass,
            float(w.peak_beyond_horizon), w.horizon)


def checked_fields(site, col, initial, times, z, t_end, conc, cum, modal_at, resolved=None):
    """The modal fields of a boring vouched for by the Laplace engine (as
    :func:`transport.solvers.engines.solve_column`): per output time the modal values where the
    two agree within the tolerance for C and the cumulative mass, else the Laplace
    values, moved onto the physical bounds where they lie outside them within their
    error bound (:func:`transport.solvers.checks.clip_to_bounds`, as solve_column does);
    a time neither can vouch for refuses the boring.  Returns the fields and
    the receptor curve C(t) the metrics are read from (the modal series from the output
    time on which it agrees with the Laplace engine at the receptor at every later
    output time, the Laplace engine before)."""
    tol = site.tolerance
    t_all = np.append(times, t_end)
    bounds = concentration_bounds(col, initial, float(t_all.max()))
    enough = good_enough(col, bounds.scale, tol)
    lap = solve_laplace(col, t_all, z, initial=initial, enough=enough, compiled=True)
    lq = quantities(lap)
    le = own_errors(lap)
    # the last row of cum is the design life at every depth; C there is not asked for
    mq = {"concentration": np.vstack([conc, lq["concentration"][-1:]]),
          "total_flux": lq["total_flux"], "cumulative_mass": cum,
          "budget": np.zeros((t_all.size, 0))}
    nan = {q: np.full(t_all.size, np.nan) for q in QUANTITIES}
    nan["total_flux"] = le["total_flux"]  # not a modal output here: taken from Laplace
    nan["budget"] = np.zeros(t_all.size)
    lq["budget"] = np.zeros((t_all.size, 0))
    le = dict(le, budget=np.zeros(t_all.size))
    choice = choose(t_all, [("modal", mq, nan), ("laplace", lq, le)], tol, bounds, col, z)
    if not choice.reliable.all():
        raise UnreliableResultError(
            f"boring column of {col.length:g} m: "
            + describe_refusal(t_all, choice, tol, "modal and laplace"),
            t_all[~choice.reliable])
    modal = choice.engine == "modal"
    conc = np.where(modal[:-1, None], conc, lq["concentration"][:-1])
    # as solve_column: values outside the physical bounds by no more than their error
    # bound (rounding-level negatives of a clean column) are moved onto the bounds
    conc = clip_to_bounds(col, bounds, z, conc, choice.error["concentration"][:-1])
    cum = np.where(modal[:, None], cum, lq["cumulative_mass"])
    depth = float(z[-1])
    # the receptor curve, as solve_column's (transport.solvers.engines.modal_evaluator):
    # the modal series from the first output time after which it agreed with the Laplace
    # engine AT THE RECEPTOR DEPTH at every output time, within the tolerance and the
    # Laplace engine's bound (the curve is read there only; deeper rows of an advective
    # column cancel to rounding at early times), the Laplace engine before it and where
    # ``resolved(t)`` is False (right after a signal change, where the truncated series
    # rings), the Laplace engine alone if no such tail exists; the Laplace engine before
    # the earliest output time, where the series is not sized (the initial state at 0)
    scale = choice.scale["concentration"]
    gap = np.abs(mq["concentration"][:-1, -1] - lq["concentration"][:-1, -1])
    with np.errstate(invalid="ignore"):  # the error of the modal value: |gap| + the
        used = gap + le["concentration"][:-1] <= tol * scale  # Laplace bound (as choose)
    cut = vouched_from(used, times)
    early = laplace_curve(col, depth, initial, enough)  # before the earliest output time
    if cut >= times.size:
        return conc, cum, early
    return conc, cum, _switched(early, modal_at, max(float(times[cut]),
                                                     float(times[times > 0].min())), resolved)


def _switched(early, late, t_switch, keep=None):
    """C(t): ``early`` before t_switch, then ``late`` where ``keep(t)``, else ``early``;
    with ``early``'s ``laplace_bound`` where early serves (0 elsewhere)."""
    def curve(t):
        return switched(t, t_switch, early, late, keep)
    if hasattr(early, "laplace_bound"):
        curve.laplace_bound = lambda t: switched(t, t_switch, early.laplace_bound,
                                                 np.zeros_like, keep)
    return curve


def steps_only(series) -> bool:
    """Whether every signal of the series is made of steps (constant between its
    changes): the mode count and the rounding bound are sized for those.  After a ramp
    or an exponential signal the truncated sum converges only algebraically in the mode
    count (the quasi-static tail correction is exact to first order in rate / lambda):
    an advective column's modal sum and its tail correction cancel from 5e4 to 0.03
    (one sand layer, column Peclet number about 64, a top concentration decaying with a
    40 yr half-life) and 87 modes leave -3.4 kg/m3 where the concentration is 0.034,
    1600 modes still 1e-5, while the rounding bound, which counts the terms of a step,
    reports 1e-14.  A Monte Carlo column's receptor curve, which is checked against the
    Laplace engine only at its breakthrough and peak, is then the Laplace engine's."""
    return all(kind == "step" for sig in series.signals for kind, *_ in sig.atoms)


def modal_scan(probe, t_start, t_end, tol, scale, level, nondecreasing=False):
    """Where the modal series serves a realization's receptor curve, and the scan of
    that curve when the Laplace engine is not needed for it: (t_modal, scan).

    t_modal: the first scan sample of the window from which the modal series' rounding
    bound (:meth:`ModalSeries.roundoff_bound`) at the probe's depth stays within
    ``tol * scale`` at every later sample; None if it does not at the last one.

    scan: the curve at the scan samples when the samples before t_modal cannot matter
    for the metrics, else None (the caller then scans the switched curve, the Laplace
    engine before t_modal).  They cannot matter when at each of them the concentration,
    bounded by |modal value| + sqrt(n) x the rounding bound (16 n eps times the sum of
    the terms' moduli, above the worst-case rounding (n - 1) eps of a sum of n terms,
    Higham 2002, *Accuracy and Stability of Numerical Algorithms*, ch. 4, equation
    number from memory) + the truncation
    tolerance, is below half the screening level and half the largest later sample:
    no crossing and no peak can lie there, so the breakthrough, the peak and their
    polish (which still read the switched curve) are those of the full scan.  Those
    samples then hold the modal values, which are not used otherwise.  Not used when a
    signal changes inside the window (the series is sized for the times from the
    earliest output time after each change: right after one the curve is the Laplace
    engine's, :meth:`ModalSeries.resolved`).  A ``nondecreasing`` curve peaks at
    the window's end: its early samples need only stay below half the level."""
    t = scan_times(t_start, t_end, SCAN_SAMPLES)
    rb = probe.roundoff_bound(t)[:, 0]
    cut = vouched_from(rb <= tol * scale, t)
    if cut == t.size:
        return None, None
    if cut == 0:
        return float(t[0]), None
    t_modal = float(t[cut])
    # the series is resolved only from the earliest output time after each change
    if any(0.0 < c < t_end for c in probe.series.change_times()):
        return t_modal, None
    early = probe.concentration(t[:cut])[:, 0]
    n = max(probe.series.modes.lam.size, 1)
    upper = float(np.max(np.abs(early) + math.sqrt(n) * rb[:cut])) + tol * scale
    if not upper <= 0.5 * level:  # (the later samples are then not evaluated here)
        return t_modal, None
    late = probe.concentration(t[cut:])[:, 0]
    if not (nondecreasing or upper <= 0.5 * float(np.max(late))):
        return t_modal, None
    return t_modal, np.concatenate([early, late])


@checked_arithmetic
def realization_metrics(site, col, depth, t_start, times, initial=None, known=None,
                        series=None, shortcut=True):
    """(breakthrough time, peak concentration) of one Monte Carlo column, warnings.

    A curve that cannot fall and ends below the level is read on the Laplace engine
    alone (:func:`transport.site.laplace_checks.stays_below`: not reached, its end
    value). Otherwise the receptor curve is the modal series from the scan sample on
    which its rounding bound stays within the tolerance, the Laplace engine before it
    (an advective column's modal sum cancels to rounding early: a spurious 'peak' of
    1e-6 of the scale at the first sample of a plume that never arrives), not asked
    where the modal bounds show those samples cannot hold the crossing or the peak
    (:func:`modal_scan`; a rising column peaks at the end); a peak within the tolerance
    of zero is not polished (:func:`curve_metrics`); both are checked against the
    Laplace engine (:func:`verified_metrics`) on the scale the data allow, or where they
    allow none the column's own largest C at the end or the peak; the window before
    ``t_start`` is then read on the Laplace engine's curve (:func:`early_metrics`), and
    the peak moved onto the physical bounds where it lies outside by no more than the
    tolerance.  ``known``: modes of a shared solve;
    ``series``: the column's series built with the boring's other columns
    (:func:`transport.solvers.modal.many.clean_series_many`, the same numbers);
    ``shortcut=False``: the caller has already found that :func:`stays_below` does not
    serve this column (it is not asked again)."""
    initial = initial or InitialState.clean()
    fast = shortcut and stays_below(col, initial, depth, t_start, site.design_life,
                                    site.screening_level, site.tolerance)
    if fast:  # a curve that cannot fall, below the level at its end
        return fast + ((),)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        if series is None:
            series = site_series(col, earliest_time_after_change(col, times),
                                 site.tolerance, initial=initial, known=known)
    probe, tol, t_end = _Probe(series, [depth]), site.tolerance, site.design_life
    bounds = concentration_bounds(col, initial, t_end)
    bounded = bounds.scale
    steps = steps_only(series)
    scale = bounded or (series.largest_vouched(t_end) if steps else
                        laplace_largest(col, initial, t_end))

    def modal_at(t):
        return probe.concentration(t)[:, 0]
    curve, scan = modal_at, None
    rising = nondecreasing_in_time(col, initial)
    if not steps:  # a ramp or an exponential signal: the Laplace engine's curve
        curve = laplace_curve(col, depth, initial,
                              good_enough(col, scale, tol) if scale else None)
    elif scale:
        t_modal, scan = modal_scan(probe, t_start, t_end, tol, scale, site.screening_level,
                                   rising)
        enough = good_enough(col, scale, tol)
        laplace_at = laplace_curve(col, depth, initial, enough)
        # the Laplace engine right after a signal change (series.resolved)
        keep = (functools.partial(series.resolved, times=times)
                if any(c > 0 for c in series.change_times()) else None)
        curve = (laplace_at if t_modal is None else modal_at
                 if t_modal <= t_start and keep is None else
                 _switched(laplace_at, modal_at, t_modal, keep))
    bt, pk_t, pk = curve_metrics(curve, t_start, t_end, site.screening_level, SCAN_SAMPLES,
                                 scan, tol * (scale or 0.0), rising)
    scale = bounded or max(scale, abs(pk), 1e-300)
    bt, pk = verified_metrics(col, initial, depth, t_start, t_end, site.screening_level,
                              tol, bt, pk_t, pk, scale)
    # the window from the release: a crossing or a peak before the earliest output time
    bt, pk = early_metrics(col, initial, depth, t_start, site.screening_level, tol, scale,
                           bt, pk, rising)
    pk, = onto_bounds(col, bounds, depth, [pk], tol * scale)  # as the fields
    return bt, pk, tuple(str(w.message) for w in caught)
