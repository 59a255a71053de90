"""The reading of a run in plain sentences: what ``stratiflux run`` and ``compare`` print.

A run is read at its receptor against its screening level: when the level is first
reached (and whether that is within the design life), how long it stays above it, the
peak or the plateau at the end of the run, the mass that passed, the time to 95 % of the
steady value; then the mass budget and the error bounds the engines vouch for. Every
sentence is built from :class:`transport.analysis.metrics.ReceptorMetrics` (computed on
the continuous solution) and the solution's own budget and error estimates.

Concentrations are shown in mg/L (ug/L below 0.1 mg/L), times in years (days below one
year), masses per area in mg/m2: the conversions are the constants of
:mod:`transport.units`. With the scenario's ``output.start_date`` a point in time also
shows its calendar date (UTC): ``3.512 yr (2030-09-04)``.

Examples
--------
>>> for line in summary_lines(solution, title="Invented depot",          # doctest: +SKIP
...                           receptor_depth=2.0, screening_level=1e-5):
...     print(line)
"""
from __future__ import annotations

import datetime as dt
import math

import numpy as np

from transport.analysis.metrics import (PLATEAU_RTOL, ReceptorViews, error_at,
                                        receptor_metrics, receptor_views)
from transport.analysis.zone import zone_lines
from transport.solvers.checks import QUANTITIES
from transport.units import DAY, MG_PER_L, MG_PER_M2, UG_PER_L, YEAR

__all__ = ["PLATEAU_RTOL", "RELIABLE_FRACTION", "format_concentration", "format_time",
           "format_date",
           "earliest_resolved_time", "run_horizon", "error_at", "reliability_note",
           "refused_lines", "receptor_lines", "final_budget", "budget_line", "check_line",
           "summary_lines", "verdict_line", "trend_phrase", "peak_beyond_flag",
           "design_life_flag", "run_views", "view_lines"]

#: A breakthrough time is flagged as unreliable when the solver's error estimate at that
#: point exceeds this fraction of the screening level.
RELIABLE_FRACTION = 0.1

#: Names of the checked quantities in the "Checked" sentence.
_QUANTITY_NAMES = {"concentration": "concentration", "total_flux": "flux",
                   "cumulative_mass": "cumulative mass", "budget": "budget"}


# ----------------------------------------------------------------------------- formatting
def format_concentration(c: float) -> str:
    """A concentration as text: mg/L, or ug/L below 0.1 mg/L.

    Parameters
    ----------
    c : float
        Concentration, kg m-3.

    Returns
    -------
    str

    Examples
    --------
    >>> format_concentration(0.0125)
    '12.5 mg/L'
    >>> format_concentration(2e-6)
    '2 ug/L'
    """
    mg_per_l = c / MG_PER_L
    if mg_per_l != 0 and abs(mg_per_l) < 0.1:
        return f"{c / UG_PER_L:.4g} ug/L"
    return f"{mg_per_l:.4g} mg/L"


def format_time(t: float, start: dt.datetime | None = None) -> str:
    """An elapsed time as text: years (Julian), or days below one year; with ``start``
    followed by the calendar date it falls on (UTC, proleptic Gregorian).

    Parameters
    ----------
    t : float
        Elapsed time, s.
    start : datetime.datetime, optional
        Calendar date of time 0 (``output.start_date``); give it only for a point in
        time, not for a duration.

    Returns
    -------
    str

    Examples
    --------
    >>> format_time(31557600.0 * 2.5)
    '2.5 yr'
    >>> format_time(86400.0 * 3)
    '3 d'
    >>> format_time(86400.0 * 3, dt.datetime(2027, 3, 1, tzinfo=dt.timezone.utc))
    '3 d (2027-03-04)'
    """
    text = f"{t / YEAR:.4g} yr" if abs(t) >= YEAR else f"{t / DAY:.4g} d"
    if start is None:
        return text
    return f"{text} ({format_date(t, start)})"


def format_date(t: float, start: dt.datetime) -> str:
    """The calendar date (UTC, proleptic Gregorian) of the day on which the instant ``t``
    seconds after ``start`` falls, ``YYYY-MM-DD`` (a year of output times is the Julian
    year, 365.25 d, so whole years after a midnight start end at 06:00, 12:00, ...).

    Parameters
    ----------
    t : float
        Elapsed time, s.
    start : datetime.datetime
        Calendar date of time 0, timezone-aware.

    Returns
    -------
    str
    """
    when = start.astimezone(dt.timezone.utc) + dt.timedelta(seconds=float(t))
    return when.strftime("%Y-%m-%d")


