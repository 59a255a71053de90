"""Independent reference solutions for the layered transport problem (test helper).

Nothing here imports the modal engine (``transport.spectrum``, ``transport.modal``):
these routines are the yardsticks that engine is measured against.

* :func:`laplace_reference` -- the layered problem solved exactly in the Laplace domain
  with mpmath (one global linear system with scaled exponentials per layer) and
  inverted numerically with :func:`mpmath.invertlaplace` (Talbot, de Hoog or Stehfest).
* :func:`crank_slab_series` -- Crank (1975), *The Mathematics of Diffusion*, 2nd ed.,
  ch. 4: a plane sheet with a fixed surface concentration.
* :func:`erfc_semi_infinite` -- semi-infinite medium with first-order decay,
  Danckwerts (1951), Trans. Faraday Soc. 47:1014.
* :func:`ogata_banks` -- advection-dispersion in a semi-infinite column with a fixed
  inlet concentration, Ogata & Banks (1961), USGS Prof. Paper 411-A; with first-order
  decay as in van Genuchten & Alves (1982), USDA Tech. Bull. 1661.
* :func:`carslaw_jaeger_two_layer_eigenvalues` -- decay rates of a two-layer composite
  slab, Carslaw & Jaeger (1959), *Conduction of Heat in Solids*, composite solids
  chapter; Mikhailov & Ozisik (1984).

Conventions (as ``transport.model``): z positive down, z = 0 at the top; on each layer
theta R dC/dt = d/dz(theta D dC/dz) - q dC/dz - theta R mu C + sigma; total flux
F = q C - theta D dC/dz, positive downward.
"""
from __future__ import annotations

import math

import mpmath as mp
import numpy as np
from scipy.special import erfc, erfcx

from transport.model import Column, InitialState, InputError

__all__ = [
    "laplace_reference",
    "crank_slab_series",
    "erfc_semi_infinite",
    "ogata_banks",
    "carslaw_jaeger_two_layer_eigenvalues",
]


# --------------------------------------------------------------------------------------
# Laplace-domain solution of the layered column
# --------------------------------------------------------------------------------------
def _segments(column: Column, initial: InitialState):
    """Split the column into segments on which the initial state is linear.

    Returns a list of dicts with the layer properties, segment top/bottom, the initial
    state c(z) = a + b (z - top), and the partition coefficient K at the segment's
    lower face (1 inside a layer).
    """
    faces = column.interfaces
    n = len(column.layers)
    kind = initial.kind
    if kind == "uniform" and len(initial.values) != n:
        raise InputError(f"uniform initial state has {len(initial.values)} values for "
                         f"{n} layers; give one value per layer")
    segs = []
    for i, lay in enumerate(column.layers):
        top, bot = float(faces[i]), float(faces[i + 1])
        cuts = [top, bot]
        if kind == "profile":
            cuts += [d for d in initial.depths if top < d < bot]
        cuts = sorted(cuts)
        for j, (z0, z1) in enumerate(zip(cuts[:-1], cuts[1:])):
            if kind == "clean":
                a, b = 0.0, 0.0
            elif kind == "uniform":
                a, b = float(initial.values[i]), 0.0
            else:
                c0, c1 = np.interp([z0, z1], initial.depths, initial.values)
                a, b = float(c0), float((c1 - c0) / (z1 - z0))
            last = j == len(cuts) - 2
            segs.append(dict(top=z0, bot=z1, theta=lay.porosity, D=lay.diffusivity,
                             R=lay.retardation, mu=lay.decay_rate, sigma=lay.source_rate,
                             a=a, b=b, K=lay.partition_to_next if last else 1.0))
    return segs


