"""Staged runs on the Laplace engine: an independent second path for [[actions]].

Each stage is solved by :func:`transport.solvers.laplace.solve_laplace` on its own clock, from
the state carried over from the previous stage.  The carried state is handed over as a
piecewise-cubic Hermite interpolant of C and dC/dz (the Laplace engine is exact for
one), sampled on a grid that is refined by halving until the interpolant meets the
tolerance: every interval whose midpoint deviates from the interpolant by more than
1/20 of the tolerance is bisected (adaptive refinement, so a thin boundary layer
gets fine samples and the rest stays coarse), and the largest deviation of the last
check is kept as the bound of the hand-over error (for a smooth profile the finer
interpolant is about sixteen times better than that).  By the maximum principle the
homogeneous problem does not amplify an initial error, so that bound carries into C at
every later time; the mass it can move is at most its integral times the layer capacity
theta R (each interval's midpoint deviation times its width), which bounds its effect
on cumulative masses and budget terms.  Faces where the carried state jumps (a clean cap
over soil, an amended layer) are handed over as jumps (a repeated sample depth).
"""
from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np

from transport.solvers.checks import QUANTITIES, budget_residual, own_errors, quantities
from transport.solvers.laplace import PiecewiseCubic, solve_laplace
from transport.solvers.laplace.contour import default_nodes
from transport.model.column import InitialState
from transport.solvers.modal.projection import initial_profile

__all__ = ["StagedLaplace", "solve_staged_laplace"]

#: Samples per layer at the first hand-over try, and the cap of the adaptive refinement.
START_SAMPLES, MAX_SAMPLES = 16, 20000
#: Rounds of restarts (see :func:`solve_staged_laplace`), and the share of the tolerance
#: above which a stage's own inversion error at a late output time asks for one.
RESTART_ROUNDS, RESTART_SHARE = 3, 0.1
#: Probe times per stage (its span halved that many times toward its start) added as
#: restart candidates where a run's output times leave some unvouched for.
PROBES = 6


def _stage_times(stages, times):
    """Stage index of every output time (a stage start belongs to the stage before)."""
    starts = np.array([s.start for s in stages])
    return np.clip(np.searchsorted(starts, times, side="left") - 1, 0, len(stages) - 1)


@dataclass
class _Handover:
    initial: PiecewiseCubic
    error: float  # bound of |C| error of the handed-over profile (kg m-3)
    mass_error: float  # bound of the mass it can move (kg m-2)


def _hermite(z, c, d):
    """Cubic Hermite coefficients (nseg, 4) in the local depth of each interval."""
    h = np.diff(z)
    c0, c1, d0, d1 = c[:-1], c[1:], d[:-1], d[1:]
    slope = (c1 - c0) / h
    return np.column_stack([c0, d0, (3 * slope - 2 * d0 - d1) / h, (d0 + d1 - 2 * slope) / h ** 2])


def _eval_hermite(coefs, h, x):
    return coefs[:, 0] + x * (coefs[:, 1] + x * (coefs[:, 2] + x * coefs[:, 3]))


