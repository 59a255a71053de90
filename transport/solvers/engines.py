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

import functools
import math
import warnings
from dataclasses import dataclass

import numpy as np

from transport.model.column import Column, InitialState, InputError, has_source_zone
from transport.solvers.checks import (QUANTITIES, UnreliableResultError, assemble, choose,
                                      budget_onto_bounds, clip_to_bounds,
                                      concentration_bounds, describe_refusal, good_enough,
                                      own_errors, quantities, switched, vouched_from)
from transport.solvers.fv.defaults import DEFAULT_TOLERANCE as FV_TOLERANCE
from transport.solvers.laplace import solve_laplace
from transport.solvers.laplace.contour import default_nodes
from transport.solvers.laplace.inversion import evaluations
from transport.solvers.modal import series as modal
from transport.solvers.modal.operator import ZONE_NOT_MODAL, build_operator
from transport.solvers.modal.projection import initial_profile
from transport.solvers.modal.sizing import DEFAULT_TOLERANCE, earliest_time_after_change
from transport.solvers.result import Solution, checked_arithmetic

__all__ = ["solve_column", "ENGINES", "ON_UNRELIABLE", "modal_evaluator", "checked_fields",
           "DEFAULT_TOLERANCE", "FV_TOLERANCE", "CostEstimate", "estimate_costs",
           "COSTLIER_BY", "COST_FLOOR", "laplace_cost", "modal_cost", "READS", "own_bound_at"]

ENGINES = ("auto", "modal", "laplace", "finite-volume")
ON_UNRELIABLE = ("raise", "flag")
# Default relative tolerances: DEFAULT_TOLERANCE (1e-8) of the modal series, and the
# looser FV_TOLERANCE (1e-3) of the finite-volume engine (a second-order scheme, whose
# error estimate comes from mesh doubling).


#: ``auto`` serves from the Laplace engine alone when the modal path is estimated this
#: many times costlier than the Laplace engine ...
COSTLIER_BY = 5.0
#: ... and at least this long (s): a small column is always solved as before (both
#: engines, the modal value where the Laplace engine confirms it).
COST_FLOOR = 1.0
# Work units in seconds, measured on a 2-core x86-64 machine with
# benchmarks/bench_engines.py (columns of 5 to 1,000 layers); only their ratio and the
# floor above decide anything, and an estimate off by a factor of 2 changes no choice
# the ratio of 5 makes.
_S_PER_MODE_LAYER = 1e-5  # root search: ~30 Pruefer passes of ~3e-7 s per mode x layer
_NODES_PER_PANEL = 16  # Gauss-Legendre nodes of the projections (8 to 32 per panel)
_S_PER_NODE_RESPONSE = 2e-7  # one steady response or mode at one quadrature node
_S_PER_LAPLACE_SOLVE = 4e-6  # one transform evaluation x (segment + 20 of overhead)
#: Later C(depth, t) evaluations assumed by default: a receptor reading scans a curve
#: served by Laplace inversion at about 240 times (160 uniform + 80 logarithmic), each
#: one more inversion, where the modal series evaluates them almost for free.  A caller
#: that reads no curve passes ``reads=0``.
READS = 240
#: Transform evaluations x segments the Laplace evaluator makes in one call (bounds its
#: memory, ~270 bytes each: a column of 1,000 layers read at 240 times, one Talbot
#: contour per time, made 15 million and held 4 GB); larger reads are split by time.
READ_BLOCK = 1_000_000


@dataclass(frozen=True)
class CostEstimate:
    """Work of the two engines of ``auto``, estimated before solving (seconds on the
    machine the constants were measured on: an order of magnitude, not a promise).

    Attributes
    ----------
    modal : float
        Modal path: eigenvalues (modes x layers x Pruefer passes) and the projections
        of its N + 2 steady responses and its modes at ~16 Gauss nodes per panel (the
        panels break at every layer face and output depth).
    laplace : float
        Laplace engine: transform evaluations (windows of output times sharing a
        hyperbola, lone times a Talbot contour each, and a read curve) x switch-on
        times x segments of the banded system.
    modes : int
        Modes the modal path needs (Weyl estimate of the tail bound).
    laplace_only : bool
        Whether ``auto`` serves from the Laplace engine alone (modal estimated
        ``COSTLIER_BY`` times costlier and above ``COST_FLOOR``).
    """

    modal: float
    laplace: float
    modes: int
    laplace_only: bool

    @property
    def ratio(self) -> float:
        """Modal estimate over the Laplace estimate."""
        return self.modal / max(self.laplace, 1e-300)

    def describe(self) -> str:
        """One line for the command line: the choice and its reason."""
        return (f"auto: Laplace chosen, modal path estimated {self.ratio:.0f}x costlier "
                f"(~{self.modal:.2g} s for {self.modes} modes against ~{self.laplace:.2g} s)")


