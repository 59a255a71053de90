"""Exact spectrum of the layered transport operator.

The layered equation (see :mod:`transport.model`)

    theta R dC/dt = d/dz(theta D dC/dz) - q dC/dz - theta R mu C

becomes a regular, self-adjoint Sturm-Liouville problem after two standard changes of
variable:

* partition jumps: C = kappa(z) u with kappa piecewise constant (kappa = 1 in the top
  layer, multiplied by ``partition_to_next`` at each face), so u is continuous;
* advection: u = exp(A(z)) v with A' = alpha = q / (2 theta D kappa).  On each layer
  v'' + w^2 v = 0 with  w^2 = (lambda a - s) / k,  where
  a = theta R kappa (weight), k = theta D kappa (stiffness) and
  s = theta R mu kappa + q^2 / (4 k) (potential).  The pair (v, p = k v') is
  continuous across every face, and exp(A) is never formed during the eigen-solve.

Eigenvalues are found from the Pruefer angle (Pruefer 1926; Pryce 1993, "Numerical
Solution of Sturm-Liouville Problems", ch. 2 and 5; Pruess & Fulton 1993, ACM TOMS
19:360): on a layer where w^2 > 0 the angle, in the scale S = k w, advances by exactly
w l; where w^2 <= 0 the angle is propagated with the scaled hyperbolic transfer matrix,
whose eigenvalues 1 +- tanh(x) are positive so the angle change is below pi.  At a face
the angle is remapped to the next layer's scale inside its branch [n pi, (n+1) pi).
The eigenvalue count N(lambda) = ceil((theta(L) - beta) / pi) is therefore exact: no
eigenvalue is ever missed, whatever the contrast or thinness of the layers.  Each root
is bracketed on the count and polished by a safeguarded regula falsi iteration on the
(continuous, single-crossing) angle mismatch, vectorised across modes.

Eigenfunctions are obtained by shooting from both ends with normalised states and a
running log-scale, and joined at the face where the two shots agree best; this keeps
exponentially decaying modes (high contrast, high Peclet) accurate.  Weighted norms are
in closed form.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .model import Column, InputError

__all__ = ["Operator", "Modes", "build_operator", "count_below", "eigenvalues", "modes",
           "SpectrumError"]

# Root polish stops when the bracket is this many ulps of lambda wide.
_ROOT_ULPS = 4.0
_MAX_ROOT_ITER = 200
# Hyperbolic layers with w*l above this use the two-endpoint exponential form.
_ENDPOINT_FORM_MIN = 1.0


class SpectrumError(RuntimeError):
    """The eigen-solve could not meet its own accuracy checks."""


@dataclass(frozen=True)
class Operator:
    """Per-layer coefficients of the symmetric problem, SI units."""

    thickness: np.ndarray  # l_i (m)
    a: np.ndarray  # theta R kappa
    k: np.ndarray  # theta D kappa
    s: np.ndarray  # theta R mu kappa + q^2/(4k)
    m: np.ndarray  # theta R mu kappa
    alpha: np.ndarray  # q / (2k)
    kappa: np.ndarray  # partition scaling
    decay: np.ndarray  # mu_i (1/s)
    source: np.ndarray  # sigma_i (kg m-3 s-1)
    z: np.ndarray  # face depths, (N+1,)
    A: np.ndarray  # A at the faces, (N+1,)
    q: float
    # boundary rows  alpha_u u + beta_u (k u') = gamma g  (u-space), top and bottom
    top_u: tuple
    bottom_u: tuple

    @property
    def n_layers(self) -> int:
        return self.thickness.size

    def v_condition(self, end: str):
        """(c_v, c_p, G) of the boundary row in v-space: c_v v + c_p p = G b, where
        b = gamma g is the boundary signal (see :func:`_boundary_row`)."""
        al, be, _ = self.top_u if end == "top" else self.bottom_u
        A_end = self.A[0] if end == "top" else self.A[-1]
        return al + be * self.q / 2.0, be, np.exp(-A_end)


def _boundary_row(bc, kappa: float, q: float, end: str):
    """Boundary condition as (alpha_u, beta_u, gamma): alpha_u u + beta_u k u' = gamma g."""
    h = bc.transfer_coefficient
    kind = bc.kind
    if kind == "concentration":
        return (kappa, 0.0, 1.0)
    if kind in ("flux", "sealed", "inlet"):
        gamma = {"flux": 1.0, "sealed": 0.0, "inlet": q}[kind]
        return (q * kappa, -1.0, gamma)
    if kind == "free-outflow":
        return (0.0, 1.0, 0.0)
    if kind == "mass-transfer":
        if end == "top":
            return (kappa * (q + h), -1.0, h)
        return (kappa * (q - h), -1.0, -h)
    raise InputError(f"unknown boundary kind {kind!r}")


