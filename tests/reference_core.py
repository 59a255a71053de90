"""The modal core as it was before the vectorised rewrite (issue 12), kept verbatim as the
reference that the optimised paths are checked against (tests/test_core_paths.py) and
timed against (benchmarks/bench_core.py).  Not part of the package: nothing in
``transport`` imports it.

Pruefer angle: Pruefer 1926; Pryce 1993, "Numerical Solution of Sturm-Liouville
Problems", ch. 2 and 5.  Eigenfunctions by two-sided shooting with closed-form norms.
"""
from __future__ import annotations

import numpy as np

from transport.model.column import Column, InitialState
from transport.solvers.modal.eigenfunctions import Modes
from transport.solvers.modal.lifting import steady_responses
from transport.solvers.modal.operator import (ENDPOINT_FORM_MIN, Operator, SpectrumError,
                                              build_operator, sinc, tanhc)
from transport.solvers.modal.projection import gauss_nodes, initial_profile
from transport.solvers.modal.series import ModalSeries
from transport.solvers.modal.sizing import column_signals

# Root polish: stop when the bracket is this many ulps of lambda wide, or when a Newton
# step is below _ROOT_REL of the eigenvalue (the next one would be at rounding level).
_ROOT_ULPS = 4.0
_ROOT_REL = 1e-11
_NEAR = 1e-6  # |f_j| (rad) below which a small step means convergence
_SEARCH_POINTS = 256  # target points per pass for modes that search their bracket
_MAX_ROOT_ITER = 200
# Grid points for the bracketing pass: n + _GRID_EXTRA.
_GRID_EXTRA = 64
# |w| l below this: series transfer in the fixed scale k/l (keeps d theta/d lambda finite).
_SMALL_X = 1e-3


def _bc_angle(c_v, c_p, scale, right: bool):
    """Angle of the boundary direction (v, p) = (c_p, -c_v) in ``scale``."""
    ang = np.mod(np.arctan2(scale * c_p, -c_v), np.pi)
    if right:
        ang = np.where(ang <= 0.0, np.pi, ang)
    return ang


