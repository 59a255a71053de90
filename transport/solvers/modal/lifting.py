"""Steady responses of the layered column to unit boundary signals and sources.

The modal engine writes the solution as  u = sum_k b_k phi_k(z) + sum_n a_n(t) e^A psi_n,
where phi_k is the steady response to boundary signal k (top value, bottom value, the
layer sources).  Each phi_k solves, per layer in u = C / kappa,

    -(k u')' + q u' + (m + eps a) u = sigma        (k = theta D kappa, a = theta R kappa)

with the boundary rows of :class:`transport.solvers.modal.spectrum.Operator`, continuity of u and of
k u' at the faces.  ``eps`` is 0 when the column has a steady state; where it has none
(no decay, fluxes prescribed at both ends) a positive ``eps`` gives a smooth lifting with
the same eigenfunctions (the shift only moves every eigenvalue by eps), as described in
the project design notes.

The solution on each layer is exact: exponentials e^{r s} with
r = (q +- sqrt(q^2 + 4 k (m + eps a))) / (2k) in a basis bounded by one on the layer (so
high Peclet numbers never overflow) plus a particular solution for the source.  The
2N unknowns solve one banded system (scipy.linalg.solve_banded).
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.linalg import solve_banded

from transport.solvers.modal.operator import Operator

__all__ = ["SteadyResponses", "steady_responses", "steady_shift", "steady_responses_many", "evaluate_many"]


@dataclass(frozen=True)
class SteadyResponses:
    """Coefficients of the steady responses; columns: 0 top, 1 bottom, 2 + i the source
    of layer i.

    Column 0 solves the top row  alpha_u u + beta_u k u' = 1  with a homogeneous bottom
    row (and no source), column 1 the converse; the physical lifting for a boundary
    value g is gamma g times that column.  Columns 0 and 1 are therefore also the two
    homogeneous solutions that satisfy the bottom and the top condition respectively.
    """

    op: Operator
    eps: float
    r_minus: np.ndarray  # (N,)
    r_plus: np.ndarray
    exp_form: np.ndarray  # bool (N,): second basis function e^{r+(s-l)}
    c1: np.ndarray  # (N, K)
    c2: np.ndarray  # (N, K)
    m_eff: np.ndarray

    def evaluate(self, z):
        """u and k u' of each response at depths z: arrays (z.size, K), K = N + 2."""
        return evaluate_many([self], z)[0]

    def layer_sums(self, z, w):
        """sum of w_q u(z_q) over the depths z_q in each layer: (N, K), without forming
        u at every depth (u is c1 f1 + c2 f2 plus the source's particular solution on
        each layer)."""
        op = self.op
        N = op.n_layers
        z = np.atleast_1d(np.asarray(z, dtype=float))
        lay = np.clip(np.searchsorted(op.z, z, side="right") - 1, 0, N - 1)
        f1, _, f2, _, pp, _ = _basis(self, lay, z - op.z[lay])
        s1 = np.bincount(lay, weights=w * f1, minlength=N)
        s2 = np.bincount(lay, weights=w * f2, minlength=N)
        sp = np.bincount(lay, weights=w * pp, minlength=N)
        out = self.c1 * s1[:, None] + self.c2 * s2[:, None]
        out[np.arange(N), 2 + np.arange(N)] += op.source * sp
        return out


def _roots(q, k, m_eff):
    """(r-, r+) per layer: the roots of k r^2 - q r - m_eff = 0 in the forms without
    cancellation for the flow direction; ``q`` a float or an array broadcasting
    against k (one flux per column of a batch: both forms are computed, each column
    takes its own, element by element as for a lone column)."""
    sq = np.sqrt(q * q + 4.0 * k * m_eff)
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        rp_down = (q + sq) / (2 * k)
        rm_down = np.where(q + sq > 0, -2.0 * m_eff / np.where(q + sq > 0, q + sq, 1.0), 0.0)
        rm_up = (q - sq) / (2 * k)
        rp_up = np.where(sq - q > 0, 2.0 * m_eff / np.where(sq - q > 0, sq - q, 1.0), 0.0)
    down = np.asarray(q) >= 0
    return np.where(down, rm_down, rm_up), np.where(down, rp_down, rp_up)


def _basis(resp, lay, s):
    """Basis functions, derivatives and the particular solution P (unit sigma) at local
    depths s in layers ``lay`` (an index array of the size of s, or one layer index)."""
    s = np.asarray(s, dtype=float)
    lay = np.broadcast_to(np.asarray(lay), s.shape)
    op = resp.op
    return _basis_of(op.thickness[lay], resp.r_minus[lay], resp.r_plus[lay],
                     resp.exp_form[lay], resp.m_eff[lay], op.k[lay], op.q, s)


