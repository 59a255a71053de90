"""Remediation timelines: the column or its boundaries change at given times.

Each stage has its own exact spectrum; the state at a stage start is carried onto the new
stage's modes by projection (Gauss-Legendre, exact for the carried profile).  Depths are
measured below the ORIGINAL top of the column (z = 0); a cap placed later occupies
negative depths, an excavation moves the top down.  A stage's local depth is
z_local = z - offset.

Carried state: soil that stays keeps its mass per volume, so a layer whose capacity
theta R changes (an amendment) starts with C_new = C_old (theta R)_old / (theta R)_new;
new layers (a cap, backfill) start clean.  The budget carries across stages and reports
the mass removed with excavated soil.  The stages and the actions that make them are in
:mod:`transport.solvers.stages` (re-exported here).
"""
from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np

from transport.model.column import InitialState, InputError, has_source_zone
from transport.solvers.checks import (QUANTITIES, Bounds, UnreliableResultError, assemble,
                                      budget_onto_bounds, budget_terms, choose, clip_to_bounds,
                                      concentration_bounds, describe_refusal, quantities)
from transport.solvers.engines import checked_fields, modal_evaluator
from transport.solvers.modal.operator import ZONE_NOT_MODAL, build_operator
from transport.solvers.modal.projection import initial_profile
from transport.solvers.modal.series import build_series, outside_change_windows
from transport.solvers.modal.sizing import (DEFAULT_TOLERANCE, AccuracyWarning, ModeCapWarning,
                                            earliest_time_after_change)
from transport.solvers.result import Solution, checked_arithmetic
from transport.solvers.staged import solve_staged_laplace
from transport.solvers.stages import (EXCAVATION_SOURCE, Stage, Timeline, amend_layer,
                                      boundary_steps_merged, clean_boundary, compose_carry,
                                      excavate, local_column,
                                      place_cap, remove_source, set_boundary, set_flow)

__all__ = ["Stage", "Timeline", "solve_timeline", "solve_timeline_modal", "build_timeline",
           "local_column", "remove_source", "excavate", "place_cap", "amend_layer",
           "set_flow", "set_boundary", "clean_boundary", "compose_carry",
           "EXCAVATION_SOURCE"]

# --- solving --------------------------------------------------------------------------

