"""Time stepping of the finite-volume system in total-mass form.

Linear storage: extrapolated implicit Euler (:func:`transport.solvers.fv.signals.
march_linear`); nonlinear isotherms: scipy's BDF (Shampine & Reichelt 1997, SIAM J.
Sci. Comput. 18:1).  The integration restarts at every change time of a schedule.
"""
from __future__ import annotations

import numpy as np
import scipy.sparse as sp
from scipy.integrate import solve_ivp

from transport.model.column import Column, InitialState, InputError
from transport.solvers.fv.assembly import assemble, build_storage, cell_props, initial_cells
from transport.solvers.fv.mesh import Mesh
from transport.solvers.fv.signals import MarchFailure, Signals, march_linear
from transport.units import YEAR

__all__ = ["DEFAULT_RTOL", "FVIntegrationError", "integrate", "MAX_RHS_EVALUATIONS"]

#: Default relative tolerance of the time integration of the reported (finest) mesh;
#: the spatial error targets are 1e-3 and below, so 1e-8 keeps the time error far under.
DEFAULT_RTOL = 1e-8


def _stiffest_layer(column: Column, mesh: Mesh, t_end: float) -> str:
    """Message naming the layer whose cells relax fastest, and what to do about it."""
    vol = np.diff(mesh.faces)
    rates = [max(lay.diffusivity / lay.retardation / float(np.min(vol[mesh.layer == i])) ** 2,
                 lay.decay_rate) for i, lay in enumerate(column.layers)]
    i = int(np.argmax(rates))
    lay = column.layers[i]
    name = lay.name or f"#{i + 1}"
    return (f"layer {name!r} (thickness {lay.thickness:.3g} m, D = {lay.diffusivity:.3g} m2/s) "
            f"relaxes in {1 / rates[i]:.3g} s, {rates[i] * max(t_end, 1e-300):.3g} times "
            "faster than the run; merge a thin, highly diffusive layer into its neighbour "
            "(it only passes mass through), or use the modal or Laplace engine (linear sorption)")


class FVIntegrationError(InputError):
    """The time integration of the finite-volume system failed; the message names the
    stiffest layer and what to change."""


def integrate(column, times, initial, mesh, rtol, atol, scheme, isotherm, augment: bool):
    """March the total-mass form in time on ``mesh``.

    State: m_j = theta R C_j + rho_b S(C_j) per cell (kg m-3 bulk), and with ``augment``
    the cumulative flux through every face Q_f = int F_f dt (kg m-2) and the decayed mass
    per area.  V_j dm_j/dt = F_{j-1/2} - F_{j+1/2} - mu_j m_j V_j + sigma_j V_j,
    F = Fmat C(m) + f0.  Linear storage: extrapolated implicit Euler
    (:func:`transport.solvers.fv.signals.march_linear`, one sparse LU solve per substep, no
    Newton iteration).  Nonlinear isotherms: scipy's BDF (Shampine & Reichelt 1997); the
    Jacobian d(dm/dt)/dm = Div diag(dC/dm) - diag(mu) stays finite at C = 0 even where
    dS/dC is infinite (Freundlich n < 1): dC/dm = 1/capacity -> 0.  Both keep the linear
    invariants (the mass budget) up to rounding / the Newton tolerance.  A failure
    raises :class:`FVIntegrationError` naming the stiffest layer.
    """
    initial = InitialState.clean() if initial is None else initial
    times = np.atleast_1d(np.asarray(times, dtype=float))
    if times.size == 0 or not np.all(np.isfinite(times)) or np.any(times < 0):
        raise InputError("finite-volume engine: give finite output times >= 0 s")
    signals = Signals(column, mesh, scheme, assemble)
    system = signals.system
    store = build_storage(column, mesh, isotherm)
    n = mesh.centres.size
    vol = np.diff(mesh.faces)
    mu = cell_props(column, mesh, "decay_rate")
    Fm, f0 = system.Fmat, system.f0
    div = (sp.diags(1.0 / vol) @ (Fm[:-1] - Fm[1:])).tocsr()
    d0 = (f0[:-1] - f0[1:]) / vol + signals.sigma_static

    def drive(t):
        """Cell drive d(t) and face constants f0(t) (constant without schedules)."""
        if not signals.varying:
            return d0, f0
        f, sig = signals.f0(t)[0], signals.sigma(t)[0]
        return (f[:-1] - f[1:]) / vol + sig, f
    c0 = initial_cells(column, mesh, initial)
    m0 = store.mass(c0)
    order = np.argsort(times)
    t_sorted = times[order]
    t_end = float(t_sorted[-1])
    n_aux = n + 2 if augment else 0
    vmu = vol * mu
    out = np.empty((times.size, n + n_aux))
    out[:] = np.concatenate([m0, np.zeros(n_aux)])
    if t_end > 0:
        probe = signals.probe_times(t_end)
        sig_max = np.max(np.abs(signals.sigma(probe)), axis=0)
        c_scale = max([np.max(np.abs(c0), initial=0.0), signals.scale(t_end),
                       np.max(sig_max / store.a) * t_end, 1e-300])
        m_scale = store.mass(np.full(n, c_scale))
        atol_m = (rtol if atol is None else atol / c_scale) * m_scale
        q_scale = (float(vol @ m_scale) + np.max(np.abs(signals.f0(probe))) * t_end
                   + float(vol @ np.abs(m0)))
        atol_q = np.full(n_aux, rtol * q_scale)
        step = _linear_steps if store.linear else _bdf_steps
        y, out_sorted = np.concatenate([m0, np.zeros(n_aux)]), np.empty((t_sorted.size, n + n_aux))
        # restart at every change of a boundary or source schedule (smooth pieces)
        for a, b in signals.intervals(t_end):
            sel = (t_sorted > a) & (t_sorted <= b)
            t_eval = np.union1d(t_sorted[sel], [b])
            left = np.nextafter(b, a)
            try:
                ys = step(div, Fm, mu, vmu, store, drive, left, a, b, y, t_eval, rtol, atol_m,
                          atol_q, augment)
            except (MarchFailure, _BDFFailure, ValueError, np.linalg.LinAlgError,
                    RuntimeError) as exc:
                raise FVIntegrationError(
                    f"finite-volume engine: time integration failed between {a / YEAR:.6g} yr "
                    f"and {b / YEAR:.6g} yr ({exc}); {_stiffest_layer(column, mesh, t_end)}") from None
            out_sorted[sel] = ys[np.searchsorted(t_eval, t_sorted[sel])]
            y = ys[-1]
        out[order] = out_sorted
    out[times == 0] = np.concatenate([m0, np.zeros(n_aux)])
    cells = np.vstack([store.concentration(row) for row in out[:, :n]])
    return dict(times=times, mesh=mesh, system=system, store=store, cells=cells,
                mass=out[:, :n], aux=out[:, n:], vol=vol, signals=signals, initial=initial)


