"""Eigenfunctions of the layered operator: two-sided shooting and closed-form norms.

Eigenfunctions are obtained by shooting from both ends with normalised states and a
running log-scale (:func:`transport.solvers.modal.transfer.shoot`, all modes at once),
and joined at the face where the two shots agree best; this keeps exponentially
decaying modes (high contrast, high Peclet) accurate.  Thick evanescent layers are
stepped in growing/decaying components so a (nearly) pure decaying state is never lost.
Weighted norms are in closed form.  See :mod:`transport.solvers.modal.spectrum` for the
operator and the eigenvalues.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from transport.solvers.modal import kernel
from transport.solvers.modal.operator import ENDPOINT_FORM_MIN, Operator
from transport.solvers.modal.transfer import (LayerTerms, Prep, chunks, layer_integrals,
                                              normalise, shc, shoot)

__all__ = ["Modes", "modes", "modes_many", "evaluate_many"]

#: Elements (points x modes) per block of :meth:`Modes.evaluate`.
_EVAL_ELEMENTS = 1 << 16


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
        z = np.atleast_1d(np.asarray(z, dtype=float))
        lam = self.lam[modes]
        V, P, L = self.v[:, modes], self.p[:, modes], self.logs[:, modes]
        out_f = np.empty((z.size, lam.size))
        out_p = np.empty((z.size, lam.size))
        lay = self.layer_of(z)
        step = max(1, _EVAL_ELEMENTS // max(lam.size, 1))
        for start in range(0, z.size, step):
            sl = slice(start, start + step)
            out_f[sl], out_p[sl] = _layer_values(self.op, lay[sl], z[sl], lam, V, P, L,
                                                 exp_sign)
        return out_f, out_p


def _layer_values(op, lay, z, lam, V, P, L, exp_sign):
    """Values of psi and k psi' at depths z inside layers ``lay`` (arrays of one size)."""
    s = (z - op.z[lay])[:, None]
    expo = exp_sign * (op.A[lay] + op.alpha[lay] * s[:, 0])[:, None]
    return _values(lay, s, op.thickness[lay][:, None], op.k[lay][:, None],
                   op.a[lay][:, None], op.s[lay][:, None], expo, lam, V, P, L)


def evaluate_many(modes_list, z, exp_sign: int = 0) -> list:
    """[:meth:`Modes.evaluate` (z, exp_sign)] of several columns' modes whose layer
    faces are the same (a boring's Monte Carlo columns: one log, drawn properties), in
    one pass over all their modes side by side: the same arithmetic, element by
    element, as each column's own call (the coefficients of a mode's operator are
    gathered per mode instead of broadcast), at the cost of about one call.  Columns
    whose faces differ from the first one's are evaluated on their own."""
    z = np.atleast_1d(np.asarray(z, dtype=float))
    first = modes_list[0].op
    same = [np.array_equal(md.op.z, first.z) for md in modes_list]
    out = [None if ok else md.evaluate(z, exp_sign) for md, ok in zip(modes_list, same)]
    batch = [md for md, ok in zip(modes_list, same) if ok]
    sizes = [md.lam.size for md in batch]
    if not batch or sum(sizes) == 0:
        return [o if o is not None else (np.empty((z.size, 0)), np.empty((z.size, 0)))
                for o in out]
    lay = batch[0].layer_of(z)
    s = (z - first.z[lay])[:, None]
    l = first.thickness[lay][:, None]

    def per_mode(values):  # (nz, modes): each mode's own operator's value at z
        return np.repeat(np.stack(values, axis=1), sizes, axis=1)

    def layer(name):
        return per_mode([getattr(md.op, name)[lay] for md in batch])
    expo = exp_sign * per_mode([md.op.A[lay] + md.op.alpha[lay] * s[:, 0] for md in batch])
    lam = np.concatenate([md.lam for md in batch])
    V, P, L = (np.concatenate([getattr(md, name) for md in batch], axis=1)
               for name in ("v", "p", "logs"))
    f, d = _values(lay, s, l, layer("k"), layer("a"), layer("s"), expo, lam, V, P, L)
    parts = iter(zip(np.split(f, np.cumsum(sizes)[:-1], axis=1),
                     np.split(d, np.cumsum(sizes)[:-1], axis=1)))
    return [o if o is not None else next(parts) for o in out]


def _values(lay, s, l, k, a, sc_, expo, lam, V, P, L):
    """psi and k psi' at local depths s (nz, 1) in layers ``lay`` (nz,) of thickness l
    (nz, 1), with the layer's k, a and s (``sc_``) and the exponent of the e^{A} factor
    ``expo`` as (nz, 1) arrays (one operator) or (nz, modes) (each mode its own
    operator), modes lam and face states V, P, L (faces, modes)."""
    w2 = (lam * a - sc_) / k
    w = np.sqrt(np.abs(w2))
    trig = w2 > 0
    # forms using the state at the top of the layer
    v0, p0, l0 = V[lay], P[lay], L[lay]
    ws = w * s
    # cos and sin of ws from t = tan(ws/2) (one fast transcendental instead of two)
    t = np.tan(0.5 * ws)
    t2 = t * t
    d = 1.0 + t2
    cs = (1.0 - t2) / d
    sn = np.divide(2.0 * t, w * d, out=s * np.ones_like(ws), where=ws > 0)  # s sinc(ws)
    if not trig.all():
        wh = np.where(trig, 0.0, np.minimum(ws, 700))
        cs = np.where(trig, cs, np.cosh(wh))
        sn = np.where(trig, sn, s * shc(wh))
    f_top = v0 * cs + (p0 / k) * sn
    # trig: k psi' = -k w^2 s sinc(ws) v0 + p0 cos(ws); hyperbolic: the same with
    # w^2 -> -b^2, sinc -> sinh(x)/x, cos -> cosh
    p_top = -k * w2 * sn * v0 + p0 * cs
    scale = np.exp(l0 + expo)
    val = f_top * scale
    der = p_top * scale
    x = w * l
    endpoint = (~trig) & (x > ENDPOINT_FORM_MIN)
    if endpoint.any():
        rows = np.flatnonzero(endpoint.any(axis=1))
        e_, lr, sr, wr, xr = endpoint[rows], lay[rows], s[rows], w[rows], x[rows]
        l0r, l1 = L[lr], L[lr + 1]
        lm = np.maximum(l0r, l1)
        V0 = V[lr] * np.exp(l0r - lm)
        V1 = V[lr + 1] * np.exp(l1 - lm)
        e = np.exp(-xr)
        det = -np.expm1(-2 * xr)
        E = (V0 - V1 * e) / det
        F = (V1 - V0 * e) / det
        em = np.exp(-wr * sr)
        ep = np.exp(-wr * np.maximum(l[rows] - sr, 0.0))
        sc = np.exp(lm + expo[rows])
        ve = (E * em + F * ep) * sc
        de = k[rows] * wr * (F * ep - E * em) * sc
        val[rows] = np.where(e_, ve, val[rows])
        der[rows] = np.where(e_, de, der[rows])
    return val, der