def _gauss_solve(M, rhs):
    """Gaussian elimination with partial pivoting (no spurious singularity test).

    mpmath's ``lu_solve`` rejects pivots below ||M||_1 eps, which an equilibrated but
    strongly graded system (high Peclet number) can trip although it is regular.
    """
    n = M.rows
    a = [[M[i, j] for j in range(n)] + [rhs[i]] for i in range(n)]
    for j in range(n):
        piv = max(range(j, n), key=lambda i: abs(a[i][j]))
        if a[piv][j] == 0:
            raise ZeroDivisionError("Laplace-domain system is singular")
        a[j], a[piv] = a[piv], a[j]
        for i in range(j + 1, n):
            f = a[i][j] / a[j][j]
            if f != 0:
                for k in range(j, n + 1):
                    a[i][k] -= f * a[j][k]
    x = [mp.mpf(0)] * n
    for i in range(n - 1, -1, -1):
        x[i] = (a[i][n] - mp.fsum(a[i][k] * x[k] for k in range(i + 1, n))) / a[i][i]
    return x


def _signal_transform(bc, s, t_eval=None):
    """Laplace transform of a boundary value: value/s, or for a schedule the sum of its
    atoms: step A e^{-s t0}/s, ramp S e^{-s t0}/s^2, exponential A e^{-s t0}/(s + r)
    (standard transform pairs, e.g. Abramowitz & Stegun 1964, table 29.3).  Atoms that
    switch on after the evaluation time ``t_eval`` contribute nothing there (causality)
    and are left out, since their delay factor grows on the inversion contour."""
    sched = getattr(bc, "schedule", None)
    if sched is None:
        return mp.mpf(bc.value) / s
    out = mp.mpf(0)
    for kind, t0, amp, rate in sched.atoms:
        if t_eval is not None and t0 >= t_eval:
            continue
        delay = mp.exp(-s * mp.mpf(t0))
        if kind == "step":
            out += mp.mpf(amp) * delay / s
        elif kind == "ramp":
            out += mp.mpf(amp) * delay / (s * s)
        else:
            out += mp.mpf(amp) * delay / (s + mp.mpf(rate))
    return out


