"""The Laplace engine: signals, components by switch-on time, outputs and budget.

Outputs: C, F, cumulative mass through each depth (F^ / s), and the mass budget from
closed-form layer integrals of C^ (stored, decayed = sum mu int c C^ / s).
"""
from __future__ import annotations

import math

import numpy as np

from transport.model.column import (Column, InitialState, InputError, check_output_grid,
                                    has_source_zone)
from transport.solvers.laplace import kernel
from transport.solvers.laplace.contour import companion_nodes, default_nodes
from transport.solvers.laplace.inversion import invert_best, plan_windows, tries_parabola
from transport.solvers.laplace.transfer import LaplaceTransfer, PiecewiseCubic, initial_values
from transport.solvers.result import Solution

__all__ = ["solve_laplace", "laplace_concentration", "laplace_lone_times", "laplace_solution",
           "signal_components", "signals_for"]


def _atom_hat(kind, amp, rate, s):
    """Laplace transform of one schedule atom switched on at its own origin."""
    if kind == "step":
        return amp / s
    if kind == "ramp":
        return amp / (s * s)
    return amp / (s + rate)


def _atoms(schedule, constant):
    """(t0, kind, amplitude, rate) of a signal: its schedule, or a constant from 0."""
    if schedule is None:
        return [(0.0, "step", float(constant), 0.0)] if constant != 0 else []
    return [(float(t0), kind, float(amp), float(rate)) for kind, t0, amp, rate in schedule.atoms]


def signal_components(column: Column, seg_layer):
    """Group the signal atoms by switch-on time: {t0: (top, bottom, [(segment mask,
    atom)])}.  By linearity each group is solved from its own origin (no delay factor
    e^{-s t0}, which a Talbot contour cannot invert) and added at t - t0."""
    groups = {0.0: ([], [], [])}
    for end, slot in (("top", 0), ("bottom", 1)):
        bc = getattr(column, end)
        if bc.kind == "source-zone":  # its inventory enters through the boundary row
            continue
        for atom in _atoms(bc.schedule, bc.value):
            groups.setdefault(atom[0], ([], [], []))[slot].append(atom)
    for i, lay in enumerate(column.layers):
        if lay.source_rate == 0:
            continue
        for t0, kind, amp, rate in _atoms(lay.source_schedule, 1.0):
            groups.setdefault(t0, ([], [], []))[2].append(
                (seg_layer == i, (t0, kind, amp * lay.source_rate, rate)))
    return groups


def signals_for(group, s, nseg, with_initial):
    """The ``signals`` of :meth:`LaplaceTransfer.solve` for one switch-on group of
    :func:`signal_components` (``group`` None: no signal in this component)."""
    group = group or ([], [], [])
    top, bot, src = group
    top_hat = sum((_atom_hat(k, a, r, s) for _, k, a, r in top), 0.0 * s)
    bot_hat = sum((_atom_hat(k, a, r, s) for _, k, a, r in bot), 0.0 * s)
    src_hat = np.zeros((nseg, s.size), dtype=complex)
    for mask, (_, k, a, r) in src:
        src_hat[mask] += _atom_hat(k, a, r, s)[None, :]
    return top_hat, bot_hat, src_hat, float(with_initial)