def build_operator(column: Column) -> Operator:
    """Coefficients of the symmetric layered operator for ``column``."""
    lays = column.layers
    q = float(column.darcy_flux)
    kappa = np.ones(len(lays))
    for i in range(1, len(lays)):
        kappa[i] = kappa[i - 1] * lays[i - 1].partition_to_next
    theta = np.array([lay.porosity for lay in lays])
    R = np.array([lay.retardation for lay in lays])
    D = np.array([lay.diffusivity for lay in lays])
    mu = np.array([lay.decay_rate for lay in lays])
    l = np.array([lay.thickness for lay in lays])
    a = theta * R * kappa
    k = theta * D * kappa
    m = a * mu
    alpha = q / (2.0 * k)
    s = m + q * q / (4.0 * k)
    A = np.concatenate([[0.0], np.cumsum(alpha * l)])
    if A.max() > 600 or A.min() < -600:
        raise InputError(
            f"the column Peclet number (about {2 * abs(A[-1]):.0f}) is beyond what this "
            "engine represents in double precision (limit about 1200); split the problem "
            "or reduce the column length")
    return Operator(
        thickness=l, a=a, k=k, s=s, m=m, alpha=alpha, kappa=kappa, decay=mu,
        source=np.array([lay.source_rate for lay in lays]),
        z=column.interfaces, A=A, q=q,
        top_u=_boundary_row(column.top, kappa[0], q, "top"),
        bottom_u=_boundary_row(column.bottom, kappa[-1], q, "bottom"),
    )


# ----------------------------------------------------------------------------------
# Pruefer angle
# ----------------------------------------------------------------------------------

def _sinc(x):
    """sin(x)/x with the limit 1 at 0."""
    return np.sinc(x / np.pi)


def _tanhc(x):
    """tanh(x)/x with the limit 1 at 0 (x >= 0)."""
    small = x < 1e-4
    xs = np.where(small, 1.0, x)
    return np.where(small, 1.0 - x * x / 3.0, np.tanh(xs) / xs)


def _remap(theta, ratio):
    """Angle theta in scale S_old to scale S_new = ratio * S_old, same branch."""
    r = np.mod(theta, np.pi)
    return theta - r + np.arctan2(ratio * np.sin(r), np.cos(r))


def _bc_angle(c_v, c_p, scale, right: bool):
    """Angle of the boundary direction (v, p) = (c_p, -c_v) in ``scale``."""
    ang = np.mod(np.arctan2(scale * c_p, -c_v), np.pi)
    if right:
        ang = np.where(ang <= 0.0, np.pi, ang)
    return ang


def _end_angles(op: Operator, lam: np.ndarray):
    """Pruefer angle at z = L and the right boundary angle, in a common scale.

    Returns (theta, beta): eigenvalue number j sits where theta - beta = j pi, and
    theta - beta is continuous with a single crossing of each j pi.
    """
    lam = np.asarray(lam, dtype=float)
    c_v, c_p, _ = op.v_condition("top")
    theta = None
    prev_scale = None
    for i in range(op.n_layers):
        l, k = op.thickness[i], op.k[i]
        w2 = (lam * op.a[i] - op.s[i]) / k
        trig = w2 > 0.0
        w = np.sqrt(np.abs(w2))
        x = w * l
        scale = np.where(trig, k * w, k / l)
        if theta is None:
            theta = _bc_angle(c_v, c_p, scale, right=False)
        else:
            theta = _remap(theta, scale / prev_scale)
        # hyperbolic step in the scale k/l:  X1 = X + tc Y,  Y1 = x th X + Y
        X, Y = np.sin(theta), np.cos(theta)
        X1 = X + _tanhc(x) * Y
        Y1 = x * np.tanh(x) * X + Y
        dh = np.arctan2(X1, Y1) - np.arctan2(X, Y)
        dh = dh - 2.0 * np.pi * np.round(dh / (2.0 * np.pi))
        theta = theta + np.where(trig, x, dh)
        prev_scale = scale
    # common, lambda-continuous end scale
    i = op.n_layers - 1
    k, l = op.k[i], op.thickness[i]
    w2 = (lam * op.a[i] - op.s[i]) / k
    final = k * np.sqrt(np.abs(w2) + 1.0 / (l * l))
    theta = _remap(theta, final / prev_scale)
    d_v, d_p, _ = op.v_condition("bottom")
    beta = _bc_angle(d_v, d_p, final, right=True)
    return theta, beta


