"""Numerical inversion of the Laplace transform on Talbot, parabolic and hyperbolic
contours (which one serves which time: :mod:`transport.solvers.laplace.inversion`).

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

Windows of times: a hyperbola serves every time of [t0, Lambda t0] with one node set
(:func:`invert_window`, below), with the same two-node-count estimate.
"""
from __future__ import annotations

import functools
import math

import numpy as np

from transport.model.column import Column, InputError

__all__ = ["DEFAULT_NODES", "talbot_nodes", "default_nodes", "companion_nodes", "invert",
           "parabola_nodes", "parabola_count", "plan_parabola", "invert_parabola",
           "pair_estimate",
           "hyperbola_parameters", "hyperbola_nodes", "hyperbola_count", "invert_window",
           "derive_hyperbola", "hyperbola_exponents", "WINDOW_RATIOS"]

DEFAULT_NODES = 32
# optimised Talbot contour (Trefethen, Weideman & Schmelzer 2006)
_SIGMA, _MU, _ALPHA, _NU = -0.6122, 0.5017, 0.6407, 0.2645
_RATE = 1.358  # discretisation error ~ exp(-1.358 N)


def talbot_nodes(n: int = DEFAULT_NODES):
    """Contour shape phi_k and weights W_k for the nodes with theta > 0 (read-only
    arrays, made once per n).

    For a time t the nodes are s_k = phi_k n / t and f(t) = sum_k Im(W_k F(s_k)) / t.
    """
    return _talbot_nodes(n)


