"""Engine selection: every number vouched for by two independent engines, or refused.

``solve_column`` runs the engines and chooses, per output time, the value it can vouch
for (:func:`transport.solvers.checks.choose`):

* ``auto``: the modal series (:mod:`transport.solvers.modal.series`) where it agrees with the Laplace
  engine (:mod:`transport.solvers.laplace`) within the tolerance for EVERY quantity (C, total
  flux, cumulative mass, budget terms), the Laplace value where only its own error
  bound meets the tolerance, and a refusal (:class:`transport.solvers.checks.
  UnreliableResultError`) where neither does.  The physical bounds and the budget
  closure are checked on every candidate (the smoke alarm);
* ``modal`` / ``laplace`` / ``finite-volume``: that engine's values, vouched for by
  its own bound or its agreement with the Laplace engine, else refused;
* a semi-infinite bottom layer: the Laplace engine with its own bound.

The result records, per output time, the engine used and the error bound of every
quantity (``error``; ``error_estimate`` is that of C, kg m-3), and ``reliable``.
"""
from __future__ import annotations

import warnings

import numpy as np

from transport.model.column import Column, InitialState, InputError
from transport.solvers.checks import (QUANTITIES, UnreliableResultError, assemble, choose,
                                      clip_to_bounds, concentration_bounds, describe_refusal,
                                      own_errors, quantities)
from transport.solvers.fv.engine import DEFAULT_TOLERANCE as FV_TOLERANCE
from transport.solvers.fv.engine import solve_fv_result
from transport.solvers.laplace import solve_laplace
from transport.solvers.modal import series as modal
from transport.solvers.modal.operator import build_operator
from transport.solvers.modal.projection import initial_profile
from transport.solvers.modal.sizing import DEFAULT_TOLERANCE
from transport.solvers.result import Solution

__all__ = ["solve_column", "ENGINES", "ON_UNRELIABLE", "modal_evaluator", "checked_fields",
           "DEFAULT_TOLERANCE", "FV_TOLERANCE"]

ENGINES = ("auto", "modal", "laplace", "finite-volume")
ON_UNRELIABLE = ("raise", "flag")
# Default relative tolerances: DEFAULT_TOLERANCE (1e-8) of the modal series, and the
# looser FV_TOLERANCE (1e-3) of the finite-volume engine (a second-order scheme, whose
# error estimate comes from mesh doubling).


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
            out[pos] = solve_laplace(column, t[pos], [depth], initial=initial,
                                     semi_infinite_bottom=semi_infinite_bottom
                                     ).concentration[:, 0]
        if (~pos).any():
            out[~pos] = initial_profile(column, initial, np.array([depth]))[0]
        return out
    return at


def _auto_evaluator(series, t_modal, laplace_at):
    """Modal series from ``t_modal`` on (where it was vouched for), Laplace before."""
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


def _expand(sol, rows, nt):
    """A candidate (quantities, own errors, budget) on the full time grid from a
    solution at ``rows`` (NaN elsewhere)."""
    vals, own = quantities(sol), own_errors(sol)
    full_v = {q: np.full((nt,) + v.shape[1:], np.nan) for q, v in vals.items()}
    full_e = {q: np.full(nt, np.nan) for q in QUANTITIES}
    for q in QUANTITIES:
        full_v[q][rows] = vals[q]
        full_e[q][rows] = own[q]
    budget = {k: np.full(nt, np.nan) for k in sol.budget}
    for k in sol.budget:
        budget[k][rows] = np.asarray(sol.budget[k], float)
    return full_v, full_e, budget


