"""Boundary values and layer sources that change in time, for the finite-volume engine.

The semi-discrete face fluxes are F = Fmat C + f0, and f0 is linear in each boundary
value (every closure of :func:`transport.solvers.fv.assembly.assemble` is), so a scheduled end
contributes ``unit_end * value(t)`` with ``unit_end`` the f0 of a unit value at that end
alone.  A scheduled layer source adds ``sigma_i * value_i(t)`` on the layer's cells.
The integrator restarts at every change time of the schedules (steps and ramp kinks),
so each interval sees a smooth right-hand side; inside the interval (a, b] the signals
are evaluated on the left of b, so a jump at b belongs to the next interval.
"""
from __future__ import annotations

from dataclasses import replace

import numpy as np
import scipy.sparse as sp
from scipy.linalg.lapack import dgttrf, dgttrs
from scipy.sparse.linalg import splu

__all__ = ["Signals", "MarchFailure", "march_linear"]

_VALUE_KINDS = ("concentration", "flux", "inlet", "mass-transfer")


class Signals:
    """Time-dependent parts of f0 (face fluxes) and sigma (cell sources)."""

    def __init__(self, column, mesh, scheme, assemble):
        self.column = column
        static = column
        self.ends = []  # (end, face vector per unit value, schedule)
        for end in ("top", "bottom"):
            bc = getattr(column, end)
            if bc.schedule is not None and bc.kind in _VALUE_KINDS:
                static = replace(static, **{end: replace(bc, value=0.0, schedule=None)})
        self.static = static
        self.system = assemble(static, mesh, scheme)
        for end in ("top", "bottom"):
            bc = getattr(column, end)
            if bc.schedule is not None and bc.kind in _VALUE_KINDS:
                unit = replace(static, **{end: replace(bc, value=1.0, schedule=None)})
                vec = assemble(unit, mesh, scheme).f0 - self.system.f0
                self.ends.append((end, vec, bc.schedule))
        rates = np.array([lay.source_rate for lay in column.layers])[mesh.layer]
        self.sigma_static = rates.copy()
        self.sources = []  # (cell rates, schedule)
        for i, lay in enumerate(column.layers):
            if lay.source_schedule is not None and lay.source_rate != 0.0:
                cells = np.where(mesh.layer == i, rates, 0.0)
                self.sigma_static[mesh.layer == i] = 0.0
                self.sources.append((cells, lay.source_schedule))
        changes = set()
        for *_, sched in self.ends + self.sources:
            changes.update(sched.change_times)
        self.change_times = sorted(changes)

    @property
    def varying(self) -> bool:
        return bool(self.ends or self.sources)

    def f0(self, t, left: bool = False) -> np.ndarray:
        """Face-flux constants at times t: (t.size, faces); ``left``: at a change time
        the value just before it (the state the engines report there)."""
        t = np.atleast_1d(np.asarray(t, dtype=float))
        out = np.tile(self.system.f0, (t.size, 1))
        for _, vec, sched in self.ends:
            out += sched.value(t, left=left)[:, None] * vec[None, :]
        return out

    def sigma(self, t) -> np.ndarray:
        """Cell sources at times t: (t.size, cells), kg m-3 s-1."""
        t = np.atleast_1d(np.asarray(t, dtype=float))
        out = np.tile(self.sigma_static, (t.size, 1))
        for cells, sched in self.sources:
            out += sched.value(t)[:, None] * cells[None, :]
        return out

    def produced(self, t, vol) -> np.ndarray:
        """Mass per area produced by the sources during (0, t), kg m-2."""
        t = np.atleast_1d(np.asarray(t, dtype=float))
        out = t * float(self.sigma_static @ vol)
        for cells, sched in self.sources:
            out = out + sched.integral(t) * float(cells @ vol)
        return out

    def boundary_value(self, end: str, t) -> np.ndarray:
        """The boundary value of ``end`` at times t (its schedule, else the constant); at
        a change time the value just before it, as the other engines report."""
        t = np.atleast_1d(np.asarray(t, dtype=float))
        bc = getattr(self.column, end)
        if bc.schedule is not None:
            return bc.schedule.value(t, left=True)
        return np.full(t.size, bc.value)

    def scale(self, t_end: float) -> float:
        """Largest boundary value magnitude over [0, t_end]."""
        probe = self.probe_times(t_end)
        return max(float(np.max(np.abs(getattr(self.column, end).schedule.value(probe))))
                   if getattr(self.column, end).schedule is not None
                   else abs(getattr(self.column, end).value) for end in ("top", "bottom"))

    def probe_times(self, t_end: float) -> np.ndarray:
        """0, t_end and the change times between, each also just before itself: where
        steps, ramps and depletion take their extremes."""
        t = np.array(sorted({0.0, t_end, *[c for c in self.change_times
                                            if 0.0 <= c <= t_end]}))
        return np.concatenate([t, np.maximum(np.nextafter(t, -np.inf), 0.0)])

    def intervals(self, t_end: float):
        """(a, b) pieces of [0, t_end] between change times."""
        cuts = [0.0] + [c for c in self.change_times if 0.0 < c < t_end] + [t_end]
        return list(zip(cuts[:-1], cuts[1:]))