def solve_laplace(column: Column, times, depths, *, initial: InitialState = None,
                  tolerance: float = None, semi_infinite_bottom: bool = False,
                  nodes: int = None, enough: dict = None, compiled: bool = False) -> Solution:
    """Solve the layered column at ``times`` (s) and ``depths`` (m) in the Laplace domain.

    Parameters
    ----------
    column : Column (boundary values constant or scheduled, sources, decay, partitions)
    times : (nt,) s, >= 0; at t = 0 the initial state is returned
    depths : (nz,) m in [0, L] (any depth >= 0 with ``semi_infinite_bottom``); at a
        partition face the value just below it
    initial : InitialState or PiecewiseCubic, default clean
    tolerance : not used: the inversion reports its own error estimate instead (taken
        for the signature every engine shares)
    semi_infinite_bottom : the last layer extends to infinity (its thickness and the
        bottom boundary are ignored)
    nodes : Talbot nodes N (even), default :func:`default_nodes` (32 for column Peclet
        numbers up to 10, more above): N / 2 complex banded solves per lone time and
        per distinct switch-on time of the scheduled signals; windows of times share
        hyperbolas aiming at the same error, e^{-1.358 N}
        (:mod:`transport.solvers.laplace.inversion`)
    enough : optional absolute errors that suffice the caller ({"concentration":
        kg m-3, "total_flux": kg m-2 s-1, "cumulative_mass": kg m-2, "budget": kg m-2},
        any subset): a time whose estimates are all within them is not inverted again
        on another contour (:func:`transport.solvers.laplace.inversion.invert_best`);
        saves work only, every value keeps its own estimate
    compiled : evaluate the transforms with the compiled transfer
        (:mod:`transport.solvers.laplace.kernel`) where it is available: the same
        numbers to rounding, faster on small batches (a site run's many columns)

    Returns
    -------
    Solution with engine="laplace", no series, no modes, ``error`` the estimated
    absolute errors (nt,) of every quantity: "concentration" (kg m-3), "total_flux"
    (kg m-2 s-1), "cumulative_mass" (kg m-2), "budget" (kg m-2; max over stored,
    decayed, entered_top, left_bottom), max over depths; ``error_estimate`` that of C;
    and ``engine_by_time``.  A value that could not be computed is NaN with an
    infinite estimate.  The budget is filled (with a semi-infinite bottom, stored and
    produced are NaN when the last layer holds initial mass or a source: infinite).
    """
    initial = initial if initial is not None else InitialState.clean()
    model, times, depths, out, est = _inverted(column, times, depths, initial,
                                               semi_infinite_bottom, nodes, enough, compiled)
    return laplace_solution(column, model, initial, times, depths, out, est,
                            semi_infinite_bottom)


def laplace_concentration(column: Column, times, depths, *, initial: InitialState = None,
                          enough: dict = None, compiled: bool = False):
    """The concentration and its error estimate alone: ``(concentration (nt, nz),
    error (nt,))``.  The same inversion as :func:`solve_laplace`, but its contours are
    chosen by the concentration's own estimates (the fluxes, masses and budget are not
    computed), so a time that solve_laplace inverts again for the sake of another
    quantity keeps its first value here; each value keeps its own estimate.  For a
    curve read at one depth (a Monte Carlo realization's receptor)."""
    initial = initial if initial is not None else InitialState.clean()
    if compiled:
        found = _lone_times(column, times, depths, initial, enough)
        if found is not None:
            return found
    model, times, depths, out, est = _inverted(column, times, depths, initial, False, None,
                                               enough, compiled, concentration_only=True)
    return _concentration(column, model, initial, times, depths, out, est)


def laplace_lone_times(column: Column, times, depth: float, *, initial: InitialState = None,
                       enough: dict = None):
    """C at one ``depth`` and its error estimate at each of ``times``, each time inverted
    on its own Talbot contours (sharing no window with the others): the numbers of
    ``laplace_concentration(column, [t], [depth], compiled=True)`` for each t, in one
    compiled call where every time is one :func:`_lone_times` serves (a Monte Carlo
    realization's check of its breakthrough and peak), else one call per time.

    Returns
    -------
    (numpy.ndarray, numpy.ndarray)
        C (kg m-3) and its estimate, one value per time.
    """
    initial = initial if initial is not None else InitialState.clean()
    times = np.atleast_1d(np.asarray(times, dtype=float))
    found = _lone_times(column, times, [depth], initial, enough, each=True)
    if found is not None:
        return found[0][:, 0], found[1]
    out = [laplace_concentration(column, [t], [depth], initial=initial, enough=enough,
                                 compiled=True) for t in times]
    return (np.array([c[0, 0] for c, _ in out], dtype=float),
            np.array([e[0] for _, e in out], dtype=float))


