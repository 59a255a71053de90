"""Receptor metrics on the continuous solution (never read off the output grid).

Crossings of the screening level and peaks are read on the continuous curve
(:mod:`transport.analysis.curve_reading`: a dense scan of C(z_r, t) with every change
time of a schedule or stage, polished with Brent's methods).  Cumulative mass through
the receptor depth comes from the closed-form time integral of the series.

A run is read over two windows (:func:`receptor_views`): the design life and the whole
run.  Whether a window's peak lies beyond its end is read from the curve itself: the
peak is at the end (within :data:`PLATEAU_RTOL`) and C still rises over the last scan
step by more than twice the error bound of C (:func:`end_trend`), or a later window
shows a higher peak.
"""
from __future__ import annotations

from dataclasses import asdict, dataclass

import numpy as np

from transport.analysis.curve_reading import (MAX_POLISHED, N_SCAN, crossings,
                                              first_exceedance, local_extremes,
                                              parabola_extreme, peak, scan_times,
                                              time_above)
from transport.solvers.checks import UnreliableResultError, clip_to_bounds
from transport.units import YEAR

__all__ = ["ReceptorMetrics", "ReceptorViews", "receptor_metrics", "receptor_views",
           "crossings", "first_exceedance", "peak", "time_above", "scan_times",
           "steady_concentration", "end_trend", "error_at", "concentration_bound",
           "PLATEAU_RTOL", "DEFAULT_TOLERANCE", "MAX_POLISHED", "local_extremes",
           "parabola_extreme", "vouch_read_times", "first_unvouched", "refuse_unvouched"]

#: Uniform samples (plus half as many log-spaced) of a curve served by Laplace inversion:
#: 0.4 yr steps over 60 yr; a receptor curve of a metre-scale column varies over years.
N_SCAN_INVERTED = 160
#: A maximum within this relative distance of the end value is a plateau, not a peak
#: (the series is accurate to the solver tolerance, 1e-8 by default).
PLATEAU_RTOL = 1e-6
#: Relative tolerance assumed for a solution that does not carry its own (the default
#: of ``[output] tolerance``).
DEFAULT_TOLERANCE = 1e-8


class _Memo:
    """A curve C(depth, t) that remembers the values it was asked for (the crossing
    and time-above scans sample the same times)."""

    def __init__(self, fn):
        self.fn, self.seen = fn, {}

    def __call__(self, depth, t):
        t = np.atleast_1d(np.asarray(t, float))
        key = (float(depth), t.tobytes())
        if key not in self.seen:
            self.seen[key] = np.asarray(self.fn(depth, t), float)
        return self.seen[key]


def unresolved_windows(solution, tolerance: float = 1e-8):
    """Intervals (c, c + tau) just after each signal change or stage start where the
    truncated modal series does not meet the tolerance; metrics never sample inside.
    None for a checked solution (an ``evaluator``): its curve is served there by another
    engine (``resolved`` of the series), so the metrics and plots sample it all."""
    series = solution.series
    out = []
    if series is None or getattr(solution, "evaluator", None) is not None:
        return out
    if hasattr(series, "timeline"):
        for st, ser in zip(series.timeline.stages, series.series):
            tau = ser.resolved_after(tolerance)
            out += [(st.start + c, st.start + c + tau) for c in ser.change_times()]
    else:
        tau = series.resolved_after(tolerance)
        out += [(c, c + tau) for c in series.change_times()]
    return out


def error_at(solution, t: float):
    """The error bound of C (kg m-3) the run reports at the output times around ``t``.

    Parameters
    ----------
    solution : Solution
        A checked run (``error_estimate`` per output time); None is returned otherwise.
    t : float
        Elapsed time, s.

    Returns
    -------
    float or None
        The larger bound of the two output times that bracket ``t``.
    """
    err = solution.error_estimate
    if err is None:
        return None
    times = np.asarray(solution.times, float)
    err = np.asarray(err, float)
    i = int(np.searchsorted(times, t))
    near = err[max(i - 1, 0):i + 1]
    return float(np.max(near)) if near.size else None


def concentration_bound(solution, t: float, scale: float) -> float:
    """Absolute error bound of C near ``t`` (kg m-3): the run's tolerance times the
    scale of C (the run's own scale when it is checked, else ``scale``), or the engines'
    bound at the output times around ``t`` (:func:`error_at`) when that is larger."""
    tol = solution.tolerance or DEFAULT_TOLERANCE
    own = (solution.scale or {}).get("concentration")
    bound = tol * abs(own if own else scale)
    engines = error_at(solution, t)
    if engines is not None and np.isfinite(engines):
        bound = max(bound, engines)
    return float(bound)