def _angle_pass(op: Operator, lam: np.ndarray, slope: bool):
    """Pruefer angle theta(L) and right boundary angle beta in a common end scale, and
    optionally d(theta - beta)/d lambda.

    Layer i is stepped in the scale S = k w (angle advances by x = w l) where
    y = w^2 l^2 >= x0^2, in the fixed scale k/l with the scaled hyperbolic transfer where
    y <= -x0^2, and in the scale k/l with the Taylor-series transfer
    [[C, Sn], [-y Sn, C]] (C = cos sqrt(y), Sn = sin sqrt(y)/sqrt(y), entire in y) where
    |y| < x0^2.  At a face the angle moves to the next scale inside its branch
    [n pi, (n+1) pi): theta += atan2((rho - 1) sin cos, cos^2 + rho sin^2), rho = S'/S.
    The slope is propagated by differentiating each of these closed-form maps (Pryce
    1993, ch. 5, for the Pruefer angle derivative); the choice of scales leaves
    theta - beta unchanged, it only keeps every map and its derivative bounded.
    The lambdas are processed in increasing order so each branch is a contiguous slice.
    """
    order = np.argsort(lam, kind="stable")
    ls = lam[order]
    n = ls.size
    ks, ls_, a_, s_ = (op.k.tolist(), op.thickness.tolist(), op.a.tolist(), op.s.tolist())
    x0sq = _SMALL_X * _SMALL_X
    c_v, c_p, _ = op.v_condition("top")
    S_prev = np.full(n, ks[0] / ls_[0])
    theta = np.full(n, float(_bc_angle(c_v, c_p, ks[0] / ls_[0], right=False)))
    dth = np.zeros(n) if slope else None
    g_prev = np.zeros(n) if slope else None  # d log S_prev / d lambda
    for i in range(op.n_layers):
        k, l = ks[i], ls_[i]
        kl = k / l
        yl = a_[i] * l * l / k  # dy/dlambda
        y = ls * yl - s_[i] * l * l / k
        ih = int(np.searchsorted(y, -x0sq, side="left"))  # [:ih] hyperbolic, big x
        it = int(np.searchsorted(y, x0sq, side="left"))  # [it:] trigonometric, big x
        S = np.full(n, kl)
        if it < n:
            x_t = np.sqrt(y[it:])
            S[it:] = kl * x_t
        # move to the new scale inside the branch
        rho = S / S_prev
        sn, cs = np.sin(theta), np.cos(theta)
        sc, ss = sn * cs, sn * sn
        cc = cs * cs
        theta += np.arctan2((rho - 1.0) * sc, cc + rho * ss)
        if slope:
            g = np.zeros(n)
            if it < n:
                g[it:] = 0.5 * yl / y[it:]
            dth = rho * ((g - g_prev) * sc + dth) / (cc + rho * rho * ss)
            g_prev = g
        S_prev = S
        if it < n:  # trigonometric, big x: exact advance
            theta[it:] += x_t
            if slope:
                dth[it:] += 0.5 * yl / x_t
        for lo_, hi_, hyper in ((0, ih, True), (ih, it, False)):
            if hi_ <= lo_:
                continue
            sl = slice(lo_, hi_)
            X, Y = rho[sl] * sn[sl], cs[sl]  # direction in the new scale (not unit)
            yy = y[sl]
            if hyper:
                x = np.sqrt(-yy)
                th = np.tanh(x)
                tc, h = th / x, x * th
                X1, Y1 = X + tc * Y, h * X + Y
                cross, dot = tc * Y * Y - h * X * X, X * X + Y * Y + (h + tc) * X * Y
            else:
                C = 1.0 + yy * (-0.5 + yy / 24.0)
                Sn = 1.0 + yy * (-1.0 / 6.0 + yy / 120.0)
                X1, Y1 = C * X + Sn * Y, C * Y - yy * Sn * X
                cross = Sn * (Y * Y + yy * X * X)
                dot = C * (X * X + Y * Y) + (1.0 - yy) * Sn * X * Y
            if slope:
                d = dth[sl]
                if hyper:
                    dx = -0.5 * yl / x
                    sech2 = 1.0 - th * th
                    dtc, dh = (sech2 - tc) / x * dx, (th + x * sech2) * dx
                    dX1 = Y * d + dtc * Y - tc * X * d
                    dY1 = dh * X + h * Y * d - X * d
                else:
                    dC, dS = -0.5 * Sn * yl, (-1.0 / 6.0 + yy / 60.0) * yl
                    dX1 = dC * X + C * Y * d + dS * Y - Sn * X * d
                    dY1 = -(yl * Sn + yy * dS) * X - yy * Sn * Y * d + dC * Y - C * X * d
                dth[sl] = (Y1 * dX1 - X1 * dY1) / (X1 * X1 + Y1 * Y1)
            theta[sl] += np.arctan2(cross, dot)
    # common, lambda-continuous end scale
    k, l = ks[-1], ls_[-1]
    yl = a_[-1] * l * l / k
    y = ls * yl - s_[-1] * l * l / k
    final = (k / l) * np.sqrt(np.abs(y) + 1.0)
    rho = final / S_prev
    sn, cs = np.sin(theta), np.cos(theta)
    sc, ss, cc = sn * cs, sn * sn, cs * cs
    theta += np.arctan2((rho - 1.0) * sc, cc + rho * ss)
    d_v, d_p, _ = op.v_condition("bottom")
    beta = _bc_angle(d_v, d_p, final, right=True)
    out = np.empty((3 if slope else 2, n))
    out[0, order] = theta
    out[1, order] = beta
    if slope:
        g = 0.5 * np.sign(y) * yl / (np.abs(y) + 1.0)
        dth = rho * ((g - g_prev) * sc + dth) / (cc + rho * rho * ss)
        dbeta = -d_v * d_p * final * g / (d_v * d_v + (final * d_p) ** 2)
        out[2, order] = dth - dbeta
    return out


def _end_angles(op: Operator, lam: np.ndarray):
    """Pruefer angle at z = L and the right boundary angle, in a common scale.

    Returns (theta, beta): eigenvalue number j sits where theta - beta = j pi, and
    theta - beta is continuous with a single crossing of each j pi.
    """
    lam = np.atleast_1d(np.asarray(lam, dtype=float))
    theta, beta = _angle_pass(op, lam.ravel(), slope=False)
    return theta.reshape(lam.shape), beta.reshape(lam.shape)


def count_below(op: Operator, lam) -> np.ndarray:
    """Number of eigenvalues strictly below each ``lam`` (Pruefer count)."""
    theta, beta = _end_angles(op, np.atleast_1d(np.asarray(lam, dtype=float)))
    n = np.ceil((theta - beta) / np.pi - 1e-12)
    return np.maximum(n, 0).astype(np.int64)