def _lone_times(column, times, depths, initial, enough, each=False):
    """:func:`laplace_concentration` at one depth and lone times (each on its own
    Talbot contours: :func:`~transport.solvers.laplace.inversion.plan_windows` puts
    no two of them in a window) of a column whose signals are steps switched on at 0,
    in the compiled kernel (:func:`transport.solvers.laplace.kernel.talbot_points`:
    :func:`~transport.solvers.laplace.contour.invert`'s equations, one time at a time;
    a Monte Carlo realization's checks and the polish of its Laplace-served curve).
    None where the case is another, or where the inversion :func:`invert_best` makes
    would try the parabolic contour at some time, or gives a value that is not
    finite: the general path then serves the whole call.  ``each``: the times are
    wanted each on its own contours even where the general path would share a window
    (:func:`laplace_lone_times`; the kernel inverts them one at a time either way)."""
    if np.ndim(depths) > 1 or np.size(depths) != 1 or not isinstance(initial, InitialState):
        return None
    depth = float(np.ravel(depths)[0])
    times = np.atleast_1d(np.asarray(times, dtype=float))
    if (times.ndim != 1 or not times.size or not np.all(times > 0)
            or not np.all(np.isfinite(times)) or not 0 <= depth <= column.length * (1 + 1e-12)):
        return None
    prep = _lone_prep(column, initial)
    if prep is None or (not each and times.size > 1 and plan_windows(times, prep.n)[0]):
        return None
    f, e = kernel.talbot_points(prep, times, depth)
    if not (np.all(np.isfinite(f)) and np.all(np.isfinite(e))):
        return None
    f = f[:, None]
    floor = float((enough or {}).get("concentration", 0.0))
    # each time alone is asked as the general path would ask it for that time alone
    rows = [slice(i, i + 1) for i in range(times.size)] if each else [slice(None)]
    if prep.s0 > 0 and any(tries_parabola(f[r], e[r, None], floor).any() for r in rows):
        return None
    return f, e


_LONE = []  # the last few columns' preparations: [(column, initial, prep or None)]


def _lone_prep(column, initial):
    """What :func:`_lone_times` needs of a column besides the times (None where the
    case is not one it serves), kept for the last few columns asked for (a realization
    checks its column several times); identity, not equality, picks an entry."""
    for col, init, prep in _LONE:
        if col is column and init is initial:
            return prep
    prep = _make_lone_prep(column, initial)
    _LONE.insert(0, (column, initial, prep))
    del _LONE[4:]
    return prep


def _make_lone_prep(column, initial):
    if has_source_zone(column) or not kernel.points_available():
        return None
    model = LaplaceTransfer(column, initial, False, True)
    if not model.compiled:
        return None
    g = model.seg
    seg_layer = np.clip(np.searchsorted(column.interfaces, g["top"], side="right") - 1, 0,
                        len(column.layers) - 1)
    groups = signal_components(column, seg_layer)
    if set(groups) != {0.0}:
        return None
    top, bottom, sources = groups[0.0]
    if any(kind != "step" for _, kind, _, _ in top + bottom + [a for _, a in sources]):
        return None
    src = np.zeros(model.n, complex)
    for mask, (_, _, amp, _) in sources:
        src[mask] += amp
    n = default_nodes(column)
    return kernel.PointsPrep(model, n, companion_nodes(n),
                             (sum(a for _, _, a, _ in top), sum(a for _, _, a, _ in bottom),
                              src),
                             float(np.max(model.q ** 2 / (4 * g["k"] * g["c"]))))


