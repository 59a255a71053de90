"""Modal superposition on the exact layered spectrum.

With u = C / kappa, the steady responses phi_k of :mod:`transport.solvers.modal.lifting` (k = top value,
bottom value, source of each layer) and their signals b_k(t) (:mod:`transport.model.schedules`):

    u(z, t) = sum_k b_k(t) phi_k(z) + e^{A(z)} sum_n a_n(t) psi_n(z),
    a_n' + lambda_n a_n = sum_k c_kn (eps b_k - b_k'),   a_n(0) = P_n - sum_k b_k(0) c_kn,

where psi_n are the weight-normalised eigenfunctions (:mod:`transport.solvers.modal.spectrum`),
c_kn the projections of phi_k from Green's identity (boundary term plus source
projection, divided by lambda_n + eps: no quadrature of the lifting), P_n the projection
of the initial state (Gauss-Legendre, :mod:`transport.solvers.modal.projection`).  ``eps`` is 0 when
a steady state exists, else a positive shift giving a smooth lifting.  The modal ODEs
are solved exactly for steps, ramps and exponential depletion (Duhamel).

Fluxes, cumulative mass through any depth and the full budget follow termwise in closed
form in time; the slowly converging 1/lambda part of the time integrals is replaced by
its exact Green's-function value (no truncation error in cumulative masses).  Where a
steady state exists and the signals are steps, each mode's time integral is summed as
its decaying transient alone, in closed form, so that the quasi-static parts never
cancel in floating point (:meth:`ModalSeries.transient_integrals`; that cancellation,
multiplied by e^{A(z)} in an advective column, left errors of 1e-4 of the scale).
"""
from __future__ import annotations

import math
import warnings
from dataclasses import dataclass, field

import numpy as np

from transport.model.column import Column, InitialState, InputError, check_output_grid
from transport.model.schedules import Schedule, phi
from transport.solvers.modal.eigenfunctions import Modes, modes
from transport.solvers.modal.integrals import TimeIntegrals
from transport.solvers.modal.lifting import SteadyResponses, steady_responses, steady_shift
from transport.solvers.modal.operator import Operator, build_operator
from transport.solvers.modal.projection import gauss_nodes, green_terms, initial_profile
from transport.solvers.modal.sizing import (DEFAULT_TOLERANCE, AccuracyWarning, ModeCapWarning,
                                            column_signals, earliest_time_after_change,
                                            mode_count, required_modes)
from transport.solvers.modal.spectrum import eigenvalues
from transport.solvers.result import Solution
from transport.units import YEAR

# the sizing names are re-exported: callers find the whole modal engine here
__all__ = ["solve", "ModalSeries", "ModeCapWarning", "AccuracyWarning", "build_series",
           "required_modes", "initial_profile", "column_signals", "earliest_time_after_change",
           "DEFAULT_TOLERANCE"]


#: Below -746 the exponential is 0 in double precision (e^-746 is under half the
#: smallest subnormal, 4.9e-324); such entries are not evaluated.
_UNDERFLOW = -746.0


def _decay(lam, t):
    """e^{-lambda_n t_j}, shape (lam.size, t.size): the same numbers as
    ``np.exp(-lam[:, None] * t[None, :])``, with the exponential evaluated only where it
    does not underflow to 0 (most entries of a long series at late times: the high
    modes have died out)."""
    x = np.multiply.outer(lam, t)
    np.negative(x, out=x)
    if x.size < 4096:  # small: the mask costs more than it saves
        return np.exp(x, out=x)
    out = np.zeros_like(x)
    return np.exp(x, out=out, where=~(x < _UNDERFLOW))  # NaN is evaluated (stays NaN)


def outside_change_windows(t, changes, marks) -> np.ndarray:
    """True at the times ``t`` outside every interval from a change c > 0 to the first
    of ``marks`` (output times, stage ends) after it: where a series sized for the gaps
    from its changes to those marks is accurate."""
    t = np.atleast_1d(np.asarray(t, dtype=float))
    marks = np.asarray(marks, dtype=float)
    ok = np.ones(t.size, bool)
    for c in changes:
        if c > 0:
            later = marks[marks > c]
            until = float(later.min()) if later.size else np.inf
            ok &= ~((t > c) & (t < until))
    return ok