def _switch_on_times(column) -> int:
    """Distinct switch-on times of the signals (each is one Laplace inversion)."""
    changes = {0.0}
    for sched in (column.top.schedule, column.bottom.schedule,
                  *(lay.source_schedule for lay in column.layers)):
        if sched is not None:
            changes.update(float(t) for t in sched.change_times)
    return len(changes)


def laplace_cost(column, times, initial=None, reads: int = 0) -> float:
    """Estimated seconds of :func:`transport.solvers.laplace.solve_laplace` on ``times``
    and of ``reads`` later evaluations of a curve over their span (transform
    evaluations as planned, windows of times sharing a hyperbola, x segments x
    switch-on times)."""
    n = default_nodes(column)
    segments = len(column.layers) + (len(initial.depths) if initial is not None
                                     and getattr(initial, "kind", "") == "profile" else 0)
    times = np.asarray(times, float).ravel()
    positive = times[times > 0]
    solves = evaluations(positive, n) if positive.size else 0
    if reads and positive.size:  # a curve scanned over the span of the output times:
        # its windows cost the same beyond a few samples per window (at most 4 READS)
        span = np.geomspace(positive.min(), max(positive.max(), 2 * positive.min()),
                            min(int(reads), 4 * READS))
        solves += evaluations(span, n)
    return _S_PER_LAPLACE_SOLVE * solves * _switch_on_times(column) * (segments + 20)


def modal_cost(column, modes: int, n_depths: int = 0) -> float:
    """Estimated seconds of the modal path with ``modes`` modes and ``n_depths`` output
    depths: root search over the layers, then N + 2 steady responses and the modes at
    ~16 Gauss nodes per panel (panels break at layer faces and output depths)."""
    n = len(column.layers)
    nodes = _NODES_PER_PANEL * (n + n_depths)
    return _S_PER_MODE_LAYER * modes * n + _S_PER_NODE_RESPONSE * nodes * (n + 2 + modes)


def estimate_costs(column, times, tolerance, max_modes=4000, initial=None,
                   rows=None, n_depths=0, reads: int = READS) -> CostEstimate:
    """Cost of the modal path and of the Laplace engine for ``column`` at ``times``,
    estimated before solving either (see :class:`CostEstimate`).

    Parameters
    ----------
    column : Column
    times : (nt,) s
    tolerance : relative tolerance (sizes the modal series)
    max_modes : cap of the modal series
    initial : InitialState, optional (a profile adds Laplace segments)
    rows : indices of the times the modal path would be asked for (default: every
        positive time)
    n_depths : number of output depths
    reads : later C(depth, t) evaluations of the result (:data:`READS` by default)

    Returns
    -------
    CostEstimate
    """
    times = np.asarray(times, float).ravel()
    rows = np.flatnonzero(times > 0) if rows is None else np.asarray(rows, int)
    lap = laplace_cost(column, times, initial, reads)
    if rows.size == 0:
        return CostEstimate(0.0, lap, 0, False)
    t_min = earliest_time_after_change(column, times[rows])
    modes = 8 if t_min is None else modal.required_modes(build_operator(column), t_min,
                                                         tolerance, max_modes)
    cost = modal_cost(column, modes, n_depths)
    return CostEstimate(cost, lap, modes, cost > COST_FLOOR and cost > COSTLIER_BY * lap)


def _weyl_modes(op, t, tolerance):
    """Mode count the modal tail bound needs at time t (no cap), as modal.required_modes."""
    return modal.required_modes(op, t, tolerance, 10 ** 9)


