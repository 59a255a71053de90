"""Independent reference solutions for the layered transport problem (test helper).

Nothing here imports the engines (``transport.solvers.modal.spectrum``, ``transport.solvers.modal.series``,
``transport.solvers.laplace``, ``transport.solvers.engines``, nor ``transport.solvers.timeline``, which imports
the modal engine): these routines are the yardsticks the engines are measured against.

* :func:`laplace_reference_full` -- the layered problem solved exactly in the Laplace
  domain with mpmath (one global band system with scaled exponentials per segment) and
  inverted numerically with mpmath's inversion rules (Talbot, de Hoog or Stehfest):
  concentration, total flux, cumulative mass through any depth and the mass budget
  (stored, decayed, entered, left, produced).  :func:`laplace_reference` returns C only.
* :func:`interpolated_state` -- a sampled field carried as piecewise polynomials
  (Chebyshev interpolation), the initial state of the next stage of a staged run.
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

Conventions (as ``transport.model.column``): z positive down, z = 0 at the top; on each layer
theta R dC/dt = d/dz(theta D dC/dz) - q dC/dz - theta R mu C + sigma; total flux
F = q C - theta D dC/dz, positive downward.
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import mpmath as mp
import numpy as np
from scipy.special import erfc, erfcx

from transport.model.column import Column, InitialState, InputError

__all__ = [
    "laplace_reference",
    "laplace_reference_full",
    "ReferenceSolution",
    "PolynomialState",
    "interpolated_state",
    "advection_guard_digits",
    "crank_slab_series",
    "erfc_semi_infinite",
    "ogata_banks",
    "carslaw_jaeger_two_layer_eigenvalues",
]


# --------------------------------------------------------------------------------------
# Laplace-domain solution of the layered column
# --------------------------------------------------------------------------------------
class PolynomialState:
    """Initial state given as polynomials on depth pieces (a reference-only form).

    ``pieces`` is a sequence of (top, bottom, coeffs): on top <= z <= bottom the initial
    concentration is sum_m coeffs[m] (z - top)^m.  The pieces of each layer must tile it
    exactly (a layer without pieces starts clean).  Used to carry a state sampled from one
    stage of a staged run into the next (see :func:`interpolated_state`).
    """

    def __init__(self, pieces):
        self.pieces = tuple((float(a), float(b), tuple(c)) for a, b, c in pieces)


def _segments(column: Column, initial):
    """Split the column into segments on which the initial state is a polynomial.

    Returns a list of dicts with the layer index and properties, the segment top/bottom,
    the initial state as polynomial coefficients ``poly`` in (z - top), and the partition
    coefficient K at the segment's lower face (1 inside a layer).
    """
    faces = column.interfaces
    n = len(column.layers)
    kind = getattr(initial, "kind", "polynomial")
    if kind == "uniform" and len(initial.values) != n:
        raise InputError(f"uniform initial state has {len(initial.values)} values for "
                         f"{n} layers; give one value per layer")
    segs = []
    for i, lay in enumerate(column.layers):
        top, bot = float(faces[i]), float(faces[i + 1])
        tol = 1e-12 * max(bot, 1.0)
        if kind == "polynomial":
            pieces = [p for p in initial.pieces if p[0] >= top - tol and p[1] <= bot + tol]
            if not pieces:
                pieces = [(top, bot, (0.0,))]
            pieces.sort()
            edges = [pieces[0][0]] + [p[1] for p in pieces]
            gaps = [abs(p[0] - e) for p, e in zip(pieces[1:], edges[1:])]
            if abs(edges[0] - top) > tol or abs(edges[-1] - bot) > tol or max(gaps + [0]) > tol:
                raise InputError(f"polynomial pieces do not tile layer {i} [{top}, {bot}]")
            pieces = [(top if j == 0 else p[0], bot if j == len(pieces) - 1 else p[1], p[2])
                      for j, p in enumerate(pieces)]
        else:
            cuts = [top, bot]
            if kind == "profile":
                cuts += [d for d in initial.depths if top < d < bot]
            cuts = sorted(cuts)
            pieces = []
            for z0, z1 in zip(cuts[:-1], cuts[1:]):
                if kind == "clean":
                    poly = (0.0,)
                elif kind == "uniform":
                    poly = (float(initial.values[i]),)
                else:
                    c0, c1 = np.interp([z0, z1], initial.depths, initial.values)
                    poly = (float(c0), float((c1 - c0) / (z1 - z0)))
                pieces.append((z0, z1, poly))
        for j, (z0, z1, poly) in enumerate(pieces):
            last = j == len(pieces) - 1
            segs.append(dict(layer=i, top=z0, bot=z1, theta=lay.water_content, D=lay.diffusivity,
                             R=lay.retardation, mu=lay.decay_rate, poly=tuple(poly),
                             K=lay.partition_to_next if last else 1.0))
    return segs


def _band_solve(rows, rhs, kl=2, ku=2):
    """Gaussian elimination with partial pivoting for a band matrix given as a list of
    {column: value} rows (lower bandwidth ``kl``, upper ``ku``; LU fill-in stays within
    kl + ku).  No spurious singularity test: mpmath's ``lu_solve`` rejects pivots below
    ||M||_1 eps, which an equilibrated but strongly graded system (high Peclet number)
    can trip although it is regular."""
    n = len(rows)
    a = [dict(r) for r in rows]
    b = list(rhs)
    for j in range(n):
        cand = range(j, min(n, j + kl + 1))
        piv = max(cand, key=lambda i: abs(a[i].get(j, 0)))
        if a[piv].get(j, 0) == 0:
            raise ZeroDivisionError("Laplace-domain system is singular")
        a[j], a[piv] = a[piv], a[j]
        b[j], b[piv] = b[piv], b[j]
        pj = a[j][j]
        for i in range(j + 1, min(n, j + kl + 1)):
            aij = a[i].pop(j, 0)
            if aij == 0:
                continue
            f = aij / pj
            for col, val in a[j].items():
                if col > j:
                    a[i][col] = a[i].get(col, 0) - f * val
            b[i] -= f * b[j]
    x = [mp.mpf(0)] * n
    for i in range(n - 1, -1, -1):
        acc = b[i] - mp.fsum(val * x[col] for col, val in a[i].items() if col > i)
        x[i] = acc / a[i][i]
    return x


def _atom_hat(kind, amp, rate, s):
    """Transform of one schedule atom switched on at 0: step A/s, ramp A/s^2,
    exponential A/(s + r) (standard pairs, Abramowitz & Stegun 1964, table 29.3)."""
    if kind == "step":
        return mp.mpf(amp) / s
    if kind == "ramp":
        return mp.mpf(amp) / (s * s)
    return mp.mpf(amp) / (s + mp.mpf(rate))


def _atom_integral(kind, amp, rate, tau):
    """int_0^tau of one atom switched on at 0 (closed form)."""
    if tau <= 0:
        return mp.mpf(0)
    tau, amp, rate = mp.mpf(tau), mp.mpf(amp), mp.mpf(rate)
    if kind == "step":
        return amp * tau
    if kind == "ramp":
        return amp * tau ** 2 / 2
    if rate == 0:
        return amp * tau
    return -amp * mp.expm1(-rate * tau) / rate


def _atoms(schedule, constant: float, scale: float = 1.0):
    """Atoms (kind, t0, amp, rate) of a scheduled value, or the constant as a step at 0."""
    if schedule is None:
        return [("step", 0.0, constant * scale, 0.0)] if constant * scale != 0 else []
    return [(k, float(t0), float(a) * scale, float(r)) for k, t0, a, r in schedule.atoms
            if a * scale != 0]


def _signals(column: Column):
    """Every signal atom: list of (where, kind, t0, amp, rate); where is "top",
    "bottom" or a layer index (zero-order source, amp in kg m-3 s-1)."""
    out = []
    for end in ("top", "bottom"):
        bc = getattr(column, end)
        if bc.kind in ("concentration", "flux", "inlet", "mass-transfer"):
            out += [(end,) + a for a in _atoms(getattr(bc, "schedule", None), bc.value)]
    for i, lay in enumerate(column.layers):
        if lay.source_rate != 0:
            out += [(i,) + a for a in _atoms(getattr(lay, "source_schedule", None), 1.0,
                                             lay.source_rate)]
    return out


class _LaplaceColumn:
    """Exact Laplace-domain solution of the layered column, all outputs per s.

    On segment i with k = theta D, c = theta R and initial state c0 = sum_m a_m zeta^m
    (zeta = z - top):  k C'' - q C' - c (s + mu) C = -c c0(zeta) - sigma^(s), with
    sigma^ the transform of the layer's zero-order source.  Particular solution
    P = sum_m p_m zeta^m of the same degree, from the top degree down:
    p_m = (c a_m + k (m+2)(m+1) p_{m+2} - q (m+1) p_{m+1} + [m = 0] sigma^) / (c (s + mu)).
    The homogeneous part is A e^{r1 (zeta - z1)} + B e^{r2 (zeta - z2)}, r1 r2 =
    -c (s + mu)/k, r1 + r2 = q/k, the root without cancellation computed first, each
    exponential anchored at the segment end where it is largest (z1, z2 in {0, l}), so
    every matrix entry has modulus <= 1 times a flux factor: thick layers and high
    Peclet numbers never over- or underflow.  The 2N unknowns follow from the two
    boundary conditions and, at each internal face, C_below = K C_above and continuity
    of F = q C - k C'.  Segment integrals: int_0^l e^{r (zeta - a)} = expm1(r l)/r
    (a = 0) or -expm1(-r l)/r (a = l); int P = sum p_m l^{m+1}/(m+1).
    """

    def __init__(self, column: Column, initial, depths):
        self.column = column
        self.segs = _segments(column, initial)
        self.q = column.darcy_flux
        tops = [g["top"] for g in self.segs]
        self.where = []
        for z in depths:
            i = max(0, int(np.searchsorted(tops, z, side="right")) - 1)
            self.where.append((i, mp.mpf(float(z)) - mp.mpf(self.segs[i]["top"])))

    def initial_mass(self):
        tot = mp.mpf(0)
        for g in self.segs:
            c = mp.mpf(g["theta"]) * mp.mpf(g["R"])
            l = mp.mpf(g["bot"]) - mp.mpf(g["top"])
            tot += c * mp.fsum(mp.mpf(a) * l ** (m + 1) / (m + 1) for m, a in enumerate(g["poly"]))
        return tot

    def values(self, s, group, with_initial):
        """[C(z_j)], [F(z_j)], [F(z_j)/s], F(0)/s, F(L)/s, stored, decayed/s at s for the
        signal atoms ``group`` ((where, kind, delay, amp, rate); delay e^{-s delay})."""
        q = mp.mpf(self.q)
        segs = self.segs
        n = len(segs)
        hat = {"top": mp.mpf(0), "bottom": mp.mpf(0)}
        src = {}
        for where, kind, delay, amp, rate in group:
            v = _atom_hat(kind, amp, rate, s)
            if delay:
                v *= mp.exp(-s * mp.mpf(delay))
            if where in hat:
                hat[where] += v
            else:
                src[where] = src.get(where, 0) + v
        parts = []
        for g in segs:
            k = mp.mpf(g["theta"]) * mp.mpf(g["D"])
            c = mp.mpf(g["theta"]) * mp.mpf(g["R"])
            sm = s + mp.mpf(g["mu"])
            root = mp.sqrt(q * q + 4 * k * c * sm)
            if q >= 0:
                r1 = (q + root) / (2 * k)
                r2 = -c * sm / (k * r1)
            else:
                r2 = (q - root) / (2 * k)
                r1 = -c * sm / (k * r2)
            length = mp.mpf(g["bot"]) - mp.mpf(g["top"])
            poly = [mp.mpf(a) for a in g["poly"]] if with_initial else [mp.mpf(0)]
            deg = len(poly) - 1
            p = [mp.mpf(0)] * (deg + 3)
            for m in range(deg, -1, -1):
                val = c * poly[m] + k * (m + 2) * (m + 1) * p[m + 2] - q * (m + 1) * p[m + 1]
                if m == 0:
                    val += src.get(g["layer"], 0)
                p[m] = val / (c * sm)
            p = p[:deg + 1]
            dp = [m * p[m] for m in range(1, deg + 1)] or [mp.mpf(0)]
            anchors = [length if mp.re(r) >= 0 else mp.mpf(0) for r in (r1, r2)]
            # e^{r (zeta - a)} at the segment ends: 1 at the anchor, e^{-|r l|-ish} at the
            # other end (one exponential per root, shared by every row and integral)
            far = [mp.exp(-r * length) if a == length else mp.exp(r * length)
                   for r, a in zip((r1, r2), anchors)]
            ends = {0: [far[j] if anchors[j] == length else mp.mpf(1) for j in (0, 1)],
                    1: [mp.mpf(1) if anchors[j] == length else far[j] for j in (0, 1)]}
            parts.append(dict(k=k, c=c, r=(r1, r2), anc=anchors, L=length, p=p, dp=dp,
                              far=far, ends=ends))

        def horner(cf, x):
            acc = mp.mpf(0)
            for a in reversed(cf):
                acc = acc * x + a
            return acc

        def ex(i, zeta):
            pp = parts[i]
            if zeta == 0:
                return pp["ends"][0]
            if zeta == pp["L"]:
                return pp["ends"][1]
            return [mp.exp(r * (zeta - a)) for r, a in zip(pp["r"], pp["anc"])]

        def row_c(i, zeta):
            return ex(i, zeta), horner(parts[i]["p"], zeta)

        def row_f(i, zeta):
            pp = parts[i]
            e = ex(i, zeta)
            coef = [(q - pp["k"] * r) * ei for r, ei in zip(pp["r"], e)]
            return coef, q * horner(pp["p"], zeta) - pp["k"] * horner(pp["dp"], zeta)

        def row_g(i, zeta):
            pp = parts[i]
            e = ex(i, zeta)
            return [r * ei for r, ei in zip(pp["r"], e)], horner(pp["dp"], zeta)

        rows = [dict() for _ in range(2 * n)]
        rhs = [mp.mpf(0)] * (2 * n)

        def put(row, i, coefs, const, scale=1):
            for j in (0, 1):
                rows[row][2 * i + j] = rows[row].get(2 * i + j, 0) + scale * coefs[j]
            rhs[row] -= scale * const

        for row, end, i, zeta in ((0, "top", 0, mp.mpf(0)),
                                  (2 * n - 1, "bottom", n - 1, parts[-1]["L"])):
            bc = getattr(self.column, end)
            val = hat[end]
            sign = 1 if end == "top" else -1
            if bc.kind == "concentration":
                put(row, i, *row_c(i, zeta))
                rhs[row] += val
            elif bc.kind in ("flux", "inlet", "sealed"):
                put(row, i, *row_f(i, zeta))
                rhs[row] += {"flux": val, "inlet": q * val, "sealed": 0}[bc.kind]
            elif bc.kind == "free-outflow":
                put(row, i, *row_g(i, zeta))
            elif bc.kind == "mass-transfer":
                # top: F = h (value - C);  bottom: F = h (C - value)
                h = mp.mpf(bc.transfer_coefficient)
                put(row, i, *row_f(i, zeta))
                put(row, i, *row_c(i, zeta), scale=sign * h)
                rhs[row] += sign * h * val
            elif bc.kind == "source-zone":
                # the zone's mass balance, transformed: Gamma (s + lambda) C^ - Gamma C_s(0)
                # = -F^ - q_out C^ (top) or +F^ - q_out C^ (bottom), C^ = C^ at the end
                gam, lam = mp.mpf(bc.capacity), mp.mpf(bc.decay_rate)
                q_out = max(-q, 0) if end == "top" else max(q, 0)
                h = gam * (s + lam) + q_out
                put(row, i, *row_f(i, zeta))
                put(row, i, *row_c(i, zeta), scale=sign * h)
                if with_initial:
                    rhs[row] += sign * gam * mp.mpf(bc.value)
            else:  # pragma: no cover - model.Boundary validates kinds
                raise InputError(f"unknown boundary kind {bc.kind!r}")
        for i in range(n - 1):  # C_below - K C_above = 0 ; F_above - F_below = 0
            row = 1 + 2 * i
            put(row, i + 1, *row_c(i + 1, mp.mpf(0)))
            put(row, i, *row_c(i, parts[i]["L"]), scale=-mp.mpf(segs[i]["K"]))
            put(row + 1, i, *row_f(i, parts[i]["L"]))
            put(row + 1, i + 1, *row_f(i + 1, mp.mpf(0)), scale=-1)
        for row in range(2 * n):  # row equilibration
            big = max(abs(v) for v in rows[row].values())
            if big != 0:
                rows[row] = {col: v / big for col, v in rows[row].items()}
                rhs[row] /= big
        coef = _band_solve(rows, rhs)

        def fields(i, zeta):
            """C and F at local depth zeta of segment i (the exponentials computed once)."""
            pp = parts[i]
            e = ex(i, zeta)
            a, b = coef[2 * i] * e[0], coef[2 * i + 1] * e[1]
            cst = horner(pp["p"], zeta)
            conc = cst + a + b
            flux = (q * cst - pp["k"] * horner(pp["dp"], zeta) + (q - pp["k"] * pp["r"][0]) * a
                    + (q - pp["k"] * pp["r"][1]) * b)
            return conc, flux

        both = [fields(i, zeta) for i, zeta in self.where]
        conc = [c for c, _ in both]
        flux = [f for _, f in both]
        f_top = fields(0, mp.mpf(0))[1]
        f_bot = fields(n - 1, parts[-1]["L"])[1]
        stored, decay = mp.mpf(0), mp.mpf(0)
        for i, (g, pp) in enumerate(zip(segs, parts)):
            l = pp["L"]
            tot = mp.fsum(pm * l ** (m + 1) / (m + 1) for m, pm in enumerate(pp["p"]))
            for j, (r, a) in enumerate(zip(pp["r"], pp["anc"])):
                if abs(r * l) < 0.5:  # expm1 where e - 1 would cancel
                    ints = -mp.expm1(-r * l) / r if a == l else mp.expm1(r * l) / r
                else:
                    ints = (1 - pp["far"][j]) / r if a == l else (pp["far"][j] - 1) / r
                tot += coef[2 * i + j] * ints
            stored += pp["c"] * tot
            decay += mp.mpf(g["mu"]) * pp["c"] * tot
        return conc + flux + [f / s for f in flux] + [f_top / s, f_bot / s, stored, decay / s]


_RULES = {"talbot": "FixedTalbot", "dehoog": "deHoog", "stehfest": "Stehfest"}


def _talbot_weights(rule, t):
    """Weights w_k of mpmath's fixed Talbot rule, f(t) = Re sum_k w_k f^(p_k): the sum of
    ``FixedTalbot.calc_time_domain_solution`` (Abate & Valko 2004, IJNME 60:979, eq. for
    the fixed Talbot method), computed once for all quantities (that routine recomputes
    its exponentials per call; tests/test_reference.py checks the two agree)."""
    M = rule.degree
    w = [mp.exp(rule.delta[0]) / 2]
    for i in range(1, M):
        cot = rule.cot_theta[i]
        w.append(mp.exp(rule.delta[i]) * (1 + 1j * rule.theta[i] * (1 + cot ** 2) - 1j * cot))
    scale = mp.mpf(2) / 5 / t
    return [wi * scale for wi in w]


def _invert_all(fvec, t, method):
    """Inverse transforms at time t of every entry of the vector function ``fvec``, on
    mpmath's own inversion nodes (as ``mp.invertlaplace``), one transform evaluation per
    node for all entries."""
    from mpmath.calculus import inverselaplace as il
    rule = getattr(il, _RULES[method])(mp.mp)
    t = mp.mpf(t)
    rule.calc_laplace_parameter(t)
    try:
        vals = [fvec(p) for p in rule.p]
        if method == "talbot":
            w = _talbot_weights(rule, t)
            return [mp.re(mp.fsum(wk * v[j] for wk, v in zip(w, vals)))
                    for j in range(len(vals[0]))]
        return [rule.calc_time_domain_solution([v[j] for v in vals], t, manual_prec=True)
                for j in range(len(vals[0]))]
    finally:
        mp.mp.dps = rule.dps_orig


@dataclass
class ReferenceSolution:
    """Fields of :func:`laplace_reference_full` on the (time, depth) grid."""

    times: np.ndarray
    depths: np.ndarray
    concentration: np.ndarray  # (nt, nz) kg m-3
    total_flux: np.ndarray  # (nt, nz) kg m-2 s-1, F = q C - theta D dC/dz
    cumulative_mass: np.ndarray  # (nt, nz) kg m-2 crossed downward during (0, t)
    budget: dict  # (nt,) stored, initial_stored, entered_top, left_bottom, decayed,
    #               produced, residual (kg m-2)


def advection_guard_digits(column: Column) -> int:
    """Guard digits for advection: the transform carries factors up to
    exp(int_0^L |q| / (2 theta D) dz) that cancel in the inversion sum."""
    guard = sum(abs(column.darcy_flux) * lay.thickness / (2 * lay.water_content * lay.diffusivity)
                for lay in column.layers)
    return int(math.ceil(guard / math.log(10)))


def laplace_reference_full(column: Column, depths, times, initial=None, dps: int = 20,
                           method: str = "talbot", shift: str = "split"):
    """C, total flux, cumulative mass and the mass budget by numerical Laplace inversion.

    Parameters
    ----------
    column : transport.model.column.Column; boundary values constant or scheduled (step, ramp
        and exponential atoms), zero-order layer sources (optionally scheduled), decay,
        partition jumps.
    depths : (nz,) m in [0, L]; at a partition face the concentration just below it.
    times : (nt,) s, > 0.  At a signal's change time the state just before the change.
    initial : InitialState (clean, uniform, profile) or :class:`PolynomialState`.
    dps : decimal digits of the caller context (``method`` raises them internally,
        Talbot by 1.72x); advection adds :func:`advection_guard_digits`.
    method : "talbot" | "dehoog" | "stehfest" (mpmath's rules).
    shift : "split" -- every group of signal atoms switched on at the same time t0 is
        inverted separately at t - t0 (shift theorem, f(t - t0) H(t - t0) <->
        e^{-s t0} f^(s)), the initial state with the group at 0; "delay" -- one inversion
        at t with the delay factors e^{-s t0} kept in the transform (a cross-check: on a
        contour built for t the factor degrades the accuracy when t - t0 << t).

    Returns
    -------
    ReferenceSolution.  cumulative_mass = inverse of F^(z, s)/s; budget: stored =
    inverse of sum theta R int C^ dz, decayed = inverse of sum mu theta R int C^ dz / s,
    entered_top / left_bottom the cumulative masses at z = 0 and z = L, produced =
    sum sigma_i l_i int_0^t (schedule) in closed form, residual = stored - initial -
    entered + left + decayed - produced (zero up to the inversion error).
    """
    initial = InitialState.clean() if initial is None else initial
    depths = np.atleast_1d(np.asarray(depths, dtype=float))
    times = np.atleast_1d(np.asarray(times, dtype=float))
    if np.any(times <= 0):
        raise ValueError("laplace_reference: times must be > 0 s")
    if np.any(depths < 0) or np.any(depths > column.length * (1 + 1e-12)):
        raise ValueError(f"laplace_reference: depths must lie in [0, {column.length}] m")
    if shift not in ("split", "delay"):
        raise ValueError(f"shift must be 'split' or 'delay', got {shift!r}")
    nt, nz = times.size, depths.size
    atoms = _signals(column)
    width = 3 * nz + 4
    acc = np.zeros((nt, width))
    produced = np.zeros(nt)
    with mp.workdps(dps + advection_guard_digits(column)):
        model = _LaplaceColumn(column, initial, depths)
        init_mass = float(model.initial_mass())
        for it, t in enumerate(times):
            if shift == "split":
                starts = sorted({0.0} | {a[2] for a in atoms if a[2] < t})
                groups = [(t0, [(w, k, 0.0, amp, r) for w, k, a0, amp, r in atoms if a0 == t0])
                          for t0 in starts]
            else:
                groups = [(0.0, [(w, k, a0, amp, r) for w, k, a0, amp, r in atoms if a0 < t])]
            row = [mp.mpf(0)] * width
            for t0, group in groups:
                first = t0 == 0.0
                vals = _invert_all(lambda s, g=group, f=first: model.values(s, g, f),
                                   t - t0, method)
                row = [a + mp.re(v) for a, v in zip(row, vals)]
            acc[it] = [float(v) for v in row]
            prod = mp.mpf(0)
            for w, k, a0, amp, r in atoms:
                if not isinstance(w, str):
                    prod += mp.mpf(column.layers[w].thickness) * _atom_integral(k, amp, r, t - a0)
            produced[it] = float(prod)
    conc, flux, cum = acc[:, :nz], acc[:, nz:2 * nz], acc[:, 2 * nz:3 * nz]
    entered, left, stored, decayed = acc[:, 3 * nz], acc[:, 3 * nz + 1], acc[:, -2], acc[:, -1]
    budget = {"stored": stored, "initial_stored": np.full(nt, init_mass),
              "entered_top": entered, "left_bottom": left, "decayed": decayed,
              "produced": produced,
              "residual": stored - init_mass - entered + left + decayed - produced}
    return ReferenceSolution(times, depths, conc.copy(), flux.copy(), cum.copy(), budget)


def laplace_reference(column: Column, depths, times, initial=None, dps: int = 30,
                      method: str = "talbot") -> np.ndarray:
    """Concentration C(z, t) (nt, nz) of a layered column by numerical Laplace inversion.

    As :func:`laplace_reference_full` (which see; the same solution), returning only C.
    Talbot: fixed Talbot contour (Talbot 1979; Abate & Valko 2004, IJNME 60:979); de
    Hoog, Knight & Stokes (1982); Gaver-Stehfest (Stehfest 1970; needs a high ``dps``).
    With advection, int_0^L |q| / (2 theta D) dz / ln 10 guard digits are added (column
    Peclet number 1000 adds ~220 digits and makes the call ~10x slower).
    """
    return laplace_reference_full(column, depths, times, initial, dps, method).concentration


def interpolated_state(column: Column, sample, clean_layers=(), pieces_per_layer: int = 4,
                       degree: int = 12) -> PolynomialState:
    """A :class:`PolynomialState` on ``column`` interpolating a sampled field.

    Each layer not in ``clean_layers`` is cut into ``pieces_per_layer`` equal pieces; on
    each piece the field is interpolated at the ``degree + 1`` Chebyshev points of the
    first kind (interior points, so a value at a face is never asked for; near-minimax
    interpolation, Trefethen 2013, *Approximation Theory and Approximation Practice*,
    ch. 4 & 8).  ``sample(z)`` gets all nodes (local depths, m) in one call and returns
    the field there.  The monomial coefficients in (z - top) are solved in mpmath.
    """
    faces = column.interfaces
    nodes, layout = [], []
    x = [math.cos((2 * j + 1) * math.pi / (2 * (degree + 1))) for j in range(degree + 1)]
    for i in range(len(column.layers)):
        if i in clean_layers:
            continue
        edges = np.linspace(faces[i], faces[i + 1], pieces_per_layer + 1)
        for a, b in zip(edges[:-1], edges[1:]):
            zs = [0.5 * (a + b) + 0.5 * (b - a) * xj for xj in x]
            layout.append((float(a), float(b), len(nodes), zs))
            nodes += zs
    vals = np.asarray(sample(np.array(nodes)), dtype=float)
    pieces = []
    with mp.workdps(40):
        for a, b, start, zs in layout:
            h = mp.mpf(b) - mp.mpf(a)
            V = mp.matrix([[((mp.mpf(z) - a) / h) ** m for m in range(degree + 1)] for z in zs])
            y = mp.matrix([mp.mpf(float(v)) for v in vals[start:start + degree + 1]])
            cf = mp.lu_solve(V, y)
            pieces.append((a, b, tuple(cf[m] / h ** m for m in range(degree + 1))))
    return PolynomialState(pieces)

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
        a1, a2 = (mp.mpf(x.water_content) * x.retardation for x in (l1, l2))
        k1, k2 = (mp.mpf(x.water_content) * x.diffusivity for x in (l1, l2))
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


def brenner_eigenvalues(peclet: float, length: float, water_content: float,
                        diffusivity: float, retardation: float, n: int, dps: int = 40):
    """First ``n`` decay rates lambda (s-1) of one layer with a flux inlet on top and a
    free outflow at the bottom, column Peclet number P = q L / (theta D): Brenner (1962,
    Chem. Eng. Sci. 17:229), beta cot beta - beta^2/P + P/4 = 0 with one root beta_n in
    each (n pi, (n+1) pi), lambda = (D/R)(beta^2 + P^2/4)/L^2; roots by bisection in
    mpmath (f decreases from +inf to -inf on each branch), about dps - 5 digits."""
    P = mp.mpf(peclet)
    with mp.workdps(dps):
        def f(b):
            return b * mp.cot(b) - b * b / P + P / 4

        def bisect(lo, hi):
            for _ in range(int(3.5 * dps) + 20):
                mid = (lo + hi) / 2
                lo, hi = (mid, hi) if f(mid) > 0 else (lo, mid)
            return (lo + hi) / 2
        tiny = mp.mpf(10) ** (-dps + 10)
        roots = [bisect(k * mp.pi + tiny, (k + 1) * mp.pi - tiny) for k in range(n)]
        return [float((diffusivity / retardation) * (b * b + P * P / 4) / length ** 2)
                for b in roots]
