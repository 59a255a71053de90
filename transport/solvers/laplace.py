"""Laplace-domain engine: exact layered transfer, numerical inversion on a Talbot contour.

The second, independent path of the project (beside the modal and finite-volume
engines).  It serves early times (where the modal series needs too many modes), high
column Peclet numbers (where the modal sum in v = e^{-A} u loses digits), a
semi-infinite bottom layer, and cross-checks.

Transformed problem
-------------------
On each segment (a layer, split further at the sample depths of a measured initial
profile so that the initial state c0 = a + b zeta is linear on it; a step, a depth
sampled twice, is a segment boundary, and the value at it is the deeper one), k = theta D,
c = theta R, zeta the depth below the segment top:

    k C'' - q C' - c (s + mu) C = -c (a + b zeta) - sigma / s,

boundary values become value / s.  Particular solution P = alpha + beta zeta with
beta = b / (s + mu), alpha = (c a + sigma / s - q beta) / (c (s + mu)).  Homogeneous
part A e^{r1 (zeta - z1)} + B e^{r2 (zeta - z2)} with

    r1,2 = (q +- sqrt(q^2 + 4 k c (s + mu))) / (2 k)     (principal square root),

computed without cancellation (r1 r2 = -c (s + mu) / k), and each exponential anchored
at the segment end where it is largest (z = bottom when Re r >= 0, else top), so every
entry has modulus <= 1 times a flux factor: thick layers and column Peclet numbers of
1000 and more never overflow.  The 2N unknowns follow from the two boundary rows (the
same kinds as :func:`transport.solvers.modal.operator.boundary_row`) and, at each internal face,
C_below = K C_above and continuity of F = q C - k C'.  The system is banded (2, 2); its
rows are equilibrated and it is solved by LU with partial pivoting (LAPACK gbsv).

A semi-infinite bottom keeps only the r2 exponential (the analytic continuation of the
one that decays with depth) in the last layer; the bottom boundary is then unused.

Inversion
---------
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

Outputs: C, F, cumulative mass through each depth (F^ / s), and the mass budget from
closed-form layer integrals of C^ (stored, decayed = sum mu int c C^ / s).
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
from scipy.linalg.lapack import zgbsv as _zgbsv

from transport.solvers.modal.series import ColumnSolution
from transport.model.column import Column, InitialState, InputError, check_output_grid

__all__ = ["PiecewiseCubic", "solve_laplace", "talbot_nodes", "invert", "LaplaceTransfer", "EngineSolution",
           "DEFAULT_NODES", "default_nodes", "companion_nodes", "parabola_nodes"]

DEFAULT_NODES = 32
# optimised Talbot contour (Trefethen, Weideman & Schmelzer 2006)
_SIGMA, _MU, _ALPHA, _NU = -0.6122, 0.5017, 0.6407, 0.2645
_RATE = 1.358  # discretisation error ~ exp(-1.358 N)
_EXP_CAP = 600.0  # largest exponent kept (exp(600) ~ 1e260)


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


def _invert_best(transform, times, n, s0, groups):
    """Talbot inversion (:func:`invert`); with advection (s0 > 0), the times where some
    estimate exceeds _RETRY times the scale of its quantity group are inverted again on
    the parabolic contour, and each value is taken from the contour with the smaller
    estimate.  The scale of a group is its largest value whose estimate is below 1e-3
    of it (garbage values carry large estimates and do not count)."""
    f, err = invert(transform, times, n)
    if s0 <= 0:
        return f, err
    retry = np.zeros(times.size, bool)
    with np.errstate(invalid="ignore"):
        for cols in groups:
            fv, ev = np.abs(f[:, cols]), err[:, cols]
            ok = np.isfinite(fv) & (ev <= 1e-3 * fv)
            scale = fv[ok].max() if ok.any() else 0.0
            retry |= ~(ev <= _RETRY * scale).all(axis=1)
    if retry.any():
        f2, e2 = _invert_parabola(transform, times[retry], s0)
        with np.errstate(invalid="ignore"):
            better = ~(err[retry] <= e2)  # also where the Talbot estimate is NaN
        f[retry] = np.where(better, f2, f[retry])
        err[retry] = np.where(better, e2, err[retry])
    return f, err


def _segments(column: Column, initial: InitialState):
    """Segments on which the initial state is linear: arrays of tops, lengths, k, c, mu,
    sigma, a, b and the partition K at each lower face (1 inside a layer)."""
    faces = column.interfaces
    n = len(column.layers)
    if initial.kind == "uniform" and len(initial.values) != n:
        raise InputError(f"a uniform initial state needs one value per layer ({n}), "
                         f"got {len(initial.values)}")
    if initial.kind == "profile" and initial.depths[-1] > column.length * (1 + 1e-12):
        raise InputError(f"initial profile sample at {initial.depths[-1]} m lies below the "
                         f"column bottom ({column.length} m); remove it or extend the column")
    if initial.kind == "cubic":
        return _cubic_segments(column, initial)
    rows = []
    for i, lay in enumerate(column.layers):
        cuts = [faces[i], faces[i + 1]]
        if initial.kind == "profile":
            cuts = sorted(set(cuts) | {d for d in initial.depths if faces[i] < d < faces[i + 1]})
        for j, (z0, z1) in enumerate(zip(cuts[:-1], cuts[1:])):
            if initial.kind == "clean":
                a = b = 0.0
            elif initial.kind == "uniform":
                a, b = float(initial.values[i]), 0.0
            else:  # value just below z0, limit just above z1: exact at a step
                c0 = float(initial.profile_at(z0, "right"))
                c1 = float(initial.profile_at(z1, "left"))
                a, b = c0, (c1 - c0) / (z1 - z0)
            last = j == len(cuts) - 2
            rows.append((z0, z1 - z0, lay.water_content * lay.diffusivity,
                         lay.water_content * lay.retardation, lay.decay_rate, lay.source_rate,
                         a, b, lay.partition_to_next if last else 1.0))
    out = {key: np.array(col) for key, col in
           zip(("top", "l", "k", "c", "mu", "sigma", "a", "b", "K"), zip(*rows))}
    out["a2"] = out["a3"] = np.zeros(out["a"].size)
    return out


@dataclass(frozen=True)
class PiecewiseCubic:
    """An initial state that is a cubic polynomial on each segment (a state handed
    over between stages): segment ``tops`` and ``lengths`` (m, each segment inside one
    layer, together covering the column) and ``coefs`` (nseg, 4) of
    c0 = c_0 + c_1 x + c_2 x^2 + c_3 x^3 in the depth x below the segment top."""

    tops: tuple
    lengths: tuple
    coefs: tuple
    kind: str = "cubic"


def _cubic_segments(column: Column, initial):
    """Segments of a piecewise-cubic initial state (``initial.tops``, ``.lengths``,
    ``.coefs`` (nseg, 4) in powers of the local depth), each inside one layer."""
    faces = column.interfaces
    tops = np.asarray(initial.tops, float)
    lengths = np.asarray(initial.lengths, float)
    coefs = np.asarray(initial.coefs, float)
    lay = np.clip(np.searchsorted(faces, tops + 0.5 * lengths, side="right") - 1, 0,
                  len(column.layers) - 1)
    bottoms = tops + lengths
    at_face = np.isclose(bottoms, faces[lay + 1], rtol=1e-12, atol=1e-15)
    L = column.layers
    return {"top": tops, "l": lengths,
            "k": np.array([L[i].water_content * L[i].diffusivity for i in lay]),
            "c": np.array([L[i].water_content * L[i].retardation for i in lay]),
            "mu": np.array([L[i].decay_rate for i in lay]),
            "sigma": np.array([L[i].source_rate for i in lay]),
            "a": coefs[:, 0], "b": coefs[:, 1], "a2": coefs[:, 2], "a3": coefs[:, 3],
            "K": np.where(at_face, [L[i].partition_to_next for i in lay], 1.0)}


def _poly(p, zeta):
    """P(zeta) and P'(zeta) of particular-solution coefficients p (4, ...)."""
    return (p[0] + zeta * (p[1] + zeta * (p[2] + zeta * p[3])),
            p[1] + zeta * (2 * p[2] + zeta * 3 * p[3]))


