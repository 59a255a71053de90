"""Modal superposition on the exact layered spectrum.

With u = C / kappa and the steady responses phi_k of :mod:`transport.lifting`,

    u(z, t) = sum_k b_k phi_k(z) + e^{A(z)} sum_n a_n(t) psi_n(z),
    a_n(t)  = a_n(0) e^{-lambda_n t} + eps c_n (1 - e^{-lambda_n t}) / lambda_n,

where psi_n are the weight-normalised eigenfunctions (:mod:`transport.spectrum`),
c_n = sum_k b_k c_kn are the projections of the lifting, obtained from Green's identity
(boundary term plus source projection, divided by lambda_n + eps: no quadrature of the
lifting), and a_n(0) = P_n - c_n with P_n the projection of the initial state.
Projections of the initial profile and the sources are integrated by Gauss-Legendre on
panels short enough (frequency x length <= 20, 32 nodes) to be exact to machine
precision for the trigonometric/exponential integrands.

Fluxes, cumulative mass through any depth and the full mass budget follow termwise in
closed form in time.
"""
from __future__ import annotations

import math
import warnings
from dataclasses import dataclass, field

import numpy as np

from .lifting import SteadyResponses, steady_responses
from .model import Column, InitialState, InputError
from .spectrum import Modes, Operator, build_operator, eigenvalues, modes

__all__ = ["solve", "ColumnSolution", "ModalSeries", "ModeCapWarning", "AccuracyWarning",
           "build_series",
           "required_modes"]

_GL_NODES = 32
_GL_PANEL = 20.0  # max (frequency x panel length) per Gauss-Legendre panel


class ModeCapWarning(UserWarning):
    """The mode cap stops the series from meeting the tolerance at the earliest times."""


class AccuracyWarning(UserWarning):
    """Rounding error (high Peclet number, early time) exceeds the requested tolerance."""


def _phi1(lam, t):
    """(1 - e^{-lam t}) / lam, with the limit t at lam = 0."""
    x = lam * t
    small = np.abs(x) < 1e-8
    xs = np.where(small, 1.0, x)
    return np.where(small, t * (1 - x / 2), t * (-np.expm1(-xs)) / xs)


def _phi2(lam, t):
    """int_0^t phi1(lam, s) ds = (lam t - 1 + e^{-lam t}) / lam^2, limit t^2/2."""
    x = lam * t
    small = np.abs(x) < 0.1
    series = 0.5 - x / 6 + x ** 2 / 24 - x ** 3 / 120 + x ** 4 / 720 - x ** 5 / 5040 \
        + x ** 6 / 40320 - x ** 7 / 362880 + x ** 8 / 3628800
    xs = np.where(small, 1.0, x)
    direct = (xs + np.expm1(-xs)) / (xs * xs)
    return t * t * np.where(small, series, direct)


def _gauss_nodes(op: Operator, lam: np.ndarray, breaks=()):
    """Gauss-Legendre nodes/weights over the column, split at faces and ``breaks``."""
    xg, wg = np.polynomial.legendre.leggauss(_GL_NODES)
    lam_hi, lam_lo = float(np.max(lam)), float(np.min(lam))
    zs, ws, lays = [], [], []
    for i in range(op.n_layers):
        z0, z1 = op.z[i], op.z[i + 1]
        w_hi = math.sqrt(max(lam_hi * op.a[i] - op.s[i], 0.0) / op.k[i])
        b_hi = math.sqrt(max(op.s[i] - lam_lo * op.a[i], 0.0) / op.k[i])
        rate = w_hi + b_hi + 2 * abs(op.alpha[i]) + 1.0 / (z1 - z0)
        cuts = [z0] + [b for b in breaks if z0 < b < z1] + [z1]
        for a_, b_ in zip(cuts[:-1], cuts[1:]):
            npan = max(1, int(math.ceil(rate * (b_ - a_) / _GL_PANEL)))
            edges = np.linspace(a_, b_, npan + 1)
            h = np.diff(edges)[:, None]
            mid = 0.5 * (edges[:-1] + edges[1:])[:, None]
            zs.append((mid + 0.5 * h * xg).ravel())
            ws.append((0.5 * h * wg).ravel())
            lays.append(np.full(npan * _GL_NODES, i))
    return np.concatenate(zs), np.concatenate(ws), np.concatenate(lays)