def count_below(op: Operator, lam) -> np.ndarray:
    """Number of eigenvalues strictly below each ``lam`` (Pruefer count)."""
    theta, beta = _end_angles(op, np.atleast_1d(np.asarray(lam, dtype=float)))
    n = np.ceil((theta - beta) / np.pi - 1e-12)
    return np.maximum(n, 0).astype(np.int64)


def _lambda_bounds(op: Operator, n: int):
    """lo with count 0 and hi with count >= n."""
    base = float(np.min(op.s / op.a))
    span = float(np.max(op.k / op.a)) / float(np.sum(op.thickness)) ** 2
    lo = base - span
    for _ in range(200):
        if count_below(op, lo)[0] == 0:
            break
        lo = lo - 4.0 * (abs(lo) + span)
    else:
        raise SpectrumError("could not find a lower bound of the spectrum")
    weyl = float(np.sum(op.thickness * np.sqrt(op.a / op.k)))
    hi = float(np.max(op.s / op.a)) + ((n + 2) * np.pi / weyl) ** 2 + span
    for _ in range(200):
        if count_below(op, hi)[0] >= n:
            break
        hi = hi + 2.0 * (hi - lo)
    else:
        raise SpectrumError("could not find an upper bound of the spectrum")
    return lo, hi


def eigenvalues(op: Operator, n: int) -> np.ndarray:
    """The ``n`` smallest eigenvalues (1/s), increasing, each to near machine precision."""
    if n < 1:
        return np.empty(0)
    lo, hi = _lambda_bounds(op, n)
    # grid in sqrt(lambda - lo): the count is monotone, so any grid brackets correctly
    m = 2 * n + 64
    grid = lo + np.linspace(0.0, np.sqrt(hi - lo), m) ** 2
    counts = count_below(op, grid)
    j = np.arange(n)
    i_lo = np.searchsorted(counts, j, side="right") - 1
    a, b = grid[i_lo], grid[i_lo + 1]
    ca, cb = counts[i_lo], counts[i_lo + 1]
    # split brackets holding several eigenvalues, by bisection on the count
    for _ in range(120):
        multi = (ca != j) | (cb != j + 1)
        if not multi.any():
            break
        mid = 0.5 * (a[multi] + b[multi])
        cm = count_below(op, mid)
        jj = j[multi]
        go_up = cm <= jj
        a_m, b_m, ca_m, cb_m = a[multi], b[multi], ca[multi], cb[multi]
        a_m = np.where(go_up, mid, a_m)
        ca_m = np.where(go_up, cm, ca_m)
        b_m = np.where(go_up, b_m, mid)
        cb_m = np.where(go_up, cb_m, cm)
        a[multi], b[multi], ca[multi], cb[multi] = a_m, b_m, ca_m, cb_m
        tight = (b - a) <= 8 * np.finfo(float).eps * np.maximum(abs(a), abs(b))
        if (tight | ~multi).all():
            break
    return _polish(op, a, b, j)


def _mismatch(op, lam, j):
    theta, beta = _end_angles(op, lam)
    return theta - beta - j * np.pi


