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

__all__ = ["SteadyResponses", "steady_responses"]


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
        op = self.op
        z = np.atleast_1d(np.asarray(z, dtype=float))
        lay = np.clip(np.searchsorted(op.z, z, side="right") - 1, 0, op.n_layers - 1)
        f1, d1, f2, d2, pp, dp = _basis(self, lay, z - op.z[lay])
        u = f1[:, None] * self.c1[lay] + f2[:, None] * self.c2[lay]
        du = d1[:, None] * self.c1[lay] + d2[:, None] * self.c2[lay]
        rows = np.arange(z.size)
        u[rows, 2 + lay] += op.source[lay] * pp
        du[rows, 2 + lay] += op.source[lay] * dp
        return u, op.k[lay][:, None] * du


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


def _roots(op, m_eff):
    q, k = op.q, op.k
    sq = np.sqrt(q * q + 4.0 * k * m_eff)
    if q >= 0:
        r_plus = (q + sq) / (2 * k)
        r_minus = np.where(q + sq > 0, -2.0 * m_eff / np.where(q + sq > 0, q + sq, 1.0), 0.0)
    else:
        r_minus = (q - sq) / (2 * k)
        r_plus = np.where(sq - q > 0, 2.0 * m_eff / np.where(sq - q > 0, sq - q, 1.0), 0.0)
    return r_minus, r_plus


def _basis(resp, lay, s):
    """Basis functions, derivatives and the particular solution P (unit sigma) at local
    depths s in layers ``lay`` (an index array of the size of s, or one layer index)."""
    op = resp.op
    s = np.asarray(s, dtype=float)
    lay = np.broadcast_to(np.asarray(lay), s.shape)
    l = op.thickness[lay]
    rm, rp = resp.r_minus[lay], resp.r_plus[lay]
    f1 = np.exp(rm * s)
    d1 = rm * f1
    delta = rp - rm
    expo = resp.exp_form[lay]
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
    me, k = resp.m_eff[lay], op.k[lay]
    if op.q != 0:
        p_flow, dp_flow = s / op.q, np.full_like(s, 1.0 / op.q)
    else:
        p_flow, dp_flow = -s * s / (2 * k), -s / k
    react = me > 0
    pp = np.where(react, 1.0 / np.where(react, me, 1.0), p_flow)
    dp = np.where(react, 0.0, dp_flow)
    return f1, d1, f2, d2, pp, dp


def steady_responses(op: Operator, eps: float = 0.0) -> SteadyResponses:
    """Steady responses to a unit top value, unit bottom value and the layer sources."""
    N = op.n_layers
    m_eff = op.m + eps * op.a
    rm, rp = _roots(op, m_eff)
    exp_form = (rp - rm) * op.thickness > 1.0
    K = N + 2
    resp = SteadyResponses(op, eps, rm, rp, exp_form, np.zeros((N, K)), np.zeros((N, K)), m_eff)
    n = 2 * N
    ab = np.zeros((5, n))  # bands: u=2, l=2 ; ab[2 + r - c, c] = A[r, c]
    rhs = np.zeros((n, K))

    def put(r, c, val):
        ab[2 + r - c, c] = val

    # the basis at both ends of every layer, in one call
    tops_bottoms = np.column_stack([np.zeros(N), op.thickness]).ravel()
    f1, d1, f2, d2, pp, dp = _basis(resp, np.repeat(np.arange(N), 2), tops_bottoms)
    ends = []
    for i in range(N):
        e = slice(2 * i, 2 * i + 2)
        ends.append((f1[e], d1[e] * op.k[i], f2[e], d2[e] * op.k[i], pp[e] * op.source[i],
                     dp[e] * op.k[i] * op.source[i]))
    # top row
    al, be, ga = op.top_u
    f1, d1, f2, d2, pp, dp = ends[0]
    sc = 1.0 / max(abs(al), abs(be) * op.k[0] / op.thickness[0], 1e-300)
    put(0, 0, sc * (al * f1[0] + be * d1[0]))
    put(0, 1, sc * (al * f2[0] + be * d2[0]))
    rhs[0, 0] = sc
    rhs[0, 2] = -sc * (al * pp[0] + be * dp[0])  # layer 0 source
    for i in range(N - 1):
        A_, B_ = ends[i], ends[i + 1]
        r1, r2 = 2 * i + 1, 2 * i + 2
        c0 = 2 * i
        put(r1, c0, A_[0][1])
        put(r1, c0 + 1, A_[2][1])
        put(r1, c0 + 2, -B_[0][0])
        put(r1, c0 + 3, -B_[2][0])
        rhs[r1, 2 + i] = -A_[4][1]
        rhs[r1, 3 + i] = B_[4][0]
        fs = 1.0 / max(op.k[i] / op.thickness[i], op.k[i + 1] / op.thickness[i + 1], abs(op.q))
        put(r2, c0, fs * A_[1][1])
        put(r2, c0 + 1, fs * A_[3][1])
        put(r2, c0 + 2, -fs * B_[1][0])
        put(r2, c0 + 3, -fs * B_[3][0])
        rhs[r2, 2 + i] = -fs * A_[5][1]
        rhs[r2, 3 + i] = fs * B_[5][0]
    al, be, ga = op.bottom_u
    f1, d1, f2, d2, pp, dp = ends[-1]
    sc = 1.0 / max(abs(al), abs(be) * op.k[-1] / op.thickness[-1], 1e-300)
    r = n - 1
    put(r, n - 2, sc * (al * f1[1] + be * d1[1]))
    put(r, n - 1, sc * (al * f2[1] + be * d2[1]))
    rhs[r, 1] = sc
    rhs[r, 1 + N] = -sc * (al * pp[1] + be * dp[1])  # last layer source
    sol = solve_banded((2, 2), ab, rhs)
    if not np.all(np.isfinite(sol)):
        raise ArithmeticError("steady response is not finite: the column has no steady state "
                              "for these boundaries")
    c1 = sol[0::2]
    c2 = sol[1::2]
    return SteadyResponses(op, eps, rm, rp, exp_form, c1, c2, m_eff)