@dataclass(frozen=True)
class TimelineSeries:
    """Stage series and the carried budget, for evaluation at any time."""

    timeline: Timeline
    series: tuple
    carried: tuple  # budget totals at each stage start (dict)

    def _stage_of(self, t):
        starts = np.array([s.start for s in self.timeline.stages])
        # a stage start belongs to the stage before it (its end state is exact there)
        return np.clip(np.searchsorted(starts, t, side="left") - 1, 0, len(starts) - 1)

    def concentration(self, z, t):
        """C at original-frame depths z and times t: (t.size, z.size); NaN outside the
        column of the stage."""
        return self._by_stage(z, t, lambda i, ser, zl, tl, zo: ser.concentration(zl, tl))

    def concentration_at(self, depth, times):
        return self.concentration(np.array([float(depth)]), times)[:, 0]

    def resolved(self, t, times) -> np.ndarray:
        """True at the times ``t`` at which the stage series are sized to be accurate:
        not between a stage start (or a signal change within a stage) and the first
        output time or stage end after it (as :meth:`ModalSeries.resolved`; a stage's
        series is sized for those gaps, and a handed-over state rings right after its
        stage starts: 0.09 of the source 0.05 yr after a source removal)."""
        stages = self.timeline.stages
        starts = [float(st.start) for st in stages]
        changes = set()
        for i, (st, ser) in enumerate(zip(stages, self.series)):
            end = starts[i + 1] if i + 1 < len(stages) else np.inf
            changes.update(st.start + c for c in ser.change_times() if st.start + c < end)
        return outside_change_windows(t, sorted(changes),
                                      np.union1d(np.asarray(times, float), starts))

    def _by_stage(self, z, t, fn):
        z = np.atleast_1d(np.asarray(z, float))
        t = np.atleast_1d(np.asarray(t, float))
        out = np.full((t.size, z.size), np.nan)
        idx = self._stage_of(t)
        for i in np.unique(idx):
            st, ser = self.timeline.stages[i], self.series[i]
            zl = z - st.offset
            inside = (zl >= -1e-12) & (zl <= st.column.length * (1 + 1e-12))
            if inside.any():
                sel = idx == i
                out[np.ix_(sel, inside)] = fn(i, ser, np.clip(zl[inside], 0, None),
                                              t[sel] - st.start, z[inside])
        return out

    def total_flux(self, z, t):
        return self._by_stage(z, t, lambda i, ser, zl, tl, zo: ser.total_flux(zl, tl))

    def cumulative_mass(self, z, t):
        """Mass through original-frame depth z since t = 0, over all stages."""
        def fn(i, ser, zl, tl, zo):
            before = np.zeros(zo.size)
            for j in range(i):
                st, s_j = self.timeline.stages[j], self.series[j]
                end = self.timeline.stages[j + 1].start - st.start
                zlj = zo - st.offset
                ok = (zlj >= -1e-12) & (zlj <= st.column.length * (1 + 1e-12))
                if ok.any():
                    before[ok] += s_j.cumulative_mass(np.clip(zlj[ok], 0, None),
                                                      np.array([end]))[0]
            return before[None, :] + ser.cumulative_mass(zl, tl)
        return self._by_stage(z, t, fn)

    def budget(self, t):
        t = np.atleast_1d(np.asarray(t, float))
        keys = ("stored", "initial_stored", "entered_top", "left_bottom", "decayed",
                "produced", "removed", "residual")
        out = {k: np.zeros(t.size) for k in keys}
        idx = self._stage_of(t)
        for i in np.unique(idx):
            sel = idx == i
            st = self.timeline.stages[i]
            b = self.series[i].budget(t[sel] - st.start)
            c = self.carried[i]
            out["stored"][sel] = b["stored"]
            out["initial_stored"][sel] = self.carried[0]["initial"]
            for k in ("entered_top", "left_bottom", "decayed", "produced"):
                out[k][sel] = c[k] + b[k]
            out["removed"][sel] = c["removed"]
        out["residual"] = (out["stored"] - out["initial_stored"] - out["entered_top"]
                           + out["left_bottom"] + out["decayed"] - out["produced"]
                           + out["removed"])
        return out


def _carried_profile(prev_stage, prev_series, t_local, new_stage):
    """C0(z_local_new) for the new stage from the previous stage's state."""
    new_col, off_new, off_old = new_stage.column, new_stage.offset, prev_stage.offset
    faces = new_col.interfaces
    carry = new_stage.carry or (1.0,) * len(new_col.layers)

    def c0(zl):
        zl = np.asarray(zl, float)
        out = np.zeros(zl.shape)
        lay = np.clip(np.searchsorted(faces, zl, side="right") - 1, 0, len(faces) - 2)
        zo = zl + off_new - off_old
        for i in np.unique(lay):
            if carry[i] is None:
                continue
            sel = lay == i
            z_old = np.clip(zo[sel], 0.0, prev_stage.column.length)
            out[sel] = carry[i] * prev_series.concentration(z_old, np.array([t_local]))[0]
        return out
    return c0


def _rate_of(series):
    op, lam = series.op, series.modes.lam
    return float(np.max(np.sqrt(np.maximum(lam.max() * op.a - op.s, 0.0) / op.k)))


