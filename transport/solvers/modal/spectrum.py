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
from transport.solvers.modal import kernel
from transport.solvers.modal.brackets import brackets_many, lambda_step, raw_counts
from transport.solvers.modal.transfer import (AngleScales, LayerTerms, Prep, chunks,
                                              end_remap, increments, layer_integrals, shoot)

__all__ = ["count_below", "eigenvalues", "eigenvalues_many"]

# Root polish: stop when the bracket is this many ulps of lambda wide, or when a Newton
# step is below _ROOT_REL of the eigenvalue (the next one would be at rounding level).
_ROOT_ULPS = 4.0
_ROOT_REL = 1e-11
_NEAR = 1e-6  # |f_j| (rad) below which a small step means convergence
_SEARCH_POINTS = 256  # target points per pass for modes that search their bracket
_MAX_ROOT_ITER = 200
# A Halley step below _QUAD_STEP of lambda whose estimated remaining error is below
# _HALLEY_REL of it ends the iteration without another pass.
_QUAD_STEP = 1e-3
# Precision is relative to max(|lambda|, _SPAN_FLOOR x the diffusive scale of the
# column): relative for every eigenvalue but one within 1e-6 of that scale from zero.
_SPAN_FLOOR = 1e-6
_HALLEY_REL = 1e-14
#: Layers from which :func:`eigenvalues` runs in the compiled kernel (where it is
#: available). Measured (500 modes, one process): 2.2x faster than the array code at 20
#: to 100 layers, 2.9x at 1000; at 10 layers x 5000 modes 0.6x (the array code
#: vectorises over the lambdas); loading the compiled library costs 0.3-0.5 s once per
#: process, repaid from about 50 layers on by a run's few eigen-solves.
COMPILED_LAYERS = 50
# Grid points for the bracketing pass: n + _GRID_EXTRA.
_GRID_EXTRA = 64
#: floating-point conditions that the iterations handle themselves (overflowing
#: states of exponentially small modes give a NaN slope, which sends the mode to search)
_QUIET = dict(invalid="ignore", divide="ignore", over="ignore")


