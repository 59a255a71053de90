"""Reading a receptor curve C(t): the first crossing of the screening level and the
peak over a window, from a scan of the curve polished on the continuous curve.

The scan brackets the crossing and the peak; Brent's method polishes them (Brent 1973,
*Algorithms for Minimization without Derivatives*, ch. 4: the root, and the bounded
minimisation of -C around the best sample).  A curve evaluated one time at a time may
round differently from the same curve evaluated on the whole scan (other array widths,
another sum order); where the scan puts the level between two samples but the single
evaluations do not (the curve is within rounding of the level at one of them), the
crossing is that sample: C there is the level to rounding.
"""
from __future__ import annotations

import functools
import math

import numpy as np
from scipy.optimize import brentq, minimize_scalar

from transport.analysis.curve_reading import MAX_POLISHED, local_extremes, parabola_extreme

__all__ = ["SCAN_SAMPLES", "EARLY_SAMPLES", "TIME_RTOL", "scan_times", "curve_metrics",
           "with_early_window"]

#: Samples of the receptor curve used to bracket the crossing and the peak: log-spaced
#: from the earliest output time plus uniform to the design life (SCAN_SAMPLES uniform
#: and SCAN_SAMPLES // 2 log-spaced; 128 gives 0.4 yr steps over a 50 yr life, receptor
#: curves of a metre-scale column vary over years). A spike narrower than
#: the spacing can be missed (the series itself is continuous in time).
SCAN_SAMPLES = 128
TIME_RTOL = 1e-10  # Brent tolerance on time, relative
#: Uniform scan samples (plus half as many log-spaced, from 1e-6 of it) of the window
#: from the release (time 0) to the earliest output time, where it is read
#: (:func:`with_early_window`)
EARLY_SAMPLES = 64