# ------------------------------------------------------------------------------- the run
def earliest_resolved_time(times) -> float:
    """Earliest positive output time: the series meets its tolerance from there on.

    Parameters
    ----------
    times : array_like
        Output times, s.

    Returns
    -------
    float

    Raises
    ------
    ValueError
        When no output time is positive (nothing after the initial state was solved).
    """
    times = np.asarray(times, dtype=float)
    positive = times[times > 0]
    if positive.size == 0:
        raise ValueError("the run has no positive output time; add output.times")
    return float(positive.min())


def run_horizon(times, design_life=None) -> float:
    """The span a run is read over: its last output time, or the design life if later.

    Parameters
    ----------
    times : array_like
        Output times, s.
    design_life : float, optional
        Design life, s.

    Returns
    -------
    float
        Seconds.
    """
    t_end = float(np.max(times))
    return max(t_end, float(design_life)) if design_life else t_end


def reliability_note(solution, t: float, level: float) -> str:
    """A warning sentence (with a leading space) when the solver's error estimate at
    ``t`` is not small against the screening ``level`` (kg m-3); else ``""``."""
    error = error_at(solution, t)
    if error is None or error < RELIABLE_FRACTION * level:
        return ""
    return (f" CAUTION: the solver's error estimate there ({format_concentration(error)}) "
            f"is not small compared with the screening level; this time is not reliable. "
            "Use a tighter tolerance or later output times.")


def refused_lines(solution) -> list:
    """What a run with refused output times could not vouch for (one sentence), or
    ``[]`` when every time is vouched for."""
    reliable = solution.reliable
    if reliable is None or np.all(reliable):
        return []
    bad = np.asarray(solution.times, float)[~np.asarray(reliable)]
    shown = ", ".join(format_time(t) for t in bad[:6]) + (" ..." if bad.size > 6 else "")
    return [f"CAUTION: no engine could vouch for {bad.size} output time(s) within the "
            f"tolerance {solution.tolerance:g} ({shown}); their values are left empty "
            "(NaN) and flagged in the file, and no receptor metrics or budget are "
            "reported for this run. Loosen the tolerance or change the output times."]