def _handover(prev_col, prev_init, t_loc, prev_off, stage, local, scale, tolerance):
    """The previous stage's state at its end, carried onto the new stage's layers as a
    piecewise-cubic Hermite interpolant of C and dC/dz (error O(h^4): Hermite 1809 /
    any numerical analysis text, e.g. Burden & Faires, sec. 3.4), refined by halving
    until the deviation at the new midpoints meets 1/20 of the tolerance."""
    col = local
    faces = col.interfaces
    old_faces = prev_col.interfaces
    carry = stage.carry or (1.0,) * len(col.layers)
    shift = stage.offset - prev_off  # new local depth + shift = old local depth
    tops, lengths, coefs = [], [], []
    err = mass = 0.0
    target = 0.05 * tolerance * scale
    q = prev_col.darcy_flux
    for i, lay in enumerate(col.layers):
        top, bot = faces[i], faces[i + 1]
        if carry[i] is None:
            tops.append(np.array([top]))
            lengths.append(np.array([bot - top]))
            coefs.append(np.zeros((1, 4)))
            continue
        mid_old = 0.5 * (top + bot) + shift
        j = int(np.clip(np.searchsorted(old_faces, mid_old, side="right") - 1, 0,
                        len(prev_col.layers) - 1))
        old = prev_col.layers[j]
        k_old = old.water_content * old.diffusivity
        bottom_jump = old.partition_to_next if j + 1 < len(prev_col.layers) else 1.0

        def at(zl, j=j, k_old=k_old, bottom_jump=bottom_jump, factor=carry[i]):
            zo = np.clip(zl + shift, old_faces[j], old_faces[j + 1])
            if t_loc > 0:
                r = solve_laplace(prev_col, [t_loc], zo, initial=prev_init)
                c, f = r.concentration[0].copy(), r.total_flux[0]
            else:
                c = initial_profile(prev_col, prev_init, zo)
                f = q * c
            if bottom_jump != 1.0:  # the value at the lower face is the one below it
                at_face = np.isclose(zo, old_faces[j + 1], rtol=0, atol=1e-12)
                c = np.where(at_face, c / bottom_jump, c)
            return factor * c, factor * (q * c - f) / k_old

        z = np.linspace(top, bot, START_SAMPLES + 1)
        c, d = at(z)
        active = np.ones(z.size - 1, bool)  # intervals still to be checked
        last = np.zeros(z.size)  # the last midpoint deviation of the interval from z[k]
        while active.any():
            cf = _hermite(z, c, d)
            h = np.diff(z)
            idx = np.flatnonzero(active)
            mid = z[idx] + 0.5 * h[idx]
            cm, dm = at(mid)
            dev = np.abs(cm - _eval_hermite(cf[idx], h[idx], 0.5 * h[idx]))
            last[idx] = dev
            split = dev > target
            if z.size + split.sum() > MAX_SAMPLES:
                e = float(dev.max())  # the cap: the worst interval left as it is
                break
            # bisect the intervals that miss the target; the others are done
            new_z = np.concatenate([z, mid[split]])
            order = np.argsort(new_z, kind="stable")
            z = new_z[order]
            c = np.concatenate([c, cm[split]])[order]
            d = np.concatenate([d, dm[split]])[order]
            last = np.concatenate([last, np.zeros(split.sum())])[order]
            flag = np.concatenate([np.zeros(z.size - split.sum(), bool),
                                   np.ones(split.sum(), bool)])[order]
            # the two halves of a split interval are checked next: the intervals that
            # start at a new point or end at one
            active = flag[:-1] | flag[1:]
        else:
            e = target  # every interval passed its last check
        cf = _hermite(z, c, d)
        tops.append(z[:-1])
        lengths.append(np.diff(z))
        coefs.append(cf)
        err = max(err, e)
        # each interval's cubic depends on its own ends alone, so its last check measured
        # the final interpolant: the Hermite error is f''''(xi)/24 (x-a)^2 (x-b)^2
        # (Burden & Faires, sec. 3.4), peaking at the midpoint, with a mean over the
        # interval 8/15 of that peak; the midpoint deviation times the width (a margin of
        # 15/8) bounds the mass the interval can move, per unit capacity
        mass += lay.water_content * lay.retardation * float(np.dot(last[:-1], np.diff(z)))
    initial = PiecewiseCubic(tuple(np.concatenate(tops)), tuple(np.concatenate(lengths)),
                             tuple(map(tuple, np.vstack(coefs))))
    return _Handover(initial, err, mass)


def _same_mass(initial, stored, new_mass):
    """A restart's hand-over scaled to hold the stored mass the stage had at that time
    (the interpolant's own mass differs from it by its interpolation error, which would
    otherwise open the budget where nothing was removed), and the concentration error
    the scaling adds: |f - 1| times the largest |C| of the interpolant (at the segment
    ends and midpoints, where a Hermite cubic between close samples peaks)."""
    f = stored / new_mass if new_mass != 0 else 1.0
    if not np.isfinite(f) or f == 1.0 or f <= 0:
        return initial, 0.0
    coefs = np.asarray(initial.coefs, float)
    h = np.asarray(initial.lengths, float)
    ends = [_eval_hermite(coefs, h, x) for x in (0.0 * h, 0.5 * h, h)]
    cmax = float(np.max(np.abs(ends)))
    scaled = replace(initial, coefs=tuple(map(tuple, f * coefs)))
    return scaled, abs(f - 1.0) * cmax * (1 + 1e-6)