class _LaplaceColumn:
    """Exact Laplace-domain solution C^(z, s) of the layered column.

    On segment i with k = theta D, c = theta R:  k C'' - q C' - c (s + mu) C =
    -c (a + b zeta) - sigma / s  (zeta = z - top).  The particular solution is linear,
    P = alpha + beta zeta with beta = b / (s + mu) and
    alpha = (c a + sigma / s - q beta) / (c (s + mu)).
    The homogeneous part is A e^{r1 (z - z1)} + B e^{r2 (z - z2)}, r = (q +- sqrt(q^2 +
    4 k c (s + mu))) / (2 k), with each exponential anchored at the segment end where it
    is largest (z1, z2 in {top, bottom}), so every matrix entry has modulus <= 1 times a
    flux factor: thick layers and high Peclet numbers never over- or underflow the
    conditioning.  The 2N unknowns follow from the two boundary conditions and, at each
    internal face, C_below = K C_above and continuity of F.
    """

    def __init__(self, column: Column, initial: InitialState):
        self.column = column
        self.segs = _segments(column, initial)
        self.q = column.darcy_flux
        self._cache = {}
        self.t_eval = None  # output time being inverted (for switched signals)

    # -- one Laplace parameter ----------------------------------------------------------
    def _solve(self, s):
        key = (s, mp.mp.prec)
        hit = self._cache.get(key)
        if hit is not None:
            return hit
        q = mp.mpf(self.q)
        segs = self.segs
        n = len(segs)
        parts = []
        for g in segs:
            k = mp.mpf(g["theta"]) * mp.mpf(g["D"])
            c = mp.mpf(g["theta"]) * mp.mpf(g["R"])
            sm = s + mp.mpf(g["mu"])
            root = mp.sqrt(q * q + 4 * k * c * sm)
            r1, r2 = (q + root) / (2 * k), (q - root) / (2 * k)
            length = mp.mpf(g["bot"]) - mp.mpf(g["top"])
            beta = mp.mpf(g["b"]) / sm
            alpha = (c * mp.mpf(g["a"]) + mp.mpf(g["sigma"]) / s - q * beta) / (c * sm)
            # anchor of each exponential: bottom if it grows with depth, else top
            anchors = [length if mp.re(r) >= 0 else mp.mpf(0) for r in (r1, r2)]
            parts.append(dict(k=k, r=(r1, r2), anc=anchors, L=length, alpha=alpha, beta=beta))

        def row_c(i, zeta):
            """Coefficients (for A_i, B_i) and constant of C at local depth zeta."""
            p = parts[i]
            e = [mp.exp(r * (zeta - a)) for r, a in zip(p["r"], p["anc"])]
            return e, p["alpha"] + p["beta"] * zeta

        def row_f(i, zeta):
            """Coefficients and constant of the total flux F = q C - k C'."""
            p = parts[i]
            e, cst = row_c(i, zeta)
            coef = [(q - p["k"] * r) * ei for r, ei in zip(p["r"], e)]
            return coef, q * cst - p["k"] * p["beta"]

        M = mp.matrix(2 * n, 2 * n)
        rhs = mp.matrix(2 * n, 1)

        def put(row, i, coefs, const, scale=1):
            M[row, 2 * i] += scale * coefs[0]
            M[row, 2 * i + 1] += scale * coefs[1]
            rhs[row] -= scale * const

        # boundaries
        for row, end, i, zeta in ((0, "top", 0, mp.mpf(0)),
                                  (2 * n - 1, "bottom", n - 1, parts[-1]["L"])):
            bc = getattr(self.column, end)
            val = _signal_transform(bc, s, self.t_eval)
            sign = 1 if end == "top" else -1
            if bc.kind == "concentration":
                put(row, i, *row_c(i, zeta))
                rhs[row] += val
            elif bc.kind in ("flux", "inlet", "sealed"):
                target = {"flux": val, "inlet": q * val, "sealed": 0}[bc.kind]
                put(row, i, *row_f(i, zeta))
                rhs[row] += target
            elif bc.kind == "free-outflow":
                p = parts[i]
                e, _ = row_c(i, zeta)
                put(row, i, [r * ei for r, ei in zip(p["r"], e)], p["beta"])
            elif bc.kind == "mass-transfer":
                # top: F = h (value - C);  bottom: F = h (C - value)
                h = mp.mpf(bc.transfer_coefficient)
                put(row, i, *row_f(i, zeta))
                put(row, i, *row_c(i, zeta), scale=sign * h)
                rhs[row] += sign * h * val
            else:  # pragma: no cover - model.Boundary validates kinds
                raise InputError(f"unknown boundary kind {bc.kind!r}")
        # internal faces: C_below - K C_above = 0 ; F_above - F_below = 0
        for i in range(n - 1):
            row = 1 + 2 * i
            put(row, i + 1, *row_c(i + 1, mp.mpf(0)))
            put(row, i, *row_c(i, parts[i]["L"]), scale=-mp.mpf(segs[i]["K"]))
            put(row + 1, i, *row_f(i, parts[i]["L"]))
            put(row + 1, i + 1, *row_f(i + 1, mp.mpf(0)), scale=-1)
        # row equilibration: boundary rows far from an exponential's anchor can be tiny
        for row in range(2 * n):
            big = max(abs(M[row, col]) for col in range(2 * n))
            if big != 0:
                for col in range(2 * n):
                    M[row, col] /= big
                rhs[row] /= big
        coef = _gauss_solve(M, rhs)
        out = (parts, coef)
        self._cache[key] = out
        return out

    def transform(self, s, depth: float):
        """C^(depth, s); at a face the value just below it (the last segment at z = L)."""
        parts, coef = self._solve(s)
        tops = [g["top"] for g in self.segs]
        i = max(0, int(np.searchsorted(tops, depth, side="right")) - 1)
        zeta = mp.mpf(depth) - mp.mpf(self.segs[i]["top"])
        p = parts[i]
        val = p["alpha"] + p["beta"] * zeta
        for j, (r, a) in enumerate(zip(p["r"], p["anc"])):
            val += coef[2 * i + j] * mp.exp(r * (zeta - a))
        return val

    def clear(self):
        self._cache.clear()