def _polish(op, a, b, j):
    """Safeguarded Illinois iteration (regula falsi with halving) on the angle mismatch
    in each bracket, vectorised over the modes."""
    fa = _mismatch(op, a, j)
    fb = _mismatch(op, b, j)
    x = 0.5 * (a + b)
    active = np.ones(a.size, bool)
    side = np.zeros(a.size, int)
    for it in range(_MAX_ROOT_ITER):
        idx = np.flatnonzero(active)
        if idx.size == 0:
            break
        A_, B_, FA, FB = a[idx], b[idx], fa[idx], fb[idx]
        denom = FB - FA
        xs = np.where(denom != 0, B_ - FB * (B_ - A_) / np.where(denom != 0, denom, 1.0),
                      0.5 * (A_ + B_))
        bad = ~((xs > A_) & (xs < B_)) | (it % 12 == 11)
        xs = np.where(bad, 0.5 * (A_ + B_), xs)
        fx = _mismatch(op, xs, j[idx])
        left = fx < 0  # root lies in (xs, B)
        sd = side[idx]
        # Illinois: halve the retained end's value when the same side is kept twice
        FB_new = np.where(left & (sd == -1), 0.5 * FB, FB)
        FA_new = np.where(~left & (sd == 1), 0.5 * FA, FA)
        a[idx] = np.where(left, xs, A_)
        fa[idx] = np.where(left, fx, FA_new)
        b[idx] = np.where(left, B_, xs)
        fb[idx] = np.where(left, FB_new, fx)
        side[idx] = np.where(left, -1, 1)
        x[idx] = xs
        width = b[idx] - a[idx]
        # stop at the angle's own rounding level, or when the bracket is a few ulps wide
        angle_noise = 4 * np.finfo(float).eps * (j[idx] + 1) * np.pi * (1 + op.n_layers)
        done = (np.abs(fx) <= angle_noise) | (width <= _ROOT_ULPS * np.finfo(float).eps
                                              * np.maximum(abs(a[idx]), abs(b[idx])))
        active[idx[done]] = False
    x = np.where(active, 0.5 * (a + b), x)
    return x


# ----------------------------------------------------------------------------------
# Eigenfunctions
# ----------------------------------------------------------------------------------

def _series_1m_sinc2(x):
    """(1 - sinc(2x)) / x^2, accurate for all x >= 0."""
    y2 = 4.0 * x * x
    small = x < 0.1
    series = 4.0 * (1 / 6 - y2 / 120 + y2 ** 2 / 5040 - y2 ** 3 / 362880
                    + y2 ** 4 / 39916800)
    xs = np.where(small, 1.0, x)
    return np.where(small, series, (1.0 - _sinc(2.0 * xs)) / (xs * xs))


def _series_shc2_m1(x):
    """(sinh(2x)/(2x) - 1) / x^2, accurate for 0 <= x <= ~1."""
    y2 = 4.0 * x * x
    small = x < 0.1
    series = 4.0 * (1 / 6 + y2 / 120 + y2 ** 2 / 5040 + y2 ** 3 / 362880
                    + y2 ** 4 / 39916800)
    xs = np.where(small, 1.0, x)
    return np.where(small, series, (np.sinh(2 * xs) / (2 * xs) - 1.0) / (xs * xs))


def _shc(x):
    """sinh(x)/x with the limit 1."""
    xs = np.where(x < 1e-8, 1.0, x)
    return np.where(x < 1e-8, 1.0, np.sinh(xs) / xs)


@dataclass(frozen=True)
class Modes:
    """Normalised eigenfunctions psi_n (weight a, unit norm) of the layered operator.

    States (v, p = k v') at the faces are stored normalised with a log scale:
    psi_n(z_j) = v[j, n] * exp(logs[j, n]).
    """

    op: Operator
    lam: np.ndarray  # (n,)
    v: np.ndarray  # (N+1, n)
    p: np.ndarray  # (N+1, n)
    logs: np.ndarray  # (N+1, n)

    @property
    def n_modes(self) -> int:
        return self.lam.size

    def layer_of(self, z):
        z = np.asarray(z, dtype=float)
        idx = np.searchsorted(self.op.z, z, side="right") - 1
        return np.clip(idx, 0, self.op.n_layers - 1)

    def evaluate(self, z, exp_sign: int = 0, modes=slice(None)):
        """psi_n(z) * exp(exp_sign A(z)) and k psi_n'(z) * exp(exp_sign A(z)).

        Returns two arrays of shape (z.size, n).
        """
        op = self.op
        z = np.atleast_1d(np.asarray(z, dtype=float))
        lam = self.lam[modes]
        out_f = np.zeros((z.size, lam.size))
        out_p = np.zeros((z.size, lam.size))
        lay = self.layer_of(z)
        for i in np.unique(lay):
            sel = np.flatnonzero(lay == i)
            s = (z[sel] - op.z[i])[:, None]
            f, pp = _layer_values(op, i, lam, self.v[:, modes], self.p[:, modes],
                                  self.logs[:, modes], s, exp_sign)
            out_f[sel] = f
            out_p[sel] = pp
        return out_f, out_p