def _lambda_guess(op: Operator, n: int):
    """First guesses of lo (count 0) and hi (count >= n), and the lambda scale span:
    below the smallest decay/retardation ratio, and above the Weyl estimate of mode n."""
    base = float(np.min(op.s / op.a))
    span = float(np.max(op.k / op.a)) / float(np.sum(op.thickness)) ** 2
    weyl = float(np.sum(op.thickness * np.sqrt(op.a / op.k)))
    hi = float(np.max(op.s / op.a)) + ((n + 2) * np.pi / weyl) ** 2 + span
    return base - span, hi, span


def _lambda_bounds(op: Operator, n: int):
    """lo with count 0 and hi with count >= n (searching from the first guesses)."""
    lo, hi, span = _lambda_guess(op, n)
    for _ in range(200):
        if count_below(op, lo)[0] == 0:
            break
        lo = lo - 4.0 * (abs(lo) + span)
    else:
        raise SpectrumError("could not find a lower bound of the spectrum")
    for _ in range(200):
        if count_below(op, hi)[0] >= n:
            break
        hi = hi + 2.0 * (hi - lo)
    else:
        raise SpectrumError("could not find an upper bound of the spectrum")
    return lo, hi, span


def eigenvalues(op: Operator, n: int) -> np.ndarray:
    """The ``n`` smallest eigenvalues (1/s), increasing, each to near machine precision.

    The mismatch f_j = theta - beta - j pi has the sign of lambda - lambda_j everywhere
    (the face remaps are increasing maps of each branch onto itself, and in a fixed scale
    theta(L) increases with lambda: Pryce 1993, thm 2.5.3), so one pass of the Pruefer
    angle over a grid brackets every eigenvalue, and each bracket is narrowed by the sign
    of f_j alone, without further counting.
    """
    if n < 1:
        return np.empty(0)
    lo, hi, span = _lambda_guess(op, n)
    for attempt in range(2):
        # grid in sqrt(lambda - lo), where the angle grows about linearly; its two ends
        # check the guessed bounds in the same pass (else search them, and redo)
        grid = lo + np.linspace(0.0, np.sqrt(hi - lo), n + _GRID_EXTRA) ** 2
        theta, beta = _end_angles(op, grid)
        F = theta - beta
        raw = np.ceil(F / np.pi - 1e-12)
        if (raw[0] <= 0 and raw[-1] >= n) or attempt:
            break
        lo, hi, span = _lambda_bounds(op, n)
    counts = np.maximum.accumulate(np.maximum(raw, 0))
    j = np.arange(n)
    i_lo = np.clip(np.searchsorted(counts, j, side="right") - 1, 0, grid.size - 2)
    a, b = grid[i_lo], grid[i_lo + 1]
    fa, fb = F[i_lo] - j * np.pi, F[i_lo + 1] - j * np.pi
    return _polish(op, a, b, fa, fb, j, span)


def _newton_step(f, df):
    """Newton step on tan(f) where |f| < pi/4 (-sin f cos f / f': exact for an isolated
    arctan-shaped angle jump, quadratic otherwise), on f elsewhere; and its validity."""
    good = np.isfinite(df) & (df > 0)
    step = np.where(np.abs(f) < 0.25 * np.pi, -np.sin(f) * np.cos(f), -f)
    return step / np.where(good, df, 1.0), good


