"""Time-varying boundaries and sources in the finite-volume engine, and the state the
engines report at the very instant of a change.

Check values come from outside the engine under test: the mpmath Laplace-domain
solution of tests/reference.py (an independent method; the transform of each schedule
atom is a standard pair, Abramowitz & Stegun 1964, table 29.3), the modal engine (an
independent method), and arithmetic closed forms (mass produced by a source that is on
for a known time).  Layer data are invented test inputs.
"""
from __future__ import annotations

import math
import warnings

import numpy as np
import pytest

from reference import laplace_reference
from transport.solvers.modal import series as modal
from transport.solvers.engines import solve_column
from transport.solvers.fv.engine import solve_fv, solve_fv_result
from transport.solvers.laplace import solve_laplace
from transport.model.column import Boundary, Column, Layer
from transport.model.schedules import Schedule

YEAR = 3.15576e7  # s, Julian year (IAU)
T = np.array([1.0, 3.0, 3.5, 6.0, 12.0]) * YEAR  # 3 yr: a change time of every schedule
Z = np.linspace(0.0, 1.0, 21)

SCHEDULES = {
    "source removed at 3 yr": Schedule.steps([0.0, 3 * YEAR], [1.0, 0.0]),
    "depletion, 2 yr half-life, from 3 yr": (Schedule.steps([0.0, 3 * YEAR], [1.0, 0.0])
                                             + Schedule.depletion(1.0, math.log(2) / (2 * YEAR),
                                                                  start=3 * YEAR)),
    "leachate record (table)": Schedule.table([0.0, 1 * YEAR, 3 * YEAR], [0.0, 1.0, 0.2]),
}


def _column(schedule):
    return Column((Layer(0.4, 0.35, 6e-10, 2.0, 1e-9), Layer(0.6, 0.45, 1e-10, 3.0)),
                  Boundary("concentration", 0.0, schedule=schedule),
                  Boundary("free-outflow"), darcy_flux=1e-10)


@pytest.mark.parametrize("name", list(SCHEDULES))
def test_fv_scheduled_top_converges_to_the_laplace_solution(name):
    """FV with a scheduled top value against the mpmath Laplace solution (Talbot, 25
    digits): the error falls at least 2.5x per mesh doubling (second order; measured
    orders 1.5-2.5) and is below 2e-4 of the source at 80 cells per layer (measured
    0.6e-4 to 1.1e-4).  The modal and the project's Laplace engine agree with the same
    reference to 1e-9, including at t = 3 yr, the change time itself."""
    col = _column(SCHEDULES[name])
    ref = laplace_reference(col, Z, T, dps=25)
    errs = [float(np.max(np.abs(solve_fv(col, T, Z, cells_per_layer=n).concentration - ref)))
            for n in (20, 40, 80)]
    assert errs[0] > 2.5 * errs[1] and errs[1] > 2.5 * errs[2], errs
    assert errs[2] < 2e-4, errs
    assert np.max(np.abs(modal.solve(col, T, Z).concentration - ref)) < 1e-9
    assert np.max(np.abs(solve_laplace(col, T, Z).concentration - ref)) < 1e-9


def test_fv_engine_is_selectable_for_scheduled_columns():
    """engine="finite-volume" takes a scheduled column (it used to refuse it) and agrees
    with the modal engine within its discretisation error (2e-4 at 80 cells, above)."""
    col = _column(SCHEDULES["source removed at 3 yr"])
    fv = solve_column(col, T, Z, engine="finite-volume", cells_per_layer=80)
    mo = solve_column(col, T, Z, engine="modal")
    assert np.max(np.abs(fv.concentration - mo.concentration)) < 2e-4


def _source_column(schedule, isotherm_r=2.0):
    lay = Layer(0.5, 0.4, 3e-10, isotherm_r, 0.0, source_rate=1e-9, source_schedule=schedule)
    return Column((Layer(0.3, 0.35, 5e-10, 1.5), lay, Layer(0.4, 0.45, 1e-10, 3.0)),
                  Boundary("concentration", 0.0), Boundary("free-outflow"),
                  darcy_flux=2e-10)