READ_BLOCK = 1_000_000  # transform evaluations x segments per call of a long read (each
#                        segment of a handed-over cubic state holds a value per s: 16 MB)


@dataclass
class StagedLaplace:
    """Per-stage initial states (local depth) and their hand-over error bounds."""

    timeline: object
    columns: tuple  # local-clock columns
    initials: tuple
    errors: tuple  # C bound carried into each stage (kg m-3)
    mass_errors: tuple  # mass bound carried into each stage (kg m-2)

    def concentration_at(self, depth, times):
        """C (kg m-3) at one depth for any times (also as the run's evaluator, called)."""
        return self._read(depth, times, bound=False)

    __call__ = concentration_at

    def laplace_bound(self, depth, times):
        """The error bound of C (kg m-3) at one depth and any times, as the run's own
        bound at its output times reads it: the stage's inversion bound plus what the
        hand-overs carried in (the stage's initial state alone at its start; 0 at the
        release). 0 where the depth lies outside the stage's column (no C there)."""
        return self._read(depth, times, bound=True)

    def _read(self, depth, times, bound):
        t = np.atleast_1d(np.asarray(times, float))
        out = np.full(t.size, 0.0 if bound else np.nan)
        stages = self.timeline.stages
        idx = _stage_times(stages, t)
        for i in np.unique(idx):
            st, col = stages[i], self.columns[i]
            zl = float(depth) - st.offset
            if not -1e-12 <= zl <= col.length * (1 + 1e-12):
                continue
            sel = idx == i
            tl = t[sel] - st.start
            vals = np.empty(tl.size)
            pos = tl > 0
            if pos.any():  # in blocks of about READ_BLOCK evaluations x segments
                at = np.flatnonzero(pos)
                at = at[np.argsort(tl[at], kind="stable")]
                segments = len(getattr(self.initials[i], "tops", col.layers))
                # the worst case: every time retried on a contour of its own
                work = at.size * default_nodes(col) * segments
                for part in np.array_split(at, max(1, int(np.ceil(work / READ_BLOCK)))):
                    r = solve_laplace(col, tl[part], [max(zl, 0.0)], initial=self.initials[i])
                    if bound:
                        e = own_errors(r)["concentration"]
                        vals[part] = np.where(np.isnan(e), np.inf, e) + self.errors[i]
                    else:
                        vals[part] = r.concentration[:, 0]
            if (~pos).any():
                vals[~pos] = (self.errors[i] if i else 0.0) if bound else initial_profile(
                    col, self.initials[i], np.array([max(zl, 0.0)]))[0]
            out[sel] = vals
        return out

    def mass_at(self, depth, t):
        return _mass_at(self, float(depth), float(t))


def _mass_at(state, depth, t):
    """Cumulative mass through original-frame ``depth`` during (0, t) over all stages,
    and its bound (inversion bounds plus the hand-over mass bounds)."""
    stages, total, err = state.timeline.stages, 0.0, 0.0
    if t <= 0:
        return 0.0, 0.0
    last = int(_stage_times(stages, np.array([t]))[0])
    for j in range(last + 1):
        st, col = stages[j], state.columns[j]
        end = (stages[j + 1].start if j < last else t) - st.start
        zl = depth - st.offset
        if not -1e-12 <= zl <= col.length * (1 + 1e-12) or end <= 0:
            continue
        r = solve_laplace(col, [end], [min(max(zl, 0.0), col.length)],
                          initial=state.initials[j])
        total += float(r.cumulative_mass[0, 0])
        e = own_errors(r)["cumulative_mass"][0]
        err += float(np.nan_to_num(e, nan=np.inf)) + state.mass_errors[j]
    return total, err


def _carried_zones(prev, stage, col, end_sol):
    """``col`` with each source zone kept from the previous stage holding the
    concentration it had at the change (the zone's own state: C at that end of the
    previous column), and the error of that value (kg m-3); a zone an action brings in
    starts from its own initial concentration."""
    err = 0.0
    for j, end in enumerate(("top", "bottom")):
        bc = getattr(col, end)
        if bc.kind == "source-zone" and getattr(stage.column, end) is getattr(prev.column, end):
            c = float(end_sol.concentration[0, j])
            col = replace(col, **{end: replace(bc, value=max(c, 0.0))})
            err += float(np.nan_to_num(own_errors(end_sol)["concentration"][0], nan=np.inf))
    return col, err


