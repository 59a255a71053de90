"""Reading a receptor curve C(depth, t) between samples: the scan, crossings of a level
and the peak, polished on the continuous curve.

The scan samples the curve (uniform plus logarithmic times, the change times of the
signals bracketed, dense after a short signal interval); crossings are bracketed by it
and polished with Brent's method (scipy.optimize.brentq; Brent 1973, Algorithms for
Minimization without Derivatives, ch. 4), extremes with bounded Brent minimisation.
Between samples on one side of a level the curve may still cross it and come back: the
local extremes of the scan that could reach it are polished too.
"""
from __future__ import annotations

import numpy as np
from scipy.optimize import brentq, minimize_scalar

__all__ = ["TIME_RTOL", "N_SCAN", "MAX_POLISHED", "PULSE_SAMPLES", "scan_times",
           "pulse_samples", "in_gap", "value_at", "local_extremes", "parabola_extreme",
           "polished_extreme", "crossings", "hidden_crossings", "first_exceedance",
           "time_above", "peak"]

TIME_RTOL = 1e-10  # relative time tolerance of the root polish
N_SCAN = 800
#: Local extremes of a scan polished: the largest maxima for the peak, the extremes
#: nearest the level for crossings between samples on one side of it.
MAX_POLISHED = 8


def scan_times(t_start: float, t_end: float, extra=(), n: int = N_SCAN,
               windows=()) -> np.ndarray:
    """Uniform and log-spaced samples on [t_start, t_end], with change times bracketed;
    samples inside unresolved windows are replaced by the window's ends."""
    t = np.linspace(t_start, t_end, n)
    if t_start > 0:
        t = np.union1d(t, np.geomspace(t_start, t_end, n // 2))
    else:
        t = np.union1d(t, np.geomspace(max(t_end * 1e-6, 1e-9), t_end, n // 2))
    pts = []
    for c in extra:
        if t_start < c < t_end:
            d = 1e-9 * max(t_end, 1.0)
            pts += [c - d, c, c + d]
    t = np.union1d(t, pts)
    t = np.union1d(t, pulse_samples(t_start, t_end, extra, n))
    for a, b in windows:
        inside = (t > a) & (t < b)
        t = np.union1d(t[~inside], [x for x in (a, b) if t_start <= x <= t_end])
    return t


#: Most samples added after a short signal interval (:func:`_pulse_samples`).
PULSE_SAMPLES = 4000


def pulse_samples(t_start, t_end, extra, n):
    """Samples after each signal interval shorter than the uniform scan step (a short
    release or interruption of the source): from its start to the window's end, every
    half interval (at most :data:`PULSE_SAMPLES` of them), so that the receptor's
    response to it, which lasts at least as long as the interval and comes a travel
    time later, holds samples and a local extreme to polish.  Without them a 0.25 yr
    release at 30 yr read over 300 yr (160 samples, one every 1.9 yr) was missed: a
    peak 7e7 x the tolerance x the scale low, its exceedance not reported."""
    step = (t_end - t_start) / max(n - 1, 1)
    changes = np.unique([c for c in extra if c < t_end])
    out = []
    for c1, c2 in zip(changes[:-1], changes[1:]):
        width = c2 - c1
        if 0 < width < step and c2 > t_start:
            start = max(c1, t_start)
            spacing = max(width / 2, (t_end - start) / PULSE_SAMPLES)
            out.append(np.arange(start, t_end, spacing))
    return np.concatenate(out) if out else np.empty(0)


def in_gap(a, b, windows):
    """Whether [a, b] holds one of the unresolved ``windows`` (a, b) entirely."""
    return any(a <= w0 and b >= w1 and a < b for w0, w1 in windows)


def value_at(conc_at, depth, s):
    """C(depth, s) of a curve ``conc_at(depth, times)`` at one time, as a float."""
    return float(np.asarray(conc_at(depth, np.array([s])), float)[0])


def local_extremes(c, kind: int) -> np.ndarray:
    """Indices of the local maxima (``kind`` +1) or minima (-1) of samples ``c``, the
    two ends included (a sample at least as far that way as its neighbours)."""
    v = kind * np.asarray(c, float)
    if v.size < 2:
        return np.arange(v.size)
    left = np.concatenate([[True], v[1:] >= v[:-1]])
    right = np.concatenate([v[:-1] >= v[1:], [True]])
    return np.flatnonzero(left & right)


def parabola_extreme(t, c, j) -> float:
    """The extreme value of the parabola through samples j - 1, j, j + 1 of a scan
    (the parabolic step of Brent's method: Press et al. 2007, *Numerical Recipes*, 3rd
    ed., sec. 10.3): what the curve reaches between them if it is smooth there; the
    sample itself at the ends of the scan or where the three are in line."""
    if j <= 0 or j >= len(t) - 1:
        return float(c[j])
    (a, fa), (b, fb), (x, fx) = (t[j - 1], c[j - 1]), (t[j], c[j]), (t[j + 1], c[j + 1])
    p, q = (b - a) * (fb - fx), (b - x) * (fb - fa)
    if p == q:
        return float(fb)
    v = b - ((b - a) * p - (b - x) * q) / (2.0 * (p - q))
    return float(fa * (v - b) * (v - x) / ((a - b) * (a - x))
                 + fb * (v - a) * (v - x) / ((b - a) * (b - x))
                 + fx * (v - a) * (v - b) / ((x - a) * (x - b)))


def polished_extreme(conc_at, depth, t, c, i, kind, windows, t_end):
    """(time, value) of the extreme of C between the neighbours of sample i (a local
    maximum, ``kind`` +1, or minimum, -1), by bounded Brent minimisation; the sample
    where that does better or the interval meets an unresolved window."""
    lo, hi = t[max(i - 1, 0)], t[min(i + 1, t.size - 1)]
    if not lo < hi or in_gap(lo, t[i], windows) or in_gap(t[i], hi, windows):
        return float(t[i]), float(c[i])
    res = minimize_scalar(lambda s: -kind * value_at(conc_at, depth, s), bounds=(lo, hi),
                          method="bounded", options={"xatol": TIME_RTOL * max(t_end, 1.0)})
    if res.success and -res.fun > kind * c[i]:
        return float(res.x), float(-kind * res.fun)
    return float(t[i]), float(c[i])


def crossings(conc_at, depth: float, level: float, t_start: float, t_end: float,
              extra=(), n: int = N_SCAN, windows=(), within: float = 0.0):
    """Times (and +1 up / -1 down directions) where C(depth, t) crosses ``level``.

    Between scan samples on the same side of the level the curve may still cross it
    and come back (a peak just above the level, a dip just below it): the local
    extremes of the samples on the wrong side, the :data:`MAX_POLISHED` nearest the
    level, are polished, and where one crosses by more than ``within`` (the error
    bound of C: less is not a crossing one can vouch for), its two crossings are
    polished too.  A crossing inside an unresolved window (just after a change) is reported at the
    window's start, the conservative end for a first exceedance."""
    windows = [w for w in windows if w[1] > t_start and w[0] < t_end]
    t = scan_times(t_start, t_end, extra, n, windows)
    c = np.asarray(conc_at(depth, t), float)
    ex = c - level
    out = hidden_crossings(conc_at, depth, level, t, c, windows, t_end, within)
    for i in np.flatnonzero(np.sign(ex[1:]) != np.sign(ex[:-1])):
        a, b = t[i], t[i + 1]
        if ex[i] == 0:
            out.append((float(a), 1 if ex[i + 1] > 0 else -1))
            continue
        if ex[i + 1] == 0:
            continue  # counted at the next interval
        if in_gap(a, b, windows):
            out.append((float(a), 1 if ex[i + 1] > ex[i] else -1))
            continue
        root = brentq(lambda s: value_at(conc_at, depth, s) - level, a, b,
                      rtol=TIME_RTOL, xtol=1e-12 * max(abs(b), 1.0))
        out.append((float(root), 1 if ex[i + 1] > ex[i] else -1))
    return sorted(out), bool(ex[0] >= 0)


def hidden_crossings(conc_at, depth, level, t, c, windows, t_end, within=0.0):
    """The crossings of the level between samples on one side of it: around the local
    maxima below it and the local minima above it (the :data:`MAX_POLISHED` nearest
    the level) whose polished extreme lies across it."""
    ex = c - level
    cands = [(i, 1) for i in local_extremes(c, 1) if ex[i] < 0]
    cands += [(i, -1) for i in local_extremes(c, -1) if ex[i] > 0]
    # worth a polish: where the parabola through the extreme and its neighbours goes at
    # least half way from the sample to the level; at an end of the scan (no parabola)
    # where the curve moves over the step next to it by at least the distance to the
    # level (rounding ripples far from it are not polished)
    last = t.size - 1

    def reach(i, k):
        if 0 < i < last:
            rise = k * (parabola_extreme(t, c, i) - c[i])
            return rise if rise > within else 0.0
        step = abs(c[i] - c[1 if i == 0 else last - 1]) if last else 0.0
        return 0.5 * step if step > within else 0.0
    # the largest and the smallest sample's extremes always: the peak's polish reads
    # them, and a peak reported above the level must come with its crossings
    top, bottom = int(np.nanargmax(c)), int(np.nanargmin(c))
    cands = [(i, k) for i, k in cands if (i, k) in ((top, 1), (bottom, -1))
             or reach(i, k) >= 0.5 * abs(ex[i])]
    cands.sort(key=lambda p: abs(ex[p[0]]))
    out = []

    def root(a, b):
        return float(brentq(lambda s: value_at(conc_at, depth, s) - level, a, b,
                            rtol=TIME_RTOL, xtol=1e-12 * max(abs(b), 1.0)))
    for i, kind in cands[:MAX_POLISHED]:
        te, ce = polished_extreme(conc_at, depth, t, c, i, kind, windows, t_end)
        if not kind * (ce - level) > within:
            continue
        a, b = float(t[max(i - 1, 0)]), float(t[min(i + 1, t.size - 1)])
        # a maximum: up before it, down after it (a minimum: the other way round); each
        # where the sample on that side lies across the level from the extreme
        for x0, x1, d, side in ((a, te, kind, a), (te, b, -kind, b)):
            if x0 < x1 and (value_at(conc_at, depth, side) - level) * (ce - level) < 0:
                out.append((root(x0, x1), d))
    return out


def first_exceedance(conc_at, depth, level, t_start, t_end, extra=(), windows=(),
                     n: int = N_SCAN, within: float = 0.0):
    """First time C reaches the level in [t_start, t_end]; t_start if already above;
    None if never."""
    cr, above0 = crossings(conc_at, depth, level, t_start, t_end, extra, n, windows=windows,
                           within=within)
    if above0:
        return float(t_start)
    ups = [t for t, d in cr if d > 0]
    return ups[0] if ups else None


def time_above(conc_at, depth, level, t_start, t_end, extra=(), windows=(), n: int = N_SCAN,
               within: float = 0.0):
    """Total time in [t_start, t_end] with C >= level."""
    cr, above = crossings(conc_at, depth, level, t_start, t_end, extra, n, windows=windows,
                          within=within)
    total, since = 0.0, (t_start if above else None)
    for t, d in cr:
        if d > 0 and since is None:
            since = t
        elif d < 0 and since is not None:
            total += t - since
            since = None
    if since is not None:
        total += t_end - since
    return total


def peak(conc_at, depth, t_start, t_end, extra=(), windows=(), n: int = N_SCAN,
         within: float = 0.0):
    """(time, concentration) of the largest C(depth, t) on [t_start, t_end]: the
    :data:`MAX_POLISHED` largest local maxima of the scan, each polished between its
    neighbouring samples (at the first or last sample: between it and the one inside,
    where a peak just after the start or before the end lies), the largest of them (a
    lower sample may hide the higher of two peaks; another maximum than the largest
    sample's must beat it by more than ``within``, the error bound of C, so that a
    rounding bump does not move the peak)."""
    t = scan_times(t_start, t_end, extra, n, windows=windows)
    c = np.asarray(conc_at(depth, t), float)
    i = int(np.nanargmax(c))
    best_t, best_c = float(t[i]), float(c[i])
    # the largest sample's maximum, and the others whose parabola rises from the sample
    # at least half way to the largest sample (a smooth peak between samples reaches
    # about twice as high again; rounding ripples do not)
    def worth(j):  # and by more than the error bound of C
        rise = parabola_extreme(t, c, j) - c[j]
        return rise > within and rise >= 0.5 * (best_c - c[j])
    tops = [j for j in local_extremes(c, 1) if np.isfinite(c[j]) and (j == i or worth(j))]
    tops.sort(key=lambda j: -c[j])
    for j in tops[:MAX_POLISHED]:
        tj, cj = polished_extreme(conc_at, depth, t, c, j, 1, windows, t_end)
        if cj > best_c + (0.0 if j == i else within):
            best_t, best_c = tj, cj
    return best_t, best_c