def receptor_lines(solution, metrics, *, design_life=None, t_start: float,
                   t_end: float, start_date=None) -> list:
    """Sentences on the receptor: screening level reached or not, peak or plateau,
    mass passed, time to 95 % of the steady value.

    Parameters
    ----------
    solution : Solution
        The run (``concentration_at`` and, for the reliability notes, its error bounds).
    metrics : ReceptorMetrics
        Metrics at the receptor over [0, ``t_end``].
    design_life : float, optional
        Design life, s: a first exceedance is said to fall within or after it.
    t_start, t_end : float
        Earliest resolved output time and horizon of the run, s (the metrics' own
        window start replaces ``t_start`` where they carry one: 0 for a checked run).
    start_date : datetime.datetime, optional
        Calendar date of time 0: points in time show their date (:func:`format_time`).

    Returns
    -------
    list of str
    """
    lines = []
    receptor, level = metrics.receptor_depth, metrics.screening_level
    where = f"Receptor at {receptor:g} m"
    if metrics.window_start is not None:  # the metrics' own window (0: from the release)
        t_start = metrics.window_start
    if level is not None:
        t_cross = metrics.first_exceedance
        shown = format_concentration(level)
        if t_cross is None:
            since = f"{format_time(t_start, start_date)} to " if t_start > 0 else "up to "
            lines.append(f"{where}: screening level {shown} not reached within the run "
                         f"({since}{format_time(t_end, start_date)}).")
        elif metrics.exceeded_at_start or (metrics.window_start is None
                                           and t_cross <= t_start):
            lines.append(f"{where}: screening level {shown} already reached at the "
                         f"earliest output time {format_time(t_start, start_date)}; "
                         "earlier times are not resolved (add earlier output times)."
                         + reliability_note(solution, t_start, level))
        else:
            against = ""
            if design_life:
                side = "within" if t_cross <= design_life else "after"
                against = f", {side} the {format_time(design_life)} design life"
            lines.append(f"{where}: screening level {shown} first reached at "
                         f"{format_time(t_cross, start_date)}{against}; above it for "
                         f"{format_time(metrics.time_above_level)} up to "
                         f"{format_time(t_end, start_date)}."
                         + reliability_note(solution, t_cross, level))
    t_peak, c_peak = metrics.peak_time, metrics.peak_concentration
    c_end = metrics.end_concentration
    if c_end is None or metrics.horizon != t_end:
        c_end = float(np.asarray(solution.concentration_at(receptor, np.array([t_end])))[0])
    if c_peak - c_end <= PLATEAU_RTOL * max(abs(c_peak), 1e-300):
        trend = getattr(metrics, "trend_at_end", None) if metrics.horizon == t_end else None
        reading = {"rising": "it is still rising there, so the peak lies beyond the run",
                   "flat": "it is at steady state there (flat within the tolerance)"}.get(
            trend, "it is still rising or at steady state, so the peak lies beyond the run")
        lines.append(f"{where}: highest concentration {format_concentration(c_end)} at "
                     f"the end of the run ({format_time(t_end, start_date)}); {reading}.")
    else:
        lines.append(f"{where}: peak {format_concentration(c_peak)} at "
                     f"{format_time(t_peak, start_date)}.")
    if metrics.cumulative_mass is not None:
        lines.append(f"{where}: {metrics.cumulative_mass / MG_PER_M2:.4g} mg/m2 passed "
                     f"downward up to {format_time(t_end, start_date)}.")
    if metrics.time_to_95_percent_steady is not None:
        lines.append(f"{where}: 95 % of the steady value "
                     f"{format_concentration(metrics.steady_concentration)} is reached at "
                     f"{format_time(metrics.time_to_95_percent_steady, start_date)}.")
    return lines


def final_budget(solution) -> dict:
    """Every term of the solution's mass budget at its last output time (kg m-2)."""
    budget = solution.budget or {}
    return {k: float(np.asarray(v)[-1]) for k, v in budget.items()}


def budget_line(solution, start_date=None) -> list:
    """The mass budget at the end of the run in one sentence (``[]`` without a budget):
    every term, the residual and its size against the largest term (``start_date``: the
    end is shown with its calendar date)."""
    last = final_budget(solution)
    if not last:
        return []
    scale = max([abs(v) for k, v in last.items() if k != "residual"] + [1e-300])
    return [
        f"Mass budget at {format_time(float(solution.times[-1]), start_date)} (kg/m2): "
        f"stored {last.get('stored', math.nan):.6g}, initial "
        f"{last.get('initial_stored', math.nan):.6g}, entered top "
        f"{last.get('entered_top', math.nan):.6g}, left bottom "
        f"{last.get('left_bottom', math.nan):.6g}, decayed "
        f"{last.get('decayed', math.nan):.6g}, produced {last.get('produced', math.nan):.6g}; "
        f"residual {last.get('residual', math.nan):.3g} "
        f"({abs(last.get('residual', math.nan)) / scale:.2g} of the largest term)."]


def check_line(solution) -> list:
    """The largest error bound of each checked quantity relative to its scale (one
    sentence), or ``[]`` for a run without error bounds."""
    err = solution.error
    if err is None or not solution.scale:
        return []
    worst = ", ".join(
        f"{_QUANTITY_NAMES[q]} {np.nanmax(np.asarray(err[q], float)) / solution.scale[q]:.1g}"
        for q in QUANTITIES)
    return [f"Checked (tolerance {solution.tolerance:g}): largest error bound "
            f"relative to the scale of each quantity: {worst}; physical bounds and "
            "the mass budget hold at every output time."]


# ------------------------------------------------------------- design life and whole run
def trend_phrase(metrics, start=None) -> str:
    """How C ends a window, in words (from ``metrics.trend_at_end``; ``start``: the
    calendar date of time 0, see :func:`format_time`).

    Examples
    --------
    >>> trend_phrase(metrics)                                # doctest: +SKIP
    'still rising at 50 yr'
    """
    at = format_time(metrics.horizon, start)
    return {"rising": f"still rising at {at}", "falling": f"falling at {at}",
            "flat": f"flat within the tolerance at {at}"}.get(
                metrics.trend_at_end, f"not resolved at {at}")