def solve_staged_laplace(timeline, times, depths, initial, tolerance, scale, local_column):
    """All quantities of a staged run by the Laplace engine.

    Returns (quantities dict, own error dict, budget dict, StagedLaplace, inversion
    error dict: the own bound without the hand-over part).  Depths are
    in the original frame; outside a stage's column the values are NaN (as the modal
    timeline).  ``scale`` is the concentration scale the hand-over is refined to.

    Restarts: a stage started from a handed-over piecewise cubic loses digits at late
    times (its polynomial particular parts grow like t^3 and cancel against the rest:
    measured, 1.8e-9 of the stage's mass left in a column flushed at Peclet 100 after 99
    years).  Where a stage's own inversion error at an output time exceeds
    RESTART_SHARE of the tolerance (of the concentration scale, or of the budget's
    largest term) while an earlier output time of the same stage was within it, the
    stage is handed over to itself at the latest such time (the same column, a fresh
    hand-over, no mass removed) and the run is solved again, up to RESTART_ROUNDS times
    while the number of such output times falls (else the run before the last round
    serves).  Where output times still miss it, the rounds are run again with probe
    times between them (:func:`_probe_times`), so that a stage whose first output time
    is already missed can restart earlier; that run serves (read at the output times)
    where it leaves fewer output times missing it.
    """
    times = np.asarray(times, float)
    initial = initial or InitialState.clean()
    memo = {}
    args = (type(timeline), depths, initial, tolerance, scale, local_column, memo)
    rows = np.arange(times.size)
    out, n_bad = _restart_rounds(timeline.stages, times, rows, *args)
    if n_bad and PROBES:
        # restart candidates between the output times too: kept where they leave fewer
        # output times missing the share
        grid = np.union1d(times, _probe_times(timeline.stages, times))
        rows = np.searchsorted(grid, times)
        alt, alt_bad = _restart_rounds(timeline.stages, grid, rows, *args)
        if alt_bad < n_bad:
            vals, own, budget, state, inversion = alt
            out = ({q: v[rows] for q, v in vals.items()}, {q: v[rows] for q, v in own.items()},
                   {k: v[rows] for k, v in budget.items()}, state,
                   {q: v[rows] for q, v in inversion.items()})
    return out


def _restart_rounds(stages, grid, rows, kind, depths, initial, tolerance, scale,
                    local_column, memo):
    """The rounds of restarts of :func:`solve_staged_laplace` on the times ``grid``
    (restart candidates), counting the misses at ``grid[rows]`` (the output times):
    (outputs on the grid, misses)."""
    stages, virtual = tuple(stages), frozenset()
    best = None
    for _ in range(RESTART_ROUNDS + 1):
        out = _solve_stages(kind(stages), virtual, grid, depths, initial, tolerance, scale,
                            local_column, memo)
        more, bad = _restarts(stages, grid, out, tolerance, scale)
        n_bad = int(np.count_nonzero(bad[rows]))
        if best is not None and n_bad >= best[1]:
            break  # the restarts did not help: the run without them
        best = (out, n_bad)
        if not more or not n_bad:
            break
        stages, virtual = _with_restarts(stages, virtual, more)
    return best


def _probe_times(stages, times):
    """Per stage, its span up to the last output time (or its end) halved PROBES times
    toward its start: times at which a stage whose first output time its inversion
    misses can be restarted (``times``: the output times)."""
    end = float(np.max(times))
    out = []
    for i, st in enumerate(stages):
        stop = min(stages[i + 1].start if i + 1 < len(stages) else end, end)
        if stop > st.start:
            out.append(st.start + (stop - st.start) * 0.5 ** np.arange(1, PROBES + 1))
    return np.concatenate(out) if out else np.empty(0)


