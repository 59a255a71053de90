"""Which contour inverts which output time, and the best value of each.

Three contours (:mod:`transport.solvers.laplace.contour`), each inverted with two node
counts so that every value carries its own error estimate:

* hyperbolas serving a WINDOW of times [t0, Lambda t0] (Lambda <= 128) with one node set
  (Weideman & Trefethen 2007): about N + N2 = 2.3 x 1.358 n / rate transform
  evaluations per window (rate 0.61 to 2.3 per node, :mod:`~transport.solvers.laplace.
  contour`) instead of (n + n2) / 2 per output time on Talbot contours.  A five-layer
  boring's check at 100 log-spaced times from 1 to 100 yr and 79 depths takes one
  window: 259 evaluations instead of 11,224, 30 x faster (``python
  benchmarks/bench_laplace.py`` prints the figures);
* Talbot contours, one per time (times that share no window cheaply: sparse output
  times), and for any windowed time whose estimate is not small enough (below);
* parabolas outside the growth region of an advective transform where neither of the
  others serves (high Peclet numbers, :func:`invert_best`), shared by the retried times
  in windows of up to 4 x in time where that saves nodes
  (:func:`transport.solvers.laplace.contour.plan_parabola`).

The acceptance levels only decide where to spend more work; every value keeps the
estimate of the contour it came from, and where two contours were tried the value with
the smaller estimate is kept.
"""
from __future__ import annotations

import math

import numpy as np

from transport.solvers.laplace.contour import (companion_nodes, hyperbola_count, invert,
                                               invert_parabola, invert_window)

__all__ = ["plan_windows", "invert_best", "tries_parabola", "WINDOW_LIMIT", "window_solves", "evaluations"]

WINDOW_LIMIT = 128.0  # widest window t_last / t_first (the table's)
_RETRY = 1e-10  # an estimate above this fraction of the quantity's scale: try the parabola
_WINDOW_LEVEL = 1e-12  # ... a windowed value above it (or above the rounding a Talbot
# contour of n nodes shows anyway, ~16 eps e^{0.171 n}): try a Talbot contour at that time


def _window_level(n: int) -> float:
    """Fraction of a group's scale above which a windowed value is tried again on a
    Talbot contour: 1e-12, or the Talbot contour's own rounding if larger."""
    return max(_WINDOW_LEVEL, 16 * np.finfo(float).eps * math.exp(0.171 * n))


def _talbot_solves(n: int) -> int:
    """Transform evaluations of one time on Talbot contours (n and n2 nodes, halves)."""
    return (n + companion_nodes(n)) // 2


def window_solves(ratio: float, n: int) -> int:
    """Transform evaluations of one window of ``ratio`` (N + N2 hyperbola nodes)."""
    count = hyperbola_count(ratio, n)
    return 2 * count + max(4, round(count / 4))


def plan_windows(times, n: int):
    """Split ``times`` (> 0) into windows served by one hyperbola each and lone times.

    The span t_last / t_first is cut into the fewest windows of equal ratio at most
    WINDOW_LIMIT (wide windows round off least: the terms at a window's latest time
    reach e^{c E} times the data for a target error e^{-E}, c = 0.152 for one time, 0.10
    at a ratio of 32, 0.080 at 128 -- about the Talbot contour's 0.126 -- so no narrow
    remainder window is left); a window's times share a hyperbola when that costs fewer
    transform evaluations than a Talbot contour per time, else they are lone.  Returns
    (list of index arrays, lone indices)."""
    times = np.asarray(times, float)
    order = np.argsort(times, kind="stable")
    ts = times[order]
    if ts.size < 2:
        return [], order
    span = ts[-1] / ts[0]
    count = max(1, int(np.ceil(np.log(span) / np.log(WINDOW_LIMIT) - 1e-9)))
    edges = ts[0] * span ** (np.arange(1, count) / count)
    windows, lone = [], []
    for part in np.split(np.arange(ts.size), np.searchsorted(ts, edges, side="right")):
        if part.size >= 2 and (window_solves(ts[part[-1]] / ts[part[0]], n)
                               < part.size * _talbot_solves(n)):
            windows.append(order[part])
        else:
            lone += list(order[part])
    return windows, np.array(lone, dtype=int)


