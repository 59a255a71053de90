"""Remediation timelines: stage changes, carried state and budgets."""
import math

import numpy as np
import pytest
from scipy.integrate import quad

from transport.solvers.modal.series import solve
from transport.model.column import Boundary, Column, InputError, Layer
from transport.model.schedules import Schedule
from transport.solvers.timeline import (Timeline, amend_layer, excavate, place_cap, remove_source,
                                set_boundary, set_flow, solve_timeline)

YEAR = 365.25 * 86400.0


def _column(top=None):
    return Column(layers=(Layer(0.5, 0.35, 6e-10, 2.0, name="fill"),
                          Layer(0.4, 0.45, 8e-11, 5.0, name="silt", decay_rate=2e-9),
                          Layer(1.1, 0.3, 7e-10, 1.5, name="sand")),
                  top=top or Boundary("concentration", 1.0), bottom=Boundary("free-outflow"),
                  darcy_flux=0.01 / YEAR)


T = np.array([2.0, 6.0, 10.0, 25.0, 60.0]) * YEAR
Z = np.array([0.0, 0.3, 0.7, 1.2, 2.0])


def test_no_change_stage_leaves_solution_identical():
    """Identity: re-stating the same boundary at 8 yr changes nothing (1e-10 of source)."""
    col = _column()
    single = solve(col, T, Z, tolerance=1e-10).concentration
    tl = Timeline.single(col).then(8 * YEAR, set_boundary("top", col.top))
    staged = solve_timeline(tl, T, Z, tolerance=1e-10).concentration
    np.testing.assert_allclose(staged, single, atol=1e-10)


def test_remove_source_equals_step_schedule():
    """Identity: a source-removal stage equals the step-off schedule on one spectrum."""
    col = _column()
    tl = Timeline.single(col).then(8 * YEAR, remove_source())
    staged = solve_timeline(tl, T, Z, tolerance=1e-10)
    sched = Schedule.steps([0.0, 8 * YEAR], [1.0, 0.0])
    ref = solve(_column(Boundary("concentration", schedule=sched)), T, Z, tolerance=1e-10)
    np.testing.assert_allclose(staged.concentration, ref.concentration, atol=1e-9)
    np.testing.assert_allclose(staged.cumulative_mass, ref.cumulative_mass, atol=1e-9 * 0.01)


def test_concentration_continuous_across_a_change():
    """Inside the column C(z, t) is continuous in time across a boundary change: the jump
    over [t_s, t_s + d] shrinks with d (roughly in proportion)."""
    col = _column()
    ts = 8 * YEAR
    tl = Timeline.single(col).then(ts, remove_source())
    d = 0.04 * YEAR
    sol = solve_timeline(tl, [ts, ts + d, ts + d / 4], [0.5, 1.0])
    c = sol.concentration
    big, small = np.abs(c[1] - c[0]), np.abs(c[2] - c[0])
    assert np.all(small < 0.5 * big)


def test_cap_conserves_mass_and_budget_closes():
    """Placing a clean cap carries all mass (1e-9 relative); budget closes afterwards."""
    col = _column()
    cap = [Layer(0.5, 0.4, 3e-10, 3.0, name="clay cap")]
    tl = Timeline.single(col).then(10 * YEAR, place_cap(cap, top=Boundary("sealed")))
    t = np.array([10.0, 11.0, 20.0, 80.0]) * YEAR
    sol = solve_timeline(tl, t, [-0.5, 0.0, 1.0, 2.0])
    b = sol.budget
    carried = sol.series.series[1].initial_mass  # projected onto the capped column
    assert abs(carried - b["stored"][0]) <= 1e-9 * b["stored"][0]
    assert abs(b["removed"][-1]) <= 1e-9 * b["stored"][0]
    scale = max(np.abs(b[k]).max() for k in ("stored", "entered_top", "left_bottom", "decayed"))
    assert np.abs(b["residual"]).max() <= 1e-9 * scale
    assert np.isnan(sol.concentration[0, 0])  # the cap is not there before 10 yr