def _restarts(stages, times, out, tolerance, scale):
    """({stage index: restart time}, which of ``times`` miss it) where a stage's
    inversion misses RESTART_SHARE of the tolerance at an output time after one where it
    met it."""
    budget, inversion = out[2], out[4]
    res, big = budget_residual(budget)
    bad = ((inversion["concentration"] > RESTART_SHARE * tolerance * scale)
           | (inversion["budget"] > RESTART_SHARE * tolerance * big))
    idx = _stage_times(stages, times)
    more = {}
    for i in np.unique(idx):
        own = np.flatnonzero((idx == i) & (times > stages[i].start))
        own = own[np.argsort(times[own], kind="stable")]
        first = np.flatnonzero(bad[own])
        if first.size and first[0] > 0:
            more[int(i)] = float(times[own[first[0] - 1]])
    return more, bad


def _with_restarts(stages, virtual, more):
    """The stages with a copy of stage i starting at ``more[i]`` after it (carrying its
    whole state); ``virtual``: the indices of such copies."""
    out, marks = [], set()
    for i, st in enumerate(stages):
        out.append(st)
        if i in virtual:
            marks.add(len(out) - 1)
        if i in more:
            n = len(st.column.layers)
            out.append(replace(st, start=more[i], carry=(1.0,) * n))
            marks.add(len(out) - 1)
    return tuple(out), frozenset(marks)