@dataclass(frozen=True)
class ModalSeries(TimeIntegrals):
    """Everything needed to evaluate the solution at any depth and time."""

    column: Column
    op: Operator
    modes: Modes
    lifting: SteadyResponses
    signals: tuple  # Schedules, (K,)
    proj0: np.ndarray  # P_n, projection of the initial state, (n,)
    lift_coef: np.ndarray  # c_kn, (K, n)
    mass_modes: np.ndarray  # int a e^A psi_n over each layer, (N, n)
    mass_lift: np.ndarray  # int a phi_k over each layer, (N, K)
    initial: object = field(default_factory=InitialState.clean)
    initial_mass: float = 0.0
    breaks: tuple = ()
    extra_rate: float = 0.0
    _cache: dict = field(default_factory=dict, repr=False, compare=False)

    @property
    def eigenvalues(self):
        return self.modes.lam

    def resolved_after(self, tolerance: float = 1e-8) -> float:
        """Time after a signal change from which the truncated series meets
        ``tolerance`` (the tail bound used to size it): lambda_N t >= ln(1/tol) + ln N + 2."""
        lam = self.modes.lam
        return (math.log(1 / tolerance) + math.log(lam.size) + 2) / max(float(lam[-1]), 1e-300)

    def resolved(self, t, times) -> np.ndarray:
        """True at the times ``t`` at which the series is sized to be accurate: not
        between a signal change and the first output time ``times`` after it (it is
        sized for the gaps from each change to the output times, and the output times
        are where another engine vouches for it).  Right after a change the truncated
        sum rings: -30 mg/L under a 120 mg/L source 0.2 yr after it is switched off, and
        in an advective column the tail bound (:meth:`resolved_after`) is still 170x off
        0.65 yr after a change that the first output time follows by 12 yr."""
        return outside_change_windows(t, self.change_times(), times)

    def change_times(self):
        out = {0.0}
        for sig in self.signals:
            out.update(sig.change_times)
        return sorted(out)

    @property
    def eps(self):
        return self.lifting.eps

    def _active(self):
        return [k for k, s in enumerate(self.signals) if s.atoms]

    def signal_values(self, t):
        """Signal values b_k(t), (K, nt); at a change time the value just before it."""
        t = np.atleast_1d(np.asarray(t, dtype=float))
        out = np.zeros((len(self.signals), t.size))
        for k in self._active():  # a signal without atoms is 0
            out[k] = self.signals[k].value(t, left=True)
        return out

    def signal_integrals(self, t):
        t = np.atleast_1d(np.asarray(t, dtype=float))
        return np.array([s.integral(t) for s in self.signals])

    def _atom_groups(self):
        """Modal weights summed over signals per distinct atom (kind, t0, rate), so each
        time kernel is evaluated once; a step at t = 0 (eps = 0) joins the initial term."""
        if "atoms" not in self._cache:
            initial = self.proj0.copy()
            groups = {}
            for k in self._active():
                for kind, t0, amp, rate in self.signals[k].atoms:
                    if kind == "step" and t0 == 0.0 and self.eps == 0.0:
                        initial -= amp * self.lift_coef[k]  # kernel -e^{-lambda t}
                        continue
                    key = (kind, t0, rate)
                    groups[key] = groups.get(key, 0.0) + amp * self.lift_coef[k]
            self._cache["atoms"] = (initial, groups)
        return self._cache["atoms"]

    def _decays(self, t):
        """e^{-lambda_n t_j} (:func:`_decay`); the last one of up to 65,536 entries is
        kept, read-only: a realization's scan asks for the same samples in its rounding
        bound and in its values."""
        key = t.tobytes()
        found = self._cache.get("decay")
        if found is not None and found[0] == key:
            return found[1]
        out = _decay(self.modes.lam, t)
        if out.size <= 1 << 16:
            out.flags.writeable = False
            self._cache["decay"] = (key, out)
        return out

    def coefficients(self, t):
        """a_n(t), shape (n, t.size)."""
        t = np.atleast_1d(np.asarray(t, dtype=float))
        lam = self.modes.lam
        initial, groups = self._atom_groups()
        out = self._decays(t) * initial[:, None]
        for (kind, t0, rate), w in groups.items():
            unit = Schedule(((kind, t0, 1.0, rate),))
            out += w[:, None] * unit.modal(lam, t, self.eps, left=True)
        return out

    def integrated_coefficients(self, t):
        """int_0^t a_n, shape (n, t.size)."""
        t = np.atleast_1d(np.asarray(t, dtype=float))
        lam = self.modes.lam
        initial, groups = self._atom_groups()
        out = initial[:, None] * phi(1, lam[:, None], t[None, :])
        for (kind, t0, rate), w in groups.items():
            unit = Schedule(((kind, t0, 1.0, rate),))
            out += w[:, None] * unit.modal(lam, t, self.eps, True, left=True)
        return out

    def fields(self, z):
        """Matrices that map coefficients to C and F at depths z.

        Parameters
        ----------
        z : array_like (nz,)
            Depths, m (local to the column).

        Returns
        -------
        (c_modes, f_modes, c_lift, f_lift)
            Read-only arrays: C and F per mode (nz, n) and per lifting (nz, K), so that
            C = c_modes @ a(t) + c_lift @ b(t) (plus the tail correction).  Kept for the
            last depth grid asked for (the probes and the tail corrections share it).
        """
        z = np.atleast_1d(np.asarray(z, dtype=float))
        key = ("fields", z.tobytes())
        found = self._cache.get("fields")
        if found is not None and found[0] == key:
            return found[1]
        psi, dpsi = self.modes.evaluate(z, exp_sign=+1)
        return self._keep_fields(z, psi, dpsi, *self.lifting.evaluate(z))

    def _keep_fields(self, z, psi, dpsi, u_l, du_l):
        """The :meth:`fields` at z from the modes' psi e^{A}, k psi' e^{A} and the steady
        responses' u, k u' there; kept for the next call at the same depths."""
        op = self.op
        kap = op.kappa[self.modes.layer_of(z)][:, None]
        out = (kap * psi, 0.5 * op.q * psi - dpsi, kap * u_l, op.q * u_l - du_l)
        for a in out:
            a.flags.writeable = False
        self._cache["fields"] = (("fields", z.tobytes()), out)
        return out

    def drive(self, t):
        """Quasi-static forcing eps b_k(t) - b_k'(t) of each lifting.

        Parameters
        ----------
        t : array_like (nt,)
            Times, s.

        Returns
        -------
        ndarray (K, nt)
            The left limit at a change time (the modes beyond the truncation have not
            yet responded to a change at that very instant).
        """
        t = np.atleast_1d(np.asarray(t, dtype=float))
        out = np.zeros((len(self.signals), t.size))
        for k in self._active():  # a signal without atoms drives nothing
            s = self.signals[k]
            out[k] = self.eps * s.value(t, left=True) - s.derivative(t)
        return out

    def concentration(self, z, t):
        """C (kg m-3), shape (t.size, z.size)."""
        c_modes, _, c_lift, _ = self.fields(z)
        out = c_modes @ self.coefficients(t)  # the sums in place: no (z, t) temporaries
        out += c_lift @ self.signal_values(t)
        forcing = self.drive(t)
        if np.any(forcing):
            out += self.tail_corrections(z)["C"][:, 1:] @ forcing
        return out.T

    def largest_vouched(self, t: float, n: int = 41) -> float:
        """Largest |C| of the column at time ``t`` less the rounding bound (times
        sqrt(modes), as a realization's early samples), at ``n`` evenly spaced depths and
        the layer faces, or 0: a lower estimate of the largest C there, for the scale of
        a column whose data bound nothing (a smaller scale only makes a check stricter)."""
        z = np.union1d(np.linspace(0.0, float(self.op.z[-1]), n), self.op.z)
        c_modes = self.fields(z)[0]
        c = np.abs(self.concentration(z, [t])[0])
        rb = self.roundoff_bound(z, [t], c_modes=c_modes)[0]
        return float(max(np.max(c - math.sqrt(max(self.modes.lam.size, 1)) * rb), 0.0))

    def concentration_at(self, depth, times):
        """C at one depth for any times: 1-D array (continuous in time)."""
        return self.concentration(np.array([float(depth)]), times)[:, 0]

    def total_flux(self, z, t):
        _, f_modes, _, f_lift = self.fields(z)
        out = (f_modes @ self.coefficients(t) + f_lift @ self.signal_values(t)).T
        forcing = self.drive(t)
        if np.any(forcing):
            corr = self.tail_corrections(z)["F"][:, 1:]
            out = out + (corr @ forcing).T
        return out

    def roundoff_bound(self, z, t, c_modes=None):
        """Estimated rounding error of C (kg m-3), shape (t.size, z.size).

        The series is summed in the symmetric variable v = e^{-A} u; rounding errors of
        the terms, before they cancel, are multiplied by e^{A(z)} on the way back.  At
        high Peclet numbers and early times this, not the mode count, limits accuracy.
        ``c_modes``: the concentration rows of :meth:`fields` at z, if at hand."""
        if c_modes is None:
            c_modes = self.fields(z)[0]
        t = np.atleast_1d(np.asarray(t, dtype=float))
        lam = self.modes.lam
        size = None  # a clean column: 0 x e^{-lambda t} (<= 1) is 0, not evaluated
        if np.any(self.proj0) or lam.min(initial=0.0) < 0:
            size = np.abs(self.proj0)[:, None] * self._decays(t)
        for k in self._active():
            sched = self.signals[k]
            amp = sum(abs(a) for _, _, a, _ in sched.atoms)
            # the latest change at or before each t (0 where there is none)
            changes = np.sort(np.asarray(sched.change_times, dtype=float))
            i = np.searchsorted(changes, t, side="right")
            last = np.where(i > 0, changes[np.maximum(i - 1, 0)] if changes.size else 0.0,
                            0.0)
            term = np.abs(self.lift_coef[k])[:, None] * amp * self._decays(
                np.maximum(t - last, 0.0))
            size = term if size is None else size + term  # (0 + term is term: >= 0)
        if size is None:
            size = np.zeros((lam.size, t.size))
        n = max(self.modes.lam.size, 1)
        return 16 * math.sqrt(n) * np.finfo(float).eps * (np.abs(c_modes) @ size).T

    def cumulative_mass(self, z, t):
        """Mass per area that crossed depth z downward during (0, t) (kg m-2)."""
        t = np.atleast_1d(np.asarray(t, dtype=float))
        _, f_modes, _, f_lift = self.fields(z)
        out = self.integrated_rows(f_modes, f_lift, self.tail_corrections(z)["F_exact"], t)
        return np.where(t[:, None] == 0, 0.0, out)

    def budget(self, t):
        """Mass budget per unit area (kg m-2) at times t.  Stored mass comes from the
        series, entered/left from the boundary fluxes and decayed from the decay terms,
        independently, so the residual measures the solution's consistency."""
        t = np.atleast_1d(np.asarray(t, dtype=float))
        op = self.op
        coef = self.coefficients(t)
        b, ib = self.signal_values(t), self.signal_integrals(t)
        stored = self.mass_modes.sum(axis=0) @ coef + self.mass_lift.sum(axis=0) @ b
        D = (op.decay[:, None] * self.mass_modes).sum(axis=0)
        exact_d = self.tail_corrections(np.array([0.0]))["D_exact"]
        decayed = self.integrated_rows(D[None, :], (op.decay @ self.mass_lift)[None, :],
                                       exact_d[None, :], t)[:, 0]
        decayed = np.where(t == 0, 0.0, decayed)
        produced = (op.source * op.thickness) @ ib[2:]
        cum = self.cumulative_mass(np.array([0.0, op.z[-1]]), t)
        stored = np.where(t == 0, self.initial_mass, stored)
        entered, left = cum[:, 0], cum[:, 1]
        residual = stored - self.initial_mass - entered + left + decayed - produced
        return {"stored": stored, "initial_stored": np.full(t.size, self.initial_mass),
                "entered_top": entered, "left_bottom": left, "decayed": decayed,
                "produced": produced, "residual": residual}