def peak_beyond_flag(metrics, start=None) -> str:
    """Whether the peak of a window lies after its end, for a table cell: ``"yes
    (still rising at 100 yr)"``, ``"no (falling at 100 yr)"``, ``"no (flat within the
    tolerance at 100 yr)"``, ``"possibly (rising again at ..., below the peak at ...)"``
    or ``"unknown (...)"`` (``start``: see :func:`format_time`)."""
    m = metrics
    if m.peak_beyond_horizon:
        return f"yes ({trend_phrase(m, start)})"
    if m.trend_at_end == "rising":
        return (f"possibly (rising again at {format_time(m.horizon, start)}, below the peak "
                f"at {format_time(m.peak_time, start)})")
    if m.trend_at_end is None:
        return f"unknown ({trend_phrase(m, start)})"
    return f"no ({trend_phrase(m, start)})"


def design_life_flag(views, start=None) -> str:
    """Whether the peak lies after the design life, for a table cell: still rising at
    its end, or a higher peak later in the run (:attr:`ReceptorViews.peak_after_design_life`);
    else :func:`peak_beyond_flag` of the design-life view (``start``: see
    :func:`format_time`)."""
    d, w = views.design_life, views.whole_run
    if d.peak_beyond_horizon:
        return f"yes ({trend_phrase(d, start)})"
    if views.peak_after_design_life:
        rise = (w.peak_concentration - d.peak_concentration) / max(
            abs(d.peak_concentration), 1e-300)
        return (f"yes (higher later: {format_concentration(w.peak_concentration)} at "
                f"{format_time(w.peak_time, start)}, {100 * rise:.2g} % above)")
    return peak_beyond_flag(d, start)


def _window_text(m, start=None) -> str:
    """Peak, screening level and mass of one window, for a sentence."""
    parts = [f"peak {format_concentration(m.peak_concentration)} at "
             f"{format_time(m.peak_time, start)}"]
    level = m.screening_level
    if level is not None:
        if m.first_exceedance is None:
            parts.append(f"screening level {format_concentration(level)} not reached")
        elif m.exceeded_at_start:
            parts.append(f"screening level {format_concentration(level)} already reached "
                         f"at the earliest output time {format_time(m.first_exceedance, start)}"
                         f" (the crossing is earlier, not resolved), above it for "
                         f"{format_time(m.time_above_level)}")
        else:
            parts.append(f"screening level {format_concentration(level)} first reached at "
                         f"{format_time(m.first_exceedance, start)}, above it for "
                         f"{format_time(m.time_above_level)}")
    if m.cumulative_mass is not None:
        parts.append(f"{m.cumulative_mass / MG_PER_M2:.4g} mg/m2 passed downward")
    return "; ".join(parts)


def view_lines(views, start_date=None) -> list:
    """Sentences on the two windows of a run: the design-life view (when the design life
    ends before the run) with whether its peak lies after it, then whether the peak lies
    beyond the end of the run (:func:`peak_beyond_flag`); ``start_date``: the end of
    the run is shown with its calendar date."""
    d, w = views.design_life, views.whole_run
    where = f"Receptor at {w.receptor_depth:g} m"
    lines = []
    if d is not w and d.horizon < w.horizon:
        lines.append(f"{where} within the {format_time(d.horizon)} design life: "
                     f"{_window_text(d, start_date)}; peak after the design life: "
                     f"{design_life_flag(views, start_date)}.")
    lines.append(f"{where} over the whole run (to {format_time(w.horizon, start_date)}): "
                 "peak after the "
                 f"end of the run: {peak_beyond_flag(w, start_date)}.")
    return lines


def run_views(solution, receptor_depth=None, screening_level=None, design_life=None):
    """Receptor metrics of a run over its design life and over the whole run
    (:func:`transport.analysis.metrics.receptor_views`, the run read up to
    :func:`run_horizon`), or None without a receptor or when output times were refused
    (no metrics are reported then)."""
    if receptor_depth is None or refused_lines(solution):
        return None
    return receptor_views(solution, receptor_depth, screening_level, design_life,
                          run_horizon(solution.times, design_life))