def end_trend(conc_at, depth: float, t_start: float, t_end: float, bound: float,
              n: int = N_SCAN, extra=(), windows=()):
    """Whether C(depth, t) still rises at ``t_end``: ``"rising"``, ``"falling"`` or
    ``"flat"`` (within the error bound), or None when the end cannot be probed.

    C at ``t_end`` is compared with C one uniform scan step earlier (the spacing of
    :func:`scan_times`, (t_end - t_start) / (n - 1)), moved after the last change
    time and unresolved window before ``t_end``; a change larger than twice ``bound``
    (both values carry the error ``bound``) is a rise or a fall, else the curve is flat
    within the tolerance there.

    Parameters
    ----------
    conc_at : callable
        ``conc_at(depth, times) -> array`` (kg m-3).
    depth : float
        Depth, m.
    t_start, t_end : float
        The window, s.
    bound : float
        Absolute error bound of C, kg m-3.
    n : int
        Uniform scan samples of the window.
    extra, windows
        Change times and unresolved windows (s), as in :func:`scan_times`.

    Returns
    -------
    str or None
    """
    step = (t_end - t_start) / max(n - 1, 1)
    after = max([c for c in extra if c < t_end]
                + [b for a, b in windows if a < t_end], default=-np.inf)
    if t_end - step <= after:
        step = (t_end - after) / 2
    if not step > 0:
        return None
    c = np.asarray(conc_at(depth, np.array([t_end - step, t_end])), float)
    change = float(c[1] - c[0])
    if not np.isfinite(change):
        return None
    if change > 2 * bound:
        return "rising"
    if change < -2 * bound:
        return "falling"
    return "flat"


def steady_concentration(series, depth_local: float):
    """C at ``depth_local`` once every signal has settled, or None if there is no steady
    state (no decay and fluxes fixed at both ends, or a ramp that never stops)."""
    if series.eps > 0:
        return None
    final = []
    for sig in series.signals:
        slope = sum(a for k, _, a, _ in sig.atoms if k == "ramp")
        if abs(slope) > 0:
            return None
        final.append(sum(a for k, _, a, _ in sig.atoms if k == "step"))
    z = np.array([float(depth_local)])
    _, _, c_lift, _ = series.fields(z)
    return float(c_lift[0] @ np.array(final))


@dataclass(frozen=True)
class ReceptorMetrics:
    """What a reviewer asks of one run at the point of compliance (SI units)."""

    receptor_depth: float  # m
    screening_level: float | None  # kg m-3
    horizon: float  # s, design life (or end of run)
    first_exceedance: float | None  # s
    time_above_level: float | None  # s within the horizon
    peak_time: float  # s
    peak_concentration: float  # kg m-3
    cumulative_mass: float | None  # kg m-2 through the receptor depth over the horizon
    steady_concentration: float | None  # kg m-3
    time_to_95_percent_steady: float | None  # s
    stays_below_level: bool | None
    end_concentration: float | None = None  # kg m-3 at the horizon
    trend_at_end: str | None = None  # "rising", "falling", "flat" (end_trend) or None
    concentration_bound: float | None = None  # kg m-3, error bound of C at the horizon
    window_start: float | None = None  # s, start of the window: 0 (a checked run) or
    # the earliest positive output time (a modal series alone)

    def as_dict(self):
        return asdict(self)

    @property
    def exceeded_at_start(self) -> bool:
        """The level is already reached at the start of a window that starts at the
        earliest positive output time (a modal series alone): the first exceedance then
        equals the window start, and the crossing itself lies earlier, between time 0
        and that time, where it is not resolved (a later time than the crossing: add
        earlier output times). Never for a window from time 0 (a checked run)."""
        return (self.first_exceedance is not None and bool(self.window_start)
                and self.first_exceedance <= self.window_start)

    @property
    def peak_at_end(self) -> bool:
        """The highest value of the window is its end value (within PLATEAU_RTOL)."""
        if self.end_concentration is None:
            return False
        c_peak = self.peak_concentration
        return c_peak - self.end_concentration <= PLATEAU_RTOL * max(abs(c_peak), 1e-300)

    @property
    def peak_beyond_horizon(self) -> bool:
        """The peak lies after the horizon: highest at the end and still rising there."""
        return self.peak_at_end and self.trend_at_end == "rising"


