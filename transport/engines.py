"""Engine selection: modal where it is accurate, Laplace where it is not.

``solve_column`` runs one of the three independent engines, or chooses per output time
(``engine="auto"``):

* the modal series (:mod:`transport.modal`) at every time where (a) its mode count
  meets the tolerance within ``max_modes`` (tail bound, Weyl estimate, then checked on
  the computed eigenvalues) and (b) its rounding bound ``roundoff_bound(z, t)`` (the
  series is summed in v = e^{-A} u, so rounding grows like e^{A(z)}) stays below
  ``tolerance`` times the concentration scale at that time;
* the Laplace engine (:mod:`transport.laplace`) at the other times, and at all times
  with a semi-infinite bottom layer.

The modal warnings that the choice resolves (ModeCapWarning, AccuracyWarning) are not
passed on.  The result records, per output time, the engine used and its estimated
error of C (kg m-3).
"""
from __future__ import annotations

import math
import warnings

import numpy as np

from . import modal
from .finite_volume import solve_fv, solve_fv_result
from .laplace import EngineSolution, solve_laplace
from .model import Column, InitialState, InputError
from .projection import initial_profile
from .spectrum import build_operator

__all__ = ["solve_column", "ENGINES"]

ENGINES = ("auto", "modal", "laplace", "finite-volume")


def _weyl_modes(op, t, tolerance):
    """Mode count the modal tail bound needs at time t (no cap), as modal.required_modes."""
    return modal.required_modes(op, t, tolerance, 10 ** 9)


def _laplace_evaluator(column, initial, semi_infinite_bottom):
    """C(depth, t) at any times by Laplace inversion (the initial state at t = 0)."""
    def at(depth, t):
        t = np.atleast_1d(np.asarray(t, dtype=float))
        out = np.empty(t.size)
        pos = t > 0
        if pos.any():
            out[pos] = solve_laplace(column, t[pos], [depth], initial,
                                     semi_infinite_bottom).concentration[:, 0]
        if (~pos).any():
            out[~pos] = initial_profile(column, initial, np.array([depth]))[0]
        return out
    return at


def _auto_evaluator(series, t_modal, laplace_at):
    """Modal series from ``t_modal`` on (where auto chose it), Laplace before."""
    def at(depth, t):
        t = np.atleast_1d(np.asarray(t, dtype=float))
        out = np.empty(t.size)
        late = t >= t_modal
        if late.any():
            out[late] = series.concentration_at(depth, t[late])
        if (~late).any():
            out[~late] = laplace_at(depth, t[~late])
        return out
    return at


def _fv_evaluator(column, initial, cells_per_layer):
    """C(depth, t) at any times by a finite-volume run with those output times."""
    def at(depth, t):
        t = np.atleast_1d(np.asarray(t, dtype=float))
        uniq, inv = np.unique(t, return_inverse=True)
        return solve_fv(column, uniq, [depth], initial,
                        cells_per_layer=cells_per_layer)[:, 0][inv]
    return at


def _merge(column, times, depths, parts, engine_by_time, error, series, evaluator=None):
    """Assemble one ColumnSolution from per-time pieces (each a solution and its rows)."""
    nt, nz = times.size, depths.size
    conc, flux, cum = (np.empty((nt, nz)) for _ in range(3))
    budget = None
    eig, n_modes = np.empty(0), 0
    for sol, rows in parts:
        conc[rows], flux[rows], cum[rows] = sol.concentration, sol.total_flux, sol.cumulative_mass
        if budget is None:
            budget = {k: np.empty(nt) for k in sol.budget}
        for k in budget:
            budget[k][rows] = sol.budget[k]
        if sol.engine == "modal":
            eig, n_modes = sol.eigenvalues, sol.n_modes
    used = sorted(set(engine_by_time))
    return EngineSolution(column=column, times=times, depths=depths, concentration=conc,
                                total_flux=flux, cumulative_mass=cum, budget=budget,
                                eigenvalues=eig, n_modes=n_modes, engine="+".join(used),
                                series=series, engine_by_time=np.asarray(engine_by_time,
                                                                         dtype=object),
                                error_estimate=np.asarray(error, dtype=float),
                                evaluator=evaluator)


def _modal_error(sol, tolerance):
    """Per-time error estimate of a modal solution: rounding bound + tail target."""
    t = sol.times
    err = np.zeros(t.size)
    pos = t > 0
    if pos.any():
        bound = sol.roundoff_bound(sol.depths, t[pos]).max(axis=1)
        scale = np.abs(sol.concentration[pos]).max(axis=1)
        err[pos] = bound + tolerance * scale
    return err, scale if pos.any() else None