def _layer_values(op, i, lam, V, P, L, s, exp_sign):
    """Values of psi and k psi' inside layer i at local depths s (column vector)."""
    l, k = op.thickness[i], op.k[i]
    w2 = (lam * op.a[i] - op.s[i]) / k
    w = np.sqrt(np.abs(w2))
    x = w * l
    trig = w2 > 0
    endpoint = (~trig) & (x > _ENDPOINT_FORM_MIN)
    expo = exp_sign * (op.A[i] + op.alpha[i] * s)
    # forms using the state at the top of the layer
    v0, p0, l0 = V[i], P[i], L[i]
    ws = w * s
    cs = np.where(trig, np.cos(ws), np.cosh(np.where(trig, 0.0, np.minimum(ws, 700))))
    sn = np.where(trig, s * _sinc(ws), s * _shc(np.where(trig, 0.0, np.minimum(ws, 700))))
    f_top = v0 * cs + (p0 / k) * sn
    # trig: k psi' = -k w^2 s sinc(ws) v0 + p0 cos(ws); hyperbolic: the same with
    # w^2 -> -b^2, sinc -> sinh(x)/x, cos -> cosh
    p_top = -k * w2 * sn * v0 + p0 * cs
    val = f_top * np.exp(l0 + expo)
    der = p_top * np.exp(l0 + expo)
    if endpoint.any():
        v1, l1 = V[i + 1], L[i + 1]
        lm = np.maximum(l0, l1)
        V0 = v0 * np.exp(l0 - lm)
        V1 = v1 * np.exp(l1 - lm)
        e = np.exp(-x)
        det = -np.expm1(-2 * x)
        E = (V0 - V1 * e) / det
        F = (V1 - V0 * e) / det
        em = np.exp(-w * s)
        ep = np.exp(-w * np.maximum(l - s, 0.0))
        scale = np.exp(lm + expo)
        ve = (E * em + F * ep) * scale
        de = k * w * (F * ep - E * em) * scale
        val = np.where(endpoint, ve, val)
        der = np.where(endpoint, de, der)
    return val, der


def _shoot(op, lam, direction):
    """Normalised states (v, p) and log scales at every face, from one end."""
    nL = op.n_layers
    n = lam.size
    V = np.zeros((nL + 1, n))
    P = np.zeros((nL + 1, n))
    L = np.zeros((nL + 1, n))
    end = "top" if direction > 0 else "bottom"
    c_v, c_p, _ = op.v_condition(end)
    j0 = 0 if direction > 0 else nL
    i_edge = 0 if direction > 0 else nL - 1
    sc = op.k[i_edge] / op.thickness[i_edge]
    nrm = np.hypot(sc * c_p, c_v)
    V[j0] = c_p / nrm
    P[j0] = -c_v / nrm
    order = range(nL) if direction > 0 else range(nL - 1, -1, -1)
    for i in order:
        jin, jout = (i, i + 1) if direction > 0 else (i + 1, i)
        l, k = op.thickness[i], op.k[i]
        w2 = (lam * op.a[i] - op.s[i]) / k
        trig = w2 > 0
        x = np.sqrt(np.abs(w2)) * l
        v, p = V[jin], P[jin]
        d = float(direction)
        # trig: [cos, d l/k sinc; -d k w^2 l sinc, cos]; hyperbolic scaled by cosh
        c = np.where(trig, np.cos(x), 1.0)
        b12 = np.where(trig, l / k * _sinc(x), l / k * _tanhc(x))
        b21 = np.where(trig, -k * w2 * l * _sinc(x), (k / l) * x * np.tanh(x))
        v1 = c * v + d * b12 * p
        p1 = d * b21 * v + c * p
        logc = np.where(trig, 0.0, x + np.log1p(np.exp(-2 * x)) - np.log(2.0))
        sc = k / l
        nrm = np.hypot(sc * v1, p1)
        V[jout] = v1 / nrm
        P[jout] = p1 / nrm
        L[jout] = L[jin] + logc + np.log(nrm)
    return V, P, L


