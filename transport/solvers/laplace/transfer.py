"""Exact Laplace-domain solution of the layered column (transfer between segments).

On each segment (a layer, split further at the sample depths of a measured initial
profile so that the initial state c0 = a + b zeta is linear on it; a step, a depth
sampled twice, is a segment boundary, and the value at it is the deeper one), k = theta D,
c = theta R, zeta the depth below the segment top:

    k C'' - q C' - c (s + mu) C = -c (a + b zeta) - sigma / s,

boundary values become value / s.  Particular solution P = alpha + beta zeta with
beta = b / (s + mu), alpha = (c a + sigma / s - q beta) / (c (s + mu)).  Homogeneous
part A e^{r1 (zeta - z1)} + B e^{r2 (zeta - z2)} with

    r1,2 = (q +- sqrt(q^2 + 4 k c (s + mu))) / (2 k)     (principal square root),

computed without cancellation (r1 r2 = -c (s + mu) / k), and each exponential anchored
at the segment end where it is largest (z = bottom when Re r >= 0, else top), so every
entry has modulus <= 1 times a flux factor: thick layers and column Peclet numbers of
1000 and more never overflow.  The 2N unknowns follow from the two boundary rows (the
same kinds as :func:`transport.solvers.modal.operator.boundary_row`, and a source zone of
finite inventory, whose row F^ +/- (Gamma (s + lambda) + q_out) C^ = +/- Gamma C_s(0) is
the Laplace transform of its mass balance, :class:`transport.model.column.Boundary`) and, at each internal face,
C_below = K C_above and continuity of F = q C - k C'.  The system is banded (2, 2); its
rows are equilibrated and it is solved by LU with partial pivoting (LAPACK gbsv).

A semi-infinite bottom keeps only the r2 exponential (the analytic continuation of the
one that decays with depth) in the last layer; the bottom boundary is then unused.
"""
from __future__ import annotations

import functools
from dataclasses import dataclass

import numpy as np
from scipy.linalg.lapack import zgbsv

from transport.model.column import Column, InitialState, InputError
from transport.solvers.laplace import kernel

__all__ = ["PiecewiseCubic", "LaplaceTransfer", "initial_values", "RESONANT"]

_EXP_CAP = 600.0  # largest exponent kept (exp(600) ~ 1e260)

#: Why a decay chain is refused when a parent's exponential solves the daughter's own
#: equation (the same transport and decay in a layer: a secular term, not modelled).
RESONANT = ("a daughter species has the same diffusivity, retardation and decay rate as "
            "its parent in a layer, which this engine does not represent; give the two "
            "species distinct decay rates, 1e-4 relative apart or more (closer, some output "
            "times cannot be vouched for: measured at 1e-6 on a two-layer chain)")


def _segments(column: Column, initial: InitialState):
    """Segments on which the initial state is linear: arrays of tops, lengths, k, c, mu,
    sigma, a, b and the partition K at each lower face (1 inside a layer)."""
    faces = column.interfaces
    n = len(column.layers)
    if initial.kind == "uniform" and len(initial.values) != n:
        raise InputError(f"a uniform initial state needs one value per layer ({n}), "
                         f"got {len(initial.values)}")
    if initial.kind == "profile" and initial.depths[-1] > column.length * (1 + 1e-12):
        raise InputError(f"initial profile sample at {initial.depths[-1]} m lies below the "
                         f"column bottom ({column.length} m); remove it or extend the column")
    if initial.kind == "cubic":
        return _cubic_segments(column, initial)
    rows = []
    for i, lay in enumerate(column.layers):
        cuts = [faces[i], faces[i + 1]]
        if initial.kind == "profile":
            cuts = sorted(set(cuts) | {d for d in initial.depths if faces[i] < d < faces[i + 1]})
        for j, (z0, z1) in enumerate(zip(cuts[:-1], cuts[1:])):
            if initial.kind == "clean":
                a = b = 0.0
            elif initial.kind == "uniform":
                a, b = float(initial.values[i]), 0.0
            else:  # value just below z0, limit just above z1: exact at a step
                c0 = float(initial.profile_at(z0, "right"))
                c1 = float(initial.profile_at(z1, "left"))
                a, b = c0, (c1 - c0) / (z1 - z0)
            last = j == len(cuts) - 2
            rows.append((z0, z1 - z0, lay.water_content * lay.diffusivity,
                         lay.water_content * lay.retardation, lay.decay_rate, lay.source_rate,
                         a, b, lay.partition_to_next if last else 1.0))
    out = {key: np.array(col) for key, col in
           zip(("top", "l", "k", "c", "mu", "sigma", "a", "b", "K"), zip(*rows))}
    out["a2"] = out["a3"] = np.zeros(out["a"].size)
    return out