def _inverted(column, times, depths, initial, semi_infinite_bottom, nodes, enough,
              compiled=False, concentration_only=False):
    """The inverted outputs of :func:`solve_laplace` and their estimates: (model,
    times, depths, out, est), out and est (nt, 3 nz + 4) as :func:`laplace_solution`
    takes them; with ``concentration_only`` (nt, nz), the concentration alone, its
    contours chosen by its own estimates."""
    n_nodes = default_nodes(column) if nodes is None else int(nodes)
    times, depths = check_output_grid(column, times, depths, semi_infinite_bottom)
    if callable(initial) or not isinstance(initial, (InitialState, PiecewiseCubic)):
        raise InputError("the Laplace engine takes an InitialState (clean, uniform or "
                         "profile); project other initial fields onto a profile first")
    model = LaplaceTransfer(column, initial, semi_infinite_bottom, compiled)
    g = model.seg
    seg_layer = np.clip(np.searchsorted(column.interfaces, g["top"], side="right") - 1, 0,
                        len(column.layers) - 1)
    nz, nt = depths.size, times.size
    ends = np.array([0.0, column.length])
    width = nz if concentration_only else 3 * nz + 4
    out = np.zeros((nt, width))
    est = np.zeros((nt, width))
    parts = (np.arange(nz), np.arange(nz, 2 * nz), np.arange(2 * nz, 3 * nz),
             np.arange(3 * nz, 3 * nz + 4))[:1 if concentration_only else 4]
    # growth parabola of the advective branch (widest over the layers); 0 without flow
    s0 = float(np.max(model.q ** 2 / (4 * g["k"] * g["c"])))
    enough = enough or {}
    floors = [float(enough.get(q, 0.0)) for q in ("concentration", "total_flux",
                                                  "cumulative_mass", "budget")][:len(parts)]
    for t0, group in sorted(signal_components(column, seg_layer).items()):
        tau = times - t0
        on = tau > 0
        if not on.any():
            continue

        def transform(s, group=group, first=(t0 == 0.0)):
            if concentration_only:
                C, _, _, capped = model.evaluate(s, signals_for(group, s, model.n, first),
                                                 depths, stored=False)
                return C, capped
            C, F, st, capped = model.evaluate(s, signals_for(group, s, model.n, first),
                                              np.concatenate([depths, ends]))
            decayed = (g["mu"][:, None] * st).sum(axis=0) / s  # st: (nseg, ns)
            return np.concatenate([C[:, :nz], F[:, :nz], F / s[:, None],
                                   st.sum(axis=0)[:, None], decayed[:, None]],
                                  axis=1), capped

        with np.errstate(over="ignore", invalid="ignore", divide="ignore"):
            f, e = invert_best(transform, tau[on], n_nodes, s0, parts, floors)
        out[on] += f
        est[on] += e
    return model, times, depths, out, est


def _concentration(column, model, initial, times, depths, out, est):
    """Concentration (nt, nz) and its error (nt,) from the inverted outputs (as in
    :func:`laplace_solution`): NaN with an infinite error at a time where a value or an
    estimate is not finite; the initial state at t = 0."""
    nz = depths.size
    conc, e = out[:, :nz], est[:, :nz]
    with np.errstate(invalid="ignore"):
        bad = ~(np.isfinite(conc).all(axis=1) & np.isfinite(e).all(axis=1))
    conc[bad] = np.nan
    error = np.where(bad, np.inf, e.max(axis=1, initial=0.0))
    zero = times == 0
    if zero.any():
        c0 = initial_values(column, initial, depths)
        conc[zero] = c0
        error[zero] = 16 * np.finfo(float).eps * np.abs(c0).max()
    return conc.copy(), error


