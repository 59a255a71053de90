"""Time schedules of boundary values and sources, and their exact modal responses.

A schedule is a sum of atoms, each switched on at a time t0 (tau = t - t0, zero before):

* step   A H(tau)                       (constant from t0 on; a constant value is a step at 0)
* ramp   S tau H(tau)                   (piecewise-linear tables are sums of ramps)
* decay  A exp(-r tau) H(tau)           (a depleting source, C0 exp(-k t))

With the lifting u = sum_k b_k(t) phi_k + e^A sum_n a_n psi_n, each mode obeys
a_n' + lambda_n a_n = c_kn (eps b_k - b_k')  (Duhamel), solved here in closed form per
atom; the time integrals of a_n (cumulative fluxes, decayed mass) also.  The kernels use
the exponential-integrator functions phi_j(lambda, tau) = int_0^tau (tau - s)^(j-1)/(j-1)!
e^(-lambda s) ds, evaluated without cancellation (series for small lambda tau,
regularised incomplete gamma otherwise).
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy.special import gammainc

from transport.model.column import InputError

__all__ = ["Schedule", "phi", "moment"]

_KINDS = ("step", "ramp", "decay")


def moment(j: int, lam, tau):
    """M_j = int_0^tau s^j e^{-lam s} ds (lam >= 0 or |lam tau| small), elementwise."""
    lam, tau = np.broadcast_arrays(np.asarray(lam, float), np.asarray(tau, float))
    x = lam * tau
    out = np.empty(x.shape)
    small = np.abs(x) < 1.0
    if small.any():
        xs, ts = x[small], tau[small]
        acc = np.zeros(xs.shape)
        term = np.ones(xs.shape)
        for i in range(40):
            acc += term / (i + j + 1)
            term = term * (-xs) / (i + 1)
        out[small] = ts ** (j + 1) * acc
    big = ~small
    if big.any():
        lb = lam[big]
        out[big] = math.factorial(j) / lb ** (j + 1) * gammainc(j + 1, x[big])
    return out


def phi(k: int, lam, tau):
    """phi_k(lam, tau): phi_0 = e^{-lam tau}, phi_1 = (1 - e^{-lam tau})/lam, ...

    phi_k = int_0^tau (tau-s)^(k-1)/(k-1)! e^{-lam s} ds = sum_i C(k-1, i) tau^(k-1-i)
    (-1)^i M_i / (k-1)!, computed here from the series / incomplete-gamma form
    phi_k = tau^k sum_j (-x)^j/(j+k)!  (small x) or the stable recurrence on x >= 1.
    """
    lam, tau = np.broadcast_arrays(np.asarray(lam, float), np.asarray(tau, float))
    x = lam * tau
    if k == 0:
        return np.exp(-x)
    out = np.empty(x.shape)
    small = np.abs(x) < 1.0
    if small.any():
        xs = x[small]
        acc = np.zeros(xs.shape)
        term = np.full(xs.shape, 1.0 / math.factorial(k))
        for j in range(40):
            acc += term
            term = term * (-xs) / (j + k + 1)
        out[small] = tau[small] ** k * acc
    big = ~small
    if big.any():
        xb, tb = x[big], tau[big]
        # Phi_0 = e^{-x}; Phi_{j+1} = (1/j! - Phi_j)/x  (stable for x >= 1)
        val = np.exp(-xb)
        for j in range(k):
            val = (1.0 / math.factorial(j) - val) / xb
        out[big] = tb ** k * val
    return out


def _divided_exp(lam, r, tau):
    """E = (e^{-r tau} - e^{-lam tau}) / (lam - r), stable for lam ~ r."""
    m = np.minimum(lam, r)
    return np.exp(-m * tau) * phi(1, np.abs(lam - r), tau)


def _divided_phi1(lam, r, tau):
    """IE = int_0^tau E ds = (phi1(r) - phi1(lam)) / (lam - r), stable for lam ~ r."""
    lam, r, tau = np.broadcast_arrays(np.asarray(lam, float), np.asarray(r, float),
                                      np.asarray(tau, float))
    d = lam - r
    near = np.abs(d) * tau < 0.05
    out = np.empty(d.shape)
    if near.any():
        acc = np.zeros(d[near].shape)
        for j in range(1, 8):
            acc += d[near] ** (j - 1) / math.factorial(j) * moment(j, lam[near], tau[near])
        out[near] = acc
    far = ~near
    if far.any():
        out[far] = (phi(1, r[far], tau[far]) - phi(1, lam[far], tau[far])) / d[far]
    return out


@dataclass(frozen=True)
class Schedule:
    """A signal in time as a sum of atoms (kind, t0, amplitude, rate); SI units."""

    atoms: tuple = ()

    # --- constructors -------------------------------------------------------------
    @classmethod
    def constant(cls, value: float):
        return cls((("step", 0.0, float(value), 0.0),))

    @classmethod
    def steps(cls, times, values):
        """Value values[i] from times[i] on (times[0] must be 0); e.g. source removed."""
        times, values = _check_series(times, values, "steps")
        if times[0] != 0.0:
            raise InputError("a step schedule starts at time 0; put the value at 0 first")
        atoms, prev = [], 0.0
        for t, v in zip(times, values):
            if v != prev:
                atoms.append(("step", t, v - prev, 0.0))
            prev = v
        return cls(tuple(atoms))

    @classmethod
    def table(cls, times, values):
        """Piecewise-linear through (times, values); constant before and after."""
        times, values = _check_series(times, values, "table")
        atoms = [("step", 0.0, values[0], 0.0)]
        slope = 0.0
        for i in range(len(times) - 1):
            new = (values[i + 1] - values[i]) / (times[i + 1] - times[i])
            if new != slope:
                atoms.append(("ramp", times[i], new - slope, 0.0))
            slope = new
        if slope != 0.0:
            atoms.append(("ramp", times[-1], -slope, 0.0))
        return cls(tuple(atoms))

    @classmethod
    def depletion(cls, initial: float, rate: float, start: float = 0.0):
        """initial * exp(-rate (t - start)) from ``start`` on (rate >= 0, 1/s)."""
        if not (np.isfinite(rate) and rate >= 0):
            raise InputError(f"a depletion rate must be >= 0 1/s, got {rate!r}")
        return cls((("decay", float(start), float(initial), float(rate)),))

    def __add__(self, other):
        return Schedule(self.atoms + other.atoms)

    def scaled(self, factor: float):
        return Schedule(tuple((k, t0, a * factor, r) for k, t0, a, r in self.atoms))

    def shifted(self, dt: float):
        """The same signal seen from a clock started ``dt`` later (stage restarts)."""
        out = []
        for kind, t0, amp, rate in self.atoms:
            if t0 >= dt:
                out.append((kind, t0 - dt, amp, rate))
                continue
            # atom already on at the new origin: its value and slope there
            tau = dt - t0
            if kind == "step":
                out.append(("step", 0.0, amp, 0.0))
            elif kind == "ramp":
                out.append(("step", 0.0, amp * tau, 0.0))
                out.append(("ramp", 0.0, amp, 0.0))
            else:
                out.append(("decay", 0.0, amp * math.exp(-rate * tau), rate))
        return Schedule(tuple(out))

    @property
    def change_times(self):
        return sorted({t0 for _, t0, _, _ in self.atoms})

    # --- evaluation -----------------------------------------------------------------
    def value(self, t, left: bool = False):
        """The signal at times t: right-continuous (a step counts from its time on), or
        with ``left`` the left limit at a change time t0 > 0 (see :func:`_on`)."""
        t = np.asarray(t, dtype=float)
        out = np.zeros(t.shape)
        for kind, t0, amp, rate in self.atoms:
            tau = t - t0
            on = _on(tau, t0, left)
            taup = np.where(on, tau, 0.0)
            if kind == "step":
                out += np.where(on, amp, 0.0)
            elif kind == "ramp":
                out += amp * taup
            else:
                out += np.where(on, amp * np.exp(-rate * taup), 0.0)
        return out

    def derivative(self, t):
        """Regular part of d value / dt (jumps excluded), the left limit at a change time
        t0 > 0: at that instant the column still holds the state reached under the
        earlier slope (the quasi-static tail corrections of the modal series need it)."""
        t = np.asarray(t, dtype=float)
        out = np.zeros(t.shape)
        for kind, t0, amp, rate in self.atoms:
            tau = t - t0
            on = _on(tau, t0, left=True)
            if kind == "ramp":
                out += np.where(on, amp, 0.0)
            elif kind == "decay":
                out += np.where(on, -rate * amp * np.exp(-rate * np.where(on, tau, 0.0)), 0.0)
        return out

    def integral(self, t):
        """int_0^t value ds."""
        t = np.asarray(t, dtype=float)
        out = np.zeros(t.shape)
        for kind, t0, amp, rate in self.atoms:
            taup = np.maximum(t - t0, 0.0)
            if kind == "step":
                out += amp * taup
            elif kind == "ramp":
                out += 0.5 * amp * taup ** 2
            else:
                out += amp * phi(1, rate, taup)
        return out

    def modal(self, lam, t, eps: float, integrated: bool = False, left: bool = False):
        """Per-unit-coefficient modal response: array (lam.size, t.size).

        a_n(t) gets c_kn times this (integrated=False); int_0^t a_n gets c_kn times
        this with integrated=True.
        """
        lam = np.asarray(lam, float)[:, None]
        t = np.atleast_1d(np.asarray(t, float))[None, :]
        out = np.zeros((lam.shape[0], t.shape[1]))
        for kind, t0, amp, rate in self.atoms:
            tau = t - t0
            on = _on(tau, t0, left)
            taup = np.where(on, tau, 0.0)
            lam_b, tau_b = np.broadcast_arrays(lam, taup)
            if kind == "step":
                if integrated:
                    g = -phi(1, lam_b, tau_b) + eps * phi(2, lam_b, tau_b)
                else:
                    g = -phi(0, lam_b, tau_b) + eps * phi(1, lam_b, tau_b)
            elif kind == "ramp":
                if integrated:
                    g = -phi(2, lam_b, tau_b) + eps * phi(3, lam_b, tau_b)
                else:
                    g = -phi(1, lam_b, tau_b) + eps * phi(2, lam_b, tau_b)
            else:
                rr = np.full(lam_b.shape, rate)
                if integrated:
                    g = -phi(1, lam_b, tau_b) + (eps + rate) * _divided_phi1(lam_b, rr, tau_b)
                else:
                    g = -phi(0, lam_b, tau_b) + (eps + rate) * _divided_exp(lam_b, rr, tau_b)
            out += amp * np.where(on, g, 0.0)
        return out


def _on(tau, t0, left: bool):
    """Whether an atom switched on at t0 acts at tau = t - t0.  Right-continuous by
    default; with ``left`` an atom does not act at its own instant t0 > 0, so the column
    state reported at a change time is the state just before the change (continuous
    inside the column, and what the Laplace-domain engine returns there).  An atom at
    t0 = 0 acts at t = 0 either way (it is part of the starting state)."""
    if left:
        return (tau > 0) | ((tau == 0) & (t0 <= 0))
    return tau >= 0


def _check_series(times, values, what):
    times = np.asarray(times, dtype=float).ravel()
    values = np.asarray(values, dtype=float).ravel()
    if times.size == 0 or times.size != values.size:
        raise InputError(f"a {what} schedule needs as many times as values (at least one)")
    if not (np.all(np.isfinite(times)) and np.all(np.isfinite(values))):
        raise InputError(f"a {what} schedule holds a value that is not a finite number")
    if np.any(times < 0):
        raise InputError(f"{what} schedule times must be >= 0, got {times.min()!r}")
    if np.any(np.diff(times) <= 0):
        raise InputError(f"{what} schedule times must increase strictly, got {times.tolist()}")
    return times.tolist(), values.tolist()
