"""Layer transfers of the layered operator for many eigenvalue candidates at once.

Everything that does not depend on the state entering a layer (the transfer matrix of
every layer at every lambda, the angle scales, the closed-form layer integrals) is
computed for all layers and all lambdas in whole-array operations; only the state
itself is carried from face to face, three numpy row operations per layer.  The
Pruefer angle is read off the carried states afterwards, again in whole-array
operations, with the closed-form angle maps of the Pruefer method (Pruefer 1926;
Pryce 1993, "Numerical Solution of Sturm-Liouville Problems", ch. 2 and 5).

On layer i, with w^2 = (lambda a - s) / k and x = |w| l, the state (v, p = k v') moves
across the layer by (downwards, d = +1; upwards, d = -1)

    [[c, d b12], [d b21, c]]:  c = cos x, b12 = (l/k) sin x / x, b21 = -k w^2 l sin x / x

where w^2 > 0, and by the same matrix divided by cosh x (c = 1, b12 = (l/k) tanh x / x,
b21 = (k/l) x tanh x, log-scale log cosh x) where w^2 <= 0; a thick evanescent layer
(x > 1) is stepped in its growing and decaying components so that a (nearly) pure
decaying state is kept exactly.  cos x and sin x come from t = tan(x/2):
cos x = (1 - t^2)/(1 + t^2), sin x = 2t/(1 + t^2) (absolute error a few units in
the last place).  States are rescaled every few faces with a running log-scale
(the state at face j is (V, P) exp(L)); :func:`normalise` makes them unit.
"""
from __future__ import annotations

import numpy as np

from transport.solvers.modal.operator import ENDPOINT_FORM_MIN, Operator, tanhc

__all__ = ["Prep", "LayerTerms", "AngleScales", "shoot", "normalise", "increments",
           "end_remap", "shc", "layer_integrals", "chunks", "bc_angle", "SMALL_X"]

#: |w| l below this: the angle is stepped in the fixed scale k/l with the Taylor-series
#: transfer (keeps the angle and its derivative finite at w = 0).
SMALL_X = 1e-3
#: Elements per (layer x lambda) array: lambdas are processed in chunks of this size.
_CHUNK_ELEMENTS = 1 << 20
#: Faces between rescalings of the carried state.  A layer changes the size of the
#: state by at most about (1 + x) max(rho, 1/rho) (rho the ratio of the layers'
#: scales k/l), far below 1e300 over this many faces; a non-finite or vanishing state
#: is redone with a rescaling at every face.
_RESCALE_EVERY = 8
_LOG2 = float(np.log(2.0))