def _expm1_over(x):
    """(e^x - 1) / x for complex x, limit 1 at 0."""
    small = np.abs(x) < 1e-6
    xs = np.where(small, 1.0, x)
    return np.where(small, 1 + x / 2 + x * x / 6, np.expm1(xs) / xs)


class LaplaceTransfer:
    """Exact Laplace-domain solution of the layered column for a batch of s values."""

    def __init__(self, column: Column, initial: InitialState, semi_infinite: bool = False):
        self.column = column
        self.q = float(column.darcy_flux)
        self.seg = _segments(column, initial)
        self.semi = bool(semi_infinite)
        self.n = self.seg["l"].size

    def solve(self, s, signals):
        """Per-segment roots, anchors, particular parts and coefficients for s (ns,).

        ``signals`` = (top, bottom, sources, with_initial): transforms of the boundary
        values (ns,), of the layer sources per segment (nseg, ns), and whether the
        initial state belongs to this component.
        """
        g, q = self.seg, self.q
        top_hat, bot_hat, src_hat, with_initial = signals
        self._signals = (top_hat, bot_hat)
        s = np.asarray(s, dtype=complex)[None, :]
        self.capped = np.zeros(s.shape[1], bool)
        a0 = g["a"][:, None] * with_initial
        b0 = g["b"][:, None] * with_initial
        k, c, l = g["k"][:, None], g["c"][:, None], g["l"][:, None]
        sm = s + g["mu"][:, None]
        root = np.sqrt(q * q + 4 * k * c * sm)
        if q >= 0:
            r1 = (q + root) / (2 * k)
            r2 = -2 * c * sm / (q + root)
        else:
            r2 = (q - root) / (2 * k)
            r1 = -2 * c * sm / (q - root)
        # particular solution P = p0 + p1 z + p2 z^2 + p3 z^3 of
        # k P'' - q P' - c sm P = -c (a0 + a1 z + a2 z^2 + a3 z^3) - sigma / s
        a2 = g["a2"][:, None] * with_initial
        a3 = g["a3"][:, None] * with_initial
        p3 = a3 / sm
        p2 = (c * a2 - 3 * q * p3) / (c * sm)
        beta = (c * b0 + 6 * k * p3 - 2 * q * p2) / (c * sm)
        alpha = (c * a0 + src_hat + 2 * k * p2 - q * beta) / (c * sm)
        alpha = np.stack(np.broadcast_arrays(alpha, beta, p2, p3))
        r = np.stack([r1, r2])  # (2, nseg, ns)
        # anchors: each exponential at the end where it peaks (bottom if Re r >= 0), so
        # every entry is <= 1 in modulus; r2 of a semi-infinite last layer at its top.
        anc = np.where(r.real >= 0, l, 0.0)
        if self.semi:
            anc[1, -1] = 0.0
        self._r, self._anc, self._alpha, self._beta, self._k = r, anc, alpha, alpha[1], k
        coef = self._linear_system(s[0], r, anc, alpha, beta, k, l)
        return coef

    def _exp(self, x):
        """exp(x) with Re x capped at _EXP_CAP; records whether the cap was hit per s."""
        over = x.real > _EXP_CAP
        if over.any():
            self.capped |= over.reshape(-1, x.shape[-1]).any(axis=0)
        return np.exp(np.where(over, _EXP_CAP + 1j * x.imag, x))

    def _ends(self, r, anc, alpha, beta, k, i, zeta):
        """C and F rows at local depth zeta of segment i: (cC (2,ns), C0, cF, F0)."""
        e = self._exp(r[:, i] * (zeta - anc[:, i]))
        cC = e
        C0, dC0 = _poly(alpha[:, i], zeta)
        cF = k[i] * r[::-1, i] * e  # q - k r1 = k r2 and q - k r2 = k r1: no cancellation
        F0 = self.q * C0 - k[i] * dC0
        return cC, C0, cF, F0

    def _boundary(self, end, r, anc, alpha, beta, k, l, s):
        bc = getattr(self.column, end)
        i = 0 if end == "top" else self.n - 1
        zeta = 0.0 if end == "top" else l[i]
        cC, C0, cF, F0 = self._ends(r, anc, alpha, beta, k, i, zeta)
        val = self._signals[0 if end == "top" else 1]
        kind = bc.kind
        if kind == "concentration":
            return cC, val - C0
        if kind in ("flux", "inlet", "sealed"):
            target = {"flux": val, "inlet": self.q * val, "sealed": 0.0 * val}[kind]
            return cF, target - F0
        if kind == "free-outflow":
            return r[:, i] * cC, -_poly(alpha[:, i], zeta)[1] + 0 * val
        if kind == "mass-transfer":
            h = bc.transfer_coefficient
            sign = 1.0 if end == "top" else -1.0
            return cF + sign * h * cC, sign * h * val - F0 - sign * h * C0
        raise InputError(f"unknown boundary kind {kind!r}")  # pragma: no cover

    def _linear_system(self, s, r, anc, alpha, beta, k, l):
        n, ns = 2 * self.n, s.size
        band = np.zeros((ns, n, 5), dtype=complex)  # band[:, row, col - row + 2]
        rhs = np.zeros((ns, n), dtype=complex)

        def put(row, col, val):
            band[:, row, col - row + 2] = val

        top, rt = self._boundary("top", r, anc, alpha, beta, k, l, s)
        put(0, 0, top[0])
        put(0, 1, top[1])
        rhs[:, 0] = rt
        if self.n > 1:  # every internal face at once (rows 2i+1 and 2i+2)
            i = np.arange(self.n - 1)
            cA, CA, fA, FA = self._ends(r, anc, alpha, beta, k, i, l[i])
            cB, CB, fB, FB = self._ends(r, anc, alpha, beta, k, i + 1, 0.0)
            K = self.seg["K"][i][:, None]

            def put_faces(row, offset, val):  # val (m, ns): entries at col = 2i + offset
                band[:, row, 2 * i + offset - row + 2] = val.T

            row = 2 * i + 1  # C_below - K C_above = 0
            put_faces(row, 0, -K * cA[0])
            put_faces(row, 1, -K * cA[1])
            put_faces(row, 2, cB[0])
            put_faces(row, 3, cB[1])
            rhs[:, row] = (K * CA - CB).T
            row = row + 1  # F_above - F_below = 0
            put_faces(row, 0, fA[0])
            put_faces(row, 1, fA[1])
            put_faces(row, 2, -fB[0])
            put_faces(row, 3, -fB[1])
            rhs[:, row] = (FB - FA).T
        row = n - 1
        if self.semi:
            put(row, n - 2, np.ones(ns))  # no growing exponential in the last layer
        else:
            bot, rb = self._boundary("bottom", r, anc, alpha, beta, k, l, s)
            put(row, n - 2, bot[0])
            put(row, n - 1, bot[1])
            rhs[:, row] = rb
        # row equilibration: entries far from an exponential's anchor can be tiny
        big = np.abs(band).max(axis=2)
        big = np.where(big > 0, big, 1.0)
        band /= big[:, :, None]
        rhs /= big
        # LAPACK gbsv storage with the 2 extra rows its LU needs: row 4 + row - col of a
        # (7, n) Fortran-ordered array per s, i.e. ab[:, col, 4 + row - col] here.  This
        # is exactly what scipy.linalg.solve_banded((2, 2), ...) hands to gbsv; calling
        # the LAPACK routine directly gives the same numbers without the wrapper's
        # per-call checks (a tenth of the cost of a small system).
        ab = np.zeros((ns, n, 7), dtype=complex)
        rows = np.arange(n)
        for j in range(5):
            col = rows - 2 + j
            ok = (col >= 0) & (col < n)
            ab[:, col[ok], 6 - j] = band[:, rows[ok], j]
        # each system is solved in place: rhs[j] becomes its solution
        info = [_zgbsv(2, 2, a.T, b, overwrite_ab=1, overwrite_b=1)[3]
                for a, b in zip(ab, rhs)]
        if info and max(info) > 0:
            raise np.linalg.LinAlgError("singular matrix")
        if info and min(info) < 0:  # pragma: no cover - the arguments are built above
            raise ValueError(f"illegal value in argument {-min(info)} of gbsv")
        return rhs.reshape(ns, self.n, 2).transpose(2, 1, 0)  # (2, nseg, ns)

    def locate(self, depths):
        """Segment index and local depth of each output depth (the segment below a face)."""
        z = np.asarray(depths, dtype=float)
        idx = np.clip(np.searchsorted(self.seg["top"], z, side="right") - 1, 0, self.n - 1)
        return idx, z - self.seg["top"][idx]

    def fields(self, coef, depths):
        """C^ and F^ at depths: two (ns, nz) arrays."""
        idx, zeta = self.locate(depths)
        r, anc = self._r[:, idx], self._anc[:, idx]  # (2, nz, ns)
        zc = zeta[:, None]
        e = self._exp(r * (zc - anc))
        if self.semi:  # the dropped exponential of the semi-infinite layer
            e[0, idx == self.n - 1] = 0.0
        cf = coef[:, idx]
        P, dP = _poly(self._alpha[:, idx], zc)
        C = (cf * e).sum(axis=0) + P
        dC = (cf * r * e).sum(axis=0) + dP
        F = self.q * C - self._k[idx] * dC
        return C.T, F.T

    def stored(self, coef):
        """int theta R C^ dz over each segment: (nseg, ns)."""
        r, anc, l = self._r, self._anc, self.seg["l"][:, None]
        c = self.seg["c"][:, None]
        # anc = l: (1 - e^{-rl}) / r ;  anc = 0: (e^{rl} - 1) / r  (both bounded)
        at_bottom = anc > 0
        x = np.where(at_bottom, -r * l, r * l)
        integ = l * _expm1_over(np.where(x.real > _EXP_CAP, _EXP_CAP + 1j * x.imag, x))
        p = self._alpha
        lin = l * (p[0] + l * (p[1] / 2 + l * (p[2] / 3 + l * p[3] / 4)))
        out = c * ((coef * integ).sum(axis=0) + lin)
        if self.semi:  # last layer: int_0^inf e^{r2 zeta} = -1/r2 (A = 0)
            r2 = r[1, -1]
            lin_last = np.where((self.seg["a"][-1] == 0) & (self.seg["b"][-1] == 0)
                                & (self.seg["sigma"][-1] == 0), 0.0, np.nan)
            out[-1] = c[-1] * (coef[1, -1] * (-1.0 / r2) + lin_last)
        return out