def laplace_reference(column: Column, depths, times, initial: InitialState | None = None,
                      dps: int = 30, method: str = "talbot") -> np.ndarray:
    """Concentration C(z, t) of a layered column by numerical Laplace inversion.

    Parameters
    ----------
    column : transport.model.Column
        Constant boundary values; zero-order sources and first-order decay per layer.
    depths : array_like (nz,), m, 0 <= z <= column length.  At a partition face the
        value just below it is returned.
    times : array_like (nt,), s, > 0.
    initial : InitialState, optional
        clean (default), uniform per layer, or a piecewise-linear profile (the column
        is split at the sample depths, where the initial state has a kink).
    dps : int
        Decimal digits of the mpmath working precision of the caller context;
        ``invertlaplace`` raises it internally (Talbot: 1.72 dps).  With advection,
        int_0^L |q| / (2 theta D) dz / ln 10 guard digits are added (column Peclet
        number 1000 adds ~220 digits and makes the call ~10x slower).
    method : {"talbot", "dehoog", "stehfest"}
        Inversion method of :func:`mpmath.invertlaplace`: fixed Talbot contour
        (Talbot 1979; Abate & Valko 2004, IJNME 60:979), de Hoog, Knight & Stokes
        (1982), or Gaver-Stehfest (Stehfest 1970; needs a high ``dps``).

    Returns
    -------
    ndarray (nt, nz) of C, kg m-3.

    Notes
    -----
    Transforming the layer equation with zero-order source sigma and initial state
    c0(z) gives  theta D C^'' - q C^' - theta R (s + mu) C^ = -theta R c0 - sigma / s,
    boundary values become value / s.  The solution on each segment is exact (see
    :class:`_LaplaceColumn`); the per-s linear solve is cached and shared by all depths.
    """
    initial = InitialState.clean() if initial is None else initial
    depths = np.atleast_1d(np.asarray(depths, dtype=float))
    times = np.atleast_1d(np.asarray(times, dtype=float))
    if np.any(times <= 0):
        raise ValueError("laplace_reference: times must be > 0 s")
    if np.any(depths < 0) or np.any(depths > column.length * (1 + 1e-12)):
        raise ValueError(f"laplace_reference: depths must lie in [0, {column.length}] m")
    model = _LaplaceColumn(column, initial)
    out = np.empty((times.size, depths.size))
    # Guard digits for advection: the transform carries factors up to
    # exp(int_0^z q / (2 theta D)) that cancel in the inversion sum.
    guard = 0.0
    for lay in column.layers:
        guard += abs(column.darcy_flux) * lay.thickness / (2 * lay.porosity * lay.diffusivity)
    dps = int(dps + math.ceil(guard / math.log(10)))
    with mp.workdps(dps):
        for it, t in enumerate(times):
            model.clear()  # Talbot/de Hoog nodes depend on t only: share them across depths
            model.t_eval = float(t)
            for iz, z in enumerate(depths):
                val = mp.invertlaplace(lambda s, z=z: model.transform(s, z), mp.mpf(t),
                                       method=method)
                out[it, iz] = float(mp.re(val))
    return out


# --------------------------------------------------------------------------------------
# Closed forms
# --------------------------------------------------------------------------------------
def _terms_needed(rate_unit: float, t: float, first: int, tol: float = 1e-18) -> int:
    """Number of series terms n with exp(-rate_unit n^2 t) above tol (at least 4)."""
    n_max = math.sqrt(-math.log(tol) / (rate_unit * t)) + first + 2
    return max(4, int(n_max))


