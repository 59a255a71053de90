"""Exact spectrum of the layered transport operator.

The layered equation (see :mod:`transport.model.column`)

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
is bracketed on the count from one pass over a grid and polished by a safeguarded
Newton iteration on the (continuous, single-crossing) angle mismatch, with its
derivative propagated in closed form through every layer, vectorised across modes.

Eigenfunctions are obtained by shooting from both ends with normalised states and a
running log-scale, and joined at the face where the two shots agree best; this keeps
exponentially decaying modes (high contrast, high Peclet) accurate.  Weighted norms are
in closed form.
"""
from __future__ import annotations

import numpy as np

from transport.solvers.modal.operator import Operator, SpectrumError

__all__ = ["count_below", "eigenvalues"]

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