def solve_column(column: Column, times, depths, *, initial: InitialState = None,
                 tolerance: float = None, engine: str = "auto", max_modes: int = 4000,
                 semi_infinite_bottom: bool = False, cells_per_layer=None,
                 on_unreliable: str = "raise") -> Solution:
    """Solve a layered column; every returned number is vouched for within ``tolerance``.

    Parameters
    ----------
    column, times (s), depths (m), initial : as :func:`transport.solvers.modal.series.solve`
    tolerance : relative tolerance of every quantity, relative to the scale of its own
        series over the run (C: the largest concentration the inputs allow); default
        1e-8, and 1e-3 for the finite-volume engine
    engine : "auto" | "modal" | "laplace" | "finite-volume"
    max_modes : cap of the modal series
    semi_infinite_bottom : last layer extends to infinity (Laplace engine only)
    cells_per_layer : finite-volume mesh (finite-volume engine only; default: planned
        from the decay, dispersion and boundary-layer lengths, then refined by doubling
        to the tolerance)
    on_unreliable : "raise" (default): :class:`transport.solvers.checks.UnreliableResultError`
        when an output time cannot be vouched for; "flag": its values are NaN and
        ``reliable`` is False there

    Returns
    -------
    Solution with ``engine_by_time`` (nt,) strings ("modal", "laplace",
    "finite-volume", "initial" at t = 0, "" where refused), ``error`` (quantity ->
    (nt,) absolute bounds), ``error_estimate`` (that of C, kg m-3) and ``reliable``.
    ``concentration_at(depth, times)`` serves any times from the engine that was
    vouched for there.
    """
    if engine not in ENGINES:
        raise InputError(f"engine {engine!r} is unknown; use one of " + ", ".join(ENGINES))
    if on_unreliable not in ON_UNRELIABLE:
        raise InputError(f"on_unreliable {on_unreliable!r} is unknown; use "
                         + " or ".join(ON_UNRELIABLE))
    if tolerance is None:
        tolerance = FV_TOLERANCE if engine == "finite-volume" else DEFAULT_TOLERANCE
    if not (isinstance(tolerance, (int, float)) and 0 < tolerance < 1):
        raise InputError(f"tolerance must be a number between 0 and 1, got {tolerance!r}")
    initial = initial or InitialState.clean()
    times = np.asarray(times, dtype=float).ravel()
    depths = np.asarray(depths, dtype=float).ravel()
    if semi_infinite_bottom and engine in ("modal", "finite-volume"):
        raise InputError(f"a semi-infinite bottom layer needs the Laplace engine (or auto), "
                         f"not {engine!r}")
    nt = times.size
    lap = solve_laplace(column, times, depths, initial=initial,
                        semi_infinite_bottom=semi_infinite_bottom)
    everything = np.arange(nt)
    lap_c = _expand(lap, everything, nt)
    laplace_at = _laplace_evaluator(column, initial, semi_infinite_bottom)
    bounds = None if semi_infinite_bottom else concentration_bounds(
        column, initial, float(times.max()) if nt else 0.0)
    series, evaluator = None, laplace_at
    eig, n_modes = np.empty(0), 0
    if engine == "laplace" or semi_infinite_bottom:
        cands = [("laplace", lap_c)]
    elif engine == "finite-volume":
        fv = solve_fv_result(column, times, depths, initial=initial, tolerance=tolerance,
                             cells_per_layer=cells_per_layer)
        cands = [("finite-volume", _expand(fv, everything, nt)), ("laplace", lap_c)]
        evaluator = fv.evaluator
    else:
        rows = _modal_rows(column, times, tolerance, max_modes, forced=engine == "modal")
        cands = []
        if rows.size:
            with warnings.catch_warnings():
                if engine == "auto":  # the cross-check below settles what they warn of
                    warnings.simplefilter("ignore", modal.ModeCapWarning)
                    warnings.simplefilter("ignore", modal.AccuracyWarning)
                sol = modal.solve(column, times[rows], depths, initial=initial,
                                  tolerance=tolerance, max_modes=max_modes)
            cands.append(("modal", _expand(sol, rows, nt)))
            series = sol.series
            eig, n_modes = sol.eigenvalues, sol.n_modes
        cands.append(("laplace", lap_c))
    selectable = 1 if engine != "auto" else len(cands)
    choice = choose(times, [(n, c[0], c[1]) for n, c in cands], tolerance, bounds, column,
                    depths, budgets=[c[2] for n, c in cands], selectable=selectable)
    if not choice.reliable.all() and on_unreliable == "raise":
        tried = " and ".join(n for n, _ in cands[:selectable]) + (
            " (cross-checked against laplace)" if selectable < len(cands) else "")
        raise UnreliableResultError(describe_refusal(times, choice, tolerance, tried),
                                    times[~choice.reliable],
                                    [q for q in QUANTITIES
                                     if np.any(choice.failed[q] & ~choice.reliable)])
    vals, budget = assemble([(n, c[0], c[1]) for n, c in cands], choice,
                            [c[2] for n, c in cands])
    vals["concentration"] = clip_to_bounds(column, bounds, depths, vals["concentration"],
                                           choice.error["concentration"])
    series, evaluator = modal_evaluator(choice, times, series, evaluator)
    eig, n_modes = (eig, n_modes) if series is not None else (np.empty(0), 0)
    return Solution(column=column, times=times, depths=depths, eigenvalues=eig,
                    n_modes=n_modes, series=series, evaluator=evaluator,
                    mass_at=_laplace_mass_at(column, initial, semi_infinite_bottom),
                    **checked_fields(choice, vals, budget, tolerance))


def modal_evaluator(choice, times, series, fallback):
    """(series, C(depth, t)) for the continuous-time metrics: the modal series from the
    first output time after which it served every time (Laplace before), or (None,
    ``fallback``) when it serves no such tail."""
    used = choice.engine == "modal"
    later = np.flatnonzero(~used & (times > 0))
    cut = later.max() + 1 if later.size else 0
    if series is not None and cut < times.size and used[cut:].all():
        return series, _auto_evaluator(series, float(times[cut]), fallback)
    return None, fallback


def checked_fields(choice, vals, budget, tolerance) -> dict:
    """The fields a checked :class:`transport.solvers.result.Solution` takes from a choice
    between engines."""
    names = sorted({e for e in choice.engine if e not in ("", "initial")})
    return dict(concentration=vals["concentration"], total_flux=vals["total_flux"],
                cumulative_mass=vals["cumulative_mass"], budget=budget,
                engine="+".join(names) or "none", engine_by_time=choice.engine,
                error_estimate=choice.error["concentration"], error=choice.error,
                reliable=choice.reliable, tolerance=float(tolerance), scale=choice.scale)


def _laplace_mass_at(column, initial, semi_infinite_bottom):
    def at(depth, t):
        if t <= 0:
            return 0.0, 0.0
        sol = solve_laplace(column, [t], [depth], initial=initial,
                            semi_infinite_bottom=semi_infinite_bottom)
        err = own_errors(sol)["cumulative_mass"][0]
        return float(sol.cumulative_mass[0, 0]), float(np.nan_to_num(err, nan=np.inf))
    return at


def _modal_rows(column, times, tolerance, max_modes, forced):
    """Output times the modal engine is asked for: all positive times when forced, else
    those its mode cap can resolve (Weyl estimate); none beyond its Peclet range."""
    positive = np.flatnonzero(times > 0)
    if forced:
        return positive
    try:
        op = build_operator(column)
    except InputError:  # column Peclet number beyond the modal engine's range
        return np.empty(0, int)
    need = np.array([_weyl_modes(op, t, tolerance) for t in times[positive]])
    return positive[need <= max_modes]
