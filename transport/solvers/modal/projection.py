"""Quadrature and Green's-function integrals used by the modal engine.

* Gauss-Legendre panels short enough that (frequency x panel length) <= 20 with 32 nodes,
  so the trigonometric / exponential integrands of the projections are integrated to
  machine precision (the error of a 32-node rule on exp(i w s) over a panel with
  w h = 20 is below 1e-20; Davis & Rabinowitz 1984, Methods of Numerical Integration,
  sec. 4.8).
* The exact time integral of a transient started from w0:  W = int_0^inf w dt solves
  L W = a w0 with homogeneous boundary rows, written with the Green's function of the
  layered operator built from the two homogeneous solutions (the unit boundary
  responses of :mod:`transport.solvers.modal.lifting`).  With a shifted lifting (no steady state)
  the same construction inverts L + eps a.
"""
from __future__ import annotations


import numpy as np

from transport.model.column import Column, InitialState, InputError
from transport.solvers.modal.operator import Operator

__all__ = ["gauss_nodes", "initial_profile", "green_flux", "green_terms"]

_GL_NODES = 32
_GL_PANEL = 20.0


def _rules():
    """The 8-, 16- and 32-node Gauss-Legendre rules on [-1, 1], concatenated, with the
    start of each."""
    xs, ws = zip(*(np.polynomial.legendre.leggauss(n) for n in (8, 16, _GL_NODES)))
    start = np.array([0, 8, 24])
    return np.concatenate(xs), np.concatenate(ws), start


_RULES = _rules()


def gauss_nodes(op: Operator, lam: np.ndarray, breaks=(), extra_rate: float = 0.0):
    """Nodes, weights and layer index of Gauss-Legendre panels over the column.

    A panel of length h where the integrand varies at most at ``rate`` gets 8, 16 or 32
    nodes for rate h <= 1, 6 or 20: the bound (rate h / 2)^(2n) / (2n)! on the error of
    an n-node rule for exp(rate s) (Davis & Rabinowitz 1984, sec. 4.8) is below 1e-18
    in every case.  Nodes are returned in increasing depth, panel after panel.
    """
    lam_hi, lam_lo = float(np.max(lam)), float(np.min(lam))
    z = op.z
    w_hi = np.sqrt(np.maximum(lam_hi * op.a - op.s, 0.0) / op.k)
    b_hi = np.sqrt(np.maximum(op.s - lam_lo * op.a, 0.0) / op.k)
    rate = w_hi + b_hi + 2 * np.abs(op.alpha) + 1.0 / op.thickness + extra_rate
    b = np.asarray(sorted(set(float(v) for v in breaks)), dtype=float)
    b = b[(b > z[0]) & (b < z[-1])]
    cuts = np.union1d(z, b)  # every segment lies inside one layer
    a_, b_ = cuts[:-1], cuts[1:]
    lay = np.clip(np.searchsorted(z, 0.5 * (a_ + b_), side="right") - 1, 0, op.n_layers - 1)
    npan = np.maximum(1, np.ceil(rate[lay] * (b_ - a_) / _GL_PANEL).astype(int))
    seg = np.repeat(np.arange(a_.size), npan)
    first = np.repeat(np.cumsum(npan) - npan, npan)
    j = np.arange(seg.size) - first  # panel index inside its segment
    h = (b_ - a_)[seg] / npan[seg]
    left = a_[seg] + j * h
    # rule per panel: index into the concatenated 8-, 16- and 32-node rules
    x_all, w_all, start = _RULES
    rh = rate[lay[seg]] * h
    order = np.where(rh <= 1.0, 8, np.where(rh <= 6.0, 16, _GL_NODES))
    rule = np.select([order == 8, order == 16], [0, 1], 2)
    pan = np.repeat(np.arange(seg.size), order)
    k = np.arange(pan.size) - np.repeat(np.cumsum(order) - order, order)
    idx = start[rule][pan] + k
    half = 0.5 * h[pan]
    return (left[pan] + half * (1.0 + x_all[idx]), half * w_all[idx],
            np.repeat(lay[seg], order))