def _initial_values(column, initial, depths):
    if initial.kind == "clean":
        return np.zeros(depths.size)
    if initial.kind == "uniform":
        lay = np.clip(np.searchsorted(column.interfaces, depths, side="right") - 1, 0,
                      len(column.layers) - 1)
        return np.asarray(initial.values)[lay]
    if initial.kind == "cubic":
        seg = _cubic_segments(column, initial)
        i = np.clip(np.searchsorted(seg["top"], depths, side="right") - 1, 0, seg["l"].size - 1)
        x = depths - seg["top"][i]
        return seg["a"][i] + x * (seg["b"][i] + x * (seg["a2"][i] + x * seg["a3"][i]))
    return initial.profile_at(depths)  # right-continuous at a step


def _atom_hat(kind, amp, rate, s):
    """Laplace transform of one schedule atom switched on at its own origin."""
    if kind == "step":
        return amp / s
    if kind == "ramp":
        return amp / (s * s)
    return amp / (s + rate)


def _atoms(schedule, constant):
    """(t0, kind, amplitude, rate) of a signal: its schedule, or a constant from 0."""
    if schedule is None:
        return [(0.0, "step", float(constant), 0.0)] if constant != 0 else []
    return [(float(t0), kind, float(amp), float(rate)) for kind, t0, amp, rate in schedule.atoms]