def modes(op: Operator, lam) -> Modes:
    """Normalised eigenfunctions for the eigenvalues ``lam``."""
    return modes_many([op], [lam])[0]


def modes_many(ops, lams, compiled: bool = False) -> list:
    """:func:`modes` of several operators: the eigenfunctions of ``ops[r]`` for the
    eigenvalues ``lams[r]``.  Operators with the same number of layers are shot in
    shared passes over the layers (their modes side by side: :meth:`Prep.stack`), each
    mode with the same arithmetic as for its own operator alone.  ``compiled``: the
    passes run one mode at a time in the compiled kernel where it is available
    (:func:`transport.solvers.modal.kernel.modes`: the same equations, the same numbers
    to rounding)."""
    lams = [np.asarray(lam, dtype=float) for lam in lams]
    out = [None] * len(ops)
    groups = {}
    for r, op in enumerate(ops):
        groups.setdefault(op.n_layers, []).append(r)
    for members in groups.values():
        preps = [Prep(ops[r]) for r in members]
        whole = preps[0] if len(members) == 1 else Prep.stack(preps)
        owner = np.repeat(np.arange(len(members)), [lams[r].size for r in members])
        lam = np.concatenate([lams[r] for r in members])
        if compiled and kernel.modes_available():
            V, P, Ls = kernel.modes(whole, lam, owner)
        else:
            V, P, Ls = _shot_modes(whole.select(owner), lam)
        cut = np.cumsum([lams[r].size for r in members])[:-1]
        for r, v, p, ls in zip(members, *(np.split(x, cut, axis=1) for x in (V, P, Ls))):
            out[r] = Modes(op=ops[r], lam=lams[r], v=v, p=p, logs=ls)
    return out


def _shot_modes(prep: Prep, lam):
    """Normalised face states (v, p) and log-scales of the modes ``lam`` (one column of
    ``prep`` per mode, or one column for all)."""
    nL = prep.n_layers
    shape = (nL + 1, lam.size)
    V, P, Ls = np.empty(shape), np.empty(shape), np.empty(shape)
    # scale used to compare directions at face j: k / l of the layer below it (of the
    # last layer at the bottom)
    sc_all = np.concatenate([prep.kl, prep.kl[-1:]])
    la_all = np.log(prep.a)
    faces = np.arange(nL + 1)[:, None]
    for cs in chunks(nL, lam.size):
        sub = prep.select(cs)
        sc, la = prep.cols(sc_all, cs), prep.cols(la_all, cs)
        terms = LayerTerms(sub, lam[cs])
        VL, PL, LL, VR, PR, LR = shoot(terms)
        # face where both shots agree best: least |sin| of the angle between them
        XL, XR = sc * VL, sc * VR
        cross = XL * PR
        cross -= PL * XR
        np.abs(cross, out=cross)
        cross /= np.sqrt(XL * XL + PL * PL)
        cross /= np.sqrt(XR * XR + PR * PR)
        # (not the bottom face itself, which the bottom shot meets exactly)
        jstar = np.argmin(cross[:-1], axis=0)
        cols = np.arange(jstar.size)
        xl, pl, xr, pr = XL[jstar, cols], PL[jstar, cols], XR[jstar, cols], PR[jstar, cols]
        coef = (xl * xr + pl * pr) / (xr * xr + pr * pr)
        sign = np.sign(coef)
        sign[sign == 0] = 1.0
        shift = LL[jstar, cols] - LR[jstar, cols] + np.log(np.abs(coef) + 1e-300)
        use_left = faces <= jstar
        Vc = np.where(use_left, VL, sign * VR)
        Pc = np.where(use_left, PL, sign * PR)
        Lc = np.where(use_left, LL, LR + shift)
        Vc, Pc, Lc = normalise(terms, Vc, Pc, Lc)
        # log of the weighted norm sum_i a_i int psi^2 (closed form per layer)
        integral, lg = layer_integrals(terms, Vc, Pc, Lc)
        np.maximum(integral, 1e-300, out=integral)
        parts = np.log(integral, out=integral)
        parts += lg
        parts += la
        top = parts.max(axis=0)
        parts -= top
        log_norm = top + np.log(np.sum(np.exp(parts, out=parts), axis=0))
        V[:, cs], P[:, cs] = Vc, Pc
        np.subtract(Lc, 0.5 * log_norm, out=Ls[:, cs])
    return V, P, Ls