def solve_column(column: Column, times, depths, initial: InitialState = None,
                 engine: str = "auto", tolerance: float = 1e-8, max_modes: int = 4000,
                 semi_infinite_bottom: bool = False, cells_per_layer=40):
    """Solve a layered column with the chosen engine, or the best one per output time.

    Parameters
    ----------
    column, times (s), depths (m), initial : as :func:`transport.modal.solve`
    engine : "auto" | "modal" | "laplace" | "finite-volume"
    tolerance : target relative accuracy of C (modal tail bound and the auto choice)
    max_modes : cap of the modal series
    semi_infinite_bottom : last layer extends to infinity (Laplace engine only)
    cells_per_layer : finite-volume mesh (finite-volume engine only)

    Returns
    -------
    transport.modal.ColumnSolution with ``engine_by_time`` (nt,) strings ("modal",
    "laplace", "finite-volume", "initial" at t = 0) and ``error_estimate`` (nt,) the
    estimated error of C (kg m-3; NaN for finite volumes, whose discretisation error the
    engine does not estimate).  ``concentration_at(depth, times)`` serves any times from
    the engine that serves them (Laplace inversion before the modal range, a
    finite-volume run at those times for the finite-volume engine).
    """
    if engine not in ENGINES:
        raise InputError(f"engine {engine!r} is unknown; use one of " + ", ".join(ENGINES))
    initial = initial or InitialState.clean()
    times = np.asarray(times, dtype=float).ravel()
    depths = np.asarray(depths, dtype=float).ravel()
    if semi_infinite_bottom and engine in ("modal", "finite-volume"):
        raise InputError(f"a semi-infinite bottom layer needs the Laplace engine (or auto), "
                         f"not {engine!r}")
    if engine == "laplace" or (engine == "auto" and semi_infinite_bottom):
        sol = solve_laplace(column, times, depths, initial, semi_infinite_bottom)
        label = np.where(times > 0, "laplace", "initial").astype(object)
        return _merge(column, times, depths, [(sol, slice(None))], label,
                      sol.error_estimate, None,
                      _laplace_evaluator(column, initial, semi_infinite_bottom))
    if engine == "modal":
        sol = modal.solve(column, times, depths, initial, tolerance, max_modes)
        err, _ = _modal_error(sol, tolerance)
        label = np.where(times > 0, "modal", "initial").astype(object)
        return _merge(column, times, depths, [(sol, slice(None))], label, err, sol.series)
    if engine == "finite-volume":
        sol = solve_fv_result(column, times, depths, initial, cells_per_layer=cells_per_layer)
        label = np.where(times > 0, "finite-volume", "initial").astype(object)
        return _merge(column, times, depths, [(sol, slice(None))], label,
                      np.full(times.size, np.nan), None,
                      _fv_evaluator(column, initial, cells_per_layer))
    return _auto(column, times, depths, initial, tolerance, max_modes)


def _auto(column, times, depths, initial, tolerance, max_modes):
    nt = times.size
    label = np.where(times > 0, "laplace", "initial").astype(object)
    try:
        op = build_operator(column)
    except InputError:  # column Peclet number beyond the modal engine's range
        op = None
    modal_ok = np.zeros(nt, bool)
    if op is not None:
        need = np.array([_weyl_modes(op, t, tolerance) if t > 0 else 0 for t in times])
        modal_ok = (times > 0) & (need <= max_modes)
    parts, err = [], np.zeros(nt)
    series = None
    if modal_ok.any():
        rows = np.flatnonzero(modal_ok)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", modal.ModeCapWarning)
            warnings.simplefilter("ignore", modal.AccuracyWarning)
            sol = modal.solve(column, times[rows], depths, initial, tolerance, max_modes)
        lam_top = float(sol.eigenvalues[-1])
        n = sol.eigenvalues.size
        t_ok = (math.log(1 / tolerance) + math.log(n) + 2) / lam_top if lam_top > 0 else 0.0
        e_modal, scale = _modal_error(sol, tolerance)
        bound = e_modal - tolerance * scale
        good = (times[rows] >= t_ok * (1 - 1e-12)) & (bound <= tolerance * np.maximum(
            scale, 1e-300))
        if good.any():
            keep = rows[good]
            sub = _take(sol, good)
            parts.append((sub, keep))
            label[keep] = "modal"
            err[keep] = e_modal[good]
            series = sol.series
        modal_ok[rows[~good]] = False
    lap = (times > 0) & ~modal_ok
    zero = times == 0
    if lap.any() or zero.any():
        rows = np.flatnonzero(lap | zero)
        sol = solve_laplace(column, times[rows], depths, initial)
        parts.append((sol, rows))
        err[rows] = sol.error_estimate
    laplace_at = _laplace_evaluator(column, initial, False)
    if series is None:
        evaluator = laplace_at
    else:
        # modal from the first output time after which every output time is modal
        positive = times > 0
        after = np.flatnonzero(positive & ~modal_ok)
        t_modal = float(times[after].max()) if after.size else 0.0
        later = times[(times > t_modal) & modal_ok]
        t_modal = float(later.min()) if later.size else np.inf
        evaluator = _auto_evaluator(series, t_modal, laplace_at)
    return _merge(column, times, depths, parts, label, err, series, evaluator)


def _take(sol, mask):
    """Rows ``mask`` of a solution, as a light object with the fields _merge reads."""
    class _Rows:
        pass
    out = _Rows()
    out.concentration = sol.concentration[mask]
    out.total_flux = sol.total_flux[mask]
    out.cumulative_mass = sol.cumulative_mass[mask]
    out.budget = {k: np.asarray(v)[mask] for k, v in sol.budget.items()}
    out.engine, out.eigenvalues, out.n_modes = sol.engine, sol.eigenvalues, sol.n_modes
    return out