def build_timeline(timeline: Timeline, initial=None, times=(), tolerance=1e-8,
                   max_modes=4000):
    """Series for every stage, carrying the state and the budget across stage starts."""
    stages = timeline.stages
    times = np.asarray(times, float)
    series, carried = [], []
    init = initial if initial is not None else InitialState.clean()
    totals = dict(entered_top=0.0, left_bottom=0.0, decayed=0.0, produced=0.0, removed=0.0)
    positive = times[times > 0]
    for i, st in enumerate(stages):
        end = stages[i + 1].start if i + 1 < len(stages) else np.inf
        local = times[(times > st.start) & (times <= end)] - st.start
        if i + 1 < len(stages):
            local = np.append(local, end - st.start)
        column = local_column(st)
        t_min = earliest_time_after_change(column, local)
        if t_min is not None and positive.size:
            t_min = min(t_min, float(positive.min()))
        if i == 0:
            ser = build_series(column, init, t_min, tolerance, max_modes,
                               None if t_min else 8)
            totals["initial"] = ser.initial_mass
        else:
            prev_st, prev = stages[i - 1], series[-1]
            t_loc = st.start - prev_st.start
            c0 = _carried_profile(prev_st, prev, t_loc, st)
            old_faces = prev_st.column.interfaces + prev_st.offset - st.offset
            breaks = tuple(old_faces[(old_faces > 0) & (old_faces < st.column.length)])
            ser = build_series(column, c0, t_min, tolerance, max_modes,
                               None if t_min else 8, breaks=breaks,
                               extra_rate=_rate_of(prev))
            b_prev = prev.budget(np.array([t_loc]))
            for k in ("entered_top", "left_bottom", "decayed", "produced"):
                totals[k] += float(b_prev[k][0])
            # what the new stage does not carry (excavated soil) was removed
            totals["removed"] += float(b_prev["stored"][0]) - ser.initial_mass
        carried.append(dict(totals))
        series.append(ser)
    return TimelineSeries(timeline, tuple(series), tuple(carried))


def _modal_range(timeline) -> bool:
    """Whether every stage's column lies within the modal engine's column Peclet range
    (else auto runs on the staged Laplace engine alone, as a single column does)."""
    try:
        for st in timeline.stages:
            build_operator(local_column(st))
    except InputError:
        return False
    return True