def crank_slab_series(depths, times, length: float, kappa: float, surface: float = 1.0,
                      bottom: str = "no-flux", bottom_value: float = 0.0,
                      initial: float = 0.0) -> np.ndarray:
    """Plane sheet 0 <= z <= l with C = ``surface`` at z = 0 (Crank 1975, ch. 4).

    Parameters
    ----------
    depths, times : array_like, m and s (times > 0)
    length : sheet thickness l, m
    kappa : apparent diffusivity D / R, m2 s-1
    surface : concentration held at z = 0 for t > 0
    bottom : "no-flux" (dC/dz = 0 at z = l) or "concentration" (C = bottom_value)
    initial : uniform initial concentration

    Returns
    -------
    ndarray (nt, nz)

    Notes
    -----
    No-flux bottom: the sheet is half of a sheet of thickness 2l with both faces held,
    Crank (1975) eq. 4.17 (number from memory) with x = l - z:
    (C - C0)/(C1 - C0) = 1 - 4/pi sum_n (-1)^n/(2n+1) exp(-kappa (2n+1)^2 pi^2 t / 4l^2)
    cos((2n+1) pi x / 2l).
    Both faces held (C1 at z = 0, C2 at z = l), Crank (1975) eq. 4.16 (number from
    memory): C = C1 + (C2 - C1) z/l + 2/pi sum_n (C2 cos n pi - C1)/n sin(n pi z/l)
    exp(-kappa n^2 pi^2 t/l^2) + 4 C0/pi sum_m 1/(2m+1) sin((2m+1) pi z/l)
    exp(-kappa (2m+1)^2 pi^2 t/l^2).
    """
    z = np.atleast_1d(np.asarray(depths, dtype=float))[None, :]
    t = np.atleast_1d(np.asarray(times, dtype=float))
    if np.any(t <= 0):
        raise ValueError("crank_slab_series: times must be > 0 s")
    out = np.empty((t.size, z.size))
    l = float(length)
    for it, tt in enumerate(t):
        if bottom == "no-flux":
            rate = kappa * math.pi ** 2 / (4 * l ** 2)
            n = np.arange(_terms_needed(4 * rate, tt, 0))[:, None]
            m = 2 * n + 1
            series = ((-1.0) ** n / m * np.exp(-rate * m ** 2 * tt)
                      * np.cos(m * math.pi * (l - z) / (2 * l))).sum(axis=0)
            out[it] = initial + (surface - initial) * (1 - 4 / math.pi * series)
        elif bottom == "concentration":
            rate = kappa * math.pi ** 2 / l ** 2
            n = np.arange(1, _terms_needed(rate, tt, 1))[:, None]
            c1, c2 = surface, bottom_value
            s1 = ((c2 * np.cos(n * math.pi) - c1) / n * np.sin(n * math.pi * z / l)
                  * np.exp(-rate * n ** 2 * tt)).sum(axis=0)
            m = 2 * n - 1
            s2 = (np.sin(m * math.pi * z / l) / m * np.exp(-rate * m ** 2 * tt)).sum(axis=0)
            out[it] = c1 + (c2 - c1) * z[0] / l + 2 / math.pi * s1 + 4 * initial / math.pi * s2
        else:
            raise ValueError(f"bottom must be 'no-flux' or 'concentration', got {bottom!r}")
    return out


def erfc_semi_infinite(depths, times, kappa: float, surface: float = 1.0,
                       decay_rate: float = 0.0) -> np.ndarray:
    """Semi-infinite clean medium, C = ``surface`` at z = 0, first-order decay mu.

    C/C0 = 1/2 e^{-z sqrt(mu/kappa)} erfc(z/(2 sqrt(kappa t)) - sqrt(mu t))
         + 1/2 e^{+z sqrt(mu/kappa)} erfc(z/(2 sqrt(kappa t)) + sqrt(mu t)),
    kappa = D / R, mu the decay rate of the R-divided equation (ours, since decay acts on
    both phases).  Danckwerts (1951), Trans. Faraday Soc. 47:1014; Crank (1975) ch. 14
    (from memory).  Each term is evaluated as erfcx(y) exp(-z^2/(4 kappa t) - mu t) when
    its erfc argument y >= 0, so nothing overflows.
    """
    z = np.atleast_1d(np.asarray(depths, dtype=float))[None, :]
    t = np.atleast_1d(np.asarray(times, dtype=float))[:, None]
    if np.any(t <= 0):
        raise ValueError("erfc_semi_infinite: times must be > 0 s")
    x = z / (2 * np.sqrt(kappa * t))
    rt = np.sqrt(decay_rate * t)
    gauss = np.exp(-x ** 2 - decay_rate * t)
    y1, y2 = x - rt, x + rt
    k = np.sqrt(decay_rate / kappa) * z
    with np.errstate(over="ignore", invalid="ignore"):
        t1 = np.where(y1 >= 0, erfcx(np.maximum(y1, 0)) * gauss, np.exp(-k) * erfc(y1))
    t2 = erfcx(y2) * gauss
    return 0.5 * surface * (t1 + t2)