def initial_profile(column: Column, initial: InitialState, z):
    """Initial pore-water concentration C0 at depths z (kg m-3)."""
    z = np.asarray(z, dtype=float)
    if initial.kind == "clean":
        return np.zeros_like(z)
    if initial.kind == "uniform":
        if len(initial.values) != len(column.layers):
            raise InputError(f"a uniform initial state needs one value per layer "
                             f"({len(column.layers)}), got {len(initial.values)}")
        lay = np.clip(np.searchsorted(column.interfaces, z, side="right") - 1, 0,
                      len(column.layers) - 1)
        return np.asarray(initial.values)[lay]
    d = np.asarray(initial.depths)
    if d[-1] > column.length * (1 + 1e-12):
        raise InputError(f"initial profile sample at {d[-1]} m lies below the column bottom "
                         f"({column.length} m); remove it or extend the column")
    return np.interp(z, d, np.asarray(initial.values))


@dataclass(frozen=True)
class ModalSeries:
    """Everything needed to evaluate the solution at any depth and time."""

    column: Column
    op: Operator
    modes: Modes
    lifting: SteadyResponses
    signals: np.ndarray  # b_k, (3,)
    a0: np.ndarray  # a_n(0), (n,)
    forcing: np.ndarray  # eps c_n, (n,)
    mass_modes: np.ndarray  # int a e^A psi_n over each layer, (N, n)
    mass_lift: np.ndarray  # int a phi_k over each layer, (N, 3)
    initial: InitialState = field(default_factory=InitialState.clean)
    initial_mass: float = 0.0
    lift_coef: np.ndarray = None  # c_n, projections of the lifting (n,)

    @property
    def eigenvalues(self):
        return self.modes.lam

    def coefficients(self, t):
        t = np.atleast_1d(np.asarray(t, dtype=float))[None, :]
        lam = self.modes.lam[:, None]
        return self.a0[:, None] * np.exp(-lam * t) + self.forcing[:, None] * _phi1(lam, t)

    def integrated_coefficients(self, t):
        t = np.atleast_1d(np.asarray(t, dtype=float))[None, :]
        lam = self.modes.lam[:, None]
        return self.a0[:, None] * _phi1(lam, t) + self.forcing[:, None] * _phi2(lam, t)

    def _fields(self, z):
        """Matrices for C and F at depths z: (z, modes) and lifting (z, 3)."""
        op = self.op
        z = np.atleast_1d(np.asarray(z, dtype=float))
        lay = self.modes.layer_of(z)
        kap = op.kappa[lay][:, None]
        psi, dpsi = self.modes.evaluate(z, exp_sign=+1)
        u_l, du_l = self.lifting.evaluate(z)
        c_modes = kap * psi
        f_modes = 0.5 * op.q * psi - dpsi
        c_lift = kap * u_l
        f_lift = op.q * u_l - du_l
        return c_modes, f_modes, c_lift, f_lift

    def concentration(self, z, t):
        """C (kg m-3), shape (t.size, z.size)."""
        c_modes, _, c_lift, _ = self._fields(z)
        return (c_modes @ self.coefficients(t)).T + c_lift @ self.signals

    def roundoff_bound(self, z, t):
        """Estimated rounding error of C (kg m-3), shape (t.size, z.size).

        The series is summed in the symmetric variable v = e^{-A} u; rounding errors of
        relative size eps in its terms are multiplied by e^{A(z)} on the way back.  At
        high Peclet numbers and early times this bound, not the mode count, limits the
        accuracy."""
        c_modes, _, c_lift, _ = self._fields(z)
        t = np.atleast_1d(np.asarray(t, dtype=float))
        # magnitudes before cancellation: projection of the initial state and of the
        # lifting enter a_n separately; each is a sum over many quadrature nodes/terms
        lam = self.modes.lam[:, None]
        size = (np.abs(self.a0) + np.abs(self.forcing / np.where(self.modes.lam != 0,
                                                               self.modes.lam, 1.0))
                + np.abs(self.lift_coef))[:, None] * np.exp(-lam * t[None, :])
        n = max(self.modes.lam.size, 1)
        return 16 * np.sqrt(n) * np.finfo(float).eps * (np.abs(c_modes) @ size).T

    def concentration_at(self, depth, times):
        """C at one depth for any times: 1-D array (continuous in time)."""
        return self.concentration(np.array([float(depth)]), times)[:, 0]

    def total_flux(self, z, t):
        _, f_modes, _, f_lift = self._fields(z)
        return (f_modes @ self.coefficients(t)).T + f_lift @ self.signals

    def cumulative_mass(self, z, t):
        """Mass per area that crossed depth z downward during (0, t) (kg m-2)."""
        _, f_modes, _, f_lift = self._fields(z)
        t = np.atleast_1d(np.asarray(t, dtype=float))
        steady = np.outer(t, f_lift @ self.signals)
        if self.lifting.eps > 0:
            return (f_modes @ self.integrated_coefficients(t)).T + steady
        # int_0^t = int_0^inf - int_t^inf ; the tail sum converges fast for t > 0
        lam = self.modes.lam[:, None]
        tail = self.a0[:, None] * np.exp(-lam * t[None, :]) / lam
        total = _transient_flux_integral(self, z)
        out = steady + total[None, :] - (f_modes @ tail).T
        return np.where(t[:, None] == 0, 0.0, out)

    def budget(self, t):
        """Mass budget per unit area (kg m-2) at times t; closes by construction only if
        the series is right: stored, entered and left are computed independently."""
        t = np.atleast_1d(np.asarray(t, dtype=float))
        op = self.op
        coef = self.coefficients(t)
        icoef = self.integrated_coefficients(t)
        lift_layer = self.mass_lift @ self.signals  # (N,)
        stored = self.mass_modes.sum(axis=0) @ coef + lift_layer.sum()
        decay_modes = (op.decay[:, None] * self.mass_modes).sum(axis=0)
        if self.lifting.eps > 0:
            decayed_tr = decay_modes @ icoef
        else:
            # int_0^t = int_0^inf - int_t^inf.  Over (0, inf) the transient part decays
            # what it does not carry out:  D_inf = F_W(0) - F_W(L) + M_tr(0)
            fw = _transient_flux_integral(self, np.array([0.0, op.z[-1]]))
            d_inf = fw[0] - fw[1] + (self.initial_mass - lift_layer.sum())
            lam = self.modes.lam[:, None]
            tail = self.a0[:, None] * np.exp(-lam * t[None, :]) / lam
            decayed_tr = d_inf - decay_modes @ tail
            decayed_tr = np.where(t == 0, 0.0, decayed_tr)
        decayed = decayed_tr + t * (op.decay @ lift_layer)
        produced = t * float(np.sum(op.source * op.thickness))
        ends = np.array([0.0, op.z[-1]])
        cum = self.cumulative_mass(ends, t)
        zero = t == 0
        stored = np.where(zero, self.initial_mass, stored)
        entered, left = cum[:, 0], cum[:, 1]
        residual = stored - self.initial_mass - entered + left + decayed - produced
        return {"stored": stored, "initial_stored": np.full(t.size, self.initial_mass),
                "entered_top": entered, "left_bottom": left, "decayed": decayed,
                "produced": produced, "residual": residual}