def initial_profile(column: Column, initial: InitialState, z):
    """Initial pore-water concentration C0 at depths z (kg m-3).

    A measured profile is piecewise-linear and right-continuous: at a depth sampled
    twice (a step) the value is the deeper sample (:meth:`InitialState.profile_at`).
    Quadrature that breaks its panels at the sample depths therefore integrates a step
    exactly (no node falls on the step)."""
    z = np.asarray(z, dtype=float)
    if callable(initial):
        return np.asarray(initial(z), dtype=float)
    if initial.kind == "clean":
        return np.zeros_like(z)
    if initial.kind == "uniform":
        if len(initial.values) != len(column.layers):
            raise InputError(f"a uniform initial state needs one value per layer "
                             f"({len(column.layers)}), got {len(initial.values)}")
        lay = np.clip(np.searchsorted(column.interfaces, z, side="right") - 1, 0,
                      len(column.layers) - 1)
        return np.asarray(initial.values)[lay]
    d = np.asarray(initial.depths)
    if d[-1] > column.length * (1 + 1e-12):
        raise InputError(f"initial profile sample at {d[-1]} m lies below the column bottom "
                         f"({column.length} m); remove it or extend the column")
    return initial.profile_at(z)


def green_flux(op: Operator, lift, z, w0_nodes, nodes, values: bool = False, lift_nodes=None):
    """Flux at depths z of W with L W = a w0 (homogeneous rows); with ``values`` also
    the u-space values U = e^A W = [phi_top I_L + phi_bot I_R] / Wr.

    F_W(z) = [F_top(z) I_L(z) + F_bot(z) I_R(z)] / Wr, with
    I_L(z) = int_0^z a e^{-2A} phi_bot w0, I_R(z) = int_z^L a e^{-2A} phi_top w0 and
    Wr = k phi_bot' phi_top - phi_bot k phi_top' (constant; evaluated at z = 0).
    ``nodes`` = (zq, wq, lq) must have every z as a panel break; w0_nodes: (nq, m) values
    of m functions (u-space) at the nodes; ``lift_nodes``: ``lift.evaluate(zq)[0]`` if
    already at hand.  Returns (z.size, m).
    """
    zq, wq, lq = nodes
    z = np.atleast_1d(np.asarray(z, dtype=float))
    uq = lift.evaluate(zq)[0] if lift_nodes is None else lift_nodes
    A = op.A[lq] + op.alpha[lq] * (zq - op.z[lq])
    g = (wq * op.a[lq] * np.exp(-2 * A))[:, None] * w0_nodes
    gl = g * uq[:, 1:2]
    gr = g * uq[:, 0:1]
    zero = np.zeros((1, g.shape[1]))
    cl = np.vstack([zero, np.cumsum(gl, axis=0)])
    # I_R summed from the bottom up, not as the total minus a prefix: where the
    # integrand falls by orders of magnitude with depth (high local Peclet numbers) the
    # difference of two O(1) sums loses every digit of a small I_R, and f_bot(z) / Wr
    # multiplies that loss by as much (a constant offset of 4e-7 of the cumulative mass
    # on a Pe ~ 40 boring)
    cr = np.vstack([np.cumsum(gr[::-1], axis=0)[::-1], zero])
    idx = np.searchsorted(zq, z)
    I_L = cl[idx]
    I_R = cr[idx]
    u_e, du_e = lift.evaluate(np.array([0.0]))
    wr = du_e[0, 1] * u_e[0, 0] - u_e[0, 1] * du_e[0, 0]
    u_z, du_z = lift.evaluate(z)
    f_top = (op.q * u_z[:, 0] - du_z[:, 0])[:, None]
    f_bot = (op.q * u_z[:, 1] - du_z[:, 1])[:, None]
    # at very high Peclet numbers the steady responses overflow (inf / inf): the NaN that
    # results is caught by the cross-check, which serves those values from Laplace
    with np.errstate(invalid="ignore", over="ignore"):
        flux = (f_top * I_L + f_bot * I_R) / wr
        if not values:
            return flux
        return flux, (u_z[:, 0:1] * I_L + u_z[:, 1:2] * I_R) / wr


def green_terms(op, lam, K, psi_e, dpsi_e):
    """(K, n) boundary terms of Green's identity, (lambda + eps) c_kn = boundary term +
    source projection (the sources' projections are added by the caller), from psi and
    k psi' at the two ends."""
    green = np.zeros((K, lam.size))
    for k, end, sgn in ((0, "top", -1.0), (1, "bottom", +1.0)):
        c_v, c_p, G = op.v_condition(end)
        j = 0 if end == "top" else 1
        green[k] = sgn * G * (c_p * psi_e[j] - c_v * dpsi_e[j]) / (c_p ** 2 + c_v ** 2)
    return green