@dataclass(frozen=True)
class PiecewiseCubic:
    """An initial state that is a cubic polynomial on each segment (a state handed
    over between stages): segment ``tops`` and ``lengths`` (m, each segment inside one
    layer, together covering the column) and ``coefs`` (nseg, 4) of
    c0 = c_0 + c_1 x + c_2 x^2 + c_3 x^3 in the depth x below the segment top."""

    tops: tuple
    lengths: tuple
    coefs: tuple
    kind: str = "cubic"


def _cubic_segments(column: Column, initial):
    """Segments of a piecewise-cubic initial state (``initial.tops``, ``.lengths``,
    ``.coefs`` (nseg, 4) in powers of the local depth), each inside one layer."""
    faces = column.interfaces
    tops = np.asarray(initial.tops, float)
    lengths = np.asarray(initial.lengths, float)
    coefs = np.asarray(initial.coefs, float)
    lay = np.clip(np.searchsorted(faces, tops + 0.5 * lengths, side="right") - 1, 0,
                  len(column.layers) - 1)
    bottoms = tops + lengths
    at_face = np.isclose(bottoms, faces[lay + 1], rtol=1e-12, atol=1e-15)
    L = column.layers
    return {"top": tops, "l": lengths,
            "k": np.array([L[i].water_content * L[i].diffusivity for i in lay]),
            "c": np.array([L[i].water_content * L[i].retardation for i in lay]),
            "mu": np.array([L[i].decay_rate for i in lay]),
            "sigma": np.array([L[i].source_rate for i in lay]),
            "a": coefs[:, 0], "b": coefs[:, 1], "a2": coefs[:, 2], "a3": coefs[:, 3],
            "K": np.where(at_face, [L[i].partition_to_next for i in lay], 1.0)}


def _poly(p, zeta):
    """P(zeta) and P'(zeta) of particular-solution coefficients p (4, ...)."""
    return (p[0] + zeta * (p[1] + zeta * (p[2] + zeta * p[3])),
            p[1] + zeta * (2 * p[2] + zeta * 3 * p[3]))


def _expm1_over(x):
    """(e^x - 1) / x for complex x, limit 1 at 0."""
    small = np.abs(x) < 1e-6
    xs = np.where(small, 1.0, x)
    return np.where(small, 1 + x / 2 + x * x / 6, np.expm1(xs) / xs)


@functools.lru_cache(maxsize=64)
def _band_rows(n):
    """Index arrays of the gbsv storage ab (ns, n, 7) of n rows: ``gather`` (n, 5), the
    flat positions of each row's five band entries (a position beyond the matrix
    points at a slot of the LU's extra rows, zero when assembled), and ``row_of`` (n,
    7), the row of each slot (n, pointing at a divisor 1, for slots of no row)."""
    rows = np.arange(n)[:, None]
    col = rows - 2 + np.arange(5)[None, :]
    inside = (col >= 0) & (col < n)
    gather = np.where(inside, col * 7 + 4 + rows - col, 0)
    slot_col, slot = np.meshgrid(np.arange(n), np.arange(7), indexing="ij")
    row = slot_col + slot - 4
    row_of = np.where((slot >= 2) & (row >= 0) & (row < n), row, n)
    for a in (gather, row_of):
        a.flags.writeable = False
    return gather, row_of