@checked_arithmetic
def solve_timeline(timeline: Timeline, times, depths, *, initial=None, tolerance=None,
                   engine: str = "auto", max_modes=4000,
                   on_unreliable: str = "raise") -> Solution:
    """Fields on the (time, depth) grid for a staged run; depths in the original frame.

    ``initial`` is the state at t = 0 (default clean), ``tolerance`` the relative
    tolerance of every quantity (default 1e-8), ``max_modes`` the cap of each stage's
    modal series.  Returns a checked :class:`transport.solvers.result.Solution` with
    ``timeline`` set and, where the modal stages serve a tail of the run, the staged
    series as ``series``.

    ``engine``: "auto" (the modal stages where they agree with the staged Laplace engine
    of :mod:`transport.solvers.staged` within ``tolerance`` for every quantity, else the
    Laplace value where its own bound meets it), "modal" or "laplace" (that engine's
    values, vouched for as in :func:`transport.solvers.engines.solve_column`).  Times no engine
    can vouch for raise :class:`transport.solvers.checks.UnreliableResultError`, or with
    ``on_unreliable="flag"`` are NaN and flagged in ``reliable``.
    """
    tolerance = DEFAULT_TOLERANCE if tolerance is None else tolerance
    if engine not in ("auto", "modal", "laplace"):
        raise InputError(f"a scenario with [[actions]] runs on the auto, modal or laplace "
                         f"engine; {engine!r} does not take stages yet")
    if on_unreliable not in ("raise", "flag"):
        raise InputError(f"on_unreliable {on_unreliable!r} is unknown; use raise or flag")
    times = np.asarray(times, float).ravel()
    depths = np.asarray(depths, float).ravel()
    if np.any(times < 0) or not np.all(np.isfinite(times)):
        raise InputError("output times must be finite and >= 0 s")
    initial = initial or InitialState.clean()
    nt = times.size
    t_end = float(times.max()) if nt else 0.0
    # bounds (maximum principle) hold stage by stage; a carried state lies within the
    # previous stage's bounds, so the union over stages bounds the run
    stage_bounds = [concentration_bounds(local_column(st), initial if i == 0 else None,
                                         max(t_end - st.start, 0.0))
                    for i, st in enumerate(timeline.stages)]
    bounds = None
    if all(np.all(b.kappa == 1.0) for b in stage_bounds):
        lo = [b.lo for b in stage_bounds]
        hi = [b.hi for b in stage_bounds]
        if None not in lo and min(lo) < 0 and any(b.lo_needs_nonnegative_start
                                                   for b in stage_bounds):
            lo = [None]  # a stage's lower bound 0 needs a start >= 0, not assured here
        bounds = Bounds(None if None in lo else min(lo), None if None in hi else max(hi),
                        np.ones(len(timeline.stages[0].column.layers)))
    cands, series, modal_sol = [], None, None
    zone = any(has_source_zone(st.column) for st in timeline.stages)
    if zone and engine == "modal":
        raise InputError(ZONE_NOT_MODAL)
    if engine == "modal" or (engine == "auto" and not zone and _modal_range(timeline)):
        with warnings.catch_warnings():
            if engine == "auto":
                warnings.simplefilter("ignore", AccuracyWarning)
                warnings.simplefilter("ignore", ModeCapWarning)
            modal_sol = solve_timeline_modal(timeline, times, depths, initial=initial,
                                             tolerance=tolerance, max_modes=max_modes)
        nan = {q: np.full(nt, np.nan) for q in QUANTITIES}
        cands.append(("modal", quantities(modal_sol), nan, modal_sol.budget))
        series = modal_sol.series
    scale = bounds.scale if bounds is not None and bounds.scale is not None else None
    if scale is None:
        c = np.abs(modal_sol.concentration) if modal_sol is not None else np.zeros(1)
        c = c[np.isfinite(c)]
        scale = float(c.max()) if c.size and c.max() > 0 else 1.0
    # the second engine solves a change of a boundary value alone as a scheduled
    # boundary (exact for it), not as a hand-over of the state
    lv, lown, lbudget, staged, lwit = solve_staged_laplace(
        boundary_steps_merged(timeline), times, depths, initial, tolerance, scale,
        local_column)
    lq = dict(lv)
    lq["budget"] = budget_terms(lbudget, nt)
    cands.append(("laplace", lq, lown, lbudget))
    selectable = len(cands) if engine == "auto" else 1
    col0 = timeline.stages[0].column
    choice = choose(times, [c[:3] for c in cands], tolerance, bounds, col0, depths,
                    budgets=[c[3] for c in cands], selectable=selectable,
                    witness=[None] * (len(cands) - 1) + [lwit])
    if not choice.reliable.all() and on_unreliable == "raise":
        tried = " and ".join(c[0] for c in cands[:selectable]) + " on every stage" + (
            " (cross-checked against laplace)" if selectable < len(cands) else "")
        raise UnreliableResultError(describe_refusal(times, choice, tolerance, tried),
                                    times[~choice.reliable],
                                    [q for q in QUANTITIES
                                     if np.any(choice.failed[q] & ~choice.reliable)])
    vals, budget = assemble([c[:3] for c in cands], choice, [c[3] for c in cands])
    vals["concentration"] = clip_to_bounds(col0, bounds, depths, vals["concentration"],
                                           choice.error["concentration"])
    budget = budget_onto_bounds(bounds, budget, choice.error["budget"])
    series, evaluator = modal_evaluator(choice, times, series, staged)
    n_modes = modal_sol.n_modes if series is not None else 0
    eig = modal_sol.eigenvalues if n_modes else np.empty(0)
    return Solution(column=col0, times=times, depths=depths, eigenvalues=eig,
                    n_modes=n_modes, series=series, evaluator=evaluator, timeline=timeline,
                    mass_at=staged.mass_at,
                    **checked_fields(choice, vals, budget, tolerance, bounds))


def solve_timeline_modal(timeline: Timeline, times, depths, *, initial=None,
                         tolerance=None, max_modes=4000) -> Solution:
    """The modal stages on the output grid, unchecked (``engine="modal"``, the staged
    series as ``series``); :func:`solve_timeline` checks them against the staged
    Laplace engine."""
    tolerance = DEFAULT_TOLERANCE if tolerance is None else tolerance
    times = np.asarray(times, float).ravel()
    depths = np.asarray(depths, float).ravel()
    initial = initial if initial is not None else InitialState.clean()
    ts = build_timeline(timeline, initial, times, tolerance, max_modes)
    conc = ts.concentration(depths, times)
    first = timeline.stages[0]
    zero = times == 0
    if zero.any():
        conc[zero] = initial_profile(first.column, initial, depths)
    return Solution(
        column=first.column, times=times, depths=depths, concentration=conc,
        total_flux=ts.total_flux(depths, times),
        cumulative_mass=np.where(zero[:, None], 0.0, ts.cumulative_mass(depths, times)),
        budget=ts.budget(times), engine="modal", eigenvalues=ts.series[-1].eigenvalues,
        n_modes=int(max(s.eigenvalues.size for s in ts.series)), series=ts, timeline=timeline)