def _laplace_evaluator(column, initial, semi_infinite_bottom, enough=None):
    """C(depth, t) at any times by Laplace inversion (the initial state at t = 0);
    ``enough`` as :func:`transport.solvers.laplace.solve_laplace`."""
    def at(depth, t):
        t = np.atleast_1d(np.asarray(t, dtype=float))
        out = np.empty(t.size)
        pos = t > 0
        idx = np.flatnonzero(pos)
        idx = idx[np.argsort(t[idx], kind="stable")]
        work = evaluations(t[idx], default_nodes(column)) * len(column.layers) if idx.size else 0
        for sel in np.array_split(idx, max(1, math.ceil(work / READ_BLOCK))):
            if not sel.size:
                continue
            out[sel] = solve_laplace(column, t[sel], [depth], initial=initial,
                                     semi_infinite_bottom=semi_infinite_bottom,
                                     enough=enough).concentration[:, 0]
        if (~pos).any():
            out[~pos] = initial_profile(column, initial, np.array([depth]))[0]
        return out

    at.laplace_bound = lambda depth, t: own_bound_at(t, lambda s: solve_laplace(
        column, s, [depth], initial=initial, semi_infinite_bottom=semi_infinite_bottom,
        enough=enough))
    return at


def own_bound_at(t, solve) -> np.ndarray:
    """The Laplace engine's own error bound of C (kg m-3) at each of ``t``, as
    :func:`transport.solvers.checks.own_errors` reads it from ``solve(positive times)``
    (a solution at one depth); 0 at t <= 0 (the initial state itself), infinite where it
    gives none (not vouched for)."""
    t = np.atleast_1d(np.asarray(t, dtype=float))
    out = np.zeros(t.size)
    pos = t > 0
    if pos.any():
        e = np.asarray(own_errors(solve(t[pos]))["concentration"], float)
        out[pos] = np.where(np.isnan(e), np.inf, e)
    return out


def _cross_checked(served_at, laplace_at):
    """The finite-volume engine's curve ``served_at(depth, t)``, with ``laplace_bound(depth,
    t)``: at each time its distance from the Laplace engine's value plus that engine's
    own bound, the cross-check of the output times at any time (what a metric read
    between them is vouched for by)."""
    def at(depth, t):
        return served_at(depth, t)

    def bound(depth, t):
        t = np.atleast_1d(np.asarray(t, dtype=float))
        return (np.abs(np.asarray(served_at(depth, t), float) - laplace_at(depth, t))
                + laplace_at.laplace_bound(depth, t))
    at.laplace_bound = bound
    return at


def _auto_evaluator(series, t_modal, laplace_at, times=None):
    """Modal series from ``t_modal`` on (where it was vouched for) where it is resolved
    after each signal change (:meth:`ModalSeries.resolved`), Laplace elsewhere.  Its
    ``laplace_bound(depth, t)``: the Laplace engine's own error bound of C where it
    serves the curve, 0 where the series does (whose values the cross-check vouched for
    at the output times from ``t_modal`` on)."""
    keep = (functools.partial(series.resolved, times=times)
            if times is not None and hasattr(series, "resolved") else None)

    def at(depth, t):
        return switched(t, t_modal, lambda s: laplace_at(depth, s),
                        lambda s: series.concentration_at(depth, s), keep)
    if hasattr(laplace_at, "laplace_bound"):
        at.laplace_bound = lambda depth, t: switched(
            t, t_modal, lambda s: laplace_at.laplace_bound(depth, s), np.zeros_like, keep)
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