@dataclass(frozen=True)
class ReceptorViews:
    """The receptor read over the design life and over the whole run.

    ``design_life`` covers [0, design life] (the whole run when no design life is
    given); ``whole_run`` covers [0, end of the run], the end being the last output time
    or the design life if later (:func:`transport.analysis.summary.run_horizon`).
    """

    design_life: ReceptorMetrics
    whole_run: ReceptorMetrics

    @property
    def peak_after_design_life(self) -> bool:
        """The design-life peak is not the peak: C still rises at the end of the design
        life, or the whole run shows a higher peak later (by more than twice the error
        bound of C)."""
        d, w = self.design_life, self.whole_run
        if d.peak_beyond_horizon:
            return True
        bound = max(d.concentration_bound or 0.0, w.concentration_bound or 0.0)
        return (w.peak_time > d.horizon
                and w.peak_concentration - d.peak_concentration > 2 * bound)


def _change_times(solution):
    ts = solution.timeline
    out = set()
    if ts is not None:
        out.update(s.start for s in ts.stages[1:])
    col = solution.column
    for sched in (col.top.schedule, col.bottom.schedule,
                  *(l.source_schedule for l in col.layers)):
        if sched is not None:
            out.update(sched.change_times)
    return sorted(out)


def receptor_metrics(solution, receptor_depth: float, screening_level=None, horizon=None):
    """Metrics at ``receptor_depth`` over [0, horizon] (default: the last output time)."""
    times = np.asarray(solution.times, float)
    horizon = float(horizon if horizon is not None else times.max())
    positive = times[times > 0]
    if solution.evaluator is not None:
        # a checked run's curve is vouched at any time (before the earliest output time
        # by the Laplace engine): the window starts at the release, so that a crossing
        # or a peak before the earliest output time is found, not read as that time
        t_start = 0.0
    else:  # a series alone is sized for the output times: not resolved before them
        t_start = float(positive.min()) if positive.size else horizon * 1e-3
        t_start = min(t_start, horizon)
    conc_at = solution.concentration_at
    extra = _change_times(solution)
    win = unresolved_windows(solution)
    # a curve served by Laplace inversion costs a few hundred solves per sample: it is
    # scanned more coarsely (its crossings and peak are still polished by Brent)
    n = N_SCAN if solution.series is not None else N_SCAN_INVERTED
    first = above = None
    # the error bound of C: a crossing or a second peak between samples within it is
    # not one the run can vouch for (a rounding bump)
    within = (solution.tolerance or DEFAULT_TOLERANCE) * abs(
        (solution.scale or {}).get("concentration") or 0.0)
    if screening_level is not None:
        curve = _Memo(conc_at)
        first = first_exceedance(curve, receptor_depth, screening_level, t_start, horizon,
                                 extra, win, n, within)
        above = time_above(curve, receptor_depth, screening_level, t_start, horizon, extra,
                           win, n, within)
        conc_at = curve
    pk_t, pk_c = peak(conc_at, receptor_depth, t_start, horizon, extra, win, n, within)
    vouch_read_times(solution, receptor_depth, within,
                     (("first exceedance", first), ("peak", pk_t)))
    series = solution.series
    cum = c_ss = None
    if solution.mass_at is not None:  # vouched by two engines
        cum = float(solution.cumulative_mass_at(receptor_depth, horizon)[0])
    elif series is not None:
        cum = float(series.cumulative_mass(np.array([receptor_depth]),
                                           np.array([horizon]))[0, 0])
    if series is not None:
        # steady state of the last stage
        last, offset = series, 0.0
        if hasattr(last, "timeline"):
            offset = last.timeline.stages[-1].offset
            last = last.series[-1]
        c_ss = steady_concentration(last, receptor_depth - offset)
    t95 = None
    if c_ss is not None and abs(c_ss) > 0:
        band = 0.05 * abs(c_ss)
        late = max(horizon, extra[-1] if extra else 0.0)
        lam1 = float(last.modes.lam[0])
        t_far = late + 40.0 / max(lam1, 1e-300)
        f = lambda d, t: np.abs(np.asarray(conc_at(d, t), float) - c_ss)  # noqa: E731
        cr, outside0 = crossings(f, receptor_depth, band, t_start, t_far, extra,
                                 windows=win)
        downs = [t for t, d in cr if d < 0]
        t95 = downs[-1] if downs else (t_start if not outside0 else None)
    stays = None if screening_level is None else first is None
    c_end = float(np.asarray(solution.concentration_at(receptor_depth,
                                                       np.array([horizon])))[0])
    bound = concentration_bound(solution, horizon, max(abs(pk_c), abs(c_end), 1e-300))
    # as the fields: a peak or end value outside the physical bounds by no more than
    # its error bound (a plateau at the source concentration) is moved onto them
    if getattr(solution, "bounds", None) is not None:
        pk_c, c_end = (float(v) for v in clip_to_bounds(
            solution.column, solution.bounds, [receptor_depth],
            np.array([[pk_c], [c_end]]), np.array([bound, bound]))[:, 0])
    trend = end_trend(solution.concentration_at, receptor_depth, t_start, horizon, bound,
                      n, extra, win)
    return ReceptorMetrics(float(receptor_depth), screening_level, horizon, first, above,
                           pk_t, pk_c, cum, c_ss, t95, stays, c_end, trend, bound, t_start)