def evaluations(times, n: int) -> int:
    """Transform evaluations of one inversion at ``times`` (> 0) as planned by
    :func:`plan_windows` (retries not counted)."""
    times = np.asarray(times, float)
    windows, lone = plan_windows(times, n)
    return (sum(window_solves(times[w].max() / times[w].min(), n) for w in windows)
            + lone.size * _talbot_solves(n))


def _unsettled(f, err, groups, floors, level):
    """Times (bool, nt) where some estimate of a group exceeds max(level x the group's
    scale, its floor); the scale of a group is its largest value whose estimate is below
    1e-3 of it (garbage values carry large estimates and do not count)."""
    with np.errstate(invalid="ignore"):
        fv = np.abs(f)
        ok = np.isfinite(fv) & (err <= 1e-3 * fv)
        # the largest trusted value of each column (0 where none), then of each group
        col_max = np.where(ok, fv, 0.0).max(axis=0, initial=0.0)
        limits = [max(level * float(col_max[cols].max(initial=0.0)), floor)
                  for cols, floor in zip(groups, floors)]
        cols = np.concatenate([np.asarray(c, int) for c in groups])
        limit = np.repeat(limits, [len(c) for c in groups])
        return ~(err[:, cols] <= limit).all(axis=1)


def tries_parabola(f, err, floor: float = 0.0) -> np.ndarray:
    """Times (bool, nt) at which :func:`invert_best` tries the parabolic contour for an
    advective transform, for values ``f`` and estimates ``err`` (nt, m) of one quantity
    group with the floor ``floor``: step 3 of its rule."""
    return _unsettled(f, err, [np.arange(f.shape[1])], [floor], _RETRY)


def _keep_better(f, err, rows, f2, e2):
    """Replace the values at ``rows`` where the new estimate is smaller (also where the
    old one is NaN)."""
    with np.errstate(invalid="ignore"):
        better = ~(err[rows] <= e2)
    f[rows] = np.where(better, f2, f[rows])
    err[rows] = np.where(better, e2, err[rows])


def invert_best(transform, times, n, s0, groups, floors=None):
    """Value (nt, m) and error estimate (nt, m) of ``transform`` at ``times`` (> 0).

    1. Windows of times share one hyperbola each (:func:`plan_windows`); lone times get
       a Talbot contour each (:func:`transport.solvers.laplace.contour.invert`, n nodes).
    2. Windowed times whose estimate of some group exceeds max(level x the group's
       scale, its floor) are inverted again on Talbot contours; the level is 1e-12, or
       the rounding a Talbot contour of n nodes shows anyway (16 eps e^{0.171 n},
       2.6e-11 at n = 52) where that is larger.
    3. With advection (s0 > 0), times whose estimate exceeds max(1e-10 x the scale, the
       floor) are inverted again on the parabolic contour.

    In 2 and 3 each value is taken from the contour with the smaller estimate.
    ``groups`` are the column indices of the quantity groups (C, F, ...); ``floors``
    (one absolute error per group, optional) are errors good enough for the caller: an
    estimate at or below them is not tried again (a curve read only ahead of a front,
    where every value is 1e-50 and the group's own scale would ask for 1e-60).  They
    only save work: every value keeps its own estimate."""
    times = np.asarray(times, float)
    floors = [0.0] * len(groups) if floors is None else list(floors)
    windows, lone = plan_windows(times, n)
    f = err = None
    parts = list(zip(windows, invert_window(transform, [times[w] for w in windows], n)))
    if lone.size:
        parts.append((lone, invert(transform, times[lone], n)))
    for rows, (fi, ei) in parts:
        if f is None:
            f = np.empty((times.size, fi.shape[1]))
            err = np.empty_like(f)
        f[rows], err[rows] = fi, ei
    windowed = np.ones(times.size, bool)
    windowed[lone] = False
    if windowed.any():  # (lone times were inverted on Talbot contours already)
        redo = windowed & _unsettled(f, err, groups, floors, _window_level(n))
        if redo.any():
            _keep_better(f, err, redo, *invert(transform, times[redo], n))
    if s0 > 0:
        retry = _unsettled(f, err, groups, floors, _RETRY)
        if retry.any():
            _keep_better(f, err, retry, *invert_parabola(transform, times[retry], s0))
    return f, err