def required_modes(op: Operator, t_min: float, tolerance: float, n_max: int) -> int:
    """Mode count with lambda_N t_min >= ln(1/tol) + ln N + 2 (tail bound), Weyl estimate."""
    weyl = float(np.sum(op.thickness * np.sqrt(op.a / op.k)))
    shift = float(np.min(op.s / op.a))
    n = 8
    for _ in range(60):
        target = (math.log(1 / tolerance) + math.log(n) + 2) / t_min
        n_new = int(math.ceil(weyl / math.pi * math.sqrt(max(target - shift, 0.0)))) + 4
        if n_new <= n:
            break
        n = min(n_new, n_max)
        if n == n_max:
            break
    return max(n, 8)


def build_series(column: Column, initial: InitialState = None, t_min: float = None,
                 tolerance: float = 1e-8, max_modes: int = 4000, n_modes: int = None):
    """Eigen-solve, lifting and projections for ``column``: a :class:`ModalSeries`."""
    initial = initial or InitialState.clean()
    op = build_operator(column)
    if n_modes is None:
        if t_min is None or t_min <= 0:
            raise InputError("give the earliest positive output time (t_min) or n_modes")
        n_modes = required_modes(op, t_min, tolerance, max_modes)
        lam = eigenvalues(op, n_modes)
        target = (math.log(1 / tolerance) + math.log(n_modes) + 2) / t_min
        while lam[-1] < target and n_modes < max_modes:
            n_modes = min(max_modes, int(n_modes * 1.5) + 8)
            lam = eigenvalues(op, n_modes)
        if lam[-1] < target:
            t_ok = (math.log(1 / tolerance) + math.log(n_modes) + 2) / lam[-1]
            warnings.warn(
                f"{n_modes} modes (the cap) do not meet the tolerance {tolerance:g} at the "
                f"earliest time {t_min:.4g} s; results are accurate from about {t_ok:.4g} s "
                "on. Raise max_modes or use later output times.", ModeCapWarning, stacklevel=3)
    else:
        lam = eigenvalues(op, n_modes)
    md = modes(op, lam)
    lam1 = lam[1] if lam.size > 1 else abs(lam[0]) + 1.0
    scale = max(abs(lam1), 1e-300)
    eps = 0.0
    if lam[0] <= 1e-9 * scale:
        eps = abs(lam1)
    lift = steady_responses(op, eps)
    top, bot = column.top, column.bottom
    signals = np.array([op.top_u[2] * top.value, op.bottom_u[2] * bot.value, 1.0])
    # Green's identity: (lambda + eps) c_kn = boundary term + source projection
    green = np.zeros((3, lam.size))
    ends = np.array([0.0, op.z[-1]])
    psi_e, dpsi_e = md.evaluate(ends, exp_sign=0)
    for col, end, sgn in ((0, "top", -1.0), (1, "bottom", +1.0)):
        c_v, c_p, G = op.v_condition(end)
        j = 0 if end == "top" else 1
        green[col] = sgn * G * (c_p * psi_e[j] - c_v * dpsi_e[j]) / (c_p ** 2 + c_v ** 2)
    breaks = tuple(initial.depths) if initial.kind == "profile" else ()
    zq, wq, lq = _gauss_nodes(op, lam, breaks)
    c0 = initial_profile(column, initial, zq)
    u0 = c0 / op.kappa[lq]
    proj0 = np.zeros(lam.size)
    mass_modes = np.zeros((op.n_layers, lam.size))
    chunk = max(1, 4_000_000 // max(lam.size, 1))
    for start in range(0, zq.size, chunk):
        sl = slice(start, start + chunk)
        psi_m, _ = md.evaluate(zq[sl], exp_sign=-1)
        wa = wq[sl] * op.a[lq[sl]]
        proj0 += (wa * u0[sl]) @ psi_m
        green[2] += (wq[sl] * op.source[lq[sl]]) @ psi_m
        psi_p, _ = md.evaluate(zq[sl], exp_sign=+1)
        np.add.at(mass_modes, lq[sl], wa[:, None] * psi_p)
    c_lift = (signals @ green) / (lam + eps)
    u_lift, _ = lift.evaluate(zq)
    mass_lift = np.zeros((op.n_layers, 3))
    np.add.at(mass_lift, lq, (wq * op.a[lq])[:, None] * u_lift)
    initial_mass = float(np.sum(wq * op.a[lq] * u0))
    return ModalSeries(column=column, op=op, modes=md, lifting=lift, signals=signals,
                       a0=proj0 - c_lift, forcing=eps * c_lift, mass_modes=mass_modes,
                       mass_lift=mass_lift, initial=initial, initial_mass=initial_mass,
                       lift_coef=c_lift)


def _transient_flux_integral(series: "ModalSeries", z):
    """int_0^inf of the transient total flux at depths z, exactly (steady state case).

    W = int_0^inf w dt solves L W = a w0 with homogeneous boundary rows, so its flux is
    given by the Green's function of the layered operator built from the two
    homogeneous solutions (the unit boundary responses):
    F_W(z) = [F_top(z) I_L(z) + F_bot(z) I_R(z)] / Wr with
    I_L(z) = int_0^z a e^{-2A} phi_bot (u0 - lift), I_R(z) = int_z^L a e^{-2A} phi_top (u0 - lift)
    and Wr = k phi_bot' phi_top - phi_bot k phi_top' (constant), evaluated at z = 0.
    The truncated series of the same quantity converges only like 1/N at a
    concentration boundary; this form has no truncation error.
    """
    op, lift = series.op, series.lifting
    z = np.atleast_1d(np.asarray(z, dtype=float))
    breaks = set(z.tolist())
    if series.initial.kind == "profile":
        breaks |= set(series.initial.depths)
    zq, wq, lq = _gauss_nodes(op, np.array([0.0]), tuple(sorted(breaks)))
    u0 = initial_profile(series.column, series.initial, zq) / op.kappa[lq]
    uq, _ = lift.evaluate(zq)
    w0 = u0 - uq @ series.signals
    A = op.A[lq] + op.alpha[lq] * (zq - op.z[lq])
    g = wq * op.a[lq] * np.exp(-2 * A) * w0
    gl = g * uq[:, 1]
    gr = g * uq[:, 0]
    cl = np.concatenate([[0.0], np.cumsum(gl)])
    cr = np.concatenate([[0.0], np.cumsum(gr)])
    idx = np.searchsorted(zq, z)  # nodes strictly above z (z is a break point)
    I_L = cl[idx]
    I_R = cr[-1] - cr[idx]
    u_e, du_e = lift.evaluate(np.array([0.0]))
    wr = du_e[0, 1] * u_e[0, 0] - u_e[0, 1] * du_e[0, 0]
    u_z, du_z = lift.evaluate(z)
    f_top = op.q * u_z[:, 0] - du_z[:, 0]
    f_bot = op.q * u_z[:, 1] - du_z[:, 1]
    return (f_top * I_L + f_bot * I_R) / wr


@dataclass(frozen=True)
class ColumnSolution:
    """Fields of one column on a (time, depth) grid, SI units (see API notes)."""

    column: Column
    times: np.ndarray
    depths: np.ndarray
    concentration: np.ndarray
    total_flux: np.ndarray
    cumulative_mass: np.ndarray
    budget: dict
    eigenvalues: np.ndarray
    n_modes: int
    engine: str = "modal"
    series: ModalSeries = field(default=None, repr=False, compare=False)

    def roundoff_bound(self, z, t):
        """Estimated rounding error of C (kg m-3), shape (t.size, z.size)."""
        return self.series.roundoff_bound(z, t)

    def concentration_at(self, depth, times):
        return self.series.concentration_at(depth, times)

    def to_dataset(self, title: str = "stratiflux column"):
        """The fields as an xarray.Dataset (CF layout, units in the attributes)."""
        from .io.netcdf import column_dataset
        return column_dataset(self, title=title)


def solve(column: Column, times, depths, initial: InitialState = None,
          tolerance: float = 1e-8, max_modes: int = 4000, n_modes: int = None):
    """Solve the layered column at ``times`` (s) and ``depths`` (m).

    Returns a :class:`ColumnSolution`.  At t = 0 the initial profile itself is returned
    (the series is not used there).  Mode count: from the earliest positive time and the
    tolerance, unless ``n_modes`` is given; a :class:`ModeCapWarning` is issued if the
    cap ``max_modes`` prevents meeting the tolerance.
    """
    initial = initial or InitialState.clean()
    times = np.asarray(times, dtype=float).ravel()
    depths = np.asarray(depths, dtype=float).ravel()
    if times.size == 0 or depths.size == 0:
        raise InputError("give at least one output time and one output depth")
    if not (np.all(np.isfinite(times)) and np.all(np.isfinite(depths))):
        raise InputError("output times and depths must be finite numbers")
    if np.any(times < 0):
        raise InputError(f"output times must be >= 0 s, got {times.min()!r}")
    L = column.length
    if np.any(depths < 0) or np.any(depths > L * (1 + 1e-12)):
        raise InputError(f"output depths must lie in the column [0, {L}] m")
    positive = times[times > 0]
    t_min = float(positive.min()) if positive.size else None
    if t_min is None and n_modes is None:
        n_modes = 8
    series = build_series(column, initial, t_min, tolerance, max_modes, n_modes)
    conc = series.concentration(depths, times)
    flux = series.total_flux(depths, times)
    cum = series.cumulative_mass(depths, times)
    scale = max(float(np.max(np.abs(conc))), 1e-300)
    bound = series.roundoff_bound(depths, times[times > 0]) if t_min else np.zeros(1)
    if bound.max() > tolerance * scale:
        bad_t = times[times > 0][np.any(bound > tolerance * scale, axis=1)]
        warnings.warn(
            f"rounding error of the modal series (up to {bound.max():.3g} kg/m3, the column "
            f"Peclet number is about {2 * (series.op.A.max() - series.op.A.min()):.0f}) exceeds "
            f"the tolerance at {bad_t.size} output time(s), the latest {bad_t.max():.4g} s; "
            "use later output times or cross-check with the finite-volume engine",
            AccuracyWarning, stacklevel=2)
    zero = times == 0
    if zero.any():
        c0 = initial_profile(column, initial, depths)
        conc[zero] = c0
        cum[zero] = 0.0
    return ColumnSolution(column=column, times=times, depths=depths, concentration=conc,
                          total_flux=flux, cumulative_mass=cum, budget=series.budget(times),
                          eigenvalues=series.eigenvalues, n_modes=series.eigenvalues.size,
                          series=series)