def _polish(op, a, b, fa, fb, j, span):
    """Safeguarded Newton iteration on f_j, vectorised over the modes.

    Start: inverse linear interpolation of the angle on the grid bracket (a, b).  A mode
    whose Newton step leaves its bracket, or whose |f_j| falls by less than half far from
    the root, switches to search: its bracket is cut at K equally spaced points in one
    pass (K grows as fewer modes search, so the passes over the layers stay few), then
    Newton restarts from the best sample if its step stays inside.  Searching is what
    finds the narrow jump of the angle near a mode confined to a few layers.  Stop when
    a Newton step near the root is below _ROOT_REL of max(|lambda|, lambda scale), when
    rounding noise stalls the steps, or when the bracket is a few ulps wide.
    """
    eps = np.finfo(float).eps
    den = fb - fa
    x = np.where(den > 0, a - fa * (b - a) / np.where(den > 0, den, 1.0), 0.5 * (a + b))
    x = np.where((x > a) & (x < b), x, 0.5 * (a + b))
    out = x.copy()
    search = np.zeros(x.size, bool)
    dx_prev = np.full(x.size, np.inf)
    f_prev = np.full(x.size, np.inf)
    idx = np.arange(x.size)
    for _ in range(_MAX_ROOT_ITER):
        if idx.size == 0:
            return out
        srch, newt = idx[search[idx]], idx[~search[idx]]
        bits = int(np.clip(np.log2(_SEARCH_POINTS / max(srch.size, 1)), 1, 4))
        K = 2 ** bits - 1
        pts = a[srch, None] + (b - a)[srch, None] * (np.arange(1, K + 1) / (K + 1))
        lam = np.concatenate([x[newt], pts.ravel()])
        theta, beta, df = _angle_pass(op, lam, slope=True)
        f_all = theta - beta - np.concatenate([j[newt], np.repeat(j[srch], K)]) * np.pi
        nn = newt.size
        # Newton modes
        f, xi = f_all[:nn], lam[:nn]
        A = np.where(f < 0, xi, a[newt])
        B = np.where(f > 0, xi, b[newt])
        a[newt], b[newt] = A, B
        step, good = _newton_step(f, df[:nn])
        xn = xi + step
        near = np.abs(f) <= _NEAR
        bad = ~(good & (xn > A) & (xn < B)) | (~near & (np.abs(f) > 0.5 * f_prev[newt]))
        step = np.abs(step)
        scale = np.maximum(np.abs(xi), span)
        # a converged step may round onto the bracket end it came from (xn == xi): it is
        # still converged, so "small" does not require the step to stay strictly inside
        small = near & good & (step <= _ROOT_REL * scale)
        stall = near & ~bad & (step <= 1e-9 * scale) & (step > 0.5 * dx_prev[newt])
        tight = (B - A) <= _ROOT_ULPS * eps * np.maximum(np.abs(A), np.abs(B))
        done_n = small | stall | tight | (f == 0)
        bad &= ~small
        out[newt] = np.where(f == 0, xi, np.where(bad, 0.5 * (A + B), np.clip(xn, A, B)))
        x[newt] = np.where(bad, 0.5 * (A + B), xn)
        dx_prev[newt], f_prev[newt], search[newt] = step, np.abs(f), bad
        # search modes: keep the sub-bracket where f_j changes sign
        fs, ds = f_all[nn:].reshape(-1, K), df[nn:].reshape(-1, K)
        r = np.arange(srch.size)
        kneg = np.count_nonzero(fs < 0, axis=1)
        ends = np.concatenate([a[srch, None], pts, b[srch, None]], axis=1)
        A, B = ends[r, kneg], ends[r, kneg + 1]
        a[srch], b[srch] = A, B
        kl, kr = np.maximum(kneg - 1, 0), np.minimum(kneg, K - 1)
        use_l = (kneg > 0) & ((kneg == K) | (np.abs(fs[r, kl]) < np.abs(fs[r, kr])))
        kk = np.where(use_l, kl, kr)
        fx = fs[r, kk]
        step, good = _newton_step(fx, ds[r, kk])
        xn = pts[r, kk] + step
        ok = good & (xn > A) & (xn < B)
        zero = fx == 0
        x[srch] = np.where(ok, xn, 0.5 * (A + B))
        out[srch] = np.where(zero, pts[r, kk], x[srch])
        search[srch], f_prev[srch], dx_prev[srch] = ~ok, np.abs(fx), np.inf
        tight = (B - A) <= _ROOT_ULPS * eps * np.maximum(np.abs(A), np.abs(B))
        idx = np.concatenate([newt[~done_n], srch[~(zero | tight)]])
    raise SpectrumError(f"{idx.size} eigenvalues did not converge in {_MAX_ROOT_ITER} "
                        "iterations")



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


def evaluate(md, z, exp_sign: int = 0, modes=slice(None)):
    """Previous ``Modes.evaluate``: psi_n(z) exp(exp_sign A(z)) and k psi_n'(z) exp(...)."""
    op = md.op
    z = np.atleast_1d(np.asarray(z, dtype=float))
    lam = md.lam[modes]
    out_f = np.zeros((z.size, lam.size))
    out_p = np.zeros((z.size, lam.size))
    lay = md.layer_of(z)
    for i in np.unique(lay):
        sel = np.flatnonzero(lay == i)
        s = (z[sel] - op.z[i])[:, None]
        f, pp = _layer_values(op, i, lam, md.v[:, modes], md.p[:, modes],
                              md.logs[:, modes], s, exp_sign)
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