def _solve_stages(timeline, virtual, times, depths, initial, tolerance, scale,
                  local_column, memo=None):
    """One solve of :func:`solve_staged_laplace`; ``virtual``: indices of the stages
    that restart the one before them (no mass removed there); ``memo``: hand-overs of
    earlier rounds, reused where a stage, the one before it and that one's initial state
    are the same objects (a round adds restarts after them and changes nothing before)."""
    memo = {} if memo is None else memo
    stages = timeline.stages
    times = np.asarray(times, float)
    depths = np.asarray(depths, float)
    nt, nz = times.size, depths.size
    cols = [local_column(st) for st in stages]
    inits, errs, merrs = [initial or InitialState.clean()], [0.0], [0.0]
    totals = dict(entered_top=0.0, left_bottom=0.0, decayed=0.0, produced=0.0, removed=0.0)
    carried = []
    cum_err, budget_err = [0.0], [0.0]  # inversion bounds of what earlier stages carried
    ends = []  # per stage: solution at its end (local), for cumulative masses
    for i, st in enumerate(stages):
        if i > 0:
            prev, pcol = stages[i - 1], cols[i - 1]
            t_loc = st.start - prev.start
            key = (id(prev), id(st), id(inits[i - 1]))
            hit = memo.get(key)
            if hit is not None and hit[0] is prev and hit[1] is st and hit[2] is inits[i - 1]:
                h = hit[3]
            else:
                h = _handover(pcol, inits[i - 1], t_loc, prev.offset, st, cols[i], scale,
                              tolerance)
                memo[key] = (prev, st, inits[i - 1], h)
            cols[i], zone_err = _carried_zones(stages[i - 1], st, cols[i], ends[-1])
            inits.append(h.initial)
            errs.append(errs[-1] + h.error + zone_err)
            merrs.append(merrs[-1] + h.mass_error)
            b = ends[-1].budget
            for k in ("entered_top", "left_bottom", "decayed", "produced"):
                totals[k] += float(b[k][0])
            eb = own_errors(ends[-1])
            budget_err.append(budget_err[-1] + float(np.nan_to_num(eb["budget"][0], nan=np.inf)))
            cum_err.append(cum_err[-1] + float(np.nan_to_num(eb["cumulative_mass"][0],
                                                             nan=np.inf)))
            new_mass = float(solve_laplace(cols[i], [0.0], [0.0], initial=inits[i])
                             .budget["stored"][0])
            if i in virtual:
                hit = memo.get(("same", id(h)))
                if hit is None or hit[0] is not h:
                    hit = memo[("same", id(h))] = (h, *_same_mass(
                        inits[i], float(b["stored"][0]), new_mass))
                inits[i], extra = hit[1], hit[2]
                errs[-1] += extra
            else:
                totals["removed"] += float(b["stored"][0]) - new_mass
        carried.append(dict(totals))
        if i + 1 < len(stages):
            ends.append(solve_laplace(cols[i], [stages[i + 1].start - st.start],
                                      np.array([0.0, cols[i].length]), initial=inits[i]))
    vals = {"concentration": np.full((nt, nz), np.nan), "total_flux": np.full((nt, nz), np.nan),
            "cumulative_mass": np.full((nt, nz), np.nan)}
    own = {q: np.zeros(nt) for q in QUANTITIES}
    inversion = {q: np.zeros(nt) for q in QUANTITIES}
    keys = ("stored", "initial_stored", "entered_top", "left_bottom", "decayed", "produced",
            "removed", "residual")
    budget = {k: np.full(nt, np.nan) for k in keys}
    init_mass = float(solve_laplace(cols[0], [0.0], [0.0], initial=inits[0])
                      .budget["stored"][0])
    idx = _stage_times(stages, times)
    for i in np.unique(idx):
        st, col = stages[i], cols[i]
        sel = np.flatnonzero(idx == i)
        tl = times[sel] - st.start
        zl = depths - st.offset
        inside = (zl >= -1e-12) & (zl <= col.length * (1 + 1e-12))
        zin = np.clip(zl[inside], 0.0, col.length)
        sol = solve_laplace(col, tl, zin if zin.size else np.array([0.0]), initial=inits[i])
        q = quantities(sol)
        e = own_errors(sol)
        before = np.zeros(inside.sum())
        for j in range(i):  # mass through each depth during earlier stages
            sj, cj = stages[j], cols[j]
            zj = depths[inside] - sj.offset
            ok = (zj >= -1e-12) & (zj <= cj.length * (1 + 1e-12))
            if ok.any():
                r = solve_laplace(cj, [stages[j + 1].start - sj.start],
                                  np.clip(zj[ok], 0.0, cj.length), initial=inits[j])
                before[ok] += r.cumulative_mass[0]
        if zin.size:
            vals["concentration"][np.ix_(sel, np.flatnonzero(inside))] = q["concentration"]
            vals["total_flux"][np.ix_(sel, np.flatnonzero(inside))] = q["total_flux"]
            vals["cumulative_mass"][np.ix_(sel, np.flatnonzero(inside))] = (
                before[None, :] + q["cumulative_mass"])
        c = carried[i]
        budget["stored"][sel] = sol.budget["stored"]
        budget["initial_stored"][sel] = init_mass
        for k in ("entered_top", "left_bottom", "decayed", "produced"):
            budget[k][sel] = c[k] + np.asarray(sol.budget[k], float)
        budget["removed"][sel] = c["removed"]
        # own bounds: this stage's inversion bound plus what the hand-overs carried in
        tau = np.maximum(tl, 1e-300)
        kappa_min = min(l.diffusivity / l.retardation for l in col.layers)
        k_max = max(l.water_content * l.diffusivity for l in col.layers)
        # an initial error e0 moves the flux by at most about theta D e0 |grad G|_L1 +
        # |q| e0, with |grad G|_L1 = 1 / sqrt(pi kappa tau) for the heat kernel (Carslaw
        # & Jaeger 1959, sec. 2.2), doubled for the layered medium
        flux_in = errs[i] * (2 * k_max / np.sqrt(np.pi * kappa_min * tau)
                             + abs(col.darcy_flux)) if i else 0.0
        for qn in QUANTITIES:
            ei = np.where(np.isnan(e[qn]), np.inf, e[qn])
            carried_in = {"concentration": errs[i], "total_flux": flux_in,
                          "cumulative_mass": merrs[i] + cum_err[i],
                          "budget": merrs[i] + budget_err[i]}[qn]
            own[qn][sel] = ei + carried_in
            inversion[qn][sel] = ei + (cum_err[i] if qn == "cumulative_mass" else
                                       budget_err[i] if qn == "budget" else 0.0)
    budget["residual"] = (budget["stored"] - budget["initial_stored"] - budget["entered_top"]
                          + budget["left_bottom"] + budget["decayed"] - budget["produced"]
                          + budget["removed"])
    zero = times == 0
    if zero.any():
        c0 = initial_profile(cols[0], inits[0], np.clip(depths, 0, cols[0].length))
        vals["concentration"][zero] = c0
        vals["cumulative_mass"][zero] = 0.0
    for qn in QUANTITIES:
        own[qn][zero] = 0.0
        inversion[qn][zero] = 0.0
    state = StagedLaplace(timeline, cols, tuple(inits), tuple(errs), tuple(merrs))
    return vals, own, budget, state, inversion