@functools.lru_cache(maxsize=64)
def scan_times(t_start: float, t_end: float, n: int) -> np.ndarray:
    """The scan samples of a window, made once per window (every realization of a run
    scans the same ones); read-only."""
    first = t_start if t_start > 0 else t_end * 1e-6  # from the release: 6 decades
    t = np.union1d(np.linspace(t_start, t_end, n), np.geomspace(first, t_end, n // 2))
    t.setflags(write=False)
    return t


def _worth_polishing(t, c, j, best, level, within) -> bool:
    """Whether the local maximum of the scan at sample j (not the largest sample) can
    matter: its parabola (:func:`transport.analysis.curve_reading.parabola_extreme`)
    rises from the sample at least half way to ``best`` (the largest sample) or to a
    level the samples stay below (a smooth peak between samples reaches about twice as
    high again), and by more than ``within`` (the error bound of C).  Rounding ripples of a curve near zero or on a plateau are not
    polished (each polish costs some 25 evaluations, of the Laplace engine where it
    serves the curve)."""
    rise = parabola_extreme(t, c, j) - c[j]
    return bool(rise > within and (rise >= 0.5 * (best - c[j])
                                   or (c[j] < level and rise >= 0.5 * (level - c[j]))))


def curve_metrics(conc, t_start, t_end, level, n_scan, scan=None, floor=0.0,
                  nondecreasing=False, within=None):
    """(breakthrough time or NaN, peak time, peak concentration) of a continuous curve.

    Parameters
    ----------
    conc : callable
        ``conc(times) -> array`` of concentrations (kg m-3) at the receptor.
    t_start, t_end : float
        The window, s.
    level : float
        Screening level, kg m-3.
    n_scan : int
        Uniform scan samples (plus half as many log-spaced) that bracket the
        crossing and the peak before Brent's method polishes them.
    scan : array, optional
        The curve at those samples, if at hand (:func:`modal_scan`).
    floor : float, optional
        A peak at or below it (kg m-3; a realization's tolerance, absolute) is the
        largest scan sample, not polished: it is within the tolerance of zero already,
        and the polish of such a peak chases rounding (where the modal series takes
        over from the Laplace engine, the two differ by up to the tolerance).
    nondecreasing : bool, optional
        The curve cannot fall (:func:`transport.solvers.monotone.nondecreasing_in_time`):
        the peak is the window's end, not searched.
    within : float, optional
        The error bound of C (kg m-3; default ``floor``): another local maximum than
        the largest sample's must beat it by more, and a maximum between samples below
        the level must pass it by more, to count (less is a rounding bump).

    Returns
    -------
    tuple of float
    """
    def one(s):
        return float(conc(np.array([s]))[0])

    t = scan_times(t_start, t_end, n_scan)
    c = conc(t) if scan is None else scan
    above = np.flatnonzero(c >= level)
    if above.size == 0:
        t_cross = math.nan
    elif above[0] == 0:
        t_cross = float(t[0])
    else:
        i = int(above[0])
        try:
            t_cross, info = brentq(lambda s: one(s) - level, t[i - 1], t[i],
                                   rtol=TIME_RTOL, full_output=True)
        except ValueError:  # no sign change when evaluated alone: see the module's text
            t_cross = float(t[i - 1] if one(t[i - 1]) >= level else t[i])
        else:
            if not info.converged:  # pragma: no cover - a valid bracket converges
                raise RuntimeError(f"breakthrough root did not converge: {info.flag}")
    i = t.size - 1 if nondecreasing else int(np.argmax(c))
    t_peak, c_peak = float(t[i]), float(c[i])
    if nondecreasing:
        return float(t_cross), t_peak, c_peak
    within = floor if within is None else within
    # the largest local maxima of the scan (a lower sample may hide the higher of two
    # peaks), each polished between its neighbouring samples; at the window's first or
    # last sample between it and the one inside (a peak just after the start or just
    # before the end lies there)
    tops = [j for j in local_extremes(c, 1) if c[j] > floor]
    tops.sort(key=lambda j: -c[j])
    c_top = float(c[i])
    for j in tops[:MAX_POLISHED]:
        if j != i and not _worth_polishing(t, c, j, c_top, level, within):
            continue
        lo, hi = t[max(j - 1, 0)], t[min(j + 1, t.size - 1)]
        if not lo < hi:
            continue
        res = minimize_scalar(lambda s: -one(s), bounds=(lo, hi),
                              method="bounded", options={"xatol": TIME_RTOL * t_end})
        if not (res.success and -res.fun > c[j]):
            continue
        tj, cj = float(res.x), float(-res.fun)
        if cj > c_peak + (0.0 if j == i else within):
            t_peak, c_peak = tj, cj
        # a polished maximum above the level between samples below it: the curve
        # crosses the level before it (earlier than the scan's first crossing, if any)
        if c[j] < level < cj - within and lo < tj and (math.isnan(t_cross) or tj < t_cross):
            if one(lo) < level:
                t_cross = brentq(lambda s: one(s) - level, lo, tj, rtol=TIME_RTOL)
    return float(t_cross), t_peak, c_peak


def with_early_window(curve, t_start, level, found, nondecreasing=False, within=0.0,
                      n_scan=EARLY_SAMPLES):
    """(breakthrough time or NaN, peak time, peak concentration) over the window from the
    release (time 0) to the end, from ``found``, those of :func:`curve_metrics` from
    ``t_start`` (the earliest output time) to the end, and the curve before ``t_start``
    (``curve(times)``, also at time 0: the initial state).

    A crossing or a peak before the earliest output time is not read as that time (a
    later crossing and a lower peak than the curve's): the early window [0, t_start] is
    scanned and polished as the rest (:func:`curve_metrics`). Its first crossing comes
    first; its peak counts where it is higher than ``found``'s by more than ``within``
    (the error bound of C). A ``nondecreasing`` curve is read there only where the level
    is already reached at ``t_start`` (its crossing lies earlier; its peak is the end);
    else nothing can lie there and ``found`` is returned as it is."""
    bt, pk_t, pk = found
    if nondecreasing and not bt <= t_start:  # (NaN: not reached at all)
        return found
    e_bt, e_pk_t, e_pk = curve_metrics(curve, 0.0, t_start, level, n_scan,
                                       nondecreasing=nondecreasing, within=within)
    if e_bt < t_start and not bt < e_bt:  # (NaN compares False)
        bt = e_bt
    if not nondecreasing and e_pk > pk + within:
        pk_t, pk = e_pk_t, e_pk
    return float(bt), float(pk_t), float(pk)