def build_series(column: Column, initial=None, t_min: float = None, tolerance: float = 1e-8,
                 max_modes: int = 4000, n_modes: int = None, breaks=(), extra_rate=0.0,
                 masses: bool = True, known_modes=None):
    """Eigen-solve, lifting and projections for ``column``: a :class:`ModalSeries`.

    ``initial`` is an :class:`InitialState` or a callable C0(z) (then give its kinks in
    ``breaks`` and its highest spatial frequency in ``extra_rate``).  With
    ``masses=False`` a clean column without sources skips the quadrature (its
    projections are zero); concentrations and cumulative masses are unchanged, the
    layer masses (budget, decayed mass) are left NaN so they cannot be misread.
    ``known_modes``: the column's first modes (:class:`Modes`), already computed in a
    shared solve; used where their eigenvalues are the ones
    :func:`~transport.solvers.modal.sizing.mode_count` asks for.
    """
    initial = initial if initial is not None else InitialState.clean()
    # the operator of known modes is this column's (built by the shared solve)
    op = build_operator(column) if known_modes is None else known_modes.op
    if n_modes is None:
        if t_min is None or t_min <= 0:
            raise InputError("give the earliest positive output time (t_min) or n_modes")
        # exponential signals: the quasi-static tail is exact to first order in
        # rate / lambda; the second order is made negligible by lambda_N >= rate/sqrt(tol)
        rates = [r for sig in column_signals(column, op) for kind, _, _, r in sig.atoms
                 if kind == "decay"]
        floor = max(rates, default=0.0) / math.sqrt(tolerance)
        lam = mode_count(op, t_min, tolerance, max_modes, floor,
                         None if known_modes is None else known_modes.lam)
    else:
        lam = eigenvalues(op, n_modes)
    shared = known_modes is not None and lam is known_modes.lam
    md = known_modes if shared else modes(op, lam)
    eps = steady_shift(lam)
    lift = steady_responses(op, eps)
    signals = column_signals(column, op)
    green = green_terms(op, lam, len(signals), *md.evaluate(np.array([0.0, op.z[-1]]),
                                                        exp_sign=0))
    skip = (not masses and not callable(initial) and initial.kind == "clean"
            and not np.any(op.source))
    if skip:
        return clean_series(column, op, md, lift, signals, green, initial)
    if not callable(initial) and initial.kind == "profile":
        breaks = tuple(breaks) + tuple(initial.depths)
    zq, wq, lq = gauss_nodes(op, lam, breaks, extra_rate)
    u0 = initial_profile(column, initial, zq) / op.kappa[lq]
    proj0 = np.zeros(lam.size)
    mass_modes = np.zeros((op.n_layers, lam.size))
    # e^{2A} at the nodes turns psi e^{-A} into psi e^{A} (one evaluation for both) where
    # it cannot overflow
    A_q = op.A[lq] + op.alpha[lq] * (zq - op.z[lq])
    shared = np.max(np.abs(A_q)) < 300.0
    chunk = max(1, 4_000_000 // max(lam.size, 1))
    for start in range(0, zq.size, chunk):
        sl = slice(start, start + chunk)
        psi_m, _ = md.evaluate(zq[sl], exp_sign=-1)
        wa = wq[sl] * op.a[lq[sl]]
        proj0 += (wa * u0[sl]) @ psi_m
        for i in np.flatnonzero(op.source):
            sel = lq[sl] == i
            if sel.any():
                green[2 + i] += (wq[sl][sel] * op.source[i]) @ psi_m[sel]
        if shared:
            psi_m *= (wa * np.exp(2.0 * A_q[sl]))[:, None]
        else:
            psi_m = wa[:, None] * md.evaluate(zq[sl], exp_sign=+1)[0]
        _add_by_layer(mass_modes, lq[sl], psi_m)
    lift_coef = green / (lam + eps)[None, :]
    mass_lift = lift.layer_sums(zq, wq * op.a[lq])
    initial_mass = float(np.sum(wq * op.a[lq] * u0))
    return ModalSeries(column=column, op=op, modes=md, lifting=lift, signals=signals,
                       proj0=proj0, lift_coef=lift_coef, mass_modes=mass_modes,
                       mass_lift=mass_lift, initial=initial, initial_mass=initial_mass,
                       breaks=tuple(breaks), extra_rate=extra_rate)


def clean_series(column, op, md, lift, signals, green, initial):
    """The series of a clean column without sources whose layer masses are not asked
    for (``build_series(..., masses=False)``)."""
    lam, K = md.lam, len(signals)
    undefined = np.full((op.n_layers, lam.size), np.nan)
    return ModalSeries(column=column, op=op, modes=md, lifting=lift, signals=signals,
                       proj0=np.zeros(lam.size), lift_coef=green / (lam + lift.eps)[None, :],
                       mass_modes=undefined, mass_lift=np.full((op.n_layers, K), np.nan),
                       initial=initial)


def _add_by_layer(out, lay, rows):
    """out[lay[i]] += rows[i] for a nondecreasing ``lay`` (quadrature nodes in depth
    order), one sum per run of equal layers."""
    if np.any(np.diff(lay) < 0):
        np.add.at(out, lay, rows)
        return
    layers, first = np.unique(lay, return_index=True)
    out[layers] += np.add.reduceat(rows, first, axis=0)


def solve(column: Column, times, depths, *, initial=None, tolerance: float = None,
          max_modes: int = 4000, n_modes: int = None) -> Solution:
    """Solve the layered column at ``times`` (s) and ``depths`` (m) by the modal series.

    Parameters
    ----------
    column : Column
    times : array_like (nt,)
        Output times, s, >= 0; at t = 0 the initial profile itself is returned (the
        series is not used there).
    depths : array_like (nz,)
        Output depths, m, in [0, L].
    initial : InitialState, optional
        Default clean.
    tolerance : float, optional
        Relative tolerance of the tail bound that sizes the series (default 1e-8).
    max_modes : int
        Cap of the mode count.
    n_modes : int, optional
        Mode count; default from the earliest positive time after a change of a
        boundary or source signal and the tolerance.

    Returns
    -------
    Solution
        ``engine="modal"``, the series as ``series``, ``n_modes`` and ``eigenvalues``;
        no error bounds (:func:`transport.solvers.engines.solve_column` checks it).

    Warns
    -----
    ModeCapWarning
        If the cap prevents meeting the tolerance.
    AccuracyWarning
        If rounding (high Peclet number, early time) exceeds it.
    """
    tolerance = DEFAULT_TOLERANCE if tolerance is None else tolerance
    initial = initial if initial is not None else InitialState.clean()
    times, depths = check_output_grid(column, times, depths)
    t_min = earliest_time_after_change(column, times)
    if t_min is None and n_modes is None:
        n_modes = 8
    series = build_series(column, initial, t_min, tolerance, max_modes, n_modes)
    conc = series.concentration(depths, times)
    flux = series.total_flux(depths, times)
    cum = series.cumulative_mass(depths, times)
    positive = times > 0
    if positive.any():
        scale = max(float(np.max(np.abs(conc))), 1e-300)
        bound = series.roundoff_bound(depths, times[positive])
        if bound.max() > tolerance * scale:
            bad_t = times[positive][np.any(bound > tolerance * scale, axis=1)]
            warnings.warn(
                f"rounding error of the modal series (up to {bound.max():.3g} kg/m3, the "
                f"column Peclet number is about {2 * (series.op.A.max() - series.op.A.min()):.0f})"
                f" exceeds the tolerance at {bad_t.size} output time(s), the latest "
                f"{bad_t.max() / YEAR:.4g} yr; use later output times or cross-check with another "
                "engine", AccuracyWarning, stacklevel=2)
    zero = times == 0
    if zero.any():
        conc[zero] = initial_profile(column, initial, depths)
    return Solution(column=column, times=times, depths=depths, concentration=conc,
                    total_flux=flux, cumulative_mass=cum, budget=series.budget(times),
                    engine="modal", eigenvalues=series.eigenvalues,
                    n_modes=series.eigenvalues.size, series=series)