def summary_lines(solution, metrics=None, *, title: str, receptor_depth=None,
                  screening_level=None, design_life=None, views=None,
                  start_date=None) -> list:
    """The reading of one run, as printed by ``stratiflux run`` (one sentence a line).

    Parameters
    ----------
    solution : Solution
        The run, SI units.
    metrics : ReceptorMetrics, optional
        Metrics at ``receptor_depth`` over the run's horizon (:func:`run_horizon`);
        computed with :func:`transport.analysis.metrics.receptor_metrics` when omitted.
    title : str
        Title of the scenario.
    receptor_depth : float, optional
        Depth of the receptor, m; without it no receptor sentence is written.
    screening_level : float, optional
        Screening level, kg m-3.
    design_life : float, optional
        Design life, s; the run is read up to it when it ends later than the run.
    views : ReceptorViews, optional
        Metrics over the design life and the whole run (:func:`run_views`); computed
        when omitted (its ``whole_run`` takes the place of ``metrics``).
    start_date : datetime.datetime, optional
        Calendar date of time 0 (``output.start_date``): points in time are shown with
        their date beside the elapsed years; without it nothing changes.

    Returns
    -------
    list of str
        The title line; then, for a run with refused output times, only what it could
        not vouch for; else the receptor sentences (:func:`receptor_lines`, then
        :func:`view_lines`), the mass
        budget (:func:`budget_line`) and the error bounds (:func:`check_line`).

    Raises
    ------
    ValueError
        When the run has no positive output time.
    """
    lines = [f"Scenario: {title}"]
    refused = refused_lines(solution)
    if refused:
        return lines + refused
    t_end = run_horizon(solution.times, design_life)
    t_start = earliest_resolved_time(solution.times)
    if receptor_depth is not None:
        if views is None and metrics is None:
            views = run_views(solution, receptor_depth, screening_level, design_life)
        elif views is None:
            design = metrics
            if design_life and design_life < t_end:
                design = receptor_metrics(solution, receptor_depth, screening_level,
                                          design_life)
            views = ReceptorViews(design, metrics)
        lines += receptor_lines(solution, views.whole_run, design_life=design_life,
                                t_start=t_start, t_end=t_end, start_date=start_date)
        lines += view_lines(views, start_date)
    when = format_time(float(solution.times[-1]), start_date)
    return (lines + zone_lines(solution, when) + budget_line(solution, start_date)
            + check_line(solution))


def verdict_line(label: str, metrics, views=None) -> str:
    """One alternative of a comparison in one sentence: below the screening level over
    the horizon (with its peak), or from when and for how long above it; with ``views``
    followed by whether the peak lies after the design life and the whole run's reading.

    Parameters
    ----------
    label : str
        Name of the alternative.
    metrics : ReceptorMetrics
        The design-life view.
    views : ReceptorViews, optional
        Both views (:func:`transport.analysis.metrics.receptor_views`).

    Returns
    -------
    str
    """
    m = metrics
    if m.screening_level is None:
        line = f"{label}: no screening level given; see the peak and mass."
    elif m.stays_below_level:
        line = (f"{label}: stays below {m.screening_level / MG_PER_L:.4g} mg/L at "
                f"{m.receptor_depth:g} m over {m.horizon / YEAR:.4g} yr "
                f"(peak {m.peak_concentration / MG_PER_L:.3g} mg/L).")
    else:
        since = (f"already at the earliest output time, {m.first_exceedance / YEAR:.4g} yr"
                 if m.exceeded_at_start else f"from {m.first_exceedance / YEAR:.4g} yr")
        line = (f"{label}: exceeds {m.screening_level / MG_PER_L:.4g} mg/L at "
                f"{m.receptor_depth:g} m {since}, "
                f"for {m.time_above_level / YEAR:.4g} yr within "
                f"{m.horizon / YEAR:.4g} yr.")
    if views is None:
        return line
    w = views.whole_run
    if views.design_life is w:  # no design life: the one window is the whole run
        return line + f" Peak after the end of the run: {peak_beyond_flag(w)}."
    line += f" Peak after the design life: {design_life_flag(views)}."
    if w.horizon > m.horizon:
        line += (f" Over the whole run (to {format_time(w.horizon)}): {_window_text(w)}; "
                 f"peak after the end of the run: {peak_beyond_flag(w)}.")
    return line