def test_excavation_reports_removed_mass():
    """The excavated soil's content (theta R C integrated over the removed 0.3 m, by
    adaptive quadrature of the pre-excavation profile, scipy.integrate.quad) is what the
    budget reports as removed; the budget still closes."""
    col = _column()
    te = 12 * YEAR
    tl = Timeline.single(col).then(te, excavate(0.3, top=Boundary("concentration", 0.0)))
    before = solve(col, [te], [0.0])
    removed, _ = quad(lambda z: 0.35 * 2.0 * before.concentration_at(z, [te])[0], 0, 0.3,
                      epsabs=1e-14, epsrel=1e-12)
    sol = solve_timeline(tl, np.array([5.0, 15.0, 40.0]) * YEAR, [0.3, 1.0])
    b = sol.budget
    assert b["removed"][-1] == pytest.approx(removed, rel=1e-8)
    scale = max(np.abs(b[k]).max() for k in ("stored", "entered_top", "left_bottom"))
    assert np.abs(b["residual"]).max() <= 1e-9 * scale


def test_amendment_keeps_mass_in_place():
    """Amending the silt (R 5 -> 40, more decay) keeps the stored mass at the switch."""
    col = _column()
    tl = Timeline.single(col).then(6 * YEAR, amend_layer("silt", retardation=40.0,
                                                         decay_rate=1e-8))
    sol = solve_timeline(tl, np.array([6.0, 7.0, 30.0]) * YEAR, [0.7])
    b = sol.budget
    carried = sol.series.series[1].initial_mass
    assert abs(carried - b["stored"][0]) <= 1e-9 * b["stored"][0]
    scale = max(np.abs(b[k]).max() for k in ("stored", "entered_top", "left_bottom", "decayed"))
    assert np.abs(b["residual"]).max() <= 1e-9 * scale


def test_flow_change_budget_closes():
    col = _column()
    tl = Timeline.single(col).then(5 * YEAR, set_flow(0.002 / YEAR))
    sol = solve_timeline(tl, np.array([3.0, 9.0, 50.0]) * YEAR, [1.0])
    b = sol.budget
    scale = max(np.abs(b[k]).max() for k in ("stored", "entered_top", "left_bottom", "decayed"))
    assert np.abs(b["residual"]).max() <= 1e-9 * scale


def test_bad_actions_are_clear_errors():
    col = _column()
    with pytest.raises(InputError, match="excavation"):
        Timeline.single(col).then(YEAR, excavate(5.0))
    with pytest.raises(InputError, match="no layer named"):
        Timeline.single(col).then(YEAR, amend_layer("peat", retardation=3.0))
    with pytest.raises(InputError, match="after"):
        Timeline.single(col).then(2 * YEAR, remove_source()).then(YEAR, remove_source())


def test_depleting_source_keeps_its_clock_across_an_action():
    """A boundary schedule is on the run's clock: a no-op amendment at 3 yr must not
    restart an exponentially depleting source.  Checked against the independent mpmath
    Laplace solution of the same column without stages (tests/reference.py, exact
    transform of A e^{-r t}: Abramowitz & Stegun 1964, 29.3.8)."""
    from transport.model.schedules import Schedule
    from transport.solvers.timeline import amend_layer
    from reference import laplace_reference

    year = 365.25 * 86400.0
    layers = (Layer(1.0, 0.3, 1e-9, 2.0, name="a"), Layer(1.0, 0.3, 2e-9, 1.5, name="b"))
    top = Boundary("concentration", 0.0,
                   schedule=Schedule.depletion(1.0, math.log(2) / (2 * year)))
    col = Column(layers, top, Boundary("free-outflow"))
    tl = Timeline.single(col).then(3 * year, amend_layer("b"))
    t = np.array([4.0, 8.0]) * year
    z = np.array([0.25, 0.5, 1.0])
    got = solve_timeline(tl, t, z, tolerance=1e-8).concentration
    ref = laplace_reference(col, z, t, dps=25)
    assert np.abs(got - ref).max() <= 1e-8
