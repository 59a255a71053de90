"""A staged run whose action changes only a boundary's value in time (the source
removed, a new top concentration, an imposed flux switched off) is the same problem as
one column with that boundary scheduled (a step at the action time). The staged Laplace
engine solves it so (transport.solvers.stages.boundary_steps_merged), without handing a
state over, which lost digits decades later in an advective column: a source removed
at 2 yr from a column at Peclet number 100 was refused at every output time from 20 to
100 yr (measured before the change: concentration errors up to 2.5e-7 of the source).

Checked against the mpmath Laplace reference of the column with a scheduled boundary
(tests/reference.py; Talbot 1979, Abate & Valko 2004), and the construction of the
merged schedule against the stages it replaces, time by time.
"""
import math

import numpy as np
import pytest

from reference import laplace_reference_full
from transport.model.column import Boundary, Column, Layer
from transport.model.schedules import Schedule
from transport.solvers.stages import (Timeline, amend_layer, boundary_steps_merged,
                                      excavate, local_column, place_cap, remove_source,
                                      set_boundary, set_flow)
from transport.solvers.timeline import solve_timeline

YEAR = 365.25 * 86400.0
TOL = 1e-8
LAYERS = (Layer(0.6, 0.3, 8e-10, 2.0, name="fill"), Layer(0.05, 0.45, 1e-11, 5.0, 1e-9,
                                                          name="clay"),
          Layer(1.35, 0.25, 1e-9, 1.5, name="sand"))


def _column(top, peclet=100.0, bottom=None, layers=LAYERS):
    """Downward flow at the column Peclet number q L / (theta D) with theta D = 3e-10
    m2/s over the 2 m column (the regime sweep's definition)."""
    return Column(layers, top, bottom or Boundary("free-outflow"), peclet * 3e-10 / 2.0)


def _value(boundary, t):
    """The boundary's value at times t on its own clock."""
    if boundary.schedule is None:
        return np.full(np.shape(t), boundary.value)
    return boundary.schedule.value(t)


def _stagewise(timeline, end, t):
    """The value of ``end`` at run times t read from the stage in force at each."""
    starts = np.array([st.start for st in timeline.stages])
    out = np.empty(t.size)
    for k, tk in enumerate(t):
        i = int(np.searchsorted(starts, tk, side="right") - 1)
        st = timeline.stages[i]
        out[k] = _value(getattr(local_column(st), end), np.array([tk - st.start]))[0]
    return out


@pytest.mark.parametrize("case", ["removed", "new level", "depleting then removed",
                                  "scheduled top brought in", "two changes"])
def test_a_boundary_value_change_folds_into_one_scheduled_stage(case):
    """The merged run has one stage whose top, read at every time, is the top of the
    stage in force at that time in the run as written (a depleting source keeps
    depleting until it is removed; a scheduled top brought in by an action starts its
    schedule then)."""
    T = 3.0 * YEAR
    k = math.log(2) / (4.0 * YEAR)
    start = {"depleting then removed": Boundary("concentration", 0.0,
                                                schedule=Schedule.depletion(1.0, k))}
    tl = Timeline.single(_column(start.get(case, Boundary("concentration", 1.0))))
    if case in ("removed", "depleting then removed"):
        tl = tl.then(T, remove_source())
    elif case == "new level":
        tl = tl.then(T, set_boundary("top", Boundary("concentration", 0.3)))
    elif case == "scheduled top brought in":
        tl = tl.then(T, set_boundary("top", Boundary("concentration", 0.0, schedule=(
            Schedule.steps([0.0, YEAR], [0.5, 0.0])))))
    else:
        tl = tl.then(T, set_boundary("top", Boundary("concentration", 0.4))).then(
            2 * T, remove_source())
    merged = boundary_steps_merged(tl)
    assert len(merged.stages) == 1
    t = np.unique(np.concatenate([np.linspace(0.0, 4 * T, 97), [T, 2 * T, T + YEAR]]))
    got = _value(merged.stages[0].column.top, t)
    np.testing.assert_allclose(got, _stagewise(tl, "top", t), rtol=0, atol=1e-15)
    if case == "depleting then removed":  # the source law itself (common practice)
        np.testing.assert_allclose(got, np.where(t < T, np.exp(-k * t), 0.0), rtol=1e-13,
                                   atol=1e-15)


@pytest.mark.parametrize("action", [
    lambda: excavate(0.3), lambda: place_cap([Layer(0.5, 0.3, 5e-10, 1.0)]),
    lambda: amend_layer("fill", retardation=4.0), lambda: set_flow(1e-9),
    lambda: set_boundary("top", Boundary("flux", 0.0)),
    lambda: set_boundary("bottom", Boundary("concentration", 0.0))],
    ids=["excavation", "cap", "amendment", "flow", "another kind", "bottom kind"])