# ------------------------------------------------------------------ linear time marching
#: Columns of the extrapolation tableau (step sequence 1, 2, ..., EXTRAP_COLUMNS).
EXTRAP_COLUMNS = 5
#: Macro steps allowed per run before the integration is declared failed.
MAX_MACRO_STEPS = 20000
#: Rejected steps allowed where the rounding of the implicit solve can explain them.
MAX_NOISY_REJECTIONS = 40


class MarchFailure(RuntimeError):
    """The linear time marching could not meet its tolerance (step size underflow or
    too many steps); the caller turns it into a message that names the cause."""


def march_linear(jac, pmat, drive, t_a, t_b, y0, q0, t_eval, rtol, atol_y, atol_q):
    """March dy/dt = J y + d(t), dq/dt = P y + e(t) from t_a to t_b (linear, constant J).

    Extrapolated implicit Euler (Deuflhard 1985, SIAM Rev. 27:505; Hairer & Wanner 1996,
    *Solving ODEs II*, sec. IV.9): a macro step H is taken with n_j = j implicit Euler
    substeps (j = 1 .. EXTRAP_COLUMNS), the results are extrapolated to H -> 0 by the
    Aitken-Neville tableau T_jk = T_j,k-1 + (T_j,k-1 - T_j-1,k-1) / (n_j / n_j-k - 1), and
    |T_jj - T_j,j-1| is the local error estimate (accepted once <= atol + rtol |y|).
    Every substep is one sparse LU solve of (I - h J): no Newton iteration, so a state
    that is already stationary (where scipy's BDF Newton test sees only rounding noise
    and halves the step without end) is marched like any other.  The implicit Euler
    substeps keep linear invariants exactly and the tableau is an affine combination of
    them, so the mass budget closes to rounding.  The stability function of every
    tableau entry is bounded on the negative real axis, where the spectrum of the
    semi-discrete operator lies (it is similar to a symmetric negative semidefinite
    matrix), and tends to 0 there, so arbitrarily stiff layers are damped.

    ``drive(t)`` returns (d, e) at t; t_eval (sorted, in (t_a, t_b]) are hit exactly.
    Returns (y, q) arrays (len(t_eval), n) and (len(t_eval), n_q).
    """
    n = y0.size
    jac = sp.csr_matrix(jac)
    lower, diag, upper = jac.diagonal(-1), jac.diagonal(0), jac.diagonal(1)
    tridiagonal = (np.count_nonzero(lower) + np.count_nonzero(diag) + np.count_nonzero(upper)
                   == jac.count_nonzero())
    eye = sp.identity(n, format="csc")
    cache = {}

    def lu(h):
        """Solver of (I - h J) x = r: LAPACK tridiagonal LU (the three-point stencil),
        sparse LU otherwise."""
        if h not in cache:
            if len(cache) > 4 * EXTRAP_COLUMNS:
                cache.clear()
            if tridiagonal:
                fac = dgttrf(-h * lower, 1.0 - h * diag, -h * upper)
                if fac[-1] != 0:
                    raise MarchFailure(f"singular implicit Euler matrix (step {h:.3g} s)")

                def solve(r, fac=fac):
                    x, info = dgttrs(*fac[:-1], r)
                    return x
            else:
                solve = splu((eye - h * jac).tocsc()).solve
            cache[h] = solve
        return cache[h]

    def euler(t, y, q, big, k):
        h = big / k
        for i in range(1, k + 1):
            tt = t + big * i / k
            d, e = drive(tt)
            y = lu(h)(y + h * d)
            q = q + h * (pmat @ y + e)
        return y, q

    targets = list(t_eval)
    if not targets or targets[-1] < t_b:
        targets.append(t_b)
    out_y, out_q = [], []
    atol = np.concatenate([atol_y, atol_q])
    t, y, q = t_a, y0.copy(), q0.copy()
    stiff = float(np.max(np.abs(diag), initial=0.0))
    noisy = 0
    span = t_b - t_a
    big = max(1e-6 * (targets[0] - t_a), 1e-12 * span)
    steps = 0
    for target in targets:
        while t < target:
            steps += 1
            if steps > MAX_MACRO_STEPS:
                raise MarchFailure(f"more than {MAX_MACRO_STEPS} steps between {t_a:.6g} s "
                                   f"and {t_b:.6g} s")
            step = min(big, target - t)
            land = step >= target - t
            rows, errs, best = [], {}, None
            ref0 = np.abs(np.concatenate([y, q]))
            for j in range(1, EXTRAP_COLUMNS + 1):
                yj, qj = euler(t, y, q, step, j)
                row = [np.concatenate([yj, qj])]
                for k in range(1, j):
                    prev = rows[-1][k - 1]
                    row.append(row[k - 1] + (row[k - 1] - prev) / (j / (j - k) - 1.0))
                rows.append(row)
                if j > 1:
                    scale = atol + rtol * np.maximum(np.abs(row[-1]), ref0)
                    errs[j] = float(np.max(np.abs(row[-1] - row[-2]) / scale))
                    best = row[-1]
            err = errs[EXTRAP_COLUMNS]
            if not np.isfinite(err) or err > 1.0:
                # rounding of the implicit solve is ~ eps h max|J_ii| of the state: where
                # that reaches the tolerance, smaller steps cannot cure the rejections
                if np.finfo(float).eps * step * stiff > 1e-3 * rtol:
                    noisy += 1
                    if noisy > MAX_NOISY_REJECTIONS:
                        raise MarchFailure(
                            f"rounding in the implicit solve (stiffness {stiff:.3g} 1/s x step "
                            f"{step:.3g} s) exceeds the tolerance rtol = {rtol:.3g}")
                big = step * max(0.1, 0.9 * min(err, 1e30) ** (-1.0 / EXTRAP_COLUMNS))
                if big <= 1e-14 * max(abs(t), span):
                    raise MarchFailure(f"step size underflow at t = {t:.6g} s")
                continue
            y, q = best[:n], best[n:]
            t = target if land else t + step
            # next step: the column with the least work per unit step (Deuflhard 1985)
            cands = []
            for j, e in errs.items():
                h_j = step * min(8.0, max(0.2, 0.9 * max(e, 1e-12) ** (-1.0 / j)))
                cands.append((j * (j + 1) / 2 / h_j, h_j))
            grown = min(cands)[1]
            big = max(big, grown) if land and step < big else grown
        out_y.append(y.copy())
        out_q.append(q.copy())
    k = len(t_eval)
    return np.array(out_y[:k]).reshape(k, n), np.array(out_q[:k]).reshape(k, q0.size)