def _mismatch(op: Operator, lam: np.ndarray, face=None, slopes: bool = True, prep=None,
              compiled: bool = False, owner=None):
    """Angle mismatch of the two shots at a matching face, its lambda derivative and
    the face used.

    Shooting from the top gives the Pruefer angle phi_L at every face, shooting from the
    bottom the angle phi_R of the solution that meets the bottom condition, lifted so
    that phi_L - phi_R - j pi has the sign of theta(L) - beta - j pi at every face (the
    angle maps of the layers are increasing and commute with a shift by pi); so
    ceil(G / pi) counts the eigenvalues below lambda.  The matching face (where
    ``face`` is negative or None) is the one where the two shots are closest to
    parallel (|v_L p_R - p_L v_R| / (|v_L p_R| + |p_L v_R|) least): near an eigenvalue,
    a face where the mode is large, which neither shot reached through a region where
    it is exponentially small, so a mode confined to a few layers gives a smooth
    mismatch instead of the narrow jump of the end angle.  There the mismatch is
    measured in the natural scale sigma = k |w| of the layer above, in which the angle
    of a uniform layer grows exactly as |w|: its branch from the lifted angles, its value
    from the two states directly (to rounding, whatever the size of the angles).  The
    Wronskian identity p v_lambda - v p_lambda = int_0^z a v^2 (from the top; minus
    int_z^L a v^2 from the bottom) gives d phi / d lambda = (sigma' v p +
    sigma int a v^2) / ((sigma v)^2 + p^2) (Pryce 1993, ch. 2).  The angle change of
    every layer is taken from the shot that reaches it before the face (one pass of the
    angle maps for both shots).

    Without ``slopes`` (counting) the mismatch is measured in the scale that puts the
    top shot at 45 degrees, where it is largest next to an eigenvalue.

    ``owner``: lambda i belongs to operator ``owner[i]`` of the stacked ``prep``
    (:meth:`Prep.select`).  With ``compiled`` (and the compiled kernel available) the
    same arithmetic runs one lambda at a time in :mod:`~transport.solvers.modal.kernel`.

    Returns (G, dG, face), arrays of the size of lam (dG is NaN without ``slopes``).
    """
    whole = Prep(op) if prep is None else prep
    if compiled and kernel.available():
        return kernel.mismatch(whole, lam, face, slopes, owner)
    if owner is not None:
        whole = whole.select(owner)
    m = lam.size
    G, dG, FACE = np.empty(m), np.empty(m), np.empty(m, dtype=np.int64)
    face = np.full(m, -1) if face is None else np.asarray(face)
    rows = whole.rows
    for sl in chunks(whole.n_layers, m):
        prep = whole.select(sl)
        terms = LayerTerms(prep, lam[sl], integrals=slopes)
        best = face[sl].copy()
        VL, PL, LL, VR, PR, LR = shoot(terms)
        sc = AngleScales(terms)
        free = best < 0
        if free.any():
            if free.all():
                vl, pl, vr, pr = VL, PL, VR, PR
            else:
                free = np.flatnonzero(free)
                vl, pl, vr, pr = VL[:, free], PL[:, free], VR[:, free], PR[:, free]
            # how far from parallel the two shots are: sin^2 of the angle between them
            # in a scale-free form
            c1, c2 = vl * pr, pl * vr
            par = c1 - c2
            par *= par
            c1 *= c1
            c2 *= c2
            c1 += c2
            par /= c1
            par[np.isnan(par)] = 2.0
            best[free] = np.argmin(par, axis=0)
        cols = np.arange(best.size)
        vl, pl, vr, pr = VL[best, cols], PL[best, cols], VR[best, cols], PR[best, cols]
        S = sc.S[best, cols]
        # the natural scale sigma = k |w| of the layer above the face (below the top
        # face), a smooth function of lambda, and its derivative
        lay = np.maximum(best - 1, 0)
        w2 = terms.w2[lay, cols]
        k_lay = prep.at(prep.k, lay, cols)
        nat = k_lay * np.sqrt(np.abs(w2))
        sig = np.where(nat > 0, nat, S)
        if not slopes:
            # the scale that puts the top shot at 45 degrees: the most sensitive one
            bal = np.abs(pl / vl)
            sig = np.where(np.isfinite(bal) & (bal > 0), bal, sig)
        # every layer from the shot that reaches it before the face
        left = rows < best
        V = np.where(left, VL[:-1], VR[:-1])
        P = np.where(left, PL[:-1], PR[:-1])
        inc = increments(terms, sc, V, P, (~left, VR[1:], PR[1:]))
        rho = sig / S
        lifted = (sc.theta0 - sc.beta + end_remap(sc, VR[-1], PR[-1]) + inc.sum(axis=0)
                  + _remap(S * vl, pl, rho) - _remap(S * vr, pr, rho))
        delta = np.arctan2(sig * (vl * pr - pl * vr), sig * sig * vl * vr + pl * pr)
        delta -= np.pi * np.round(delta / np.pi)
        G[sl] = delta + np.pi * np.round((lifted - delta) / np.pi)
        FACE[sl] = best
        if not slopes:
            dG[sl] = np.nan
            continue
        # int a v^2 from each end to the face, in units of the state's size there
        L = np.where(left, LL[:-1], LR[:-1])

        def bottom(r):
            lr = left[r]
            return np.where(lr, VL[r + 1], VR[r + 1]), np.where(lr, LL[r + 1], LR[r + 1])
        I, lg = layer_integrals(terms, V, P, L, bottom)
        rl, rr = (sig * vl) ** 2 + pl * pl, (sig * vr) ** 2 + pr * pr
        ref = np.where(left, 2.0 * LL[best, cols] + np.log(rl),
                       2.0 * LR[best, cols] + np.log(rr))
        lg -= ref
        np.exp(lg, out=lg)
        lg *= I
        lg *= prep.a
        dsig = (np.where(nat > 0, np.sign(w2) * k_lay * prep.at(prep.a, lay, cols), 0.0)
                / (2.0 * sig))
        dG[sl] = sig * lg.sum(axis=0) + dsig * (vl * pl / rl - vr * pr / rr)
    return G, dG, FACE