@functools.lru_cache(maxsize=32)
def _talbot_nodes(n):
    if n < 4 or n % 2:
        raise InputError(f"the number of Talbot nodes must be even and >= 4, got {n!r}")
    h = 2 * np.pi / n
    theta = -np.pi + (np.arange(n // 2, n) + 0.5) * h
    cot = 1.0 / np.tan(_ALPHA * theta)
    phi = _SIGMA + _MU * theta * cot + 1j * _NU * theta
    dphi = _MU * (cot - _ALPHA * theta * (1.0 + cot * cot)) + 1j * _NU
    weights = (h / np.pi) * n * dphi * np.exp(n * phi)
    shape = n * phi
    shape.flags.writeable = weights.flags.writeable = False
    return shape, weights


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


def _talbot_sums(vals, flags, weights, times):
    """Talbot sums of transform values ``vals`` (nt * nodes, m) at the nodes of
    :func:`talbot_nodes` with ``weights``: value (nt, m), sum of |terms| (nt, m), the
    modulus of the outermost term (nt, m) and whether an exponent was capped (nt,)."""
    vals = vals.reshape(times.size, weights.size, -1)
    terms = weights[None, :, None] * vals / times[:, None, None]
    capped = np.zeros(times.size, bool)
    if flags is not None:
        capped = np.asarray(flags).reshape(times.size, -1).any(axis=1)
    return (np.imag(terms).sum(axis=1), np.abs(terms).sum(axis=1), np.abs(terms[:, -1, :]),
            capped)


def invert(transform, times, n: int = DEFAULT_NODES):
    """Invert ``transform(s) -> (s.size, m)`` (or ``(values, capped flags)``) at ``times``
    (> 0): the value (nt, m) and an estimate of its absolute error (nt, m).

    The transform is inverted with n and n2 = :func:`companion_nodes` (n) nodes (two
    disjoint node sets, ~2.2 times the work of one, evaluated in one call).  The estimate is

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
    (shape, w), (shape2, w2) = talbot_nodes(n), talbot_nodes(companion_nodes(n))
    # both node sets in one call of the transform
    first = times.size * shape.size
    out = transform(np.concatenate([(shape[None, :] / times[:, None]).ravel(),
                                    (shape2[None, :] / times[:, None]).ravel()]))
    vals, flags = out if isinstance(out, tuple) else (out, None)
    one, two = (None, None) if flags is None else (flags[:first], flags[first:])
    return pair_estimate(_talbot_sums(vals[:first], one, w, times),
                         _talbot_sums(vals[first:], two, w2, times))


def pair_estimate(one, two):
    """Value and error estimate of :func:`invert` from two sums ``one`` and ``two`` of
    the same integral with different node sets, each (value, sum of |terms|, |outermost
    term|, capped): the second value, or the first where the two differ by no more than
    their rounding; estimate 2 |f2 - f1| + 16 eps (S1 + S2) + 2 |outermost term|,
    infinite where an exponent was capped."""
    (f1, size1, end1, cap1), (f2, size2, end2, cap2) = one, two
    diff = np.abs(f2 - f1)
    rounding = 16 * np.finfo(float).eps * (size1 + size2)
    first = diff <= rounding
    f = np.where(first, f1, f2)
    err = 2 * diff + rounding + 2 * np.where(first, end1, end2)
    err[np.broadcast_to(cap1 | cap2, err.shape[:1])] = np.inf
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


def parabola_nodes(s0: float, t: float, m: int, t_last: float = None):
    """m nodes s_k and weights W_k (u > 0 half) of the parabolic contour for time t:
    f(t) = sum_k Im(W_k F(s_k)).  With ``t_last`` (> t) the contour serves every time
    of [t, t_last] and the weights leave out e^{s_k t} (multiply by it per time): its
    shift is _PARA_SHIFT / t_last (terms stay below e^{_PARA_SHIFT} at every time of
    the window) and it runs to where e^{Re s t} < e^{-40} at t."""
    last = t if t_last is None else t_last
    shift = _PARA_SHIFT / last
    u_max = math.sqrt((_PARA_TAIL + _PARA_SHIFT * t / last) / (s0 * t))
    h = u_max / m
    u = (np.arange(m) + 0.5) * h
    s = shift + s0 * ((1 + 1j * u) ** 2 - 1)
    w = (h / np.pi) * 2j * s0 * (1 + 1j * u)
    return (s, w * np.exp(s * t)) if t_last is None else (s, w)


def parabola_count(s0: float, t: float, t_last: float = None) -> int:
    """Nodes of the parabolic contour for time t: 12 sqrt(s0 t) + 24; for the window
    [t, t_last], the node spacing of t_last's contour (the pole at s = 0 lies
    ~_PARA_SHIFT / (2 s0 t_last) from the path) out to t's end: about
    sqrt(t_last / t) (12 sqrt(s0 t_last) + 24)."""
    single = int(math.ceil(12 * math.sqrt(s0 * t))) + 24
    if t_last is None or t_last <= t:
        return single
    last = parabola_count(s0, t_last)
    h_last = math.sqrt((_PARA_TAIL + _PARA_SHIFT) / (s0 * t_last)) / last
    u_max = math.sqrt((_PARA_TAIL + _PARA_SHIFT * t / t_last) / (s0 * t))
    return int(math.ceil(u_max / h_last))


def plan_parabola(s0: float, times, limit: float = 4.0):
    """Windows (index arrays) of ``times`` for the parabolic contour: from the earliest
    time not yet placed, the window up to ``limit`` times it that saves the most nodes
    against one contour per time (a lone time when none saves)."""
    times = np.asarray(times, float)
    order = np.argsort(times, kind="stable")
    ts = times[order]
    single = np.array([parabola_count(s0, t) for t in ts])
    out, i = [], 0
    while i < ts.size:
        best, best_j = 0, i
        for j in range(i + 1, int(np.searchsorted(ts, ts[i] * limit, side="right"))):
            saved = single[i:j + 1].sum() - parabola_count(s0, ts[i], ts[j])
            if saved > best:
                best, best_j = saved, j
        out.append(order[i:best_j + 1])
        i = best_j + 1
    return out


def invert_parabola(transform, times, s0):
    """Like :func:`invert` on the parabolic contour, node counts m and 1.25 m + 2; the
    times share contours in windows (:func:`plan_parabola`), one transform call per
    window; a lone time gets its own contour."""
    times = np.asarray(times, float)
    f = e = None
    for rows in plan_parabola(s0, times):
        t = times[rows]
        t0, t1 = float(t.min()), float(t.max())
        m = parabola_count(s0, t0, t1 if t1 > t0 else None)
        sets = [parabola_nodes(s0, t0, mm, t_last=t1) for mm in (m, int(1.25 * m) + 2)]
        out = transform(np.concatenate([z for z, _ in sets]))
        vals, flags = out if isinstance(out, tuple) else (out, None)
        capped = flags is not None and bool(np.any(flags))
        sums, at = [], 0
        for z, w in sets:
            v = vals[at:at + z.size]
            at += z.size
            sums.append(_window_sums(v, capped, z, w, t))
        fi, ei = pair_estimate(*sums)
        if f is None:
            f, e = np.empty((times.size, fi.shape[1])), np.empty((times.size, fi.shape[1]))
        f[rows], e[rows] = fi, ei
    return f, e


# Hyperbolic contour serving a window of times t in [t0, Lambda t0] with ONE node set
# (Weideman & Trefethen 2007, Math. Comp. 76:1341, section 3):
#     z(u) = mu (1 + sin(i u - alpha)),  u_k = (k + 1/2) h, k = 0 .. N - 1 (u > 0 half),
#     f(t) = sum_k Im(W_k e^{z_k t} F(z_k)),  W_k = (h / pi) i mu cos(i u_k - alpha),
# with h = a / N and mu = m N / t0.  In the strip -alpha' < Im u < pi/2 - alpha the
# contour family stays right of the singularities (the negative real axis, reached at
# Im u = pi/2 - alpha) and left of the vertical line Re z = mu, so the trapezoid error is
# ~ e^{-2 pi (pi/2 - alpha) / h} (singularities) + e^{mu Lambda t0 (1 - sin(alpha - d))
# - 2 pi d / h} (lower strip, worst at the latest time) + e^{-mu t0 (sin alpha cosh(N h)
# - 1)} (truncation, worst at the earliest time).  :func:`derive_hyperbola` picks
# alpha, d, a, m making all three equal, e^{-rate N}; the table holds its output on the
# window ratios 2^(k/2) (a window uses the first ratio at least its own: a contour for a
# wider window serves a narrower one).  Lambda = 1 gives alpha = 1.1721, a = 1.0818,
# m = 4.4921, rate 2.3157 per node (e^{-1.16} per node of the full contour), the
# single-time hyperbola of Weideman & Trefethen 2007 (tests/test_laplace_window.py).
# Rounding: the terms at the latest time reach e^{m N Lambda (1 - sin alpha)} (<= e^6)
# times the data, inside the estimate's 16 eps sum |terms|.
WINDOW_RATIOS = tuple(2 ** (k / 2) for k in range(15))  # 1 .. 128
# (alpha, a = N h, m = mu t0 / N, rate) for each ratio of WINDOW_RATIOS
_HYPERBOLA = (
    (1.172104, 1.081792, 4.49208, 2.315654),
    (1.159557, 1.280898, 2.59559, 2.017249),
    (1.143097, 1.528044, 1.47083, 1.758661),
    (1.122093, 1.831466, 0.816775, 1.539360),
    (1.096908, 2.194435, 0.445964, 1.356853),
    (1.068933, 2.612207, 0.24112, 1.207141),
    (1.040755, 3.068889, 0.130703, 1.085197),
    (1.014644, 3.545115, 0.0718251, 0.985696),
    (0.991700, 4.025947, 0.0402463, 0.903779),
    (0.972151, 4.502159, 0.0230368, 0.835465),
    (0.955647, 4.969938, 0.0134522, 0.777695),
    (0.941705, 5.428165, 0.00799594, 0.728183),
    (0.929861, 5.877027, 0.00482645, 0.685230),
    (0.919703, 6.317422, 0.00295167, 0.647564),
    (0.910618, 6.753302, 0.00182035, 0.614222),
)


def hyperbola_exponents(ratio: float, alpha: float, a: float, m: float):
    """The three error exponents per node (singularities, lower strip at its best
    offset d, truncation) of the hyperbola (alpha, a, m) on windows of ``ratio``: its
    discretisation error is ~ e^{-N min(...)}."""
    from scipy.optimize import minimize_scalar
    lower = minimize_scalar(lambda d: -(2 * math.pi * d / a
                                        - m * ratio * (1 - math.sin(alpha - d))),
                            bounds=(0.0, alpha), method="bounded",
                            options={"xatol": 1e-12})
    return (2 * math.pi * (math.pi / 2 - alpha) / a, float(-lower.fun),
            m * (math.sin(alpha) * math.cosh(a) - 1))


def derive_hyperbola(ratio: float):
    """(alpha, a, m, rate) of the hyperbola for windows [t0, ratio t0]: maximise the
    smallest of the three error exponents above (Nelder-Mead from a few starts; m is
    chosen to equalise the lower-strip and truncation exponents).  The source of the
    table; slow (~0.1 s), not used by the solver.  The optimum is flat: at ratio 128,
    parameters 0.3 % apart reach the same rate to 1e-5."""
    from scipy.optimize import minimize

    def exponents(p):
        alpha, frac, a = p
        d = frac * alpha
        m = (2 * math.pi * d / a) / (math.sin(alpha) * math.cosh(a) - 1
                                     + ratio * (1 - math.sin(alpha - d)))
        return min(2 * math.pi * (math.pi / 2 - alpha) / a,
                   m * (math.sin(alpha) * math.cosh(a) - 1)), m

    def cost(p):
        ok = 0 < p[0] < math.pi / 2 and 0 < p[1] < 1 and p[2] > 0
        return -exponents(p)[0] if ok else 1e9

    best = min((minimize(cost, [a0, 0.5, h0], method="Nelder-Mead",
                         options=dict(xatol=1e-10, fatol=1e-12, maxiter=4000))
                for a0 in (0.6, 0.9, 1.2) for h0 in (0.5, 1.0, 2.0, 4.0)),
               key=lambda r: r.fun)
    rate, m = exponents(best.x)
    return float(best.x[0]), float(best.x[2]), float(m), float(rate)


def hyperbola_parameters(ratio: float):
    """(alpha, a, m, rate) of the tabulated hyperbola serving windows of ``ratio``
    (t_last / t_first, 1 .. 128)."""
    k = int(np.searchsorted(WINDOW_RATIOS, ratio * (1 - 1e-12)))
    if k >= len(WINDOW_RATIOS):
        raise ValueError(f"no hyperbola tabulated for a window ratio of {ratio:g} (> 128)")
    return _HYPERBOLA[k]


def hyperbola_count(ratio: float, n: int) -> int:
    """Nodes N of the hyperbola for a window of ``ratio`` aiming at the discretisation
    error of a Talbot inversion with n nodes, e^{-1.358 n}: N = 1.358 n / rate."""
    return int(math.ceil(_RATE * n / hyperbola_parameters(ratio)[3]))


def hyperbola_nodes(ratio: float, count: int, t0: float):
    """Nodes z_k and weights W_k (without e^{z_k t}) of the hyperbola for the window
    [t0, ratio t0] with ``count`` nodes."""
    alpha, a, m, _ = hyperbola_parameters(ratio)
    h = a / count
    w = 1j * (np.arange(count) + 0.5) * h - alpha
    mu = m * count / t0
    return mu * (1 + np.sin(w)), (h / np.pi) * 1j * mu * np.cos(w)


def _window_sums(vals, capped, z, w, times):
    """(value, sum |terms|, |outermost term|, capped) of the hyperbola sums at ``times``
    from the transform values (count, m) at its nodes: matrix products."""
    e = w[None, :] * np.exp(z[None, :] * times[:, None])
    f = e.real @ vals.imag + e.imag @ vals.real
    size = np.abs(e) @ np.abs(vals)
    end = np.abs(e[:, -1:]) * np.abs(vals[-1:, :])
    return f, size, end, np.full(times.size, bool(np.any(capped)))


def invert_window(transform, windows, n: int):
    """Invert ``transform`` on each window of times (a list of arrays, each its times
    > 0, t_last / t_first <= 128) with one hyperbola per window and node count: N =
    :func:`hyperbola_count` and N2 = N + max(4, N / 4) nodes, all in ONE call of the
    transform.  Returns [(value (nt, m), estimate (nt, m))] per window, the estimate as
    :func:`invert` (:func:`pair_estimate`)."""
    if not windows:
        return []
    sets = []
    for times in windows:
        t0 = float(times.min())
        ratio = float(times.max()) / t0
        count = hyperbola_count(ratio, n)
        sets += [hyperbola_nodes(ratio, c, t0)
                 for c in (count, count + max(4, round(count / 4)))]
    s = np.concatenate([z for z, _ in sets])
    out = transform(s)
    vals, flags = out if isinstance(out, tuple) else (out, None)
    vals = vals.reshape(s.size, -1)
    flags = np.zeros(s.size, bool) if flags is None else np.asarray(flags).reshape(-1)
    results, at = [], 0
    for k, times in enumerate(windows):
        sums = []
        for z, w in sets[2 * k:2 * k + 2]:
            part = slice(at, at + z.size)
            sums.append(_window_sums(vals[part], flags[part], z, w, times))
            at += z.size
        results.append(pair_estimate(*sums))
    return results
