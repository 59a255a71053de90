"""Checks inside every run: the smoke alarm of the engines, and the per-time choice
between two independent engines.

Nothing here uses the series that produced a result, so a result cannot vouch for
itself:

* **Physical bounds** (maximum principle for linear parabolic equations; e.g. Protter &
  Weinberger 1967, *Maximum Principles in Differential Equations*, ch. 3): without
  zero-order sources or imposed fluxes, u = C / kappa (kappa the product of the
  partition coefficients above a layer) stays between the extremes of its initial and
  boundary values, and of 0 where there is decay.  A positive source or an imposed
  inflow lifts only the upper bound; a negative one lowers only the lower bound.  An
  inlet, sealed or fixed-flux end that lets water OUT, or a mass-transfer end that lets
  it out faster than the transfer coefficient, is not a bound (the law fixes the total
  flux there, so the column may pile up mass against it).  The distance of a result
  outside its bounds is a LOWER bound of its actual error.
* **Mass budget**: stored - initial - entered + left + decayed - produced (+ removed)
  is zero for the exact solution, whichever engine computed its terms; the terms are
  computed independently (layer integrals, boundary fluxes, decay integrals), so a
  residual above tolerance x the largest term means at least one term is wrong.
* **Two engines** (:func:`choose`): the modal value at a time is vouched for when it
  agrees with the Laplace value within tolerance; its error is then at most
  |modal - Laplace| + (the Laplace error bound).  Otherwise the Laplace value serves
  where its own bound meets the tolerance; otherwise no engine can vouch for the time,
  and the run refuses it (:class:`UnreliableResultError`) or, when asked, flags it
  (values set to NaN, ``reliable`` False): never a confident wrong number.

Scales are never taken from one engine's result alone (a blown-up result would scale
its own yardstick): the concentration scale is the largest |C| the inputs allow (the
bounds) where they apply, otherwise, like every other quantity, the largest of the
SMALLER of the two engines' magnitudes at each point; cumulative masses are measured
against at least the largest budget term (the mass that moves in the column).
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from transport.solvers.onto_bounds import budget_onto_bounds, clip_to_bounds
from transport.solvers.result import Solution
from transport.units import YEAR

__all__ = ["UnreliableResultError", "Bounds", "concentration_bounds", "bound_violation",
           "budget_residual", "QUANTITIES", "quantities", "choose",
           "describe_refusal", "clip_to_bounds", "budget_onto_bounds", "input_scales", "good_enough", "vouched_from",
           "switched"]

#: The reported quantities and their names in messages.
QUANTITIES = ("concentration", "total_flux", "cumulative_mass", "budget")
_LABEL = {"concentration": "concentration", "total_flux": "total flux",
          "cumulative_mass": "cumulative mass", "budget": "mass budget"}
BUDGET_TERMS = ("stored", "entered_top", "left_bottom", "decayed", "produced", "removed")
_EPS = np.finfo(float).eps


class UnreliableResultError(RuntimeError):
    """No engine could deliver a quantity within the requested tolerance.

    ``times`` (s) lists the output times concerned and ``quantities`` what failed there
    (e.g. "concentration", "cumulative_mass", "budget").  The message says what was
    tried and what the user can do; the tool never returns such a number as a result.
    """

    def __init__(self, message: str, times=(), quantities=()):
        super().__init__(message)
        self.times = tuple(float(t) for t in times)
        self.quantities = tuple(quantities)


# --------------------------------------------------------------------------- bounds
@dataclass(frozen=True)
class Bounds:
    """Bounds of u = C / kappa: ``lo``/``hi`` (kg m-3, None where no bound applies) and
    ``kappa`` per layer."""

    lo: float | None
    hi: float | None
    kappa: np.ndarray
    #: ``lo`` (then 0) rests on positivity alone: it holds only while the state a stage
    #: starts from is >= 0 (see :func:`concentration_bounds`)
    lo_needs_nonnegative_start: bool = False

    @property
    def scale(self) -> float | None:
        """Largest |C| the bounds allow (None when a side is unbounded)."""
        if self.lo is None or self.hi is None:
            return None
        return float(max(abs(self.lo), abs(self.hi)) * np.max(self.kappa))


def _signal_range(value, schedule, t_end):
    """Extremes of a boundary or source signal over [0, t_end]: sampled at every change
    time (both sides), densely between, and at the end."""
    if schedule is None:
        return float(value), float(value)
    changes = np.asarray(schedule.change_times, float)
    t_end = max(float(t_end), float(changes.max()) if changes.size else 0.0, 1.0)
    t = np.union1d(np.linspace(0.0, t_end, 2001), changes[changes <= t_end])
    t = np.union1d(t, np.geomspace(t_end * 1e-9, t_end, 400))
    vals = np.concatenate([schedule.value(t), schedule.value(t, left=True)])
    return float(vals.min()), float(vals.max())


def _kappa(column) -> np.ndarray:
    k = [1.0]
    for lay in column.layers[:-1]:
        k.append(k[-1] * lay.partition_to_next)
    return np.array(k)


def concentration_bounds(column, initial, t_end: float) -> Bounds:
    """Bounds of u = C / kappa over [0, t_end] from the inputs.

    Where water enters or stands still at both ends, the maximum principle bounds u by
    the range of its data.  Where water leaves through an end that holds the solute's
    total flux (sealed, flux, an inlet, or a slow mass transfer), mass piles up and
    there is no upper bound; the lower bound 0 still holds when every datum is >= 0 and
    no end withdraws solute at a prescribed rate (positivity: the negative part
    N = int R max(-C, 0) dz cannot grow, since at its edges F = -theta D dC/dz points out
    of it and at an end the flux into the column is >= 0; Evans 2010, Partial
    Differential Equations, sec. 7.1 (section from memory), the energy method, here in
    L1).
    """
    kappa = _kappa(column)
    q = column.darcy_flux
    vals = [0.0]
    lo_ok = hi_ok = True
    positivity_only = False  # the lower bound 0 holds by positivity, not from the data
    if initial is not None and getattr(initial, "kind", "clean") != "clean":
        if initial.kind == "uniform":
            vals += list(np.asarray(initial.values, float) / kappa[:len(initial.values)])
        else:  # a profile sample at a face may belong to either layer: take both
            faces = column.interfaces
            d = np.asarray(initial.depths, float)
            v = np.asarray(initial.values, float)
            for side in ("left", "right"):
                lay = np.clip(np.searchsorted(faces, d, side=side) - 1, 0, kappa.size - 1)
                vals += list(v / kappa[lay])
    ends = (("top", column.top, kappa[0], q > 0 or q == 0),
            ("bottom", column.bottom, kappa[-1], q < 0 or q == 0))
    for end, bc, kap, inward in ends:
        lo_v, hi_v = _signal_range(bc.value, bc.schedule, t_end)
        if bc.kind == "concentration":
            vals += [lo_v / kap, hi_v / kap]
        elif bc.kind == "source-zone":
            # a well-mixed cell between C_s(0) and the column, fed by clean water only:
            # it never leaves the range of its own start and the column's data
            vals += [bc.value / kap]
        elif bc.kind == "inlet":
            if not inward and q != 0:
                # water leaves through an inlet: F = q C_in is held, mass piles up (no
                # upper bound); a C_in > 0 withdraws solute at a fixed rate (no lower)
                hi_ok = False
                positivity_only = True
                if hi_v > 0:
                    lo_ok = False
            # (without flow F = q C_in = 0: a sealed end, both bounds hold)
            vals += [lo_v / kap, hi_v / kap]
        elif bc.kind == "mass-transfer":
            if not inward and bc.transfer_coefficient < abs(q):
                hi_ok = False  # outflow faster than the transfer: mass piles up
                positivity_only = True  # F = h (C_ext - C) >= 0 wherever C < 0
            vals += [lo_v / kap, hi_v / kap]
        elif bc.kind in ("flux", "sealed"):
            if not inward and q != 0:
                hi_ok = False  # water leaves, the total flux is held: mass piles up
                positivity_only = True
            if bc.kind == "flux":
                # top: value enters downward; bottom: value leaves downward
                into = (lo_v, hi_v) if end == "top" else (-hi_v, -lo_v)
                if into[1] > 0:
                    hi_ok = False
                if into[0] < 0:
                    lo_ok = False
    for lay in column.layers:
        if lay.source_rate != 0:
            lo_s, hi_s = _signal_range(1.0, lay.source_schedule, t_end)
            rates = (lay.source_rate * lo_s, lay.source_rate * hi_s)
            if max(rates) > 0:
                hi_ok = False
            if min(rates) < 0:
                lo_ok = False
    lo = min(vals)
    if positivity_only and lo < 0:
        lo_ok = False  # a negative datum: positivity says nothing
    return Bounds(lo if lo_ok else None, max(vals) if hi_ok else None, kappa,
                  lo_needs_nonnegative_start=lo_ok and positivity_only)


def bound_violation(column, bounds: Bounds, depths, conc) -> np.ndarray:
    """Largest distance (kg m-3) of C outside its bounds at each time: (nt,); NaN or
    infinite values count as infinite."""
    depths = np.asarray(depths, float)
    conc = np.asarray(conc, float)
    lay = np.clip(np.searchsorted(column.interfaces, depths, side="right") - 1, 0,
                  bounds.kappa.size - 1)
    kap = bounds.kappa[lay][None, :]
    u = conc / kap
    v = np.zeros(conc.shape)
    if bounds.lo is not None:
        v = np.maximum(v, (bounds.lo - u) * kap)
    if bounds.hi is not None:
        v = np.maximum(v, (u - bounds.hi) * kap)
    v = np.where(np.isfinite(conc), v, np.inf)
    return v.max(axis=1) if v.size else np.zeros(conc.shape[0])


def budget_terms(budget: dict, nt: int) -> np.ndarray:
    """The independent budget terms as columns (nt, m)."""
    cols = [np.asarray(budget[k], float) for k in BUDGET_TERMS if k in budget]
    return np.column_stack(cols) if cols else np.zeros((nt, 0))


def budget_residual(budget: dict) -> tuple[np.ndarray, np.ndarray]:
    """(|residual|, largest |term|) per time, from the terms (not the engine's own
    residual entry): stored - initial - entered + left + decayed - produced + removed."""
    g = {k: np.asarray(v, float) for k, v in budget.items()}
    res = (g["stored"] - g["initial_stored"] - g["entered_top"] + g["left_bottom"]
           + g["decayed"] - g["produced"] + g.get("removed", 0.0))
    terms = np.column_stack([np.abs(g[k]) for k in ("stored", "initial_stored",
                                                    "entered_top", "left_bottom",
                                                    "decayed", "produced")
                             + (("removed",) if "removed" in g else ())])
    big = terms.max(axis=1)
    res = np.where(np.isfinite(res) & np.isfinite(big), np.abs(res), np.inf)
    return res, big


# ----------------------------------------------------------------- quantities & choice
def _running_max(times, values):
    """The largest of ``values`` at the times up to each one (times in any order)."""
    order = np.argsort(np.asarray(times, float), kind="stable")
    out = np.empty(np.size(values))
    out[order] = np.fmax.accumulate(np.asarray(values, float)[order])
    return out


def quantities(sol: Solution) -> dict:
    """Every reported quantity of a solution as (nt, m) arrays."""
    nt = np.size(sol.times)
    return {"concentration": np.asarray(sol.concentration, float),
            "total_flux": np.asarray(sol.total_flux, float),
            "cumulative_mass": np.asarray(sol.cumulative_mass, float),
            "budget": budget_terms(sol.budget, nt)}


def own_errors(sol: Solution) -> dict:
    """An engine's own per-time error bounds per quantity (absolute), or NaN where it
    gives none."""
    nt = np.size(sol.times)
    err = sol.error
    out = {}
    for q in QUANTITIES:
        e = None if err is None else err.get(q)
        if e is None and q == "concentration" and sol.error_estimate is not None:
            e = sol.error_estimate
        out[q] = np.full(nt, np.nan) if e is None else np.asarray(e, float).reshape(nt)
    return out


def _maxabs(a):
    a = np.abs(a)
    a = np.where(np.isfinite(a), a, np.inf)
    return a.max(axis=1) if a.shape[1] else np.zeros(a.shape[0])


def scales(a: dict, b: dict | None, bounds: Bounds | None, column=None) -> dict:
    """Scale of each quantity over the run: the largest of min(|a|, |b|) pointwise
    (finite values only: where one candidate has none, the other's, as for an engine
    alone); concentration: the bounds' scale where it exists.  With the
    ``column``, fluxes and masses are measured against at least the scales its inputs
    set: F_in = C_s (|q| + max theta D / L) and M_in = C_s sum theta R L, with C_s the
    concentration scale (a run shown only after the plume has left would otherwise
    measure rounding against nothing)."""
    out = {}
    for q in QUANTITIES:
        x = np.abs(a[q])
        if b is not None:  # where one has no value (NaN), the other's counts
            x = np.fmin(x, np.abs(b[q]))
        x = x[np.isfinite(x)]
        out[q] = float(x.max()) if x.size else 0.0
    if bounds is not None and bounds.scale is not None:
        out["concentration"] = bounds.scale
    # mass through a depth is measured against the mass that moves in the column (the
    # largest budget term): a depth the plume has barely reached has no scale of its own
    out["cumulative_mass"] = max(out["cumulative_mass"], out["budget"])
    if column is not None:
        f_in, m_in = input_scales(column, out["concentration"])
        out["total_flux"] = max(out["total_flux"], f_in)
        out["cumulative_mass"] = max(out["cumulative_mass"], m_in)
        out["budget"] = max(out["budget"], m_in)
    # fluxes and masses are never on a smaller scale than rounding allows
    for q in QUANTITIES:
        out[q] = max(out[q], 1e-300)
    return out


def input_scales(column, c_s: float) -> tuple:
    """The flux and mass scales a concentration scale ``c_s`` sets in ``column``:
    F_in = c_s (|q| + max theta D / L) and M_in = c_s sum theta R L."""
    f_in = c_s * (abs(column.darcy_flux)
                  + max(l.water_content * l.diffusivity for l in column.layers)
                  / column.length)
    m_in = c_s * sum(l.water_content * l.retardation * l.thickness for l in column.layers)
    return f_in, m_in


def good_enough(column, scale, tolerance) -> dict:
    """Absolute errors that suffice a check at ``tolerance``: 1 % of it times each
    quantity's least scale (the concentration scale ``scale`` and the flux and mass
    scales it sets, :func:`input_scales`), the ``enough`` of
    :func:`transport.solvers.laplace.solve_laplace` (saves re-inversions on other
    contours, e.g. ahead of a front; every value keeps its own estimate).  Empty
    without a scale."""
    if not scale:
        return {}
    c = 0.01 * tolerance * scale
    flux, mass = input_scales(column, c)
    return {"concentration": c, "total_flux": flux, "cumulative_mass": mass,
            "budget": mass}


def vouched_from(ok, times) -> int:
    """Index of the first time from which ``ok`` holds at every later positive time
    (times <= 0 do not count): 0 if it holds everywhere, ``times.size`` if it fails at
    the last one.  Where a curve may switch from the Laplace engine to the modal
    series."""
    bad = np.flatnonzero(~np.asarray(ok, bool) & (np.asarray(times, float) > 0))
    return int(bad.max()) + 1 if bad.size else 0


def switched(t, t_switch, early, late, keep=None):
    """``early(t)`` at t < t_switch and ``late(t)`` from t_switch on where ``keep(t)``
    (default everywhere), each engine asked only for its own times (1-D, as t)."""
    t = np.atleast_1d(np.asarray(t, dtype=float))
    out = np.empty(t.size)
    on = (t >= t_switch) & (True if keep is None else keep(t))
    if on.any():
        out[on] = late(t[on])
    if (~on).any():
        out[~on] = early(t[~on])
    return out


@dataclass
class Choice:
    """Per-time outcome of :func:`choose`: which engine serves each output time and the
    error bound of every quantity there."""

    engine: np.ndarray  # (nt,) object: name of the engine, "initial" or "" (refused)
    error: dict  # quantity -> (nt,) absolute error bound
    reliable: np.ndarray  # (nt,) bool
    failed: dict = field(default_factory=dict)  # quantity -> (nt,) bool
    scale: dict = field(default_factory=dict)
    #: selectable engine -> quantity -> (nt,) its error bound (before the choice)
    by_candidate: dict = field(default_factory=dict)


def choose(times, candidates, tolerance: float, bounds: Bounds | None, column, depths,
           budgets=None, selectable: int = None, witness=None):
    """Pick, per output time, the first candidate engine whose every quantity is vouched
    for within ``tolerance`` x its scale.

    ``candidates``: list of (name, quantities dict, error dict) in order of preference.
    The error of a candidate at a time is its own bound, or, where two candidates are
    given, |difference| + the other's bound when that is smaller (the agreement of two
    independent engines).  A candidate is also rejected where it breaks the physical
    bounds or leaves the budget open by more than the tolerance x its largest term up
    to that time (the smoke alarm; ``budgets``: the candidates' budget dicts).  Only the
    first ``selectable`` candidates (default all) may serve; the others only witness.
    ``witness[j]``: the error dict candidate j counts with when it confirms another
    (default: its own bound), e.g. the staged Laplace engine's inversion bound without
    the conservative bound of its state hand-over, whose effect the agreement measures.
    """
    selectable = len(candidates) if selectable is None else int(selectable)
    times = np.asarray(times, float)
    nt = times.size
    # points where no candidate has a value (a depth outside the column of a stage, a
    # time an engine was not asked for) are not results: compare the rest
    served = [c for c in candidates if np.isfinite(c[1]["concentration"]).any()]
    absent = {q: np.all([np.isnan(c[1][q]) for c in served], axis=0) for q in QUANTITIES}
    candidates = [(n, {q: np.where(absent[q], 0.0, v[q]) if v[q].shape == absent[q].shape
                       else v[q] for q in QUANTITIES}, e) for n, v, e in candidates]
    qa = candidates[0][1]
    qb = candidates[1][1] if len(candidates) > 1 else None
    sc = scales(qa, qb, bounds, column)
    engine = np.full(nt, "", dtype=object)
    error = {q: np.full(nt, np.inf) for q in QUANTITIES}
    failed = {q: np.ones(nt, bool) for q in QUANTITIES}
    cand_err = []
    for i, (name, vals, own) in enumerate(candidates):
        errs = {}
        for q in QUANTITIES:
            e = np.where(np.isnan(own[q]), np.inf, own[q])
            for j, (_, other, other_own) in enumerate(candidates):
                if j == i:
                    continue
                if witness is not None and witness[j] is not None:
                    other_own = witness[j]
                oe = np.where(np.isnan(other_own[q]), np.inf, other_own[q])
                diff = _maxabs(vals[q] - other[q]) if vals[q].shape == other[q].shape \
                    else np.full(nt, np.inf)
                e = np.minimum(e, diff + oe)
            # NaN or infinite values are never vouched for
            e = np.where(np.isfinite(_maxabs(vals[q])), e, np.inf)
            errs[q] = e
        # smoke alarm: the bounds and the budget give lower bounds of the actual error
        if bounds is not None:
            v = bound_violation(column, bounds, depths, vals["concentration"])
            errs["concentration"] = np.maximum(errs["concentration"], v)
        if budgets is not None and budgets[i] is not None:
            res, big = budget_residual(budgets[i])
            # the budget must close to the tolerance of its largest term up to that time
            # (net integrals: mass in and out through one face nets to ~0, not its error)
            big = _running_max(times, big)
            floor = 64 * _EPS * sc["budget"]
            open_ = res > np.maximum(tolerance * big, floor)
            errs["budget"] = np.where(open_, np.inf, np.maximum(errs["budget"], res))
        cand_err.append(errs)
    for t in range(nt):
        if times[t] == 0:
            engine[t] = "initial"
            for q in QUANTITIES:
                error[q][t] = 0.0
                failed[q][t] = False
            continue
        for (name, vals, _), errs in zip(candidates[:selectable], cand_err):
            ok = {q: errs[q][t] <= tolerance * sc[q] for q in QUANTITIES}
            if all(ok.values()):
                engine[t] = name
                for q in QUANTITIES:
                    error[q][t] = errs[q][t]
                    failed[q][t] = False
                break
        else:  # nobody vouches: report the smallest bound per quantity and what failed
            for q in QUANTITIES:
                best = min(e[q][t] for e in cand_err[:selectable])
                error[q][t] = best
                failed[q][t] = not best <= tolerance * sc[q]
    reliable = engine != ""
    per = {c[0]: e for c, e in zip(candidates[:selectable], cand_err)}
    return Choice(engine, error, reliable, failed, sc, per)


def assemble(candidates, choice: Choice, budgets):
    """Per-time values from the chosen candidates: (dict quantity -> (nt, m), budget
    dict); refused times hold NaN."""
    out = {}
    nt = choice.engine.size
    keys = [k for k in budgets[-1]]
    budget = {k: np.full(nt, np.nan) for k in keys}
    for (name, _, _), b in zip(candidates, budgets):
        rows = (choice.engine == name) | ((choice.engine == "initial") & (b is budgets[-1]))
        if rows.any():
            for k in keys:
                budget[k][rows] = np.asarray(b[k], float)[rows]
    for q in QUANTITIES:
        base = np.full(candidates[0][1][q].shape, np.nan)
        for name, vals, _ in candidates:
            rows = choice.engine == name
            if rows.any() and vals[q].shape == base.shape:
                base[rows] = vals[q][rows]
        zero = choice.engine == "initial"
        if zero.any():
            base[zero] = candidates[-1][1][q][zero]
        out[q] = base
    return out, budget


def describe_refusal(times, choice: Choice, tolerance: float, tried: str,
                     year: float = YEAR) -> str:
    """One paragraph: which output times, which quantities, what was tried, what to do."""
    times = np.asarray(times, float)
    bad = ~choice.reliable
    which = [q for q in QUANTITIES if np.any(choice.failed[q] & bad)]
    tb = times[bad]
    shown = ", ".join(f"{t / year:.4g} yr" for t in tb[:6]) + (" ..." if tb.size > 6 else "")
    worst = {q: float(np.max(choice.error[q][bad] / choice.scale[q])) for q in which}
    detail = "; ".join(
        f"{_LABEL[q]} error up to {worst[q]:.2g} of its scale" if np.isfinite(worst[q])
        else (f"{_LABEL[q]} not vouched for (the budget does not close to the tolerance "
              "at that time, or a value is not finite)" if q == "budget" else
              f"{_LABEL[q]} not vouched for (a value is not finite or no engine gives a "
              "bound)") for q in which)
    if not which and choice.by_candidate:  # each quantity vouched for, but by different engines
        parts = []
        for name, errs in choice.by_candidate.items():
            over = [(q, float(np.max(errs[q][bad] / choice.scale[q]))) for q in QUANTITIES
                    if np.any(errs[q][bad] > tolerance * choice.scale[q])]
            parts.append(f"{name}: " + ", ".join(
                f"{_LABEL[q]} error up to {w:.2g} of its scale" for q, w in over))
        detail = ("no single engine vouches for every quantity; " + "; ".join(parts))
    return (f"no engine could vouch for the results at {tb.size} output time(s) ({shown}) "
            f"within the tolerance {tolerance:g} ({detail}); tried: {tried}. The tool does "
            "not report numbers it cannot vouch for. Try a looser tolerance "
            "(--tolerance or [output] tolerance), later or fewer output times, or a "
            "finer description of a steep source; or ask for the run with "
            "--allow-unreliable to get the other times, the refused ones left empty "
            "(NaN) and flagged.")