def _remap(X, Y, rho):
    """Angle change of the direction atan2(X, Y) when X is multiplied by rho > 0, inside
    its branch (in (-pi/2, pi/2))."""
    return np.arctan2((rho - 1.0) * X * Y, Y * Y + rho * X * X)


def count_below(op: Operator, lam) -> np.ndarray:
    """Number of eigenvalues strictly below each ``lam`` (Pruefer count, from the
    two-shot mismatch: ceil(G / pi), see :func:`_mismatch`)."""
    lam = np.atleast_1d(np.asarray(lam, dtype=float))
    with np.errstate(**_QUIET):
        G = _mismatch(op, lam.ravel(), slopes=False)[0].reshape(lam.shape)
    n = raw_counts(G)
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
    angle over a grid brackets every eigenvalue; the same pass shoots from both ends, so
    each root starts from a Newton step on the two-shot mismatch (:func:`_mismatch`,
    of the same sign as f_j) at the better end of its bracket, or from the root of the
    cubic through both ends where they were matched at the same face.

    A column of :data:`COMPILED_LAYERS` layers or more runs its passes in the compiled
    kernel where it is available (the same eigenvalues to rounding, 2-3x faster); fewer
    layers keep the array code, which vectorises over the lambdas and whose first call
    does not load the compiled kernel's library (a few tenths of a second, once per
    process).
    """
    many = op.n_layers >= COMPILED_LAYERS
    return eigenvalues_many([op], [n], compiled=many and kernel.available())[0]


def eigenvalues_many(ops, ns, compiled: bool = False) -> list:
    """:func:`eigenvalues` of several operators: ``ns[r]`` eigenvalues of ``ops[r]``.

    Operators with the same number of layers share every pass over the layers (their
    grids, then their unconverged modes, side by side in one array: :meth:`Prep.stack`),
    which costs about as much as one operator's pass when the layers are few (a boring's
    Monte Carlo columns).  Each lambda is computed exactly as for its own operator.
    ``compiled``: the passes run in the compiled kernel where it is available (the
    same eigenvalues to rounding; see :func:`_mismatch`).
    """
    out = [np.empty(0)] * len(ops)
    groups = {}
    for r, (op, n) in enumerate(zip(ops, ns)):
        if n >= 1:
            groups.setdefault(op.n_layers, []).append(r)
    for members in groups.values():
        lams = _solve_group([ops[r] for r in members], [ns[r] for r in members], compiled)
        for r, lam in zip(members, lams):
            out[r] = lam
    return out


def _solve_group(ops, ns, compiled=False):
    """Eigenvalues of operators with the same number of layers (see
    :func:`eigenvalues_many`)."""
    preps = [Prep(op) for op in ops]
    whole = preps[0] if len(ops) == 1 else Prep.stack(preps)
    with np.errstate(**_QUIET):
        # grid in sqrt(lambda - lo), where the angle grows about linearly; its two ends
        # check the guessed bounds in the same pass (else search them, and redo alone)
        guess = [_lambda_guess(op, n) for op, n in zip(ops, ns)]
        grids = [_grid(lo, hi, n) for (lo, hi, _), n in zip(guess, ns)]
        owner = np.repeat(np.arange(len(ops)), [g.size for g in grids])
        G, dG, face = _mismatch(None, np.concatenate(grids), prep=whole, owner=owner,
                                compiled=compiled)
        # every member bracketed in one call; a member whose guessed bounds fail is
        # redone on its own grid between searched bounds first
        members, los, spans, start = [], [], [], 0
        for r, (op, n) in enumerate(zip(ops, ns)):
            lo, _, span = guess[r]
            sl = slice(start, start + grids[r].size)
            start = sl.stop
            g = (grids[r], G[sl], dG[sl], face[sl])
            raw = raw_counts(g[1])
            if not (raw[0] <= 0 and raw[-1] >= n):
                lo, hi, span = _lambda_bounds(op, n)
                grid = _grid(lo, hi, n)
                g = (grid,) + _mismatch(op, grid, prep=preps[r], compiled=compiled)
            members.append(g)
            los.append(lo)
            spans.append(span)
        found = brackets_many(*(np.concatenate(v) for v in zip(*members)), ns, los,
                              [g[0].size for g in members])
        parts = [found[r] + (np.full(n, los[r]), np.full(n, _SPAN_FLOOR * spans[r]),
                             np.full(n, r)) for r, n in enumerate(ns)]
        a, b, x, j, used, mu, slope, lo, floor, own = (np.concatenate(v) for v in zip(*parts))
        lam = _polish(whole, own, a, b, x, j, floor, lo, (used, mu, slope), compiled)
    return np.split(lam, np.cumsum(ns)[:-1])


def _grid(lo, hi, n):
    """n + _GRID_EXTRA points from lo to hi, uniform in sqrt(lambda - lo)."""
    return lo + np.linspace(0.0, np.sqrt(hi - lo), n + _GRID_EXTRA) ** 2




def _polish(prep, owner, a, b, x, j, floor, lo, start, compiled=False):
    """Safeguarded Newton-Halley iteration on the mismatch f_j, vectorised over modes.

    Start: x inside the bracket (a, b), and ``start`` = (face, mu, slope in mu) of the
    grid point it was reached from; mode i belongs to operator ``owner[i]`` of ``prep``
    (:meth:`Prep.stack`), whose lower bound is ``lo[i]`` and eigenvalue scale floor
    ``floor[i]`` (per mode).  Each pass evaluates the two-shot mismatch
    (:func:`_mismatch`); a mode keeps its matching face from one pass to the next, so
    that the change of the slope between two passes gives the curvature, and the
    Halley step (Halley 1694; the cubically convergent correction of Newton's step,
    e.g. Press et al. 2007, Numerical Recipes, sec. 9.4) is taken once the curvature is
    known; steps are taken in mu = sqrt(lambda - lo).  A mode whose step leaves its
    bracket, or whose |f_j| falls by less than half far from the root, switches to
    search: its bracket is cut at K equally spaced points in one pass (K grows as fewer
    modes search, so the passes over the layers stay few), then the iteration restarts
    from the best sample, at a face chosen afresh.  Stop when a step near the root is
    below _ROOT_REL of max(|lambda|, _SPAN_FLOOR lambda scale); when the error left
    after the Halley step (estimated from the curvature and its change) is below
    _HALLEY_REL of it; when rounding noise stalls the steps; or when the bracket is a
    few ulps wide.
    """
    eps = np.finfo(float).eps
    n = x.size
    out = x.copy()
    search = np.zeros(n, bool)
    f_prev = np.full(n, np.inf)
    dx_prev = np.full(n, np.inf)
    face = np.full(n, -1)  # the face the next pass matches at (-1: its own choice)
    # the last point evaluated (mu, slope in mu, the face it matched at): at first the
    # grid end the start came from
    used, mu_old, d_old = (np.array(v) for v in start)
    jpi = j * np.pi
    idx = np.arange(n)
    for _ in range(_MAX_ROOT_ITER):
        if idx.size == 0:
            return out
        srch_mask = search[idx]
        if srch_mask.any():
            srch, newt = idx[srch_mask], idx[~srch_mask]
            bits = int(np.clip(np.log2(_SEARCH_POINTS / srch.size), 1, 4))
            K = 2 ** bits - 1
            pts = a[srch, None] + (b - a)[srch, None] * (np.arange(1, K + 1) / (K + 1))
            lam = np.concatenate([x[newt], pts.ravel()])
            fc = np.concatenate([face[newt], np.full(pts.size, -1)])
            own = np.concatenate([owner[newt], np.repeat(owner[srch], K)])
        else:
            srch, newt = idx[:0], idx
            lam, fc, own = x[newt], face[newt], owner[newt]
        nn = newt.size
        G, df, fc = _mismatch(None, lam, fc, prep=prep, owner=own, compiled=compiled)
        # Newton modes
        f, xi, d = G[:nn] - jpi[newt], lam[:nn], df[:nn]
        A = np.where(f < 0, xi, a[newt])
        B = np.where(f > 0, xi, b[newt])
        a[newt], b[newt] = A, B
        _, good, mu, dmu, smu = lambda_step(f, d, xi, lo[newt])
        scale = np.maximum(np.abs(xi), floor[newt])
        # curvature in mu from the slopes at the last two points of the same face
        mo = mu_old[newt]
        same = (fc[:nn] == used[newt]) & (mo != mu)  # mo is NaN where there is none
        curv = np.where(same, (dmu - d_old[newt]) / (mu - mo), 0.0)
        c2 = curv / (2.0 * dmu)
        h = smu * c2  # Halley: step / (1 + h)
        halley = same & good & (np.abs(h) < 0.5)
        smu = np.where(halley, smu / (1.0 + h), smu)
        # error left after the Halley step: cubic term and the curvature's own error
        err = c2 * c2 * (2.0 * np.abs(smu) + np.abs(mu - mo)) * smu * smu * (2.0 * mu)
        step = smu * (2.0 * mu + smu)
        xn = xi + step
        af = np.abs(f)
        near = af <= _NEAR
        bad = ~(good & (xn > A) & (xn < B)) | (~near & (af > 0.5 * f_prev[newt]))
        step = np.abs(step)
        # a converged step may round onto the bracket end it came from (xn == xi): it is
        # still converged, so "small" does not require the step to stay strictly inside
        small = near & good & (step <= _ROOT_REL * scale)
        cubic = (near & halley & ~bad & (step <= _QUAD_STEP * scale)
                 & (err <= _HALLEY_REL * scale))
        stall = near & ~bad & (step <= 1e-9 * scale) & (step > 0.5 * dx_prev[newt])
        tight = (B - A) <= _ROOT_ULPS * eps * np.maximum(np.abs(A), np.abs(B))
        zero = f == 0
        done_n = small | cubic | stall | tight | zero
        bad &= ~(small | cubic)
        mid = 0.5 * (A + B)
        out[newt] = np.where(zero, xi, np.where(bad, mid, np.clip(xn, A, B)))
        x[newt] = np.where(bad, mid, xn)
        dx_prev[newt], f_prev[newt], search[newt] = step, af, bad
        mu_old[newt], d_old[newt], used[newt] = mu, dmu, fc[:nn]
        face[newt] = np.where(bad, -1, fc[:nn])
        if srch.size:
            done_s = _search_update(srch, pts, K, G[nn:] - np.repeat(jpi[srch], K), df[nn:],
                                    a, b, x, out, search, f_prev, dx_prev, face, mu_old,
                                    lo[srch])
            idx = np.concatenate([newt[~done_n], srch[~done_s]])
        else:
            idx = newt[~done_n]
    raise SpectrumError(f"{idx.size} eigenvalues did not converge in {_MAX_ROOT_ITER} "
                        "iterations")


def _search_update(srch, pts, K, f_all, df, a, b, x, out, search, f_prev, dx_prev, face,
                   mu_old, lo):
    """Searching modes: keep the sub-bracket where f_j changes sign, restart Newton from
    the best sample if its step stays inside (else bisect once more)."""
    fs, ds = f_all.reshape(-1, K), df.reshape(-1, K)
    r = np.arange(srch.size)
    kneg = np.count_nonzero(fs < 0, axis=1)
    ends = np.concatenate([a[srch, None], pts, b[srch, None]], axis=1)
    A, B = ends[r, kneg], ends[r, kneg + 1]
    a[srch], b[srch] = A, B
    kl, kr = np.maximum(kneg - 1, 0), np.minimum(kneg, K - 1)
    use_l = (kneg > 0) & ((kneg == K) | (np.abs(fs[r, kl]) < np.abs(fs[r, kr])))
    kk = np.where(use_l, kl, kr)
    fx = fs[r, kk]
    step, good = lambda_step(fx, ds[r, kk], pts[r, kk], lo)[:2]
    xn = pts[r, kk] + step
    ok = good & (xn > A) & (xn < B)
    zero = fx == 0
    x[srch] = np.where(ok, xn, 0.5 * (A + B))
    out[srch] = np.where(zero, pts[r, kk], x[srch])
    search[srch], f_prev[srch], dx_prev[srch] = ~ok, np.abs(fx), np.inf
    # the next pass chooses its face afresh (a sample's face is not kept)
    face[srch], mu_old[srch] = -1, np.nan
    eps = np.finfo(float).eps
    return zero | ((B - A) <= _ROOT_ULPS * eps * np.maximum(np.abs(A), np.abs(B)))
