"""Compiled code of :mod:`transport.solvers.modal.kernel` (imports numba: loaded only
when the compiled mismatch is asked for).  The equations and their order are those of
transfer.py (LayerTerms, shoot, AngleScales, increments, end_remap, layer_integrals)
and spectrum._mismatch, one lambda at a time; :func:`modes` those of
eigenfunctions._shot_modes (shots, matching face, normalisation, closed-form norms)."""
import math

import numba
import numpy as np

SMALL_X = 1e-3  # as transfer.SMALL_X
ENDPOINT = 1.0  # as operator.ENDPOINT_FORM_MIN
EVERY = 8  # as transfer._RESCALE_EVERY
LOG2 = math.log(2.0)
_JIT = dict(cache=True, nogil=True, error_model="numpy")


@numba.njit(**_JIT)
def _series(y2, sign):
    return 4.0 * (1 / 6 + sign * y2 / 120 + y2 ** 2 / 5040 + sign * y2 ** 3 / 362880
                  + y2 ** 4 / 39916800)


@numba.njit(**_JIT)
def _terms(lam, r, k, l, a, s, kl, lk, mkl, hl, hl3, l2, slopes, w2, x, trig, c, b12,
           b21, logc, big, alpha, beta, gamma):
    """LayerTerms of one lambda (operator column r)."""
    nL = k.shape[0]
    for i in range(nL):
        wi = (lam * a[i, r] - s[i, r]) / k[i, r]
        xi = math.sqrt(abs(wi)) * l[i, r]
        t = math.tan(xi * 0.5)
        tt = t * t
        d = tt + 1.0
        cs = (1.0 - tt) / d
        sn = (t + t) / d
        sincx = sn / xi if xi > 0 else 1.0
        w2[i], x[i] = wi, xi
        th = not (wi > 0)
        trig[i] = not th
        big[i] = False
        logc[i] = 0.0
        if th:
            c[i] = 1.0
            tc = 1.0 - xi * xi / 3.0 if xi < 1e-4 else math.tanh(xi) / xi
            b12[i] = lk[i, r] * tc
            b21[i] = kl[i, r] * xi * math.tanh(xi)
            if xi > 1.0:
                big[i] = True
                logc[i] = xi
            else:
                logc[i] = xi + math.log1p(math.exp(-2 * xi)) - LOG2
        else:
            c[i] = cs
            b12[i] = lk[i, r] * sincx
            b21[i] = mkl[i, r] * wi * sincx
        if not slopes:
            continue
        if th:
            xh = min(xi, ENDPOINT)
            xs = 1.0 if xh < 1e-8 else xh
            sh = 1.0 if xh < 1e-8 else math.sinh(xs) / xs
            sh2 = 1.0 if xh < 1e-8 else math.sinh(2 * xs) / (2 * xs)
            m2h = _series(4.0 * xh * xh, 1.0) if xh < 0.1 else (sh2 - 1.0) / (xs * xs)
            li = l[i, r]
            alpha[i] = 0.5 * li * (1.0 + sh2)
            gamma[i] = 0.5 * li ** 3 * m2h
            beta[i] = li * li * sh * sh
        else:
            sinc2 = sn * cs / xi if xi > 0 else 1.0
            alpha[i] = (1.0 + sinc2) * hl[i, r]
            if xi < 0.1:
                m2 = _series(4.0 * xi * xi, -1.0)
            else:
                m2 = (1.0 - sinc2) / (xi * xi)
            gamma[i] = hl3[i, r] * m2
            beta[i] = sincx * sincx * l2[i, r]


