"""Compiled code of :mod:`transport.solvers.laplace.kernel` (imports numba: loaded only
when the compiled transfer is asked for)."""
import numba
import numpy as np

CAP = 600.0  # as transfer._EXP_CAP


@numba.njit(cache=True, nogil=True)
def cabs1(z):
    return abs(z.real) + abs(z.imag)


@numba.njit(cache=True, nogil=True)
def transfer(s, k, c, mu, l, K, a0, b0, src, q, semi, last_clean, kinds, h, target,
             idx, zeta, C, F, st, capped):
    """The transforms at s (ns,) into C, F (ns, nz), st (nseg, ns) and capped (ns,):
    see :func:`transport.solvers.laplace.kernel.evaluate` (segments k, c, mu, l, K;
    a0, b0, src (nseg, ns) the initial state's and the sources' terms; kinds, h,
    target (2, ns) the boundary rows; idx, zeta the depths' segments and local depths)."""
    ns, n, nz = s.size, k.size, idx.size
    N = 2 * n
    r = np.empty((2, n), np.complex128)
    anc = np.empty((2, n))
    alpha = np.empty(n, np.complex128)
    beta = np.empty(n, np.complex128)
    ab = np.empty((N, 7), np.complex128)  # entry (row, col) at ab[row, 2 + col - row]
    x = np.empty(N, np.complex128)
    for j in range(ns):
        sj = s[j]
        cap = False
        for i in range(n):
            sm = sj + mu[i]
            root = np.sqrt(q * q + 4 * k[i] * c[i] * sm)
            if q >= 0:
                r1 = (q + root) / (2 * k[i])
                r2 = -2 * c[i] * sm / (q + root)
            else:
                r2 = (q - root) / (2 * k[i])
                r1 = -2 * c[i] * sm / (q - root)
            r[0, i] = r1
            r[1, i] = r2
            for m in range(2):
                anc[m, i] = l[i] if r[m, i].real >= 0 else 0.0
            # particular solution alpha + beta zeta of
            # k P'' - q P' - c sm P = -c (a0 + b0 zeta) - sigma^
            beta[i] = (c[i] * b0[i, j]) / (c[i] * sm)
            alpha[i] = (c[i] * a0[i, j] + src[i, j] - q * beta[i]) / (c[i] * sm)
        if semi:
            anc[1, n - 1] = 0.0
        for i in range(N):
            for b in range(7):
                ab[i, b] = 0.0
            x[i] = 0.0
        # the two boundary rows
        for end in range(2):
            i = 0 if end == 0 else n - 1
            row = 0 if end == 0 else N - 1
            if end == 1 and semi:
                ab[row, 2 + (N - 2) - row] = 1.0  # no growing exponential below
                continue
            z = 0.0 if end == 0 else l[i]
            kind = kinds[end]
            hh = h[end, j]
            for m in range(2):
                ex = r[m, i] * (z - anc[m, i])
                if ex.real > CAP:
                    cap = True
                    ex = complex(CAP, ex.imag)
                e = np.exp(ex)
                if kind == 0:
                    v = e
                elif kind == 1:
                    v = k[i] * r[1 - m, i] * e
                elif kind == 2:
                    v = r[m, i] * e
                else:
                    v = k[i] * r[1 - m, i] * e + hh * e
                ab[row, 2 + (2 * i + m) - row] = v
            C0 = alpha[i] + beta[i] * z
            F0 = q * C0 - k[i] * beta[i]
            if kind == 0:
                x[row] = target[end, j] - C0
            elif kind == 1:
                x[row] = target[end, j] - F0
            elif kind == 2:
                x[row] = target[end, j] - beta[i]
            else:
                x[row] = target[end, j] - F0 - hh * C0
        # internal faces: C_below - K C_above = 0, F_above - F_below = 0
        for i in range(n - 1):
            row = 2 * i + 1
            for m in range(2):
                exa = r[m, i] * (l[i] - anc[m, i])
                if exa.real > CAP:
                    cap = True
                    exa = complex(CAP, exa.imag)
                exb = r[m, i + 1] * (0.0 - anc[m, i + 1])
                if exb.real > CAP:
                    cap = True
                    exb = complex(CAP, exb.imag)
                ea = np.exp(exa)
                eb = np.exp(exb)
                ab[row, 2 + (2 * i + m) - row] = -K[i] * ea
                ab[row, 2 + (2 * i + 2 + m) - row] = eb
                ab[row + 1, 2 + (2 * i + m) - row - 1] = k[i] * r[1 - m, i] * ea
                ab[row + 1, 2 + (2 * i + 2 + m) - row - 1] = -(k[i + 1] * r[1 - m, i + 1] * eb)
            CA = alpha[i] + beta[i] * l[i]
            CB = alpha[i + 1]
            FA = q * CA - k[i] * beta[i]
            FB = q * CB - k[i + 1] * beta[i + 1]
            x[row] = K[i] * CA - CB
            x[row + 1] = FB - FA
        # row equilibration (the largest modulus of each row's entries)
        for i in range(N):
            big = 0.0
            for b in range(5):
                a = abs(ab[i, b])
                if a > big:
                    big = a
            if big > 0:
                for b in range(5):
                    ab[i, b] /= big
                x[i] /= big
        # LU with partial pivoting on the band, as LAPACK's gbtf2 and gbtrs: pivot
        # the first largest |re| + |im| (izamax), multipliers by the reciprocal of
        # the pivot, updates skipped where the pivot row's entry is 0 (geru)
        bad = False
        for p in range(N):
            piv = p
            best = cabs1(ab[p, 2])
            for i in range(p + 1, min(N, p + 3)):
                v = cabs1(ab[i, 2 + p - i])
                if v > best:
                    best = v
                    piv = i
            if best == 0.0:
                bad = True
                break
            top = min(N - 1, p + 4)
            if piv != p:
                for col in range(p, top + 1):
                    tmp = ab[p, 2 + col - p]
                    ab[p, 2 + col - p] = ab[piv, 2 + col - piv]
                    ab[piv, 2 + col - piv] = tmp
                tmp = x[p]
                x[p] = x[piv]
                x[piv] = tmp
            rec = 1.0 / ab[p, 2]
            for i in range(p + 1, min(N, p + 3)):
                ab[i, 2 + p - i] *= rec
            for col in range(p + 1, top + 1):
                u = ab[p, 2 + col - p]
                if u != 0:
                    for i in range(p + 1, min(N, p + 3)):
                        ab[i, 2 + col - i] -= ab[i, 2 + p - i] * u
            if x[p] != 0:
                for i in range(p + 1, min(N, p + 3)):
                    x[i] -= ab[i, 2 + p - i] * x[p]
        if not bad:  # the upper triangle, column by column (tbsv)
            for p in range(N - 1, -1, -1):
                if x[p] != 0:
                    x[p] = x[p] / ab[p, 2]
                    for i in range(max(0, p - 4), p):
                        x[i] -= x[p] * ab[i, 2 + p - i]
            for i in range(N):
                if not (np.isfinite(x[i].real) and np.isfinite(x[i].imag)):
                    bad = True
                    break
        if bad:
            cap = True
            for i in range(N):
                x[i] = 0.0
        # fields at the depths
        for d in range(nz):
            i = idx[d]
            z = zeta[d]
            e0 = r[0, i] * (z - anc[0, i])
            e1 = r[1, i] * (z - anc[1, i])
            if e0.real > CAP:
                cap = True
                e0 = complex(CAP, e0.imag)
            if e1.real > CAP:
                cap = True
                e1 = complex(CAP, e1.imag)
            t0 = np.exp(e0) * x[2 * i]
            if semi and i == n - 1:
                t0 = 0.0
            t1 = np.exp(e1) * x[2 * i + 1]
            P = alpha[i] + beta[i] * z
            C[j, d] = t0 + t1 + P
            F[j, d] = k[i] * (t0 * r[1, i] + t1 * r[0, i]) + (q * P - k[i] * beta[i])
        # stored mass per segment: c int C^ dzeta (not asked for where st has no
        # rows: the concentration alone)
        if st.shape[0] > 0:
            for i in range(n):
                lin = l[i] * (alpha[i] + l[i] * (beta[i] / 2))
                if semi and i == n - 1:
                    last = 0.0 if last_clean else np.nan
                    st[i, j] = c[i] * (x[2 * i + 1] * (-1.0 / r[1, i]) + last)
                    continue
                acc = 0.0j
                for m in range(2):
                    xx = -r[m, i] * l[i] if anc[m, i] > 0 else r[m, i] * l[i]
                    if xx.real > CAP:
                        xx = complex(CAP, xx.imag)
                    if abs(xx) < 1e-6:
                        integ = l[i] * (1 + xx / 2 + xx * xx / 6)
                    else:
                        integ = l[i] * (np.expm1(xx) / xx)
                    acc += x[2 * i + m] * integ
                st[i, j] = c[i] * (acc + lin)
        capped[j] = cap



