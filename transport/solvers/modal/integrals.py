"""Exact time integrals of the modal series: tail corrections and closed-form transients.

Mixed into :class:`transport.solvers.modal.series.ModalSeries` (which holds the modes,
liftings, projections and signals these methods read).  Modes beyond the truncation
respond quasi-statically to the signals; their slowly converging 1/(lambda + eps) sums
are replaced by exact Green's-function values (:func:`transport.solvers.modal.projection.
green_flux`), and, where a steady state exists and the signals are steps, each mode's
time integral is summed as its decaying transient alone, in closed form, so that the
quasi-static parts never cancel in floating point (in an advective column that
cancellation is multiplied by e^{A(z)}).
"""
from __future__ import annotations

import numpy as np

from transport.solvers.modal.projection import gauss_nodes, green_flux, initial_profile

__all__ = ["TimeIntegrals"]


class TimeIntegrals:
    """Time integrals of a :class:`~transport.solvers.modal.series.ModalSeries`."""

    # --- exact corrections of the time integrals (steady-state case) -----------------
    def _w0_functions(self, zq, lq, uq=None):
        """u-space initial state and lifting functions at nodes: (nq, 1 + K)."""
        u0 = initial_profile(self.column, self.initial, zq) / self.op.kappa[lq]
        if uq is None:
            uq, _ = self.lifting.evaluate(zq)
        return np.column_stack([u0, uq])

    def tail_corrections(self, z):
        """Tail corrections of the truncated series at depths z (dict of arrays).

        Exact minus truncated 1/(lambda + eps) sums, for the initial state (column 0)
        and each lifting (columns 1..K): "C" values (nz, 1+K) and "F" fluxes at z; and
        the exact sums themselves, "F_exact" (nz, 1+K) and "D_exact" for the decayed
        mass (1+K,), for :meth:`integrated_rows`.  Modes beyond the truncation respond
        quasi-statically, a_n ~ c_kn (eps b_k - b_k') / (lambda_n + eps); these sums
        replace their slowly converging tails by Green's-function values."""
        op = self.op
        z = np.atleast_1d(np.asarray(z, dtype=float))
        key = z.tobytes()
        cache = self._cache
        if key in cache:
            return cache[key]
        ends = np.array([0.0, op.z[-1]])
        nodes = gauss_nodes(op, np.array([0.0]), tuple(self.breaks) + tuple(z.tolist()),
                            self.extra_rate)
        zq, wq, lq = nodes
        uq, _ = self.lifting.evaluate(zq)
        w0 = self._w0_functions(zq, lq, uq)
        F, U = green_flux(op, self.lifting, np.concatenate([z, ends]), w0, nodes, values=True,
                          lift_nodes=uq)
        Fz, Fe = F[:z.size], F[z.size:]
        integ = (wq * op.a[lq]) @ w0
        lam_e = self.modes.lam + self.eps
        coef = np.vstack([self.proj0, self.lift_coef]) / lam_e[None, :]  # (1+K, n)
        stored_w = coef @ self.mass_modes.sum(axis=0)  # int a W, converges fast
        QD = Fe[0] - Fe[1] + integ - self.eps * stored_w
        c_modes, f_modes, _, _ = self.fields(z)
        lay = self.modes.layer_of(z)
        out = {"C": op.kappa[lay][:, None] * U[:z.size] - c_modes @ coef.T,
               "F": Fz - f_modes @ coef.T, "F_exact": Fz, "D_exact": QD}
        if len(cache) > 64:
            cache.clear()
        cache[key] = out
        return out

    def integrated_correction(self, corr, t):
        """Time integral of the tail correction: corr_0 H(t) + sum_k (eps int_0^t b_k -
        b_k(t)) corr_k.

        Parameters
        ----------
        corr : array_like (m, 1 + K)
            Corrections of :meth:`tail_corrections` (initial state, then each lifting).
        t : array_like (nt,)
            Times, s.

        Returns
        -------
        ndarray (nt, m)
        """
        t = np.atleast_1d(np.asarray(t, dtype=float))
        # left limits at a change time, as in :meth:`drive`: (K, nt)
        weight = self.eps * self.signal_integrals(t) - self.signal_values(t)
        corr = np.atleast_2d(corr)
        return (np.outer((t > 0).astype(float), corr[:, 0])
                + (corr[:, 1:] @ weight).T)

    def transient_integrals(self, t):
        """int_0^t a_n minus its quasi-static part, in closed form: (n, t.size), or None.

        The time integral of a mode splits into a quasi-static part, which the exact
        Green's-function values of :meth:`tail_corrections` carry for every mode at
        once, and a transient that dies away as e^{-lambda tau} / lambda.  Summing the
        two parts of each mode separately (as ``integrated_coefficients`` minus the
        truncated quasi-static sum) cancels two O(1 / lambda) sums; in an advective
        column every term is multiplied by e^{A(z)} on the way back, so the rounding
        left over is of the order eps e^{A(z)} sum |f_n c_n| / lambda_n and does not
        decay (2e-4 of the scale at column Peclet number 73).  The transient alone,
        -P_n e^{-lambda t} / lambda + sum over steps amp c_kn e^{-lambda tau} / lambda,
        is accurate to rounding of its own size.  Available when a steady state exists
        (eps = 0) and every signal is made of steps (else None: the caller keeps the
        summed form).
        """
        if self.eps != 0.0:
            return None
        steps = []
        for k in self._active():
            for kind, t0, amp, rate in self.signals[k].atoms:
                if kind != "step":
                    return None
                steps.append((k, t0, amp))
        t = np.atleast_1d(np.asarray(t, dtype=float))
        lam = self.modes.lam
        inv = 1.0 / lam[:, None]
        out = -self.proj0[:, None] * np.exp(-lam[:, None] * t[None, :]) * inv
        for k, t0, amp in steps:
            tau = t - t0
            on = (tau > 0) | ((tau == 0) & (t0 <= 0))  # left limit at a change time
            decay = np.exp(-lam[:, None] * np.where(on, tau, 0.0)[None, :])
            out += np.where(on[None, :], (amp * self.lift_coef[k])[:, None] * decay * inv, 0.0)
        return out

    def integrated_rows(self, rows, lift_rows, exact, t):
        """Time integrals over (0, t) of quantities that are linear in the coefficients:
        ``rows @ a(t) + lift_rows @ b(t)`` with the exact quasi-static values ``exact``
        (m, 1 + K) of those quantities (:meth:`tail_corrections`: "F_exact",
        "D_exact"): (nt, m).  The transient of each mode is summed in closed form
        (:meth:`transient_integrals`) where it exists, else the integrated coefficients
        with the tail corrections."""
        t = np.atleast_1d(np.asarray(t, dtype=float))
        exact = np.atleast_2d(exact)
        trans = self.transient_integrals(t)
        if trans is None:
            lam_e = self.modes.lam + self.eps
            coef = np.vstack([self.proj0, self.lift_coef]) / lam_e[None, :]
            corr = exact - rows @ coef.T
            return ((rows @ self.integrated_coefficients(t)
                     + lift_rows @ self.signal_integrals(t)).T
                    + self.integrated_correction(corr, t))
        return ((rows @ trans + lift_rows @ self.signal_integrals(t)).T
                + self.integrated_correction(exact, t))