@numba.njit(**_JIT)
def _shoot(down, every, r, k, kl, ends, w2, x, c, b12, b21, logc, big, V, P, L):
    """One shot into V, P, L (N+1); False where a norm was not finite and positive."""
    nL = c.size
    j0 = 0 if down else nL
    sh = 0 if down else 1
    V[j0], P[j0], L[j0] = ends[sh, 0, r], ends[sh, 1, r], 0.0
    acc = 0.0
    ok = True
    for step in range(1, nL + 1):
        i = step - 1 if down else nL - step
        jin, jout = (i, i + 1) if down else (i + 1, i)
        v, p = V[jin], P[jin]
        if down:
            ov = c[i] * v + b12[i] * p
            op = c[i] * p + b21[i] * v
        else:
            ov = c[i] * v - b12[i] * p
            op = c[i] * p - b21[i] * v
        if big[i]:
            kb = k[i, r] * math.sqrt(abs(w2[i]))
            g = 0.5 * (v + p / kb)
            h = 0.5 * (v - p / kb)
            damp = math.exp(-2 * x[i])
            if down:
                h = h * damp
            else:
                g = g * damp
            ov = g + h
            op = kb * (g - h)
        acc += logc[i]
        if step % every == 0 or step == nL:
            nrm = math.hypot(kl[i, r] * ov, op)
            ov /= nrm
            op /= nrm
            if not (math.isfinite(nrm) and nrm > 0):
                ok = False
            acc += math.log(nrm)
        V[jout], P[jout], L[jout] = ov, op, acc
    return ok


@numba.njit(**_JIT)
def _endpoint_integral(v0, v1, L0, L1, x, w2, l):
    """int v^2 over a thick evanescent layer from the states v0 e^{L0} and v1 e^{L1} at
    its faces (two-exponential form, as transfer.layer_integrals): (I, lg), the
    integral being I e^{lg}."""
    lm = max(L0, L1)
    V0 = v0 * math.exp(L0 - lm)
    V1 = v1 * math.exp(L1 - lm)
    e = math.exp(-x)
    det = -math.expm1(-2 * x)
    E = (V0 - V1 * e) / det
    F = (V1 - V0 * e) / det
    w = math.sqrt(abs(w2))
    ws = w if w > 0 else 1.0
    return (E * E + F * F) * det / (2 * ws) + 2 * E * F * l * e, 2.0 * lm


@numba.njit(**_JIT)
def _layer_scratch(nL):
    """Per-layer work arrays of one lambda: w2, x, c, b12, b21, logc, alpha, beta,
    gamma (float) and trig, big (bool)."""
    lay = np.empty((9, nL))
    return (lay[0], lay[1], lay[2], lay[3], lay[4], lay[5], lay[6], lay[7], lay[8],
            np.empty(nL, np.bool_), np.empty(nL, np.bool_))


@numba.njit(**_JIT)
def _terms_and_shots(lam, r, k, l, a, s, kl, lk, mkl, hl, hl3, l2, slopes, ends, w2, x,
                     trig, c, b12, b21, logc, big, alpha, beta, gamma, VL, PL, LL, VR,
                     PR, LR):
    """LayerTerms of one lambda, then both shots (a shot whose rescaling norm is not
    finite is redone rescaled at every face)."""
    _terms(lam, r, k, l, a, s, kl, lk, mkl, hl, hl3, l2, slopes, w2, x, trig, c, b12, b21,
           logc, big, alpha, beta, gamma)
    if not _shoot(True, EVERY, r, k, kl, ends, w2, x, c, b12, b21, logc, big, VL, PL, LL):
        _shoot(True, 1, r, k, kl, ends, w2, x, c, b12, b21, logc, big, VL, PL, LL)
    if not _shoot(False, EVERY, r, k, kl, ends, w2, x, c, b12, b21, logc, big, VR, PR, LR):
        _shoot(False, 1, r, k, kl, ends, w2, x, c, b12, b21, logc, big, VR, PR, LR)


@numba.njit(**_JIT)
def _remap(X, Y, rho):
    return math.atan2((rho - 1.0) * X * Y, Y * Y + rho * X * X)


@numba.njit(**_JIT)
def _bc_angle(c_v, c_p, scale):
    ang = np.fmod(math.atan2(scale * c_p, -c_v), math.pi)
    if ang < 0:
        ang += math.pi
    return math.pi if ang <= 0.0 else ang


