"""Numerical inversion of the Laplace transform on Talbot and parabolic contours.

Optimised Talbot contour (Trefethen, Weideman & Schmelzer 2006, BIT 46:653; analysis
of such contours in Weideman & Trefethen 2007, Math. Comp. 76:1341):

    s(theta) = (N / t) (-0.6122 + 0.5017 theta cot(0.6407 theta) + 0.2645 i theta),

trapezoid rule with N nodes theta_k = -pi + (k + 1/2) 2 pi / N; f is real, so only the
N / 2 nodes with theta > 0 are evaluated.  For a smooth transform the discretisation
error is ~ e^{-1.358 N} and the rounding ~ eps e^{0.171 N} times the integrand; the
transform must have its singularities on the negative real axis (true here: the
spectrum is real, <= 0 in s).

Error estimates (:func:`invert`): every quantity is inverted with N and a larger N2,
and the estimate is 2 |f_N2 - f_N| + 16 eps sum |terms| (both sums) + twice the
outermost term; no a-priori rate is assumed, so a transform that is not smooth (a step
in the initial state, a front) or that carries its own rounding is caught.

High Peclet numbers: inside the parabola Re s < -(Im s)^2 / (4 s0), s0 = q^2 / (4 theta D
theta R), the advective branch grows like e^{Pe z / 2} (a delay e^{-s tau}); the Talbot
contour sweeps that region and, ahead of a front, sums terms up to 1e40 to get values
near 0 (garbage, now with an estimate to match).  Times whose Talbot estimate exceeds
1e-10 of the quantity's scale are inverted again on a parabolic contour just outside
that region (:func:`parabola_nodes`; Weideman & Trefethen 2007 analyse parabolic
contours), where every term is bounded, at ~12 sqrt(s0 t) + 24 solves per time; each
value comes from the contour with the smaller estimate.
Measured against mpmath (tests/test_laplace.py): column Peclet numbers 100 to 1000 are
served to ~1e-12 of the inlet concentration ahead of and behind the front.
"""
from __future__ import annotations

import math

import numpy as np

from transport.model.column import Column, InputError

__all__ = ["DEFAULT_NODES", "talbot_nodes", "default_nodes", "companion_nodes", "invert",
           "parabola_nodes", "parabola_count", "invert_best"]

DEFAULT_NODES = 32
# optimised Talbot contour (Trefethen, Weideman & Schmelzer 2006)
_SIGMA, _MU, _ALPHA, _NU = -0.6122, 0.5017, 0.6407, 0.2645
_RATE = 1.358  # discretisation error ~ exp(-1.358 N)