def _components(column: Column, seg_layer):
    """Group the signal atoms by switch-on time: {t0: (top, bottom, [(segment mask,
    atom)])}.  By linearity each group is solved from its own origin (no delay factor
    e^{-s t0}, which a Talbot contour cannot invert) and added at t - t0."""
    groups = {0.0: ([], [], [])}
    for atom in _atoms(column.top.schedule, column.top.value):
        groups.setdefault(atom[0], ([], [], []))[0].append(atom)
    for atom in _atoms(column.bottom.schedule, column.bottom.value):
        groups.setdefault(atom[0], ([], [], []))[1].append(atom)
    for i, lay in enumerate(column.layers):
        if lay.source_rate == 0:
            continue
        for t0, kind, amp, rate in _atoms(lay.source_schedule, 1.0):
            groups.setdefault(t0, ([], [], []))[2].append(
                (seg_layer == i, (t0, kind, amp * lay.source_rate, rate)))
    return groups


def _signals_for(group, s, nseg, with_initial):
    top, bot, src = group
    top_hat = sum((_atom_hat(k, a, r, s) for _, k, a, r in top), 0.0 * s)
    bot_hat = sum((_atom_hat(k, a, r, s) for _, k, a, r in bot), 0.0 * s)
    src_hat = np.zeros((nseg, s.size), dtype=complex)
    for mask, (_, k, a, r) in src:
        src_hat[mask] += _atom_hat(k, a, r, s)[None, :]
    return top_hat, bot_hat, src_hat, float(with_initial)