@numba.njit(**_JIT)
def mismatch(lam, face_in, owner, slopes, k, l, a, s, kl, lk, mkl, hl, hl3, l2, ends, kl_last,
             kl0, theta0, d_v, d_p, G, dG, FACE):
    """spectrum._mismatch at every lambda into G, dG, FACE: lambda j belongs to the
    operator in column owner[j] of the layer arrays (nL, R) and of the end constants."""
    m = lam.size
    nL = k.shape[0]
    w2, x, c, b12, b21, logc, alpha, beta, gamma, trig, big = _layer_scratch(nL)
    face7 = np.empty((7, nL + 1))
    VL, PL, LL, VR, PR, LR, S = (face7[0], face7[1], face7[2], face7[3], face7[4],
                                 face7[5], face7[6])
    for j in range(m):
        r = owner[j]
        _terms_and_shots(lam[j], r, k, l, a, s, kl, lk, mkl, hl, hl3, l2, slopes, ends,
                         w2, x, trig, c, b12, b21, logc, big, alpha, beta, gamma,
                         VL, PL, LL, VR, PR, LR)
        # angle scales
        S[0] = kl0[r]
        for i in range(nL):
            S[i + 1] = kl[i, r] * x[i] if (trig[i] and x[i] >= SMALL_X) else kl[i, r]
        final = kl_last[r] * math.sqrt(x[nL - 1] * x[nL - 1] + 1.0)
        bc = _bc_angle(d_v[r], d_p[r], final)
        # the matching face
        best = face_in[j]
        if best < 0:
            best, low = 0, np.inf
            for f in range(nL + 1):
                c1, c2 = VL[f] * PR[f], PL[f] * VR[f]
                par = (c1 - c2) * (c1 - c2) / (c1 * c1 + c2 * c2)
                if math.isnan(par):
                    par = 2.0
                if par < low:
                    best, low = f, par
        vl, pl, vr, pr, Sb = VL[best], PL[best], VR[best], PR[best], S[best]
        lay = max(best - 1, 0)
        k_lay = k[lay, r]
        nat = k_lay * math.sqrt(abs(w2[lay]))
        sig = nat if nat > 0 else Sb
        if not slopes:
            bal = abs(pl / vl)
            if math.isfinite(bal) and bal > 0:
                sig = bal
        # the angle change of every layer from the shot that reaches it first
        total = 0.0
        for i in range(nL):
            left = i < best
            v, p = (VL[i], PL[i]) if left else (VR[i], PR[i])
            rho = S[i + 1] / S[i]
            A = S[i] * v
            d = math.atan2(A * p * (rho - 1.0), p * p + A * A * rho)
            xi = x[i]
            if trig[i] and xi >= SMALL_X:
                d += xi
            else:
                X, Y = kl[i, r] * v, p
                if (not trig[i]) and xi >= SMALL_X:  # hyperbolic, else the series
                    th = math.tanh(xi)
                    tc, h = th / xi, xi * th
                    if left:
                        cross = tc * Y * Y - h * X * X
                        dot = X * X + Y * Y + (h + tc) * X * Y
                    else:
                        X1, Y1 = kl[i, r] * VR[i + 1], PR[i + 1]
                        cross = tc * Y1 * Y1 - h * X1 * X1
                        dot = X1 * X1 + Y1 * Y1 - (h + tc) * X1 * Y1
                else:
                    yy = (1.0 if trig[i] else -1.0) * xi * xi
                    Cs = 1.0 + yy * (-0.5 + yy / 24.0)
                    Sn = 1.0 + yy * (-1.0 / 6.0 + yy / 120.0)
                    cross = Sn * (Y * Y + yy * X * X)
                    dot = Cs * (X * X + Y * Y) + (1.0 - yy) * Sn * X * Y
                d += math.atan2(cross, dot)
            total += d
        rho_e = final / S[nL]
        end = _remap(S[nL] * VR[nL], PR[nL], rho_e)
        rb = sig / Sb
        lifted = (theta0[r] - bc + end + total + _remap(Sb * vl, pl, rb)
                  - _remap(Sb * vr, pr, rb))
        delta = math.atan2(sig * (vl * pr - pl * vr), sig * sig * vl * vr + pl * pr)
        delta -= math.pi * np.rint(delta / math.pi)
        G[j] = delta + math.pi * np.rint((lifted - delta) / math.pi)
        FACE[j] = best
        if not slopes:
            dG[j] = np.nan
            continue
        # int a v^2 from each end to the face, in units of the state's size there
        rl = (sig * vl) ** 2 + pl * pl
        rr = (sig * vr) ** 2 + pr * pr
        ref_l = 2.0 * LL[best] + math.log(rl)
        ref_r = 2.0 * LR[best] + math.log(rr)
        acc = 0.0
        for i in range(nL):
            left = i < best
            if left:
                v, p, L0, v1, L1, ref = VL[i], PL[i], LL[i], VL[i + 1], LL[i + 1], ref_l
            else:
                v, p, L0, v1, L1, ref = VR[i], PR[i], LR[i], VR[i + 1], LR[i + 1], ref_r
            if (not trig[i]) and x[i] > ENDPOINT:
                I, lg = _endpoint_integral(v, v1, L0, L1, x[i], w2[i], l[i, r])
            else:
                pk = p / k[i, r]
                I = alpha[i] * v * v + gamma[i] * pk * pk + beta[i] * v * pk
                lg = 2.0 * L0
            acc += math.exp(lg - ref) * I * a[i, r]
        dsig = 0.0
        if nat > 0:
            dsig = (1.0 if w2[lay] > 0 else (-1.0 if w2[lay] < 0 else 0.0)) * k_lay * a[lay, r]
        dsig /= 2.0 * sig
        dG[j] = sig * acc + dsig * (vl * pl / rl - vr * pr / rr)


