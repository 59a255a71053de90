"""Eigenfunctions of the layered operator: two-sided shooting and closed-form norms.

Eigenfunctions are obtained by shooting from both ends with normalised states and a
running log-scale, and joined at the face where the two shots agree best; this keeps
exponentially decaying modes (high contrast, high Peclet) accurate.  Thick evanescent
layers are stepped in growing/decaying components so a (nearly) pure decaying state is
never lost.  Weighted norms are in closed form.  See :mod:`transport.solvers.modal.spectrum` for the
operator and the eigenvalues.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from transport.solvers.modal.operator import ENDPOINT_FORM_MIN, Operator, sinc, tanhc

__all__ = ["Modes", "modes"]


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
    return np.where(small, series, (1.0 - sinc(2.0 * xs)) / (xs * xs))


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
    endpoint = (~trig) & (x > ENDPOINT_FORM_MIN)
    expo = exp_sign * (op.A[i] + op.alpha[i] * s)
    # forms using the state at the top of the layer
    v0, p0, l0 = V[i], P[i], L[i]
    ws = w * s
    cs = np.where(trig, np.cos(ws), np.cosh(np.where(trig, 0.0, np.minimum(ws, 700))))
    sn = np.where(trig, s * sinc(ws), s * _shc(np.where(trig, 0.0, np.minimum(ws, 700))))
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
        b12 = np.where(trig, l / k * sinc(x), l / k * tanhc(x))
        b21 = np.where(trig, -k * w2 * l * sinc(x), (k / l) * x * np.tanh(x))
        v1 = c * v + d * b12 * p
        p1 = d * b21 * v + c * p
        logc = np.where(trig, 0.0, x + np.log1p(np.exp(-2 * x)) - np.log(2.0))
        big = (~trig) & (x > 1.0)
        if big.any():
            # thick hyperbolic step in growing/decaying components: scaling the cosh/sinh
            # matrix by cosh makes it rank one in floating point (tanh x = 1), losing a
            # state that is (almost) pure decaying; the components keep it exactly
            kb = k * np.sqrt(np.abs(w2[big]))
            vb, pb, xb = v[big], p[big], x[big]
            g = 0.5 * (vb + pb / kb)  # grows like e^{+beta s} in the shooting direction
            h = 0.5 * (vb - pb / kb)
            damp = np.exp(-2 * xb)
            g1, h1 = (g, h * damp) if direction > 0 else (g * damp, h)
            v1 = v1.copy()
            p1 = p1.copy()
            v1[big] = g1 + h1
            p1[big] = kb * (g1 - h1)
            logc = np.where(big, x, logc)
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
        xh = np.where(trig, 0.0, np.minimum(x, ENDPOINT_FORM_MIN))
        t_int = (v * v * 0.5 * l * (1 + sinc(2 * xt)) + pk * pk * 0.5 * l ** 3
                 * _series_1m_sinc2(xt) + v * pk * l * l * sinc(xt) ** 2)
        h_int = (v * v * 0.5 * l * (1 + _shc(2 * xh)) + pk * pk * 0.5 * l ** 3
                 * _series_shc2_m1(xh) + v * pk * l * l * _shc(xh) ** 2)
        integral = np.where(trig, t_int, h_int)
        logi = np.log(np.maximum(integral, 1e-300)) + 2 * L[i]
        endpoint = (~trig) & (x > ENDPOINT_FORM_MIN)
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