def _linear_steps(div, Fm, mu, vmu, store, drive, left, a, b, y, t_eval, rtol, atol_m,
                  atol_q, augment):
    """Linear storage: C = m / (theta R); extrapolated implicit Euler."""
    n = store.a.size
    inv_a = sp.diags(1.0 / store.a)
    jac = (div @ inv_a - sp.diags(mu)).tocsc()
    if augment:
        pmat = sp.vstack([Fm @ inv_a, sp.csr_matrix(vmu[None, :])]).tocsr()
    else:
        pmat = sp.csr_matrix((0, n))

    def drv(t):
        d, f = drive(min(t, left))
        return d, (np.concatenate([f, [0.0]]) if augment else np.empty(0))
    ys, qs = march_linear(jac, pmat, drv, a, b, y[:n], y[n:], t_eval, rtol, atol_m, atol_q)
    return np.hstack([ys, qs])


class _BDFFailure(RuntimeError):
    pass


#: Right-hand-side evaluations allowed per BDF interval (nonlinear isotherms) before the
#: run is declared failed, instead of creeping on with ever smaller steps.
MAX_RHS_EVALUATIONS = 400000


def _bdf_steps(div, Fm, mu, vmu, store, drive, left, a, b, y, t_eval, rtol, atol_m, atol_q,
               augment):
    """Nonlinear storage: scipy's BDF with the analytic sparse Jacobian."""
    n = store.a.size
    n_aux = y.size - n
    calls = [0]

    def rhs(t, yy):
        calls[0] += 1
        if calls[0] > MAX_RHS_EVALUATIONS:
            raise _BDFFailure(f"more than {MAX_RHS_EVALUATIONS} right-hand-side evaluations")
        d, f = drive(min(t, left))
        m = yy[:n]
        c = store.concentration(m)
        dm = div @ c + d - mu * m
        if not augment:
            return dm
        return np.concatenate([dm, Fm @ c + f, [vmu @ m]])

    def jac(t, yy):
        dcdm = 1.0 / store.capacity(store.concentration(yy[:n]))
        jm = div @ sp.diags(dcdm) - sp.diags(mu)
        if not augment:
            return jm.tocsc()
        top = sp.hstack([jm, sp.csr_matrix((n, n_aux))])
        low = sp.hstack([sp.vstack([Fm @ sp.diags(dcdm), sp.csr_matrix(vmu[None, :])]),
                         sp.csr_matrix((n_aux, n_aux))])
        return sp.vstack([top, low]).tocsc()
    sol = solve_ivp(rhs, (a, b), y, method="BDF", t_eval=t_eval, jac=jac, rtol=rtol,
                    atol=np.concatenate([atol_m, atol_q]))
    if not sol.success:
        raise _BDFFailure(sol.message)
    return sol.y.T