@dataclass(frozen=True)
class EngineSolution(ColumnSolution):
    """A :class:`transport.solvers.modal.series.ColumnSolution` that records, per output time, the
    engine that produced it and its estimated error of C (kg m-3, ``error_estimate``),
    and (``error``, optional) the estimated absolute errors of every quantity:
    "concentration" (kg m-3), "total_flux" (kg m-2 s-1), "cumulative_mass" (kg m-2),
    "budget" (kg m-2; max over stored, decayed, entered_top, left_bottom).  A value
    that could not be computed is NaN with an infinite estimate."""

    engine_by_time: np.ndarray = field(default=None, repr=False, compare=False)
    error_estimate: np.ndarray = field(default=None, repr=False, compare=False)
    evaluator: object = field(default=None, repr=False, compare=False)
    # {"concentration", "total_flux", "cumulative_mass", "budget"} -> (nt,) absolute
    # error estimates (max over depths / over the budget terms), or None
    error: dict = field(default=None, repr=False, compare=False)

    def concentration_at(self, depth, times):
        """C at one depth for any times, from the engine that serves those times."""
        if self.evaluator is not None:
            return self.evaluator(float(depth), times)
        if self.series is None:
            raise AttributeError("this result holds only its output grid")
        return self.series.concentration_at(depth, times)