def first_unvouched(bound, read, limit: float):
    """The first metric of ``read`` ((what, time or None), ...) whose time is not
    vouched for by ``bound(times)`` (an engine's own error bound of C at those times)
    within ``limit`` (kg m-3): (what, time, bound there), or None."""
    read = [(what, float(t)) for what, t in read if t is not None and np.isfinite(t)]
    if not read:
        return None
    err = np.asarray(bound(np.array([t for _, t in read])), float)
    for (what, t), e in zip(read, err):
        if not e <= limit:  # (NaN: no bound, not vouched for)
            return what, t, float(e)
    return None


def refuse_unvouched(bound, read, limit: float, where: str, prefix: str = "") -> None:
    """Raise :class:`UnreliableResultError` for the first metric of ``read`` that
    ``bound`` does not vouch for within ``limit`` (:func:`first_unvouched`), naming it,
    ``where`` it is read (e.g. "at 4 m") and its time; nothing where all are vouched."""
    bad = first_unvouched(bound, read, limit)
    if bad:
        what, t, e = bad
        raise UnreliableResultError(
            f"{prefix}the {what} {where} is read at {t / YEAR:.4g} yr, away from the vouched "
            f"output times, where the receptor curve's error bound is {e:.3g} kg/m3 (the "
            "Laplace engine's own bound there, or for the finite-volume engine its distance "
            "from the Laplace engine plus that bound), above the tolerance times the scale "
            f"of C ({limit:.3g} kg/m3); add output times around that time, or loosen "
            "[output] tolerance", np.array([t]))


def vouch_read_times(solution, depth: float, limit: float, read) -> None:
    """Refuse a metric read where the Laplace engine serves the curve (before the
    earliest output time, between output times before the modal series takes over)
    unless the engine's own error bound of C there is within ``limit`` (the run's
    tolerance times its scale of C): the output times were vouched for by the
    cross-check, the times between them by this.  ``read``: ((what, time or None), ...).
    Staged runs and chains carry the bound too (a staged run's includes what its
    hand-overs carried in), and the finite-volume engine's curve its distance from the
    Laplace engine plus that engine's bound; a series alone (no other engine) is not
    checked here."""
    bound = getattr(getattr(solution, "evaluator", None), "laplace_bound", None)
    if bound is not None and limit > 0:
        refuse_unvouched(lambda t: bound(float(depth), t), read, limit, f"at {depth:g} m")


def receptor_views(solution, receptor_depth: float, screening_level=None,
                   design_life=None, run_end=None) -> ReceptorViews:
    """Receptor metrics over the design life and over the whole run.

    Parameters
    ----------
    solution : Solution
    receptor_depth : float
        Depth of the receptor, m.
    screening_level : float, optional
        Screening level, kg m-3.
    design_life : float, optional
        Design life, s; without it both views are the whole run.
    run_end : float, optional
        End of the whole-run view, s (default: the last output time, or the design life
        if later).

    Returns
    -------
    ReceptorViews

    Examples
    --------
    >>> views = receptor_views(solution, 4.0, 5e-6, design_life=50 * YEAR)  # doctest: +SKIP
    >>> views.peak_after_design_life                                        # doctest: +SKIP
    True
    """
    if run_end is None:
        run_end = float(np.max(solution.times))
        if design_life:
            run_end = max(run_end, float(design_life))
    whole = receptor_metrics(solution, receptor_depth, screening_level, run_end)
    if not design_life or float(design_life) == float(run_end):
        return ReceptorViews(whole, whole)
    design = receptor_metrics(solution, receptor_depth, screening_level, design_life)
    return ReceptorViews(design, whole)