def ogata_banks(depths, times, velocity: float, dispersion: float, surface: float = 1.0,
                decay_rate: float = 0.0) -> np.ndarray:
    """Semi-infinite clean column, C = ``surface`` at z = 0, advection and dispersion.

    For dC/dt = Dr C'' - v C' - mu C (our equation divided by theta R: Dr = D/R,
    v = q / (theta R)):

    C/C0 = 1/2 e^{(v-u) z/(2 Dr)} erfc((z - u t)/(2 sqrt(Dr t)))
         + 1/2 e^{(v+u) z/(2 Dr)} erfc((z + u t)/(2 sqrt(Dr t))),   u = v sqrt(1 + 4 mu Dr/v^2).

    With mu = 0 (u = v) this is Ogata & Banks (1961), USGS Prof. Paper 411-A, eq. 20
    (number from memory); with decay, van Genuchten & Alves (1982), USDA Tech. Bull.
    1661, first-type inlet solution (their mu_vGA = R mu).  Terms with a positive erfc
    argument are evaluated as erfcx(y) exp(-(z - v t)^2/(4 Dr t) - mu t): no overflow at
    high Peclet number.
    """
    z = np.atleast_1d(np.asarray(depths, dtype=float))[None, :]
    t = np.atleast_1d(np.asarray(times, dtype=float))[:, None]
    if np.any(t <= 0):
        raise ValueError("ogata_banks: times must be > 0 s")
    v, d, mu = float(velocity), float(dispersion), float(decay_rate)
    u = math.sqrt(v * v + 4 * mu * d)
    root = 2 * np.sqrt(d * t)
    y1, y2 = (z - u * t) / root, (z + u * t) / root
    gauss = np.exp(-((z - v * t) ** 2) / (4 * d * t) - mu * t)
    with np.errstate(over="ignore", invalid="ignore"):
        t1 = np.where(y1 >= 0, erfcx(np.maximum(y1, 0)) * gauss,
                      np.exp((v - u) * z / (2 * d)) * erfc(y1))
    t2 = erfcx(y2) * gauss
    return 0.5 * surface * (t1 + t2)


# --------------------------------------------------------------------------------------
# Two-layer composite slab: eigenvalues
# --------------------------------------------------------------------------------------
def _cos_sinc(x, l):
    """(cos(w l), sin(w l)/w) with w = sqrt(x), entire in x (x < 0 -> cosh, sinh)."""
    if x > 0:
        w = mp.sqrt(x)
        return mp.cos(w * l), mp.sin(w * l) / w
    if x < 0:
        w = mp.sqrt(-x)
        return mp.cosh(w * l), mp.sinh(w * l) / w
    return mp.mpf(1), mp.mpf(l)