EPS16 = 16 * np.finfo(np.float64).eps


@numba.njit(cache=True, nogil=True)
def _sums(C, first, count, w, t):
    """Talbot sums of C[first:first + count, 0] with weights w at time t: (value, sum
    of |terms|, |outermost term|) as contour._talbot_sums."""
    val, size, end = 0.0, 0.0, 0.0
    for m in range(count):
        term = w[m] * C[first + m, 0] / t
        val += term.imag
        size += abs(term)
        end = abs(term)
    return val, size, end


@numba.njit(cache=True, nogil=True)
def talbot_points(times, shape1, w1, shape2, w2, k, c, mu, l, K, a0c, b0c, src_amp, q,
                  kinds, h_end, t_amp, idx, zeta, out_f, out_e):
    """C at one depth (segment idx[0], local depth zeta[0]) at each time (> 0) on the
    Talbot contours of n and n2 nodes (contour.invert with contour.pair_estimate) for
    signals that are steps switched on at 0: the boundary targets t_amp[end] / s (h
    h_end[end] constant), the segments' sources src_amp / s, the initial state a0c +
    b0c zeta per segment (with_initial 1).  Value into out_f, estimate into out_e
    (infinite where an exponent was capped)."""
    n1, n2 = shape1.size, shape2.size
    ns = n1 + n2
    n = k.size
    s = np.empty(ns, np.complex128)
    a0 = np.empty((n, ns), np.complex128)
    b0 = np.empty((n, ns), np.complex128)
    src = np.empty((n, ns), np.complex128)
    h = np.empty((2, ns), np.complex128)
    target = np.empty((2, ns), np.complex128)
    C = np.empty((ns, 1), np.complex128)
    F = np.empty((ns, 1), np.complex128)
    st = np.empty((0, ns), np.complex128)  # the stored mass is not asked for
    capped = np.zeros(ns, np.bool_)
    for j in range(times.size):
        t = times[j]
        for m in range(n1):
            s[m] = shape1[m] / t
        for m in range(n2):
            s[n1 + m] = shape2[m] / t
        for m in range(ns):
            for i in range(n):
                a0[i, m] = a0c[i]
                b0[i, m] = b0c[i]
                src[i, m] = src_amp[i] / s[m]
            for e in range(2):
                h[e, m] = h_end[e]
                target[e, m] = t_amp[e] / s[m]
        transfer(s, k, c, mu, l, K, a0, b0, src, q, False, True, kinds, h, target, idx,
                 zeta, C, F, st, capped)
        f1, size1, end1 = _sums(C, 0, n1, w1, t)
        f2, size2, end2 = _sums(C, n1, n2, w2, t)
        cap = False
        for m in range(ns):
            cap = cap or capped[m]
        diff = abs(f2 - f1)
        rounding = EPS16 * (size1 + size2)
        first = diff <= rounding
        out_f[j] = f1 if first else f2
        out_e[j] = np.inf if cap else 2 * diff + rounding + 2 * (end1 if first else end2)