@checked_arithmetic
def solve_column(column: Column, times, depths, *, initial: InitialState = None,
                 tolerance: float = None, engine: str = "auto", max_modes: int = 4000,
                 semi_infinite_bottom: bool = False, cells_per_layer=None,
                 on_unreliable: str = "raise", reads: int = READS) -> Solution:
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
    reads : C(depth, t) evaluations the caller expects to make of the result (through
        ``concentration_at``) besides the output grid; with ``engine="auto"`` they count
        in the Laplace engine's estimated cost (:func:`estimate_costs`), so the modal
        path, whose series serves them almost for free, is skipped only when it is
        estimated far costlier even so (default :data:`READS`, a receptor reading; 0
        for the output grid alone).  The choice, when the estimate made it, is in
        ``diagnostics["engine_choice"]``.

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
    zone = has_source_zone(column)
    if zone and engine in ("modal", "finite-volume"):
        raise InputError(ZONE_NOT_MODAL.replace("the modal engine", f"the {engine} engine"))
    nt = times.size
    bounds = None if semi_infinite_bottom else concentration_bounds(
        column, initial, float(times.max()) if nt else 0.0)
    # errors that suffice the check: no re-inversion on another contour below them
    enough = good_enough(column, bounds.scale, tolerance) if bounds is not None else {}
    lap = solve_laplace(column, times, depths, initial=initial,
                        semi_infinite_bottom=semi_infinite_bottom, enough=enough)
    everything = np.arange(nt)
    lap_c = _expand(lap, everything, nt)
    laplace_at = _laplace_evaluator(column, initial, semi_infinite_bottom, enough)
    series, evaluator = None, laplace_at
    eig, n_modes = np.empty(0), 0
    note = ""
    if engine == "laplace" or semi_infinite_bottom or zone:
        cands = [("laplace", lap_c)]
        if zone and engine == "auto":
            note = ("auto: the source zone (finite inventory) is served by the Laplace "
                    "engine alone, vouched for by its own bound (two node counts), the "
                    "physical bounds and the mass budget")
    elif engine == "finite-volume":
        # loaded when asked for: the engine brings scipy.integrate (start-up time)
        from transport.solvers.fv.engine import solve_fv_result
        fv = solve_fv_result(column, times, depths, initial=initial, tolerance=tolerance,
                             cells_per_layer=cells_per_layer)
        cands = [("finite-volume", _expand(fv, everything, nt)), ("laplace", lap_c)]
        evaluator = _cross_checked(fv.evaluator, laplace_at)
    else:
        rows = _modal_rows(column, times, tolerance, max_modes, forced=engine == "modal")
        if engine == "auto" and rows.size:
            rows, note = _cheaper_plan(column, times, depths, rows, tolerance, max_modes,
                                       initial, bounds, lap_c, reads)
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
    budget = budget_onto_bounds(bounds, budget, choice.error["budget"])
    series, evaluator = modal_evaluator(choice, times, series, evaluator)
    eig, n_modes = (eig, n_modes) if series is not None else (np.empty(0), 0)
    return Solution(column=column, times=times, depths=depths, eigenvalues=eig,
                    n_modes=n_modes, series=series, evaluator=evaluator,
                    mass_at=_laplace_mass_at(column, initial, semi_infinite_bottom),
                    diagnostics={"engine_choice": note} if note else {},
                    **checked_fields(choice, vals, budget, tolerance, bounds))


def _cheaper_plan(column, times, depths, rows, tolerance, max_modes, initial, bounds,
                  lap_c, reads):
    """(rows for the modal path, note): no rows when the modal path is estimated far
    costlier than the Laplace engine (:func:`estimate_costs`) and the Laplace engine
    alone vouches for every output time by its own bound (two node counts), the physical
    bounds and its budget, as :func:`transport.solvers.checks.choose` rules; else the
    rows unchanged (both engines, as for any column).  The note says what was chosen
    and why ("" when the estimate changed nothing)."""
    cost = estimate_costs(column, times, tolerance, max_modes, initial, rows, depths.size,
                          reads)
    if not cost.laplace_only:
        return rows, ""
    alone = choose(times, [("laplace", lap_c[0], lap_c[1])], tolerance, bounds, column,
                   depths, budgets=[lap_c[2]], selectable=1)
    if alone.reliable.all():
        return rows[:0], cost.describe()
    return rows, (f"auto: modal path estimated {cost.ratio:.0f}x costlier than the "
                  "Laplace engine, run as well: the Laplace engine alone could not vouch "
                  "for every output time")


def modal_evaluator(choice, times, series, fallback):
    """(series, C(depth, t)) for the continuous-time metrics: the modal series from the
    first output time after which it served every time (Laplace before, and right after
    a signal change: :func:`_auto_evaluator`), or (None, ``fallback``) when it serves no
    such tail."""
    cut = vouched_from(choice.engine == "modal", times)
    if series is not None and cut < times.size and (times > 0).any():
        # from the first positive time on: at t = 0 the state itself (the fallback)
        first = max(cut, int(np.argmax(times > 0)))
        return series, _auto_evaluator(series, float(times[first]), fallback, times)
    return None, fallback


def checked_fields(choice, vals, budget, tolerance, bounds=None) -> dict:
    """The fields a checked :class:`transport.solvers.result.Solution` takes from a choice
    between engines, and the physical ``bounds`` its concentrations were moved onto."""
    names = sorted({e for e in choice.engine if e not in ("", "initial")})
    return dict(concentration=vals["concentration"], total_flux=vals["total_flux"],
                cumulative_mass=vals["cumulative_mass"], budget=budget,
                engine="+".join(names) or "none", engine_by_time=choice.engine,
                error_estimate=choice.error["concentration"], error=choice.error,
                reliable=choice.reliable, tolerance=float(tolerance), scale=choice.scale,
                bounds=bounds)


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