def test_fv_scheduled_source_budget_and_modal_agreement():
    """A layer source switched off at 3 yr: the mass produced is rate x thickness x time
    on (arithmetic), the FV budget closes to 1e-10 of it, and the concentrations
    converge to the modal engine's at second order (measured 6.0e-4, 1.4e-4, 3.2e-5 of
    the peak at 40, 80, 160 cells per layer)."""
    sched = Schedule.steps([0.0, 3 * YEAR], [1.0, 0.0])
    col = _source_column(sched)
    sol = solve_fv_result(col, T, Z, cells_per_layer=80)
    expected = 1e-9 * 0.5 * np.minimum(T, 3 * YEAR)
    np.testing.assert_allclose(sol.budget["produced"], expected, rtol=1e-12)
    assert np.max(np.abs(sol.budget["residual"])) < 1e-10 * expected.max()
    mo = modal.solve(col, T, Z)
    peak = np.max(np.abs(mo.concentration))
    err80 = np.max(np.abs(sol.concentration - mo.concentration)) / peak
    err40 = np.max(np.abs(solve_fv(col, T, Z, cells_per_layer=40).concentration
                          - mo.concentration)) / peak
    assert err80 < 2e-4 and err40 > 3.0 * err80, (err40, err80)


def test_nonlinear_sorption_with_a_source_removal():
    """Freundlich (1906) with n = 1 under a scheduled top value is the linear discrete
    system (same mesh: agreement to the integrator tolerance), and a Langmuir (1918)
    layer under the same schedule keeps its mass budget to 1e-8 of the mass entered."""
    sched = SCHEDULES["source removed at 3 yr"]
    rho, kf, theta = 1600.0, 2e-4, 0.35
    top = Boundary("concentration", 0.0, schedule=sched)
    lin = Column((Layer(1.0, theta, 6e-10, 1 + rho * kf / theta),), top,
                 Boundary("free-outflow"), darcy_flux=1e-10)
    non = Column((Layer(1.0, theta, 6e-10, 1.0),), top, Boundary("free-outflow"),
                 darcy_flux=1e-10)
    fre = {"kind": "freundlich", "coefficient": kf, "exponent": 1.0, "bulk_density": rho}
    a = solve_fv(lin, T, Z, cells_per_layer=40).concentration
    b = solve_fv(non, T, Z, cells_per_layer=40, isotherm=fre).concentration
    assert np.max(np.abs(a - b)) < 1e-7
    lang = {"kind": "langmuir", "capacity": 5e-4, "affinity": 2.0, "bulk_density": rho}
    sol = solve_fv_result(non, T, Z, cells_per_layer=40, isotherm=lang)
    scale = np.max(np.abs(sol.budget["entered_top"]))
    assert np.max(np.abs(sol.budget["residual"])) < 1e-8 * scale
    # after the removal the top layer releases mass back through the top face
    assert sol.budget["entered_top"][-1] < sol.budget["entered_top"][2]


@pytest.mark.parametrize("name", list(SCHEDULES))
def test_modal_state_is_continuous_at_a_change_time(name):
    """Identity: inside the column concentration and cumulative mass are continuous in
    time, so at a change time the modal engine reports the state just before the change
    (what the Laplace-domain solution gives there, by causality): C and the cumulative
    mass at t0 equal their values at t0 (1 - 1e-12) to 1e-10 of their scale."""
    col = _column(SCHEDULES[name])
    t0 = 3 * YEAR
    z = np.concatenate([[0.0], Z[1:]])
    with warnings.catch_warnings():
        warnings.simplefilter("error")  # both times resolved: no mode-cap warning
        sol = modal.solve(col, np.array([t0 * (1 - 1e-12), t0, 1.5 * t0]), z)
    c, m = sol.concentration, sol.cumulative_mass
    assert np.max(np.abs(c[1] - c[0])) < 1e-10 * np.max(np.abs(c))
    assert np.max(np.abs(m[1] - m[0])) < 1e-10 * np.max(np.abs(m))


@pytest.mark.parametrize("name", ["source removed at 3 yr", "leachate record (table)"])
def test_fv_estimate_bounds_error_under_a_schedule(name):
    """The default estimated run under a scheduled top value (restarts at 1 and 3 yr,
    outputs at and just after the change) against the mpmath Laplace solution of
    tests/reference.py: actual <= estimate at every time, and both below 1e-3 of the
    source value."""
    col = _column(SCHEDULES[name])
    t = np.array([1.0, 3.0, 3.05, 6.0]) * YEAR
    ref = laplace_reference(col, Z, t, dps=20)
    sol = solve_fv_result(col, t, Z)
    act = np.max(np.abs(sol.concentration - ref), axis=1)
    assert np.all(act <= sol.error_estimate), (act, sol.error_estimate)
    assert np.all(sol.error_estimate <= 1e-3)