def test_a_change_of_the_column_or_of_a_boundary_kind_keeps_its_stage(action):
    """Actions that change the layers, the depth frame, the flow or a boundary's kind
    are not a value in time: their stages stay as written (the state is handed over)."""
    tl = Timeline.single(_column(Boundary("concentration", 1.0))).then(YEAR, action())
    assert boundary_steps_merged(tl).stages == tl.stages


def test_source_removed_early_is_served_decades_later():
    """Column Peclet number 100, the source removed at 2 yr, output times 20 to 100 yr:
    every time is served, and C, total flux and cumulative mass at 0.3 and 1 m are
    within the tolerance times their scales of the mpmath reference of the column with a
    step-off top, with the budget closed; each within the run's own stated bound."""
    times = np.array([20.0, 40.0, 60.0, 100.0]) * YEAR
    depths = np.array([0.3, 1.0])
    removal = 2.0 * YEAR
    tl = Timeline.single(_column(Boundary("concentration", 1.0))).then(removal,
                                                                        remove_source())
    sol = solve_timeline(tl, times, depths, tolerance=TOL)
    assert sol.reliable.all()
    step = Boundary("concentration", 0.0, schedule=Schedule.steps([0.0, removal], [1.0, 0.0]))
    ref = laplace_reference_full(_column(step), depths, times, dps=20)
    for name in ("concentration", "total_flux", "cumulative_mass"):
        err = np.abs(getattr(sol, name) - getattr(ref, name)).max(axis=1)
        assert np.all(err <= sol.error[name] + 1e-15 * sol.scale[name]), name
        assert np.all(err <= TOL * sol.scale[name]), name
    res = (sol.budget["stored"] - sol.budget["initial_stored"] - sol.budget["entered_top"]
           + sol.budget["left_bottom"] + sol.budget["decayed"] - sol.budget["produced"])
    assert np.all(np.abs(res) <= TOL * sol.scale["budget"])


def test_imposed_flux_switched_off_matches_the_reference():
    """An imposed inflow (flux boundary) switched off at 1 yr, column Peclet number 10:
    the merged run equals the mpmath reference of the scheduled flux within the
    tolerance times the scale at 2, 5 and 30 yr."""
    times = np.array([2.0, 5.0, 30.0]) * YEAR
    depths = np.array([0.0, 0.5, 1.5])
    flux = 1e-9  # kg m-2 s-1
    tl = Timeline.single(_column(Boundary("flux", flux), peclet=10.0)).then(
        YEAR, set_boundary("top", Boundary("flux", 0.0)))
    assert len(boundary_steps_merged(tl).stages) == 1
    sol = solve_timeline(tl, times, depths, tolerance=TOL)
    assert sol.reliable.all()
    step = Boundary("flux", 0.0, schedule=Schedule.steps([0.0, YEAR], [flux, 0.0]))
    ref = laplace_reference_full(_column(step, peclet=10.0), depths, times, dps=20)
    for name in ("concentration", "cumulative_mass"):
        err = np.abs(getattr(sol, name) - getattr(ref, name)).max()
        assert err <= TOL * sol.scale[name], name


def test_a_column_beyond_the_modal_range_runs_on_the_laplace_engine_alone():
    """Column Peclet number 1500 (beyond the modal engine's double-precision range,
    about 1200): a staged run on the auto engine is served by the staged Laplace engine
    alone, as a single column is, instead of stopping with the modal engine's input
    error; within the tolerance of the mpmath reference (about 330 guard digits)."""
    layers = (Layer(1.2, 0.3, 1e-9, 1.5), Layer(0.8, 0.35, 8e-10, 2.5))
    q = 1500 * 0.3e-9 / 2.0
    removal = 0.2 * YEAR
    col = Column(layers, Boundary("concentration", 1.0), Boundary("free-outflow"), q)
    times, depths = np.array([0.15, 0.25]) * YEAR, np.array([0.8, 1.8])
    sol = solve_timeline(Timeline.single(col).then(removal, remove_source()), times,
                         depths, tolerance=TOL)
    assert sol.reliable.all() and set(sol.engine_by_time) == {"laplace"}
    # the front passes 1.8 m at 0.15 yr, the tail 0.8 m at 0.25 yr
    assert 0.01 < sol.concentration[0, 1] < 0.99 and 0.01 < sol.concentration[1, 0] < 0.99
    step = Boundary("concentration", 0.0, schedule=Schedule.steps([0.0, removal], [1.0, 0.0]))
    ref = laplace_reference_full(Column(layers, step, Boundary("free-outflow"), q), depths,
                                 times, dps=20)
    assert np.abs(sol.concentration - ref.concentration).max() <= TOL