def laplace_solution(column, model, initial, times, depths, out, est,
                     semi_infinite_bottom=False, produced_extra=None) -> Solution:
    """The :class:`Solution` of inverted outputs ``out`` and their estimates ``est``
    (nt, 3 nz + 4: C, F, cumulative mass at the depths; cumulative mass at the two ends,
    stored, decayed), with the values at t = 0 and the mass budget.  ``produced_extra``
    (nt,) kg m-2 is mass produced besides the layer sources (a daughter species: its
    yield times its parent's decayed mass) and ``est`` holds its error in the budget."""
    g = model.seg
    nz, nt = depths.size, times.size
    # error estimate per quantity and time; a group with any non-finite value or
    # estimate at a time is refused there: NaN values, infinite estimate
    groups = {"total_flux": np.arange(nz, 2 * nz), "cumulative_mass": np.arange(2 * nz, 3 * nz),
              "budget": np.arange(3 * nz, 3 * nz + 4)}
    if semi_infinite_bottom:  # nothing leaves through the bottom at infinity
        out[:, 3 * nz + 1] = 0.0
        est[:, 3 * nz + 1] = 0.0
    conc, err_c = _concentration(column, model, initial, times, depths, out, est)
    error = {"concentration": err_c}
    with np.errstate(invalid="ignore"):
        for name, cols in groups.items():
            bad = ~(np.isfinite(out[:, cols]).all(axis=1) & np.isfinite(est[:, cols]).all(axis=1))
            out[np.ix_(bad, cols)] = np.nan
            error[name] = np.where(bad, np.inf, est[:, cols].max(axis=1, initial=0.0))
    flux, cum = out[:, nz:2 * nz], out[:, 2 * nz:3 * nz]
    cum_ends, stored, decayed = out[:, 3 * nz:3 * nz + 2], out[:, -2], out[:, -1]
    gl = g["l"]
    init_mass = float(np.sum(g["c"] * gl * (g["a"] + gl * (g["b"] / 2 + gl * (
        g["a2"] / 3 + gl * g["a3"] / 4)))))
    produced = np.zeros(nt)
    for i, lay in enumerate(column.layers):
        if lay.source_rate != 0:
            sched = lay.source_schedule
            produced += lay.source_rate * lay.thickness * (
                times if sched is None else np.asarray(sched.integral(times), dtype=float))
    if produced_extra is not None:
        produced = produced + np.asarray(produced_extra, float)
    if semi_infinite_bottom:
        tail = g["a"][-1] != 0 or g["b"][-1] != 0 or column.layers[-1].source_rate != 0
        init_mass = math.nan if tail else init_mass
        if tail:
            produced = np.full(nt, math.nan)
    zero = times == 0
    if zero.any():
        c0 = conc[zero][0]  # the initial state (set by _concentration)
        # flux of the initial profile: q C0 - theta D dC0/dz (piecewise-linear slope)
        idx, zeta0 = model.locate(depths)
        slope = g["b"][idx] + zeta0 * (2 * g["a2"][idx] + 3 * zeta0 * g["a3"][idx])
        flux[zero] = model.q * c0 - g["k"][idx] * slope
        stored[zero] = init_mass
        # exact up to the rounding of the interpolation and of the sums
        eps16 = 16 * np.finfo(float).eps
        error["total_flux"][zero] = eps16 * np.abs(np.abs(model.q * c0)
                                                   + np.abs(g["k"][idx] * slope)).max()
        error["budget"][zero] = eps16 * float(np.sum(g["c"] * (np.abs(g["a"]) * g["l"] + np.abs(
            g["b"]) * g["l"] ** 2 / 2)))
    residual = stored - init_mass - cum_ends[:, 0] + cum_ends[:, 1] + decayed - produced
    unknown = ~np.isfinite(np.column_stack([stored, decayed, cum_ends])).all(axis=1)
    error["budget"][unknown] = np.inf  # e.g. the infinite mass of a semi-infinite tail
    budget = {"stored": stored, "initial_stored": np.full(nt, init_mass),
              "entered_top": cum_ends[:, 0].copy(), "left_bottom": cum_ends[:, 1].copy(),
              "decayed": decayed, "produced": produced, "residual": residual}
    return Solution(column=column, times=times, depths=depths, concentration=conc.copy(),
                    total_flux=flux.copy(), cumulative_mass=cum.copy(), budget=budget,
                    engine="laplace",
                    engine_by_time=np.where(zero, "initial", "laplace").astype(object),
                    error=error, error_estimate=error["concentration"].copy())