def talbot_nodes(n: int = DEFAULT_NODES):
    """Contour shape phi_k and weights W_k for the nodes with theta > 0.

    For a time t the nodes are s_k = phi_k n / t and f(t) = sum_k Im(W_k F(s_k)) / t.
    """
    if n < 4 or n % 2:
        raise InputError(f"the number of Talbot nodes must be even and >= 4, got {n!r}")
    h = 2 * np.pi / n
    theta = -np.pi + (np.arange(n // 2, n) + 0.5) * h
    cot = 1.0 / np.tan(_ALPHA * theta)
    phi = _SIGMA + _MU * theta * cot + 1j * _NU * theta
    dphi = _MU * (cot - _ALPHA * theta * (1.0 + cot * cot)) + 1j * _NU
    weights = (h / np.pi) * n * dphi * np.exp(n * phi)
    return n * phi, weights


def default_nodes(column: Column) -> int:
    """Talbot nodes for ``column``: 32 up to a column Peclet number of 10, then more
    (the transform approaches a pure delay e^{-s tau}, whose sharp fronts need finer
    quadrature): N = 32 + 6 log2(Pe / 10), capped at 96 (rounding grows like
    e^{0.171 N}: ~1e-13 at N = 32, ~3e-11 at N = 64, ~5e-9 at N = 96)."""
    pe = sum(abs(column.darcy_flux) * lay.thickness / (lay.water_content * lay.diffusivity)
             for lay in column.layers)
    if pe <= 10:
        return DEFAULT_NODES
    return int(min(96, 2 * round((32 + 6 * math.log2(pe / 10)) / 2)))


def companion_nodes(n: int) -> int:
    """The second, larger node count used to estimate the error of an inversion with n
    nodes: n + max(8, n / 4) (even)."""
    return int(n + max(8, 2 * round(n / 8)))


def _invert_once(transform, times, n):
    """Talbot sum with n nodes: value (nt, m), sum of |terms| (nt, m), the modulus of
    the outermost term (nt, m) and whether an exponent was capped (nt,)."""
    shape, w = talbot_nodes(n)
    s = (shape[None, :] / times[:, None]).ravel()
    out = transform(s)
    vals, flags = out if isinstance(out, tuple) else (out, None)
    vals = vals.reshape(times.size, shape.size, -1)
    terms = w[None, :, None] * vals / times[:, None, None]
    capped = np.zeros(times.size, bool)
    if flags is not None:
        capped = np.asarray(flags).reshape(times.size, -1).any(axis=1)
    return (np.imag(terms).sum(axis=1), np.abs(terms).sum(axis=1), np.abs(terms[:, -1, :]),
            capped)


def invert(transform, times, n: int = DEFAULT_NODES):
    """Invert ``transform(s) -> (s.size, m)`` (or ``(values, capped flags)``) at ``times``
    (> 0): the value (nt, m) and an estimate of its absolute error (nt, m).

    The transform is inverted with n and n2 = :func:`companion_nodes` (n) nodes (two
    disjoint node sets, ~2.2 times the work of one).  The estimate is

        2 |f_n2 - f_n| + 16 eps (S_n + S_n2) + 2 |outermost term|

    with S = sum |terms|.  Why each part:

    * 2 |f_n2 - f_n|: discretisation.  Whenever the error of f_n2 is at most 2/3 of that
      of f_n (geometric convergence, e^{-1.358 N} for a smooth transform, gives a factor
      e^{-1.358 (n2 - n)} < 1e-4; algebraic convergence of order >= 2 with
      n2 >= 1.25 n gives <= 0.64), err(f_n2) <= |f_n2 - f_n| / (3/2 - 1) = 2 |f_n2 - f_n|.
      Unlike the a-priori rate it sees transforms that are not smooth (a step in the
      initial state, fronts at high Peclet numbers) and transform values that carry
      their own rounding (evaluated at different nodes, the two sums disagree).
    * 16 eps (S_n + S_n2): rounding of the two sums (terms much larger than their sum
      cancel: high Peclet numbers ahead of a front, e^{0.171 N} growth at large N).
    * 2 |outermost term|: the Bromwich path is truncated at the ends of the contour;
      the estimate is useless if the integrand is not negligible there (a transform
      that grows in the left half-plane, e^{-s tau} ahead of an advective front).

    The value reported is f_n2, or f_n where the two differ by no more than their
    rounding (f_n then has the smaller rounding).  A capped exponent gives an infinite
    estimate.
    """
    times = np.asarray(times, dtype=float)
    f1, size1, end1, cap1 = _invert_once(transform, times, n)
    f2, size2, end2, cap2 = _invert_once(transform, times, companion_nodes(n))
    diff = np.abs(f2 - f1)
    rounding = 16 * np.finfo(float).eps * (size1 + size2)
    first = diff <= rounding
    f = np.where(first, f1, f2)
    err = 2 * diff + rounding + 2 * np.where(first, end1, end2)
    err[cap1 | cap2] = np.inf
    return f, err


# Parabolic contour outside the growth region of an advective transform.  With
# s0 = q^2 / (4 theta D theta R) the branch r2 = (q - sqrt(q^2 + 4 k c s)) / (2 k) has
# Re r2 > 0 exactly inside the parabola Re s < -(Im s)^2 / (4 s0): there the transform
# grows like e^{Pe z / 2} (an advective delay e^{-s tau}) and a Talbot contour, which
# sweeps that region, sums huge terms ahead of a front.  The contour
#     s(u) = m0 + s0 ((1 + i u)^2 - 1),  m0 = _PARA_SHIFT / t
# is that parabola moved right by m0, so e^{r2 z} is bounded by 1 on it at every depth
# and the terms never exceed ~e^{_PARA_SHIFT} times the data scale.  Trapezoid rule in
# u: the pole at s = 0 lies ~m0 / (2 s0) from the real u axis, so the step must be
# small, h = pi (m0 / s0) / _PARA_DIGITS, and u runs to where e^{Re s t} < e^{-40}: about
# 12 sqrt(s0 t) + 24 nodes (measured in tests/test_laplace.py against mpmath).
_PARA_SHIFT = 6.0
_PARA_TAIL = 40.0


def parabola_nodes(s0: float, t: float, m: int):
    """m nodes s_k and weights W_k (u > 0 half) of the parabolic contour for time t:
    f(t) = sum_k Im(W_k F(s_k))."""
    shift = _PARA_SHIFT / t
    u_max = math.sqrt((_PARA_TAIL + _PARA_SHIFT) / (s0 * t))
    h = u_max / m
    u = (np.arange(m) + 0.5) * h
    s = shift + s0 * ((1 + 1j * u) ** 2 - 1)
    return s, (h / np.pi) * 2j * s0 * (1 + 1j * u) * np.exp(s * t)


def parabola_count(s0: float, t: float) -> int:
    """Nodes of the parabolic contour for time t: 12 sqrt(s0 t) + 24."""
    return int(math.ceil(12 * math.sqrt(s0 * t))) + 24


def _invert_parabola(transform, times, s0):
    """Like :func:`invert` on the parabolic contour, node counts m and 1.25 m + 2."""
    f = []
    for t in times:
        m = parabola_count(s0, t)
        parts = []
        for mm in (m, int(1.25 * m) + 2):
            s, w = parabola_nodes(s0, t, mm)
            out = transform(s)
            vals, flags = out if isinstance(out, tuple) else (out, None)
            terms = w[:, None] * vals
            parts.append((np.imag(terms).sum(axis=0), np.abs(terms).sum(axis=0),
                          np.abs(terms[-1]), flags is not None and np.any(flags)))
        (f1, s1, e1, c1), (f2, s2, e2, c2) = parts
        diff = np.abs(f2 - f1)
        rounding = 16 * np.finfo(float).eps * (s1 + s2)
        first = diff <= rounding
        err = 2 * diff + rounding + 2 * np.where(first, e1, e2)
        if c1 or c2:
            err[:] = np.inf
        f.append((np.where(first, f1, f2), err))
    return np.array([a for a, _ in f]), np.array([b for _, b in f])


_RETRY = 1e-10  # an estimate above this fraction of the quantity's scale: try the parabola


def invert_best(transform, times, n, s0, groups, floors=None):
    """Best of two contours.

    Talbot inversion (:func:`invert`); with advection (s0 > 0), the times where some
    estimate exceeds _RETRY times the scale of its quantity group are inverted again on
    the parabolic contour, and each value is taken from the contour with the smaller
    estimate.  The scale of a group is its largest value whose estimate is below 1e-3
    of it (garbage values carry large estimates and do not count).

    ``floors`` (one absolute error per group, optional): estimates at or below it are
    good enough for the caller and are not retried (a curve read only ahead of a front,
    where every value is 1e-50 and the group's own scale would ask for 1e-60).  It only
    saves work: every value keeps its own estimate."""
    f, err = invert(transform, times, n)
    if s0 <= 0:
        return f, err
    floors = [0.0] * len(groups) if floors is None else list(floors)
    retry = np.zeros(times.size, bool)
    with np.errstate(invalid="ignore"):
        for cols, floor in zip(groups, floors):
            fv, ev = np.abs(f[:, cols]), err[:, cols]
            ok = np.isfinite(fv) & (ev <= 1e-3 * fv)
            scale = fv[ok].max() if ok.any() else 0.0
            retry |= ~(ev <= max(_RETRY * scale, floor)).all(axis=1)
    if retry.any():
        f2, e2 = _invert_parabola(transform, times[retry], s0)
        with np.errstate(invalid="ignore"):
            better = ~(err[retry] <= e2)  # also where the Talbot estimate is NaN
        f[retry] = np.where(better, f2, f[retry])
        err[retry] = np.where(better, e2, err[retry])
    return f, err