def _solve_banded(ab, rhs):
    """Solve the ns banded (2, 2) systems ab[j] (n, 7) in gbsv storage: (solutions
    (ns, n), gbsv info per system).

    The systems are solved as ONE block-diagonal system of ns n rows in a single gbsv
    call: its band is the same (the entries coupling neighbouring blocks are zero), a
    zero candidate is never chosen as a pivot over a nonzero one, and every update a
    block receives from another is a zero multiple, so each block's LU and solution are
    those of its own call, to the bit (checked against the per-system calls in the
    tests).  A zero pivot (info > 0, the solve is then skipped) or a non-finite
    solution (0 x inf would spread to the neighbouring blocks) sends every system
    through its own call, which flags the bad ones alone."""
    ns, n = rhs.shape
    if ns > 1 and np.isfinite(ab).all() and np.isfinite(rhs).all():
        x, info = zgbsv(2, 2, ab.reshape(ns * n, 7).T, rhs.reshape(ns * n))[2:]
        if info == 0 and np.isfinite(x).all():
            return x.reshape(ns, n), np.zeros(ns, dtype=int)
    # each system on its own, in place: rhs[j] becomes its solution
    info = np.array([zgbsv(2, 2, a.T, b, overwrite_ab=1, overwrite_b=1)[3]
                     for a, b in zip(ab, rhs)], dtype=int)
    return rhs, info