def _basis_of(l, rm, rp, expo, me, k, q, s):
    """:func:`_basis` from the layer values at each depth (arrays of the shape of s;
    ``q`` a float or an array broadcasting against them, one flux per column)."""
    f1 = np.exp(rm * s)
    d1 = rm * f1
    delta = rp - rm
    pos = delta > 0
    with np.errstate(over="ignore", invalid="ignore"):
        # e^{r+ (s - l)} where (r+ - r-) l > 1; elsewhere the bounded difference form
        # e^{r- s} (e^{delta s} - 1) / delta (delta l <= 1), or s e^{r- s} at delta = 0
        f2_e = np.exp(np.where(expo, rp * (s - l), 0.0))
        f2_d = f1 * np.where(pos, np.expm1(np.where(expo, 0.0, delta * s))
                             / np.where(pos, delta, 1.0), s)
        d2_d = rm * f2_d + np.exp(np.where(expo, 0.0, rp * s))
    f2 = np.where(expo, f2_e, f2_d)
    d2 = np.where(expo, rp * f2_e, d2_d)
    flow = np.asarray(q) != 0
    with np.errstate(divide="ignore", invalid="ignore"):
        p_flow = np.where(flow, s / q, -s * s / (2 * k))
        dp_flow = np.where(flow, np.full_like(s, 1.0) * (np.float64(1.0) / q), -s / k)
    react = me > 0
    pp = np.where(react, 1.0 / np.where(react, me, 1.0), p_flow)
    dp = np.where(react, 0.0, dp_flow)
    return f1, d1, f2, d2, pp, dp


def steady_responses(op: Operator, eps: float = 0.0) -> SteadyResponses:
    """Steady responses to a unit top value, unit bottom value and the layer sources."""
    return steady_responses_many([op], [eps])[0]


def _stack(ops, name):
    return np.stack([getattr(op, name) for op in ops])


def steady_responses_many(ops, eps) -> list:
    """[:func:`steady_responses` (op, e) for op, e in zip(ops, eps)] for operators with
    the same number of layers (a boring's Monte Carlo columns), computed side by side:
    the same arithmetic element by element, and the banded systems solved as ONE
    block-diagonal banded system in one LAPACK call (its band is the same, the entries
    coupling neighbouring blocks are zero: a zero candidate is never chosen as a pivot
    over a nonzero one and every update a block receives from another is a zero
    multiple, so each block's LU and solution are those of its own call, to the bit;
    as :func:`transport.solvers.laplace.transfer._solve_banded`).  A failed or
    non-finite batch solve is redone one operator at a time: the first operator that
    has no steady response raises the error of its own call."""
    R = len(ops)
    N = ops[0].n_layers
    if any(op.n_layers != N for op in ops):
        return [steady_responses_many([op], [e])[0] for op, e in zip(ops, eps)]
    k, a, m, l, src = (_stack(ops, name) for name in ("k", "a", "m", "thickness", "source"))
    q = np.array([op.q for op in ops])[:, None]
    m_eff = m + np.asarray(eps, dtype=float)[:, None] * a
    rm, rp = _roots(q, k, m_eff)
    exp_form = (rp - rm) * l > 1.0
    K = N + 2
    n = 2 * N
    # the basis at both ends of every layer (columns 2i and 2i + 1: top and bottom)
    lay = np.repeat(np.arange(N), 2)
    ends_s = np.stack([np.column_stack([np.zeros(N), row]).ravel() for row in l])
    f1, d1, f2, d2, pp, dp = _basis_of(l[:, lay], rm[:, lay], rp[:, lay], exp_form[:, lay],
                                       m_eff[:, lay], k[:, lay], q, ends_s)
    kk, ss = k[:, lay], src[:, lay]
    d1, d2 = d1 * kk, d2 * kk  # k f' at the ends
    pp, dp = pp * ss, dp * kk * ss
    ab = np.zeros((R, 5, n))  # bands: u=2, l=2 ; ab[:, 2 + r - c, c] = A[r, c]
    rhs = np.zeros((R, n, K))

    def put(r, c, val):
        ab[:, 2 + r - c, c] = val

    # top row
    al, be = (np.array([op.top_u[j] for op in ops]) for j in (0, 1))
    sc = 1.0 / np.maximum(np.maximum(np.abs(al), np.abs(be) * k[:, 0] / l[:, 0]), 1e-300)
    put(0, 0, sc * (al * f1[:, 0] + be * d1[:, 0]))
    put(0, 1, sc * (al * f2[:, 0] + be * d2[:, 0]))
    rhs[:, 0, 0] = sc
    rhs[:, 0, 2] = -sc * (al * pp[:, 0] + be * dp[:, 0])  # layer 0 source
    for i in range(N - 1):
        bot, top = 2 * i + 1, 2 * i + 2  # the bottom of layer i, the top of layer i + 1
        r1, r2 = 2 * i + 1, 2 * i + 2
        c0 = 2 * i
        put(r1, c0, f1[:, bot])
        put(r1, c0 + 1, f2[:, bot])
        put(r1, c0 + 2, -f1[:, top])
        put(r1, c0 + 3, -f2[:, top])
        rhs[:, r1, 2 + i] = -pp[:, bot]
        rhs[:, r1, 3 + i] = pp[:, top]
        fs = 1.0 / np.maximum(np.maximum(k[:, i] / l[:, i], k[:, i + 1] / l[:, i + 1]),
                              np.abs(q[:, 0]))
        put(r2, c0, fs * d1[:, bot])
        put(r2, c0 + 1, fs * d2[:, bot])
        put(r2, c0 + 2, -fs * d1[:, top])
        put(r2, c0 + 3, -fs * d2[:, top])
        rhs[:, r2, 2 + i] = -fs * dp[:, bot]
        rhs[:, r2, 3 + i] = fs * dp[:, top]
    al, be = (np.array([op.bottom_u[j] for op in ops]) for j in (0, 1))
    sc = 1.0 / np.maximum(np.maximum(np.abs(al), np.abs(be) * k[:, -1] / l[:, -1]), 1e-300)
    r = n - 1
    put(r, n - 2, sc * (al * f1[:, -1] + be * d1[:, -1]))
    put(r, n - 1, sc * (al * f2[:, -1] + be * d2[:, -1]))
    rhs[:, r, 1] = sc
    rhs[:, r, 1 + N] = -sc * (al * pp[:, -1] + be * dp[:, -1])  # last layer source
    sol = None
    if R > 1 and np.isfinite(ab).all() and np.isfinite(rhs).all():
        try:
            sol = solve_banded((2, 2), np.concatenate(list(ab), axis=1),
                               rhs.reshape(R * n, K)).reshape(R, n, K)
        except np.linalg.LinAlgError:
            sol = None
        if sol is not None and not np.isfinite(sol).all():
            sol = None
    out = []
    for j, op in enumerate(ops):
        s_j = sol[j] if sol is not None else solve_banded((2, 2), ab[j], rhs[j])
        if not np.all(np.isfinite(s_j)):
            raise ArithmeticError("steady response is not finite: the column has no steady "
                                  "state for these boundaries")
        out.append(SteadyResponses(op, float(eps[j]), rm[j], rp[j], exp_form[j], s_j[0::2],
                                   s_j[1::2], m_eff[j]))
    return out