def solve_laplace(column: Column, times, depths, initial: InitialState = None,
                  semi_infinite_bottom: bool = False, nodes: int = None):
    """Solve the layered column at ``times`` (s) and ``depths`` (m) in the Laplace domain.

    Parameters
    ----------
    column : Column (boundary values constant or scheduled, sources, decay, partitions)
    times : (nt,) s, >= 0; at t = 0 the initial state is returned
    depths : (nz,) m in [0, L] (any depth >= 0 with ``semi_infinite_bottom``); at a
        partition face the value just below it
    initial : InitialState, default clean
    semi_infinite_bottom : the last layer extends to infinity (its thickness and the
        bottom boundary are ignored)
    nodes : Talbot nodes N (even), default :func:`default_nodes` (32 for column Peclet
        numbers up to 10, more above): N / 2 complex banded solves per time
        and per distinct switch-on time of the scheduled signals

    Returns
    -------
    EngineSolution (a ColumnSolution) with engine="laplace", series=None, eigenvalues
    empty, ``error_estimate`` (nt,) the estimated error of C (kg m-3, max over depths),
    ``error`` the estimates of every quantity (see :class:`EngineSolution`) and
    ``engine_by_time``.  The budget is filled (with a semi-infinite bottom, stored and
    produced are NaN when the last layer holds initial mass or a source: infinite).
    """
    initial = initial if initial is not None else InitialState.clean()
    n_nodes = default_nodes(column) if nodes is None else int(nodes)
    times, depths = check_output_grid(column, times, depths, semi_infinite_bottom)
    if callable(initial) or not isinstance(initial, (InitialState, PiecewiseCubic)):
        raise InputError("the Laplace engine takes an InitialState (clean, uniform or "
                         "profile); project other initial fields onto a profile first")
    model = LaplaceTransfer(column, initial, semi_infinite_bottom)
    g = model.seg
    seg_layer = np.clip(np.searchsorted(column.interfaces, g["top"], side="right") - 1, 0,
                        len(column.layers) - 1)
    nz, nt = depths.size, times.size
    ends = np.array([0.0, column.length])
    out = np.zeros((nt, 3 * nz + 4))
    est = np.zeros((nt, 3 * nz + 4))
    parts = (np.arange(nz), np.arange(nz, 2 * nz), np.arange(2 * nz, 3 * nz),
             np.arange(3 * nz, 3 * nz + 4))
    # growth parabola of the advective branch (widest over the layers); 0 without flow
    s0 = float(np.max(model.q ** 2 / (4 * g["k"] * g["c"])))
    for t0, group in sorted(_components(column, seg_layer).items()):
        tau = times - t0
        on = tau > 0
        if not on.any():
            continue

        def transform(s, group=group, first=(t0 == 0.0)):
            coef = model.solve(s, _signals_for(group, s, model.n, first))
            C, F = model.fields(coef, np.concatenate([depths, ends]))
            st = model.stored(coef)  # (nseg, ns)
            decayed = (g["mu"][:, None] * st).sum(axis=0) / s
            return np.concatenate([C[:, :nz], F[:, :nz], F / s[:, None],
                                   st.sum(axis=0)[:, None], decayed[:, None]],
                                  axis=1), model.capped.copy()

        with np.errstate(over="ignore", invalid="ignore", divide="ignore"):
            f, e = _invert_best(transform, tau[on], n_nodes, s0, parts)
        out[on] += f
        est[on] += e
    # error estimate per quantity and time; a group with any non-finite value or
    # estimate at a time is refused there: NaN values, infinite estimate
    groups = {"concentration": np.arange(nz), "total_flux": np.arange(nz, 2 * nz),
              "cumulative_mass": np.arange(2 * nz, 3 * nz),
              "budget": np.arange(3 * nz, 3 * nz + 4)}
    if semi_infinite_bottom:  # nothing leaves through the bottom at infinity
        out[:, 3 * nz + 1] = 0.0
        est[:, 3 * nz + 1] = 0.0
    error = {}
    with np.errstate(invalid="ignore"):
        for name, cols in groups.items():
            bad = ~(np.isfinite(out[:, cols]).all(axis=1) & np.isfinite(est[:, cols]).all(axis=1))
            out[np.ix_(bad, cols)] = np.nan
            error[name] = np.where(bad, np.inf, est[:, cols].max(axis=1, initial=0.0))
    conc, flux, cum = out[:, :nz], out[:, nz:2 * nz], out[:, 2 * nz:3 * nz]
    cum_ends, stored, decayed = out[:, 3 * nz:3 * nz + 2], out[:, -2], out[:, -1]
    gl = g["l"]
    init_mass = float(np.sum(g["c"] * gl * (g["a"] + gl * (g["b"] / 2 + gl * (
        g["a2"] / 3 + gl * g["a3"] / 4)))))
    produced = np.zeros(nt)
    for i, lay in enumerate(column.layers):
        if lay.source_rate != 0:
            sched = lay.source_schedule
            produced += lay.source_rate * lay.thickness * (
                times if sched is None else np.asarray(sched.integral(times), dtype=float))
    if semi_infinite_bottom:
        tail = g["a"][-1] != 0 or g["b"][-1] != 0 or column.layers[-1].source_rate != 0
        init_mass = math.nan if tail else init_mass
        if tail:
            produced = np.full(nt, math.nan)
    zero = times == 0
    if zero.any():
        c0 = _initial_values(column, initial, depths)
        conc[zero] = c0
        # flux of the initial profile: q C0 - theta D dC0/dz (piecewise-linear slope)
        idx, zeta0 = model.locate(depths)
        slope = g["b"][idx] + zeta0 * (2 * g["a2"][idx] + 3 * zeta0 * g["a3"][idx])
        flux[zero] = model.q * c0 - g["k"][idx] * slope
        stored[zero] = init_mass
        # exact up to the rounding of the interpolation and of the sums
        eps16 = 16 * np.finfo(float).eps
        error["concentration"][zero] = eps16 * np.abs(c0).max()
        error["total_flux"][zero] = eps16 * np.abs(np.abs(model.q * c0)
                                                   + np.abs(g["k"][idx] * slope)).max()
        error["budget"][zero] = eps16 * float(np.sum(g["c"] * (np.abs(g["a"]) * g["l"] + np.abs(
            g["b"]) * g["l"] ** 2 / 2)))
    residual = stored - init_mass - cum_ends[:, 0] + cum_ends[:, 1] + decayed - produced
    unknown = ~np.isfinite(np.column_stack([stored, decayed, cum_ends])).all(axis=1)
    error["budget"][unknown] = np.inf  # e.g. the infinite mass of a semi-infinite tail
    budget = {"stored": stored, "initial_stored": np.full(nt, init_mass),
              "entered_top": cum_ends[:, 0].copy(), "left_bottom": cum_ends[:, 1].copy(),
              "decayed": decayed, "produced": produced, "residual": residual}
    return EngineSolution(column=column, times=times, depths=depths,
                          concentration=conc.copy(), total_flux=flux.copy(),
                          cumulative_mass=cum.copy(), budget=budget, eigenvalues=np.empty(0),
                          n_modes=0, engine="laplace", series=None,
                          engine_by_time=np.where(zero, "initial", "laplace").astype(object),
                          error_estimate=error["concentration"].copy(), error=error)