@numba.njit(**_JIT)
def modes(lam, owner, k, l, a, s, kl, lk, mkl, hl, hl3, l2, ends, la, V, P, Ls):
    """eigenfunctions._shot_modes, one lambda at a time: the face states (v, p) and
    log-scales of the normalised eigenfunction of lam[j] (operator owner[j]) into
    column j of V, P, Ls (N+1, m)."""
    m = lam.size
    nL = k.shape[0]
    w2, x, c, b12, b21, logc, alpha, beta, gamma, trig, big = _layer_scratch(nL)
    face9 = np.empty((9, nL + 1))
    VL, PL, LL, VR, PR, LR, Vc, Pc, Lc = (face9[0], face9[1], face9[2], face9[3], face9[4],
                                          face9[5], face9[6], face9[7], face9[8])
    parts = np.empty(nL)
    for j in range(m):
        r = owner[j]
        _terms_and_shots(lam[j], r, k, l, a, s, kl, lk, mkl, hl, hl3, l2, True, ends,
                         w2, x, trig, c, b12, b21, logc, big, alpha, beta, gamma,
                         VL, PL, LL, VR, PR, LR)
        # the face where both shots agree best (least |sin| of the angle between them),
        # not the bottom face, which the bottom shot meets exactly
        js, low = 0, np.inf
        for f in range(nL):
            sc = kl[f, r]
            XL, XR = sc * VL[f], sc * VR[f]
            cross = abs(XL * PR[f] - PL[f] * XR)
            cross /= math.sqrt(XL * XL + PL[f] * PL[f])
            cross /= math.sqrt(XR * XR + PR[f] * PR[f])
            if cross < low:
                js, low = f, cross
        sc = kl[js, r]
        xl, pl, xr, pr = sc * VL[js], PL[js], sc * VR[js], PR[js]
        coef = (xl * xr + pl * pr) / (xr * xr + pr * pr)
        sign = 1.0 if coef >= 0 else -1.0
        shift = LL[js] - LR[js] + math.log(abs(coef) + 1e-300)
        for f in range(nL + 1):
            sc = kl[min(f, nL - 1), r]
            if f <= js:
                v, p, lg = VL[f], PL[f], LL[f]
            else:
                v, p, lg = sign * VR[f], sign * PR[f], LR[f] + shift
            X = sc * v
            nrm = math.sqrt(X * X + p * p)
            Vc[f], Pc[f], Lc[f] = v / nrm, p / nrm, lg + math.log(nrm)
        # log of the weighted norm sum_i a_i int psi^2 (closed form per layer)
        top = -np.inf
        for i in range(nL):
            v0 = Vc[i]
            pk = Pc[i] / k[i, r]
            integral = alpha[i] * v0 * v0 + gamma[i] * pk * pk + beta[i] * v0 * pk
            lg = 2.0 * Lc[i]
            if (not trig[i]) and x[i] > ENDPOINT:
                L0, L1 = Lc[i], Lc[i + 1]
                integral, lg = _endpoint_integral(v0, Vc[i + 1], L0, L1, x[i], w2[i], l[i, r])
            parts[i] = math.log(max(integral, 1e-300)) + lg + la[i, r]
            top = max(top, parts[i])
        total = 0.0
        for i in range(nL):
            total += math.exp(parts[i] - top)
        half = 0.5 * (top + math.log(total))
        for f in range(nL + 1):
            V[f, j], P[f, j], Ls[f, j] = Vc[f], Pc[f], Lc[f] - half