def modes(op: Operator, lam) -> Modes:
    """Normalised eigenfunctions for the eigenvalues ``lam``."""
    lam = np.asarray(lam, dtype=float)
    VL, PL, LL = _shoot(op, lam, +1)
    VR, PR, LR = _shoot(op, lam, -1)
    nL = op.n_layers
    # scale used to compare directions at face j
    lay = np.minimum(np.arange(nL + 1), nL - 1)
    sc = (op.k[lay] / op.thickness[lay])[:, None]
    cross = np.abs(sc * VL * PR - PL * sc * VR)
    dot = sc * sc * VL * VR + PL * PR
    cross = cross / np.hypot(sc * VL, PL) / np.hypot(sc * VR, PR)
    jstar = np.argmin(cross, axis=0)  # face where both shots agree best
    cols = np.arange(lam.size)
    d_star = dot[jstar, cols]
    rr = (sc[jstar, 0] ** 2) * VR[jstar, cols] ** 2 + PR[jstar, cols] ** 2
    coef = d_star / rr
    sign = np.sign(coef)
    sign[sign == 0] = 1.0
    shift = LL[jstar, cols] - LR[jstar, cols] + np.log(np.abs(coef) + 1e-300)
    use_left = np.arange(nL + 1)[:, None] <= jstar[None, :]
    V = np.where(use_left, VL, sign * VR)
    P = np.where(use_left, PL, sign * PR)
    Ls = np.where(use_left, LL, LR + shift)
    log_norm = _log_norm(op, lam, V, P, Ls)
    return Modes(op=op, lam=lam, v=V, p=P, logs=Ls - 0.5 * log_norm)


def _log_norm(op, lam, V, P, L):
    """log of the weighted norm sum_i a_i int psi^2 (closed form per layer)."""
    parts = []
    for i in range(op.n_layers):
        l, k = op.thickness[i], op.k[i]
        w2 = (lam * op.a[i] - op.s[i]) / k
        trig = w2 > 0
        w = np.sqrt(np.abs(w2))
        x = w * l
        v, pk = V[i], P[i] / k
        # trig: v^2 l/2 (1 + sinc 2x) + (p/k)^2 l^3/2 f1 + v (p/k) l^2 sinc^2 x
        xt = np.where(trig, x, 0.0)
        xh = np.where(trig, 0.0, np.minimum(x, _ENDPOINT_FORM_MIN))
        t_int = (v * v * 0.5 * l * (1 + _sinc(2 * xt)) + pk * pk * 0.5 * l ** 3
                 * _series_1m_sinc2(xt) + v * pk * l * l * _sinc(xt) ** 2)
        h_int = (v * v * 0.5 * l * (1 + _shc(2 * xh)) + pk * pk * 0.5 * l ** 3
                 * _series_shc2_m1(xh) + v * pk * l * l * _shc(xh) ** 2)
        integral = np.where(trig, t_int, h_int)
        logi = np.log(np.maximum(integral, 1e-300)) + 2 * L[i]
        endpoint = (~trig) & (x > _ENDPOINT_FORM_MIN)
        if endpoint.any():
            lm = np.maximum(L[i], L[i + 1])
            V0 = v * np.exp(L[i] - lm)
            V1 = V[i + 1] * np.exp(L[i + 1] - lm)
            e = np.exp(-x)
            det = -np.expm1(-2 * x)
            E = (V0 - V1 * e) / det
            F = (V1 - V0 * e) / det
            wsafe = np.where(w > 0, w, 1.0)
            e_int = (E * E + F * F) * det / (2 * wsafe) + 2 * E * F * l * e
            loge = np.log(np.maximum(e_int, 1e-300)) + 2 * lm
            logi = np.where(endpoint, loge, logi)
        parts.append(np.log(op.a[i]) + logi)
    parts = np.array(parts)
    top = parts.max(axis=0)
    return top + np.log(np.sum(np.exp(parts - top), axis=0))