def carslaw_jaeger_two_layer_eigenvalues(column: Column, n: int, dps: int = 30) -> list:
    """First ``n`` decay rates lambda (C ~ exp(-lambda t)) of a two-layer slab, q = 0.

    Parameters
    ----------
    column : Column with exactly two layers, zero Darcy flux, top "concentration" and
        bottom "concentration" or a zero-flux bottom ("sealed", or "flux" with value 0).
    n : number of eigenvalues.
    dps : mpmath decimal digits; the roots are good to about dps - 5 digits.

    Returns
    -------
    list of mpmath.mpf, increasing (s-1).

    Notes
    -----
    With a_i = theta_i R_i, k_i = theta_i D_i, w_i = sqrt((lambda - mu_i) a_i / k_i),
    S_i = sin(w_i l_i)/w_i, C_i = cos(w_i l_i) and K the partition at the interface
    (C_below = K C_above), the eigenvalue equations (Carslaw & Jaeger 1959, composite
    solids; Mikhailov & Ozisik 1984; decay and K carried through here from the layer
    solutions A sin(w1 z), B sin(w2 (L - z)) or B cos(w2 (L - z))) are

    * Dirichlet / Dirichlet:  k1 C_1 S_2 + K k2 S_1 C_2 = 0,
    * Dirichlet / no flux:    k1 C_1 C_2 - K (lambda - mu_2) a2 S_1 S_2 = 0,

    both entire in lambda (no spurious root at w = 0).  Roots are bracketed by a sign
    scan uniform in sqrt(lambda) with a phase step sum_i l_i sqrt(a_i/k_i) d(sqrt lambda)
    of pi/64 and polished with a bracketing solver (Anderson-Bjorck) of mpmath.findroot.
    """
    if len(column.layers) != 2 or column.darcy_flux != 0:
        raise ValueError("carslaw_jaeger_two_layer_eigenvalues needs two layers and q = 0")
    if column.top.kind != "concentration":
        raise ValueError("top boundary must be 'concentration'")
    bkind = column.bottom.kind
    if bkind == "concentration":
        dirichlet = True
    elif bkind == "sealed" or (bkind == "flux" and column.bottom.value == 0):
        dirichlet = False
    else:
        raise ValueError("bottom boundary must be 'concentration' or zero flux")
    l1, l2 = column.layers
    with mp.workdps(dps):
        a1, a2 = (mp.mpf(x.porosity) * x.retardation for x in (l1, l2))
        k1, k2 = (mp.mpf(x.porosity) * x.diffusivity for x in (l1, l2))
        m1, m2 = mp.mpf(l1.decay_rate), mp.mpf(l2.decay_rate)
        h1, h2 = mp.mpf(l1.thickness), mp.mpf(l2.thickness)
        kp = mp.mpf(l1.partition_to_next)

        def f(lam):
            c1, s1 = _cos_sinc((lam - m1) * a1 / k1, h1)
            c2, s2 = _cos_sinc((lam - m2) * a2 / k2, h2)
            if dirichlet:
                return k1 * c1 * s2 + kp * k2 * s1 * c2
            return k1 * c1 * c2 - kp * (lam - m2) * a2 * s1 * s2

        phase = h1 * mp.sqrt(a1 / k1) + h2 * mp.sqrt(a2 / k2)
        step = mp.pi / 64 / phase  # step in sqrt(lambda - lam0)
        lam0 = min(m1, m2)  # no eigenvalue lies below the smallest decay rate
        roots = []
        j = 0
        x_prev, f_prev = lam0, f(lam0)
        while len(roots) < n:
            j += 1
            x = lam0 + (j * step) ** 2
            fx = f(x)
            if fx == 0:
                roots.append(x)
            elif f_prev != 0 and mp.sign(fx) != mp.sign(f_prev):
                roots.append(mp.findroot(f, (x_prev, x), solver="anderson"))
            x_prev, f_prev = x, fx
            if j > 10 ** 6:
                raise RuntimeError("carslaw_jaeger_two_layer_eigenvalues: scan did not find "
                                   f"{n} roots")
        return [+r for r in roots[:n]]


def assert_relative(c, ref, scale, rtol):
    """|c - ref| <= rtol |ref| wherever |ref| > rtol * scale (the issues' criterion:
    relative agreement where C exceeds that fraction of the source scale)."""
    c, ref = np.asarray(c, float), np.asarray(ref, float)
    mask = np.abs(ref) > rtol * scale
    assert mask.any()
    err = np.abs(c - ref)[mask] / np.abs(ref[mask])
    assert err.max() <= rtol, f"max relative error {err.max():.3g}"
