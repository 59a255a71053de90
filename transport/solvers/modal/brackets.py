"""Brackets and first iterates of the eigenvalues from one pass over a grid, and the
Newton and Hermite steps the root polish shares (:mod:`transport.solvers.modal.spectrum`).

Steps are taken in mu = sqrt(lambda - lo), in which the Pruefer angles grow about
linearly (exactly, in a uniform layer).
"""
from __future__ import annotations

import numpy as np

__all__ = ["brackets", "brackets_many", "lambda_step", "raw_counts"]


def raw_counts(G):
    """ceil(G / pi): the eigenvalue count below each grid point (before monotone
    clean-up)."""
    return np.ceil(G / np.pi - 1e-12)


def brackets(grid, G, dG, face, n, lo):
    """Bracket (a, b), first iterate x and mode index j of each of the n smallest
    eigenvalues from one pass over ``grid``; with the face, mu and slope in mu of the
    grid point the iterate was reached from (the start of the root polish in
    :mod:`transport.solvers.modal.spectrum`)."""
    return brackets_many(grid, G, dG, face, [n], [lo], [grid.size])[0]


def brackets_many(grid, G, dG, face, ns, los, sizes):
    """:func:`brackets` of several operators at once: operator r has the next
    ``sizes[r]`` grid points, its ``ns[r]`` smallest eigenvalues are bracketed, and its
    lower bound is ``los[r]``.  A list of tuples, one per operator, each the same
    arrays as its own call would give."""
    m = len(ns)
    raw = np.maximum(raw_counts(G), 0)
    if m > 1 and not np.isfinite(raw).all():  # keep each operator's own NaN handling
        cut = np.cumsum(sizes)[:-1]
        split = [np.split(v, cut) for v in (grid, G, dG, face)]
        return [brackets(*(v[r] for v in split), ns[r], los[r]) for r in range(m)]
    # each operator's running maximum of the counts, all at once: operator r's counts
    # are offset by r x (largest count + 1), exactly (integers far below 2^53)
    off = np.repeat(np.arange(m), sizes) * (raw.max() + 1.0 if m > 1 else 0.0)
    counts = np.maximum.accumulate(raw + off)
    first = np.concatenate([[0], np.cumsum(sizes)[:-1]])
    own = np.repeat(np.arange(m), ns)
    j = np.arange(own.size) - np.repeat(np.cumsum(ns) - np.asarray(ns), ns)
    base = first[own]
    i_lo = np.searchsorted(counts, j + off[base], side="right") - 1 - base
    i_lo = base + np.clip(i_lo, 0, np.asarray(sizes)[own] - 2)
    i_hi = i_lo + 1
    lo = np.asarray(los, dtype=float)[own]
    a, b = grid[i_lo], grid[i_hi]
    # first Newton step from the better end of the bracket
    jpi = j * np.pi
    ga, gb = G[i_lo] - jpi, G[i_hi] - jpi
    sa, oka = lambda_step(ga, dG[i_lo], a, lo)[:2]
    sb, okb = lambda_step(gb, dG[i_hi], b, lo)[:2]
    xa, xb = a + sa, b + sb
    oka &= (xa > a) & (xa < b) & (ga <= 0)
    okb &= (xb > a) & (xb < b) & (gb >= 0)
    use_a = oka & (~okb | (np.abs(ga) <= np.abs(gb)))
    x = np.where(use_a, xa, np.where(okb, xb, 0.5 * (a + b)))
    # where both ends matched at the same face, G is one smooth function over the
    # bracket: the root of its cubic Hermite interpolant (in mu) is a better start
    same = (face[i_lo] == face[i_hi]) & (ga < 0) & (gb > 0)
    if same.any():
        sel = np.flatnonzero(same)
        xh = _hermite_root(a[sel], b[sel], ga[sel], gb[sel], dG[i_lo[sel]],
                           dG[i_hi[sel]], lo[sel])
        x[sel] = np.where((xh > a[sel]) & (xh < b[sel]), xh, x[sel])
        use_a[sel] = np.abs(ga[sel]) <= np.abs(gb[sel])
    # the end the start came from: its face and slope give the curvature at the
    # first pass if that pass matches at the same face
    end = np.where(use_a, i_lo, i_hi)
    mu_end = np.sqrt(np.maximum(grid[end] - lo, 0.0))
    known = (oka | okb | same)
    out = (a, b, x, j, np.where(known, face[end], -1), np.where(known, mu_end, np.nan),
           dG[end] * 2.0 * mu_end)
    cut = np.cumsum(ns)[:-1]
    return list(zip(*(np.split(v, cut) for v in out)))


def _hermite_root(a, b, ga, gb, da, db, lo):
    """Root in (a, b) of the cubic Hermite interpolant of g (values ga < 0 < gb,
    lambda slopes da, db) in mu = sqrt(lambda - lo), by safeguarded Newton steps on
    the cubic from the secant root."""
    ma, mb = np.sqrt(np.maximum(a - lo, 0.0)), np.sqrt(np.maximum(b - lo, 0.0))
    h = mb - ma
    pa, pb = da * 2.0 * ma * h, db * 2.0 * mb * h  # slopes in t = (mu - ma) / h
    # p(t) = ga + pa t + c2 t^2 + c3 t^3
    c2 = 3.0 * (gb - ga) - 2.0 * pa - pb
    c3 = 2.0 * (ga - gb) + pa + pb
    t = np.clip(-ga / (gb - ga), 0.0, 1.0)
    for _ in range(5):
        p = ga + t * (pa + t * (c2 + t * c3))
        dp = pa + t * (2.0 * c2 + 3.0 * t * c3)
        t = np.clip(t - p / np.where(dp > 0, dp, np.inf), 0.0, 1.0)
    mu = ma + t * h
    return lo + mu * mu


def _newton_step(f, df):
    """Newton step -f / f' and its validity (a finite, positive slope)."""
    good = np.isfinite(df) & (df > 0)
    return -f / np.where(good, df, 1.0), good


def lambda_step(f, df, x, lo):
    """Newton step of f_j in mu = sqrt(lambda - lo), in which the angles grow about
    linearly (exactly, in a uniform layer), returned as a lambda step
    d_mu (2 mu + d_mu); with its validity, mu, df/dmu and d_mu."""
    mu = np.sqrt(np.maximum(x - lo, 0.0))
    dmu = df * 2.0 * mu
    step, good = _newton_step(f, dmu)
    return step * (2.0 * mu + step), good, mu, dmu, step