class PreviousModes(Modes):
    """Modes whose ``evaluate`` is the previous one."""

    def evaluate(self, z, exp_sign: int = 0, modes=slice(None)):
        return evaluate(self, z, exp_sign, modes)


def build_series(column: Column, initial=None, t_min: float = None, tolerance: float = 1e-8,
                 max_modes: int = 4000, n_modes: int = None, breaks=(), extra_rate=0.0,
                 masses: bool = True, lam=None):
    """Previous ``build_series``: eigen-solve, lifting and projections for ``column``
    with the previous eigenvalues (or ``lam``), eigenfunctions and their evaluation
    (only with ``n_modes`` or ``lam`` given; the sizing loop around the eigen-solve is
    unchanged).

    ``initial`` is an :class:`InitialState` or a callable C0(z) (then give its kinks in
    ``breaks`` and its highest spatial frequency in ``extra_rate``).  With
    ``masses=False`` a clean column without sources skips the quadrature (its
    projections are zero); concentrations and cumulative masses are unchanged, the
    layer masses (budget, decayed mass) are left NaN so they cannot be misread.
    """
    initial = initial if initial is not None else InitialState.clean()
    op = build_operator(column)
    lam = eigenvalues(op, n_modes) if lam is None else np.asarray(lam, dtype=float)
    md = modes(op, lam)
    md = PreviousModes(op=md.op, lam=md.lam, v=md.v, p=md.p, logs=md.logs)
    lam1 = lam[1] if lam.size > 1 else abs(lam[0]) + 1.0
    eps = abs(lam1) if lam[0] <= 1e-9 * max(abs(lam1), 1e-300) else 0.0
    lift = steady_responses(op, eps)
    signals = column_signals(column, op)
    K = len(signals)
    # Green's identity: (lambda + eps) c_kn = boundary term + source projection
    green = np.zeros((K, lam.size))
    psi_e, dpsi_e = md.evaluate(np.array([0.0, op.z[-1]]), exp_sign=0)
    for k, end, sgn in ((0, "top", -1.0), (1, "bottom", +1.0)):
        c_v, c_p, G = op.v_condition(end)
        j = 0 if end == "top" else 1
        green[k] = sgn * G * (c_p * psi_e[j] - c_v * dpsi_e[j]) / (c_p ** 2 + c_v ** 2)
    skip = (not masses and not callable(initial) and initial.kind == "clean"
            and not np.any(op.source))
    if skip:
        undefined = np.full((op.n_layers, lam.size), np.nan)
        return ModalSeries(column=column, op=op, modes=md, lifting=lift, signals=signals,
                           proj0=np.zeros(lam.size), lift_coef=green / (lam + eps)[None, :],
                           mass_modes=undefined, mass_lift=np.full((op.n_layers, K), np.nan),
                           initial=initial)
    if not callable(initial) and initial.kind == "profile":
        breaks = tuple(breaks) + tuple(initial.depths)
    zq, wq, lq = gauss_nodes(op, lam, breaks, extra_rate)
    u0 = initial_profile(column, initial, zq) / op.kappa[lq]
    proj0 = np.zeros(lam.size)
    mass_modes = np.zeros((op.n_layers, lam.size))
    chunk = max(1, 4_000_000 // max(lam.size, 1))
    for start in range(0, zq.size, chunk):
        sl = slice(start, start + chunk)
        psi_m, _ = md.evaluate(zq[sl], exp_sign=-1)
        wa = wq[sl] * op.a[lq[sl]]
        proj0 += (wa * u0[sl]) @ psi_m
        for i in np.unique(lq[sl]):
            if op.source[i] != 0.0:
                sel = lq[sl] == i
                green[2 + i] += (wq[sl][sel] * op.source[i]) @ psi_m[sel]
        psi_p, _ = md.evaluate(zq[sl], exp_sign=+1)
        np.add.at(mass_modes, lq[sl], wa[:, None] * psi_p)
    lift_coef = green / (lam + eps)[None, :]
    u_lift, _ = lift.evaluate(zq)
    mass_lift = np.zeros((op.n_layers, K))
    np.add.at(mass_lift, lq, (wq * op.a[lq])[:, None] * u_lift)
    initial_mass = float(np.sum(wq * op.a[lq] * u0))
    return ModalSeries(column=column, op=op, modes=md, lifting=lift, signals=signals,
                       proj0=proj0, lift_coef=lift_coef, mass_modes=mass_modes,
                       mass_lift=mass_lift, initial=initial, initial_mass=initial_mass,
                       breaks=tuple(breaks), extra_rate=extra_rate)