class LaplaceTransfer:
    """Exact Laplace-domain solution of the layered column for a batch of s values."""

    def __init__(self, column: Column, initial: InitialState, semi_infinite: bool = False,
                 compiled: bool = False):
        self.column = column
        self.q = float(column.darcy_flux)
        self.seg = _segments(column, initial)
        self.semi = bool(semi_infinite)
        self.n = self.seg["l"].size
        # the compiled transfer (kernel.py) serves evaluate() where it covers the case:
        # an initial state linear on each segment (a decay chain's forcing is not passed
        # to evaluate)
        self.compiled = (compiled and not np.any(self.seg["a2"]) and not np.any(self.seg["a3"])
                         and kernel.available())

    def evaluate(self, s, signals, depths, stored=True):
        """C^ and F^ at ``depths`` ((ns, nz) each), the stored mass per segment (nseg,
        ns) and the capped flags (ns,) for s (ns,): :meth:`solve`, :meth:`fields` and
        :meth:`stored` in one, compiled where the transfer was built with
        ``compiled`` and the case allows (the same numbers to rounding).  Without
        ``stored`` the stored mass is not computed (an empty (0, ns) array)."""
        if not self.compiled:
            coef = self.solve(s, signals)
            C, F = self.fields(coef, depths)
            st = self.stored(coef) if stored else np.empty((0, np.size(s)), complex)
            return C, F, st, self.capped.copy()
        return kernel.evaluate(self, s, signals, depths, stored)

    def solve(self, s, signals, forcing=None):
        """Per-segment roots, anchors, particular parts and coefficients for s (ns,).

        ``signals`` = (top, bottom, sources, with_initial): transforms of the boundary
        values (ns,), of the layer sources per segment (nseg, ns), and whether the
        initial state belongs to this component.  ``forcing`` (a decay chain's parent,
        :mod:`transport.solvers.laplace.chain`): ``(poly, rho, anchor, amp)``, a
        transformed source per bulk volume  sum_m poly[m] zeta^m + sum_e amp[e]
        e^{rho[e] (zeta - anchor[e])}  on each segment (poly (4, nseg, ns); rho, anchor,
        amp (ne, nseg, ns)); its particular solution is carried with the fields.
        """
        g, q = self.seg, self.q
        top_hat, bot_hat, src_hat, with_initial = signals
        self._signals = (top_hat, bot_hat)
        self._with_initial = with_initial
        s = np.asarray(s, dtype=complex)[None, :]
        self.capped = np.zeros(s.shape[1], bool)
        c_seg = g["c"][:, None]
        poly = np.zeros((4, 1, 1)) if forcing is None else forcing[0] / c_seg
        a0 = g["a"][:, None] * with_initial + poly[0]
        b0 = g["b"][:, None] * with_initial + poly[1]
        k, c, l = g["k"][:, None], g["c"][:, None], g["l"][:, None]
        sm = s + g["mu"][:, None]
        root = np.sqrt(q * q + 4 * k * c * sm)
        if q >= 0:
            r1 = (q + root) / (2 * k)
            r2 = -2 * c * sm / (q + root)
        else:
            r2 = (q - root) / (2 * k)
            r1 = -2 * c * sm / (q - root)
        # particular solution P = p0 + p1 z + p2 z^2 + p3 z^3 of
        # k P'' - q P' - c sm P = -c (a0 + a1 z + a2 z^2 + a3 z^3) - sigma / s
        a2 = g["a2"][:, None] * with_initial + poly[2]
        a3 = g["a3"][:, None] * with_initial + poly[3]
        p3 = a3 / sm
        p2 = (c * a2 - 3 * q * p3) / (c * sm)
        beta = (c * b0 + 6 * k * p3 - 2 * q * p2) / (c * sm)
        alpha = (c * a0 + src_hat + 2 * k * p2 - q * beta) / (c * sm)
        alpha = np.stack(np.broadcast_arrays(alpha, beta, p2, p3))
        r = np.stack([r1, r2])  # (2, nseg, ns)
        # anchors: each exponential at the end where it peaks (bottom if Re r >= 0), so
        # every entry is <= 1 in modulus; r2 of a semi-infinite last layer at its top.
        anc = np.where(r.real >= 0, l, 0.0)
        if self.semi:
            anc[1, -1] = 0.0
        self._r, self._anc, self._alpha, self._beta, self._k = r, anc, alpha, alpha[1], k
        # particular part of each forcing exponential: P = amp / (c sm + q rho - k rho^2)
        if forcing is None or forcing[1].shape[0] == 0:
            self._xr = self._xanc = self._xp = np.zeros((0,) + sm.shape, complex)
        else:
            rho, xanc, amp = forcing[1], forcing[2], forcing[3]
            den = c * sm + q * rho - k * rho * rho
            scale = np.abs(c * sm) + abs(q) * np.abs(rho) + k * np.abs(rho) ** 2
            if np.any(np.abs(den) <= 1e-10 * scale):
                raise InputError(RESONANT)
            self._xr, self._xanc, self._xp = rho, np.broadcast_to(xanc, rho.shape), amp / den
        # no particular part at all (a clean column without sources or forcing): its
        # values and slopes are 0 and are not evaluated
        self._none = self._xr.shape[0] == 0 and not np.any(alpha)
        coef = self._linear_system(s[0], r, anc, alpha, beta, k, l)
        return coef

    def representation(self, coef):
        """C^ of the last :meth:`solve` on every segment as (poly (4, nseg, ns), rho,
        anchor, amp (ne, nseg, ns)): sum_m poly[m] zeta^m + sum_e amp[e] e^{rho[e]
        (zeta - anchor[e])}, every exponential bounded by 1 on its segment."""
        anc = np.broadcast_to(self._anc, self._r.shape)
        return (self._alpha, np.concatenate([self._r, self._xr]),
                np.concatenate([anc, self._xanc]), np.concatenate([coef, self._xp]))

    def _forced(self, i, zeta):
        """Value and slope of the forcing's exponential particular part at local depth
        zeta of segments i (zeta broadcasting against (len(i), ns)): two arrays."""
        if self._xr.shape[0] == 0:
            return 0.0, 0.0
        e = self._exp(self._xr[:, i] * (zeta - self._xanc[:, i]))
        return (self._xp[:, i] * e).sum(axis=0), (self._xp[:, i] * self._xr[:, i] * e).sum(axis=0)

    def _exp(self, x):
        """exp(x) with Re x capped at _EXP_CAP; records whether the cap was hit per s."""
        over = x.real > _EXP_CAP
        if over.any():
            self.capped |= over.reshape(-1, x.shape[-1]).any(axis=0)
            return np.exp(np.where(over, _EXP_CAP + 1j * x.imag, x))
        return np.exp(x)

    def _ends(self, r, anc, alpha, beta, k, i, zeta):
        """C and F rows at local depth zeta of segment i: (cC (2,ns), C0, cF, F0)."""
        e = self._exp(r[:, i] * (zeta - anc[:, i]))
        cC = e
        if self._none:
            C0 = dC0 = 0.0
        else:
            C0, dC0 = _poly(alpha[:, i], zeta)
            xC, xdC = self._forced(i, zeta)
            C0, dC0 = C0 + xC, dC0 + xdC
        cF = k[i] * r[::-1, i] * e  # q - k r1 = k r2 and q - k r2 = k r1: no cancellation
        F0 = self.q * C0 - k[i] * dC0
        return cC, C0, cF, F0

    def end_row(self, end, val, s, with_initial):
        """The boundary row at ``end`` ("top" or "bottom") as (kind, h, target): the
        transformed C (kind 0), F (1), dC/dz (2) or F + h C (3) equals ``target``;
        ``val`` is the transformed boundary value (ns,).  The one description of the
        boundary kinds that both forms of the transfer (:meth:`_boundary`, the compiled
        :func:`transport.solvers.laplace.kernel.evaluate`) build their rows from."""
        bc = getattr(self.column, end)
        kind = bc.kind
        sign = 1.0 if end == "top" else -1.0
        if kind == "concentration":
            return 0, 0.0, val
        if kind in ("flux", "inlet", "sealed"):
            return 1, 0.0, {"flux": val, "inlet": self.q * val, "sealed": 0.0 * val}[kind]
        if kind == "free-outflow":
            return 2, 0.0, 0 * val
        if kind == "mass-transfer":
            h = sign * bc.transfer_coefficient
            return 3, h, h * val
        if kind == "source-zone":
            # Gamma (s + lambda) C^_s - Gamma C_s(0) = -/+ F^ - q_out C^_s with C^_s = C^
            # at this end: F^ +/- h C^ = +/- Gamma C_s(0), h = Gamma (s + lambda) + q_out;
            # the zone's initial inventory belongs to the component holding the initial state
            h = sign * (bc.capacity * (s + bc.decay_rate) + bc.zone_outflow(self.q, end))
            inv = bc.capacity * bc.value * with_initial
            return 3, h, sign * inv
        raise InputError(f"unknown boundary kind {kind!r}")  # pragma: no cover

    def _boundary(self, end, r, anc, alpha, beta, k, l, s):
        i = 0 if end == "top" else self.n - 1
        zeta = 0.0 if end == "top" else l[i]
        cC, C0, cF, F0 = self._ends(r, anc, alpha, beta, k, i, zeta)
        val = self._signals[0 if end == "top" else 1]
        kind, h, target = self.end_row(end, val, s, self._with_initial)
        if kind == 0:
            return cC, target - C0
        if kind == 1:
            return cF, target - F0
        if kind == 2:
            slope = 0.0 if self._none else _poly(alpha[:, i], zeta)[1] + self._forced(i, zeta)[1]
            return r[:, i] * cC, -slope + target
        return cF + h * cC, target - F0 - h * C0

    def _linear_system(self, s, r, anc, alpha, beta, k, l):
        n, ns = 2 * self.n, s.size
        # LAPACK gbsv storage with the 2 extra rows its LU needs: entry (row, col) at row
        # 4 + row - col of a (7, n) Fortran-ordered array per s, i.e. ab[:, col, 4 + row
        # - col] here.  This is exactly what scipy.linalg.solve_banded((2, 2), ...) hands
        # to gbsv; calling the LAPACK routine directly gives the same numbers without
        # the wrapper's per-call checks (a tenth of the cost of a small system).
        ab = np.zeros((ns, n, 7), dtype=complex)
        rhs = np.zeros((ns, n), dtype=complex)

        def put(row, col, val):
            ab[:, col, 4 + row - col] = val

        top, rt = self._boundary("top", r, anc, alpha, beta, k, l, s)
        put(0, 0, top[0])
        put(0, 1, top[1])
        rhs[:, 0] = rt
        if self.n > 1:  # every internal face at once (rows 2i+1 and 2i+2)
            i = np.arange(self.n - 1)
            cA, CA, fA, FA = self._ends(r, anc, alpha, beta, k, i, l[i])
            cB, CB, fB, FB = self._ends(r, anc, alpha, beta, k, i + 1, 0.0)
            K = self.seg["K"][i][:, None]

            def put_faces(row, offset, val):  # val (m, ns): entries at col = 2i + offset
                col = 2 * i + offset
                ab[:, col, 4 + row - col] = val.T

            row = 2 * i + 1  # C_below - K C_above = 0
            put_faces(row, 0, -K * cA[0])
            put_faces(row, 1, -K * cA[1])
            put_faces(row, 2, cB[0])
            put_faces(row, 3, cB[1])
            rhs[:, row] = (K * CA - CB).T
            row = row + 1  # F_above - F_below = 0
            put_faces(row, 0, fA[0])
            put_faces(row, 1, fA[1])
            put_faces(row, 2, -fB[0])
            put_faces(row, 3, -fB[1])
            rhs[:, row] = (FB - FA).T
        row = n - 1
        if self.semi:
            put(row, n - 2, np.ones(ns))  # no growing exponential in the last layer
        else:
            bot, rb = self._boundary("bottom", r, anc, alpha, beta, k, l, s)
            put(row, n - 2, bot[0])
            put(row, n - 1, bot[1])
            rhs[:, row] = rb
        # row equilibration: entries far from an exponential's anchor can be tiny
        gather, row_of = _band_rows(n)
        big = np.abs(ab.reshape(ns, 7 * n)[:, gather]).max(axis=2)  # (ns, n)
        big = np.where(big > 0, big, 1.0)
        ab /= np.concatenate([big, np.ones((ns, 1))], axis=1)[:, row_of]
        rhs /= big
        rhs, info = _solve_banded(ab, rhs)
        if info.size and info.min() < 0:  # pragma: no cover - the arguments are built above
            raise ValueError(f"illegal value in argument {-info.min()} of gbsv")
        self.capped |= info > 0
        rhs[info > 0] = 0.0
        return self._unusable(rhs).reshape(ns, self.n, 2).transpose(2, 1, 0)

    def _unusable(self, sol):
        """Solutions (ns, n) with systems that were singular in floating point or gave
        non-finite coefficients: those s are flagged like a capped exponent (their
        inversions carry an infinite error estimate, so another contour or engine
        serves, or the time is refused) and their coefficients set to 0.  This happens
        far out on a contour in layers of very high Peclet number, where both
        exponentials of a layer fall below the smallest double across it."""
        bad = ~np.isfinite(sol).all(axis=1)
        if bad.any():
            self.capped |= bad
            sol[bad] = 0.0
        return sol

    def locate(self, depths):
        """Segment index and local depth of each output depth (the segment below a face)."""
        z = np.asarray(depths, dtype=float)
        idx = np.clip(np.searchsorted(self.seg["top"], z, side="right") - 1, 0, self.n - 1)
        return idx, z - self.seg["top"][idx]

    def fields(self, coef, depths):
        """C^ and F^ at depths: two (ns, nz) arrays."""
        idx, zeta = self.locate(depths)
        r, anc = self._r[:, idx], self._anc[:, idx]  # (2, nz, ns)
        zc = zeta[:, None]
        e = self._exp(r * (zc - anc))
        if self.semi:  # the dropped exponential of the semi-infinite layer
            e[0, idx == self.n - 1] = 0.0
        e *= coef[:, idx]  # the two exponential terms of C^
        C = e[0] + e[1]
        # F = q C - k C' of the exponential terms: q - k r1 = k r2 and q - k r2 = k r1
        # (the roots' sum is q / k), as in _ends: no cancellation
        F = e[0] * r[1]
        F += e[1] * r[0]
        F *= self._k[idx]
        if np.any(self._alpha) or self._xr.shape[0]:  # particular part (initial state,
            P, dP = _poly(self._alpha[:, idx], zc)  # sources, a parent's forcing)
            xC, xdC = self._forced(idx, zc)
            P, dP = P + xC, dP + xdC
            C += P
            F += self.q * P - self._k[idx] * dP
        return C.T, F.T

    def stored(self, coef):
        """int theta R C^ dz over each segment: (nseg, ns)."""
        r, anc, l = self._r, self._anc, self.seg["l"][:, None]
        c = self.seg["c"][:, None]
        # anc = l: (1 - e^{-rl}) / r ;  anc = 0: (e^{rl} - 1) / r  (both bounded)
        at_bottom = anc > 0
        x = np.where(at_bottom, -r * l, r * l)
        integ = l * _expm1_over(np.where(x.real > _EXP_CAP, _EXP_CAP + 1j * x.imag, x))
        p = self._alpha
        lin = 0.0 if self._none else l * (p[0] + l * (p[1] / 2 + l * (p[2] / 3 + l * p[3] / 4)))
        if self._xr.shape[0]:  # int_0^l e^{rho (zeta - a)} dzeta of the forcing's part
            xr, xa = self._xr, self._xanc
            lo, hi = self._exp(-xr * xa), self._exp(xr * (l - xa))
            with np.errstate(divide="ignore", invalid="ignore"):
                xi = np.where(np.abs(xr * l) < 1e-6, l * lo * _expm1_over(xr * l),
                              (hi - lo) / xr)
            lin = lin + (self._xp * xi).sum(axis=0)
        out = c * ((coef * integ).sum(axis=0) + lin)
        if self.semi:  # last layer: int_0^inf e^{r2 zeta} = -1/r2 (A = 0)
            r2 = r[1, -1]
            lin_last = np.where((self.seg["a"][-1] == 0) & (self.seg["b"][-1] == 0)
                                & (self.seg["sigma"][-1] == 0), 0.0, np.nan)
            out[-1] = c[-1] * (coef[1, -1] * (-1.0 / r2) + lin_last)
        return out


def initial_values(column: Column, initial, depths):
    """The initial state C0 (kg m-3) at ``depths`` (clean, uniform, profile or piecewise
    cubic), right-continuous at a step."""
    if initial.kind == "clean":
        return np.zeros(depths.size)
    if initial.kind == "uniform":
        lay = np.clip(np.searchsorted(column.interfaces, depths, side="right") - 1, 0,
                      len(column.layers) - 1)
        return np.asarray(initial.values)[lay]
    if initial.kind == "cubic":
        seg = _cubic_segments(column, initial)
        i = np.clip(np.searchsorted(seg["top"], depths, side="right") - 1, 0, seg["l"].size - 1)
        x = depths - seg["top"][i]
        return seg["a"][i] + x * (seg["b"][i] + x * (seg["a2"][i] + x * seg["a3"][i]))
    return initial.profile_at(depths)  # right-continuous at a step