def chunks(n_layers: int, n: int):
    """Slices of at most about _CHUNK_ELEMENTS / (n_layers + 1) lambdas covering n."""
    size = max(16, _CHUNK_ELEMENTS // (n_layers + 1))
    return [slice(i, min(i + size, n)) for i in range(0, n, size)]


def shc(x):
    """sinh(x)/x with the limit 1."""
    xs = np.where(x < 1e-8, 1.0, x)
    return np.where(x < 1e-8, 1.0, np.sinh(xs) / xs)


def _series(y2, sign):
    """4 (1/6 + s y2/120 + y2^2/5040 + s y2^3/362880 + y2^4/39916800), s = sign."""
    return 4.0 * (1 / 6 + sign * y2 / 120 + y2 ** 2 / 5040 + sign * y2 ** 3 / 362880
                  + y2 ** 4 / 39916800)


class Prep:
    """Per-operator constants shared by every pass over a set of lambdas: layer
    coefficients as columns (N, 1), the end states of both shots, the boundary angles.

    :meth:`stack` holds several operators with the same number of layers, one column
    (and one entry of each end constant) per operator; :meth:`select` then gives the
    constants of any list of lambdas, one column per lambda, so that one pass over the
    layers serves the lambdas of every operator (a boring's Monte Carlo columns).  The
    arithmetic of each lambda is the same as with its own operator's ``Prep``.
    """

    _COLUMNS = ("k", "l", "a", "s", "kl", "lk", "mkl", "hl", "hl3", "l2")
    _ENDS = ("kl_last", "kl0", "theta0", "d_v", "d_p")

    def __init__(self, op: Operator = None):
        self.op, self.stacked = op, False
        if op is None:
            return
        nL = self.n_layers = op.n_layers
        self.k, self.l = op.k[:, None], op.thickness[:, None]
        self.a, self.s = op.a[:, None], op.s[:, None]
        self.kl = self.k / self.l
        self.lk = self.l / self.k
        self.mkl = -self.k * self.l
        self.hl, self.hl3, self.l2 = 0.5 * self.l, 0.5 * self.l ** 3, self.l * self.l
        self.rows = np.arange(nL)[:, None]
        kl = op.k / op.thickness
        self.kl_last, self.kl0 = float(kl[-1]), float(kl[0])
        # the end states (v, p) = (c_p, -c_v) of both shots, unit in the edge scale
        ends = []
        for end, sc in (("top", kl[0]), ("bottom", kl[-1])):
            c_v, c_p, _ = op.v_condition(end)
            nrm = np.hypot(sc * c_p, c_v)
            ends.append((c_p / nrm, -c_v / nrm))
        self.ends = np.array(ends)[:, :, None]  # (shot, component, 1)
        c_v, c_p, _ = op.v_condition("top")
        self.theta0 = float(bc_angle(c_v, c_p, self.kl0, right=False))
        self.d_v, self.d_p, _ = op.v_condition("bottom")

    @classmethod
    def stack(cls, preps) -> "Prep":
        """The constants of several operators' ``Prep`` (same number of layers) side
        by side: column r (entry r of the end constants) is operator r."""
        first = preps[0]
        if any(p.n_layers != first.n_layers for p in preps):
            raise ValueError("stacked operators must have the same number of layers")
        out = cls()
        out.stacked, out.n_layers, out.rows = True, first.n_layers, first.rows
        for name in cls._COLUMNS:
            setattr(out, name, np.concatenate([getattr(p, name) for p in preps], axis=1))
        for name in cls._ENDS:
            setattr(out, name, np.array([float(getattr(p, name)) for p in preps]))
        out.ends = np.concatenate([p.ends for p in preps], axis=2)
        return out

    def select(self, owner) -> "Prep":
        """The constants of lambdas whose operators are ``owner`` (indices or a slice
        into the stack); a single operator's ``Prep`` serves any lambdas as it is."""
        if not self.stacked:
            return self
        out = Prep()
        out.stacked, out.n_layers, out.rows = True, self.n_layers, self.rows
        for name in self._COLUMNS:
            setattr(out, name, getattr(self, name)[:, owner])
        for name in self._ENDS:
            setattr(out, name, getattr(self, name)[owner])
        out.ends = self.ends[:, :, owner]
        return out

    def cols(self, values, cols):
        """``values`` (one column, or one per lambda) at the lambda columns ``cols``."""
        return values[:, cols] if self.stacked else values

    def at(self, values, rows, cols):
        """``values`` at (row, lambda column) pairs."""
        return values[rows, cols] if self.stacked else values[rows, 0]


class LayerTerms:
    """Per-layer quantities at the lambdas ``lam``: arrays (N, n), row i = layer i.

    ``w2`` w^2, ``x`` |w| l, ``trig`` w^2 > 0, ``c`` and ``B`` (b12, b21 side by side,
    (N, 2, n)) the (scaled) transfer matrix, ``logc`` its log-scale (None when every
    entry is trigonometric), ``big`` the thick evanescent entries (x > 1), ``hcols``
    the columns with an evanescent entry.  With ``integrals``: the coefficients of the
    closed-form layer integral int v^2 = alpha v0^2 + beta v0 (p0/k) + gamma (p0/k)^2
    from the state (v0, p0) at the top of the layer.
    """

    def __init__(self, prep: Prep, lam, integrals: bool = True):
        lam = np.asarray(lam, dtype=float)
        self.prep, self.op, self.lam = prep, prep.op, lam
        nL, n = prep.n_layers, lam.size
        w2 = np.multiply(lam, prep.a)
        w2 -= prep.s
        w2 /= prep.k
        trig = w2 > 0
        self.all_trig = bool(trig.all())
        x = np.sqrt(w2) if self.all_trig else np.sqrt(np.abs(w2))
        x *= prep.l
        self.w2, self.x, self.trig = w2, x, trig
        self.hcols = (np.empty(0, dtype=int) if self.all_trig
                      else np.flatnonzero(~trig.all(axis=0)))
        # cos x and sin x from t = tan(x/2)
        t = np.multiply(x, 0.5)
        np.tan(t, out=t)
        cos = np.multiply(t, t)
        d = cos + 1.0
        np.subtract(1.0, cos, out=cos)
        cos /= d
        t += t
        t /= d
        sin = t
        self.pos = bool(x.all())
        if self.pos:
            sincx = np.divide(sin, x, out=d)
        else:
            sincx = np.divide(sin, x, out=d, where=x > 0)
            sincx[x == 0] = 1.0
        self.c = cos
        # the off-diagonal entries (b12, b21) side by side: (N, 2, n)
        B = np.empty((nL, 2, n))
        np.multiply(prep.lk, sincx, out=B[:, 0])
        np.multiply(prep.mkl, w2, out=B[:, 1])
        B[:, 1] *= sincx
        self.B = B
        self.logc = None
        self.big = None
        self.big_rows = set()
        if self.hcols.size:
            self._evanescent(cos)
        if integrals:
            self._integral_terms(cos, sin, sincx)

    def _evanescent(self, cos):
        """The scaled hyperbolic transfers of the entries with w^2 <= 0."""
        prep, h = self.prep, self.hcols
        xh, th = self.x[:, h], ~self.trig[:, h]
        B = self.B
        self.c[:, h] = np.where(th, 1.0, cos[:, h])
        B[:, 0, h] = np.where(th, prep.cols(prep.lk, h) * tanhc(xh), B[:, 0, h])
        B[:, 1, h] = np.where(th, prep.cols(prep.kl, h) * xh * np.tanh(xh), B[:, 1, h])
        self.logc = np.zeros_like(self.x)
        big = th & (xh > 1.0)
        logc = np.where(th, xh + np.log1p(np.exp(-2 * xh)) - _LOG2, 0.0)
        # thick evanescent entries are stepped in components: their log-scale is x
        self.logc[:, h] = np.where(big, xh, logc)
        self.big = np.zeros(self.x.shape, dtype=bool)
        self.big[:, h] = big
        self.big_rows = set(np.flatnonzero(self.big.any(axis=1)).tolist())

    def _integral_terms(self, cos, sin, sincx):
        """alpha, beta, gamma of int v^2 over each layer (closed forms; the thick
        evanescent entries are replaced by the two-exponential form in
        :func:`layer_integrals`)."""
        prep, x = self.prep, self.x
        sinc2 = sin * cos  # sinc(2x) = sin x cos x / x
        if self.pos:
            sinc2 /= x
        else:
            np.divide(sinc2, x, out=sinc2, where=x > 0)
            sinc2[x == 0] = 1.0
        self.alpha = 1.0 + sinc2
        self.alpha *= prep.hl
        m2 = np.subtract(1.0, sinc2, out=sinc2)
        m2 /= x * x
        small = x < 0.1
        if small.any():
            xs = x[small]
            m2[small] = _series(4.0 * xs * xs, -1.0)  # (1 - sinc 2x) / x^2
        self.gamma = np.multiply(prep.hl3, m2, out=m2)
        self.beta = sincx * sincx
        self.beta *= prep.l2
        if self.hcols.size:
            h = self.hcols
            l = prep.cols(prep.l, h)
            th = ~self.trig[:, h]
            xh = np.minimum(self.x[:, h], ENDPOINT_FORM_MIN)
            xs = np.where(xh < 1e-8, 1.0, xh)
            sh = np.where(xh < 1e-8, 1.0, np.sinh(xs) / xs)
            sh2 = np.where(xh < 1e-8, 1.0, np.sinh(2 * xs) / (2 * xs))
            m2h = np.where(xh < 0.1, _series(4.0 * xh * xh, 1.0), (sh2 - 1.0) / (xs * xs))
            self.alpha[:, h] = np.where(th, 0.5 * l * (1.0 + sh2), self.alpha[:, h])
            self.gamma[:, h] = np.where(th, 0.5 * l ** 3 * m2h, self.gamma[:, h])
            self.beta[:, h] = np.where(th, l * l * sh * sh, self.beta[:, h])


def shoot(terms: LayerTerms, every: int = _RESCALE_EVERY):
    """States at every face, shooting from the top and from the bottom.

    The state at face j is (V, P) exp(L); (V, P) is rescaled every ``every`` faces.
    Returns VL, PL, LL, VR, PR, LR of shape (N+1, n) (top shot, bottom shot).
    """
    return _shoot(terms, +1, every) + _shoot(terms, -1, every)


def _shoot(terms, direction, every):
    """One shot: (v1, p1) = c (v, p) +- (b12 p, b21 v) across each layer, three row
    operations per layer."""
    prep = terms.prep
    nL = prep.n_layers
    n = terms.lam.size
    VP = np.empty((nL + 1, 2, n))
    L = np.empty((nL + 1, n))
    down = direction > 0
    j0 = 0 if down else nL
    VP[j0] = prep.ends[0 if down else 1]
    combine = np.add if down else np.subtract
    mul = np.multiply
    Cl, Bl, VPl, Ll = list(terms.c), list(terms.B), list(VP), list(L)
    scl = list(prep.kl) if prep.stacked else prep.kl[:, 0].tolist()
    big_rows = terms.big_rows
    logc = terms.logc
    tmp = np.empty((2, n))
    acc = np.zeros(n)
    L[j0] = 0.0
    norms = []
    order = range(nL) if down else range(nL - 1, -1, -1)
    for step, i in enumerate(order, start=1):
        jin, jout = (i, i + 1) if down else (i + 1, i)
        st, out = VPl[jin], VPl[jout]
        mul(Cl[i], st, out=out)
        mul(Bl[i], st[::-1], out=tmp)
        combine(out, tmp, out=out)
        if big_rows and i in big_rows:
            _big_step(terms, i, st, out, direction)
        if logc is not None:
            acc += logc[i]
        if step % every == 0 or step == nL:
            nrm = np.hypot(scl[i] * out[0], out[1])
            out /= nrm
            norms.append(nrm)
            acc += np.log(nrm)
            Ll[jout][...] = acc
        elif logc is not None:
            Ll[jout][...] = acc
        else:
            Ll[jout][...] = Ll[jin]
    if every > 1 and norms:
        allnrm = np.concatenate(norms)
        if not (np.all(np.isfinite(allnrm)) and np.all(allnrm > 0)):
            return _shoot(terms, direction, 1)
    return VP[:, 0], VP[:, 1], L


def _big_step(terms, i, st, out, direction):
    """Thick evanescent entries of row i, in growing/decaying components: scaling the
    cosh/sinh matrix by cosh makes it rank one in floating point (tanh x = 1), losing a
    state that is (almost) pure decaying; the components keep it exactly."""
    big = terms.big[i]
    k = terms.prep.k[i][big] if terms.prep.stacked else terms.prep.k[i, 0]
    kb = k * np.sqrt(np.abs(terms.w2[i, big]))
    vb, pb, xb = st[0, big], st[1, big], terms.x[i, big]
    g = 0.5 * (vb + pb / kb)  # grows like e^{+beta s} in the shooting direction
    h = 0.5 * (vb - pb / kb)
    damp = np.exp(-2 * xb)
    g1, h1 = (g, h * damp) if direction > 0 else (g * damp, h)
    out[0, big] = g1 + h1
    out[1, big] = kb * (g1 - h1)


def normalise(terms: LayerTerms, V, P, L):
    """Unit states at the faces (in the scale k/l of the layer below each face, of the
    last layer at the bottom), the log-scales taking up the size."""
    kl = terms.prep.kl
    X = np.concatenate([kl, kl[-1:]]) * V
    nrm = X * X
    nrm += P * P
    np.sqrt(nrm, out=nrm)
    return V / nrm, P / nrm, L + np.log(nrm)


def bc_angle(c_v, c_p, scale, right: bool):
    """Angle of the boundary direction (v, p) = (c_p, -c_v) in ``scale``."""
    ang = np.mod(np.arctan2(scale * c_p, -c_v), np.pi)
    if right:
        ang = np.where(ang <= 0.0, np.pi, ang)
    return ang


class AngleScales:
    """Angle scale of every face (the scale of the layer above it; k_0/l_0 at the top),
    the ratios of consecutive scales, the common end scale and the bottom boundary angle
    in it (shared by both shots)."""

    def __init__(self, terms: LayerTerms):
        prep = terms.prep
        nL = prep.n_layers
        x = terms.x
        n = terms.lam.size
        if terms.all_trig and x.min() >= SMALL_X:
            self.tr, self.all_tr = None, True
        else:
            self.tr = terms.trig & (x >= SMALL_X)  # stepped in the scale k w
            self.all_tr = bool(self.tr.all())
        S = np.empty((nL + 1, n))
        S[0] = prep.kl0
        np.multiply(prep.kl, x, out=S[1:])
        if not self.all_tr:
            S[1:] = np.where(self.tr, S[1:], prep.kl)
        self.S = S
        self.rho = S[1:] / S[:-1]
        self.rho_m1 = self.rho - 1.0
        # the common, lambda-continuous end scale
        self.final = prep.kl_last * np.sqrt(x[-1] * x[-1] + 1.0)
        self.beta = bc_angle(prep.d_v, prep.d_p, self.final, right=True)
        self.theta0 = prep.theta0


def increments(terms: LayerTerms, sc: AngleScales, v, p, below=None):
    """Pruefer angle change across each layer, from the state (v, p) at its top: (N, n).

    ``below`` = (mask, v1, p1): where mask holds, the state came up from the bottom of
    the layer, (v1, p1); the change across an evanescent layer is then minus that of
    the upward map from (v1, p1), which is well conditioned for a state decaying
    downwards, where the downward map from the top is not (it sends that state to
    nearly zero).

    Layer i is stepped in the scale S = k w (the angle advances by exactly x) where
    x >= SMALL_X and w^2 > 0, else in the fixed scale k/l with the scaled hyperbolic
    transfer (x >= SMALL_X) or the Taylor-series transfer [[C, Sn], [-y Sn, C]],
    y = w^2 l^2; at its top face the angle first moves from the scale of the face to
    that of the layer inside its branch: theta += atan2((rho - 1) sin cos,
    cos^2 + rho sin^2), rho = S'/S.  The angle at z = 0 is ``sc.theta0`` (scale
    k_0/l_0); after the last face the angle moves to the end scale (:func:`end_remap`).
    """
    A = sc.S[:-1] * v
    num = A * p
    num *= sc.rho_m1
    A *= A
    A *= sc.rho
    inc = p * p
    inc += A
    np.arctan2(num, inc, out=inc)
    if sc.all_tr:
        inc += terms.x
    else:
        inc += np.where(sc.tr, terms.x, 0.0)
        cols = np.flatnonzero(~sc.tr.all(axis=0))
        up = None if below is None else tuple(b[:, cols] for b in below)
        _slow_increments(terms, sc, v[:, cols], p[:, cols], cols, inc, up)
    return inc


def end_remap(sc: AngleScales, v, p):
    """Angle change into the end scale from the state (v, p) at the bottom face."""
    rho = sc.final / sc.S[-1]
    A = sc.S[-1] * v
    return np.arctan2((rho - 1.0) * A * p, p * p + rho * A * A)


def _slow_increments(terms, sc, v, p, cols, inc, up=None):
    """Angle increments of the hyperbolic and small-x entries (columns ``cols``)."""
    kl = terms.prep.cols(terms.prep.kl, cols)
    x, trig = terms.x[:, cols], terms.trig[:, cols]
    tr = sc.tr[:, cols]
    X, Y = kl * v, p  # direction in the scale k/l
    hyp = (~trig) & (x >= SMALL_X)
    sml = ~(tr | hyp)
    add = np.zeros_like(x)
    if hyp.any():
        xh = np.where(hyp, x, 1.0)
        th = np.tanh(xh)
        tc, h = th / xh, xh * th
        # downward map [[1, tc], [h, 1]] from the top
        cross = tc * Y * Y - h * X * X
        dot = X * X + Y * Y + (h + tc) * X * Y
        if up is not None and up[0].any():
            # minus the upward map [[1, -tc], [-h, 1]] from the bottom
            m, X1, Y1 = up[0], kl * up[1], up[2]
            cross = np.where(m, tc * Y1 * Y1 - h * X1 * X1, cross)
            dot = np.where(m, X1 * X1 + Y1 * Y1 - (h + tc) * X1 * Y1, dot)
        add += np.where(hyp, np.arctan2(cross, dot), 0.0)
    if sml.any():
        yy = np.where(sml, np.where(trig, 1.0, -1.0) * x * x, 0.0)
        Cs = 1.0 + yy * (-0.5 + yy / 24.0)
        Sn = 1.0 + yy * (-1.0 / 6.0 + yy / 120.0)
        cross = Sn * (Y * Y + yy * X * X)
        dot = Cs * (X * X + Y * Y) + (1.0 - yy) * Sn * X * Y
        add += np.where(sml, np.arctan2(cross, dot), 0.0)
    inc[:, cols] += add


def layer_integrals(terms: LayerTerms, V, P, L, bottom=None):
    """int_layer v^2 dz of the solution with state (V, P) exp(L) at the top of each
    layer (arrays (N, n)), as (I, lg): the integral is I exp(lg), lg = 2 L except in
    the thick evanescent entries, whose integral comes from both faces in the
    two-exponential form: ``bottom(rows)`` gives (V1, L1) at the bottom faces of those
    layers; with ``bottom`` None, V, P and L hold the N+1 faces of one shot.  Closed
    forms: sinc and sinh series of the layer solution.
    """
    nL = terms.prep.n_layers
    if bottom is None:
        Vf, Lf = V, L
        V, P, L = V[:nL], P[:nL], L[:nL]

        def bottom(rows):
            return Vf[rows + 1], Lf[rows + 1]
    pk = P / terms.prep.k
    integral = terms.alpha * V
    integral *= V
    tmp = terms.gamma * pk
    tmp *= pk
    integral += tmp
    np.multiply(terms.beta, V, out=tmp)
    tmp *= pk
    integral += tmp
    lg = 2.0 * L
    if terms.hcols.size:
        endpoint = (~terms.trig) & (terms.x > ENDPOINT_FORM_MIN)
        rows = np.flatnonzero(endpoint.any(axis=1))
        if rows.size:
            l = terms.prep.l[rows]
            e_ = endpoint[rows]
            V1r, L1r = bottom(rows)
            L0 = L[rows]
            lm = np.maximum(L0, L1r)
            V0 = V[rows] * np.exp(L0 - lm)
            V1r = V1r * np.exp(L1r - lm)
            xr = terms.x[rows]
            e = np.exp(-xr)
            det = -np.expm1(-2 * xr)
            E = (V0 - V1r * e) / det
            F = (V1r - V0 * e) / det
            w = np.sqrt(np.abs(terms.w2[rows]))
            wsafe = np.where(w > 0, w, 1.0)
            e_int = (E * E + F * F) * det / (2 * wsafe) + 2 * E * F * l * e
            integral[rows] = np.where(e_, e_int, integral[rows])
            lg[rows] = np.where(e_, 2.0 * lm, lg[rows])
    return integral, lg