def evaluate_many(resps, z) -> list:
    """[r.evaluate(z) for r in resps]: u and k u' of each column's responses at depths
    z, for columns with the same layer faces (a boring's Monte Carlo columns) side by
    side, element by element as each alone (others one at a time)."""
    z = np.atleast_1d(np.asarray(z, dtype=float))
    op0 = resps[0].op
    if any(not np.array_equal(r.op.z, op0.z) for r in resps):
        return [evaluate_many([r], z)[0] for r in resps]
    lay = np.clip(np.searchsorted(op0.z, z, side="right") - 1, 0, op0.n_layers - 1)
    s = z - op0.z[lay]
    q = np.array([r.op.q for r in resps])[:, None]

    def at(name, owner="resp"):
        return np.stack([getattr(r if owner == "resp" else r.op, name)[lay] for r in resps])
    f1, d1, f2, d2, pp, dp = _basis_of(at("thickness", "op"), at("r_minus"), at("r_plus"),
                                       at("exp_form"), at("m_eff"), at("k", "op"), q,
                                       np.broadcast_to(s, (len(resps), z.size)))
    rows = np.arange(z.size)
    out = []
    for j, r in enumerate(resps):
        u = f1[j][:, None] * r.c1[lay] + f2[j][:, None] * r.c2[lay]
        du = d1[j][:, None] * r.c1[lay] + d2[j][:, None] * r.c2[lay]
        u[rows, 2 + lay] += r.op.source[lay] * pp[j]
        du[rows, 2 + lay] += r.op.source[lay] * dp[j]
        out.append((u, r.op.k[lay][:, None] * du))
    return out


def steady_shift(lam) -> float:
    """The shift eps of the steady responses: |lambda_1| where lambda_0 is zero (no
    steady state), else 0."""
    lam1 = lam[1] if lam.size > 1 else abs(lam[0]) + 1.0
    return abs(lam1) if lam[0] <= 1e-9 * max(abs(lam1), 1e-300) else 0.0
