"""Regression tests of the cases where the default engine once printed impossible
numbers: each is now right (against the independent mpmath Laplace solution of
tests/reference.py, Talbot inversion after Abate & Valko 2004) or refused.

Maximum principle (Protter & Weinberger 1967, ch. 3): without sources, C stays between
the extremes of its initial and boundary values; the mass budget closes exactly.
"""
import math

import numpy as np
import pytest

from transport.solvers.checks import UnreliableResultError, concentration_bounds
from transport.solvers.engines import solve_column
from transport.model.column import Boundary, Column, InitialState, Layer
from transport.model.schedules import Schedule
from transport.solvers.timeline import Timeline, place_cap, solve_timeline

from reference import laplace_reference_full

YEAR = 365.25 * 86400.0


def _two_layers(flux_m_per_yr, top=None, bottom=None):
    """Two layers (0.4 m + 1.1 m), dispersivity 1 cm: column Peclet number ~ 150 at
    0.5 m/yr (invented properties)."""
    v = abs(flux_m_per_yr) / YEAR
    lay = (Layer(0.4, 0.40, 1e-9 * 0.4 + 0.01 * v / 0.40, 1.8, name="upper"),
           Layer(1.1, 0.35, 1e-9 * 0.35 + 0.01 * v / 0.35, 1.4, name="lower"))
    return Column(lay, top or Boundary("concentration", 0.01),
                  bottom or Boundary("free-outflow"), darcy_flux=flux_m_per_yr / YEAR)


def _check_against_reference(sol, col, times, depths, tol, initial=None):
    ref = laplace_reference_full(col, depths, times, initial, dps=20)
    for name, got, want in (("concentration", sol.concentration, ref.concentration),
                            ("total_flux", sol.total_flux, ref.total_flux),
                            ("cumulative_mass", sol.cumulative_mass, ref.cumulative_mass)):
        err = np.abs(got - want).max(axis=1)
        assert np.all(err <= sol.error[name] + 4 * np.finfo(float).eps * np.abs(want).max()), name
        assert np.all(err <= tol * sol.scale[name]), name
    for key in ("stored", "entered_top", "left_bottom"):
        err = np.abs(sol.budget[key] - ref.budget[key])
        assert np.all(err <= tol * sol.scale["budget"]), key


def test_two_layer_advective_cumulative_mass_is_finite_and_right():
    """Issue case 6: 0.5 m/yr downward through 0.4 m + 1.1 m printed 3.5e70 mg/m2 and
    an infinite cumulative mass; now within 1e-8 of the reference."""
    col = _two_layers(0.5)
    t = np.array([0.3, 2.0, 20.0, 50.0]) * YEAR
    z = np.array([0.0, 0.4, 1.0, 1.5])
    sol = solve_column(col, t, z)
    assert sol.reliable.all() and np.all(np.isfinite(sol.cumulative_mass))
    _check_against_reference(sol, col, t, z, 1e-8)


@pytest.mark.parametrize("flux", [-1.0, 0.5])
def test_depleting_source_peak_is_physical(flux):
    """Issue case 1: a depleting top source (half-life 6 yr) under flow printed a peak
    8,500 times the source and negative concentrations; now C stays within [0, source]
    and matches the reference (downward and upward flow)."""
    top = Boundary("concentration", 0.0,
                   schedule=Schedule.depletion(0.018, math.log(2) / (6 * YEAR)))
    bottom = Boundary("free-outflow") if flux > 0 else Boundary("concentration", 0.0)
    col = _two_layers(flux, top=top, bottom=bottom)
    t = np.array([0.5, 3.0, 12.0, 40.0]) * YEAR
    z = np.array([0.0, 0.4, 1.0, 1.5])
    sol = solve_column(col, t, z)
    assert sol.concentration.min() >= 0.0 and sol.concentration.max() <= 0.018
    _check_against_reference(sol, col, t, z, 1e-8)


def test_cap_over_depleting_source_has_no_negative_concentration():
    """Issue case 2: a cap placed at 3 yr over a depleting source gave -132 kg/m3; the
    staged run now stays within its bounds and its budget closes to the tolerance at
    every output time, and before the cap it equals the reference."""
    top = Boundary("concentration", 0.0,
                   schedule=Schedule.depletion(0.018, math.log(2) / (6 * YEAR)))
    col = _two_layers(0.15, top=top)
    cap = Layer(0.3, 0.40, 2e-10, 3.0, name="cap")
    tl = Timeline.single(col).then(3 * YEAR, place_cap([cap], Boundary("sealed")))
    t = np.array([1.0, 2.0, 5.0, 20.0]) * YEAR
    z = np.array([0.0, 0.4, 1.0, 1.5])
    sol = solve_timeline(tl, t, z)
    assert sol.reliable.all()
    assert np.nanmin(sol.concentration) >= 0.0 and np.nanmax(sol.concentration) <= 0.018
    b = sol.budget
    largest = np.max(np.abs([b[k] for k in ("stored", "entered_top", "left_bottom")]), axis=0)
    assert np.all(np.abs(b["residual"]) <= 1e-8 * largest + 1e-15)
    before = t < 3 * YEAR
    ref = laplace_reference_full(col, z, t[before], dps=20)
    assert np.abs(sol.concentration[before] - ref.concentration).max() <= 1e-8 * 0.018


def test_refusal_names_times_and_quantities():
    """Asking for more than double precision can give (1e-14 of the scale at column
    Peclet ~150) is refused, not answered; with on_unreliable="flag" the refused times
    are NaN and flagged."""
    col = _two_layers(0.5)
    t = np.array([0.05, 1.0, 30.0]) * YEAR
    z = np.array([0.0, 0.7, 1.5])
    with pytest.raises(UnreliableResultError) as err:
        solve_column(col, t, z, tolerance=1e-14)
    assert err.value.times and "tolerance 1e-14" in str(err.value)
    sol = solve_column(col, t, z, tolerance=1e-14, on_unreliable="flag")
    bad = ~sol.reliable
    assert bad.any() and np.all(np.isnan(sol.concentration[bad]))


def test_bounds_follow_the_physics_of_each_end():
    """An inlet top with a sealed bottom under downward flow piles mass up above the
    inlet value (no upper bound); with free outflow the inlet value bounds C."""
    inlet = Boundary("inlet", 1.0)
    piled = concentration_bounds(_two_layers(0.5, top=inlet, bottom=Boundary("sealed")),
                                 None, YEAR)
    assert piled.hi is None
    free = concentration_bounds(_two_layers(0.5, top=inlet), None, YEAR)
    assert free.lo == 0.0 and free.hi == 1.0
    profile = InitialState.profile([0.0, 0.7, 0.7, 1.5], [0.2, 0.2, 3.0, 3.0])
    b = concentration_bounds(_two_layers(0.5), profile, YEAR)
    assert b.hi == 3.0 and b.lo == 0.0


def test_lower_bound_zero_holds_where_water_leaves_through_a_held_flux_end():
    """Upward flow out of a sealed top piles solute up under it (no upper bound), but C
    stays >= 0: the negative part of C cannot grow when no end withdraws solute at a
    prescribed rate (Evans 2010, PDE, sec. 7.1, section from memory; energy method,
    here in L1).  An inlet that water leaves through holds F = q C_in < 0: it withdraws
    solute at a fixed rate and C goes negative, so no lower bound is claimed.  Both
    against the independent mpmath Laplace solution (tests/reference.py)."""
    up = _two_layers(-0.5, top=Boundary("sealed"), bottom=Boundary("concentration", 0.01))
    b = concentration_bounds(up, None, YEAR)
    assert b.lo == 0.0 and b.hi is None and b.lo_needs_nonnegative_start
    t = np.array([0.05, 1.0, 10.0]) * YEAR
    z = np.linspace(0.0, 1.5, 16)
    ref = laplace_reference_full(up, z, t, None, dps=20)
    assert ref.concentration.min() >= -1e-15 * ref.concentration.max()
    assert ref.concentration[-1, 0] > 0.01  # piled up above the bottom value
    sol = solve_column(up, t, z)
    assert sol.reliable.all() and sol.concentration.min() >= 0.0
    _check_against_reference(sol, up, t, z, 1e-8)

    drawn = _two_layers(-0.5, top=Boundary("inlet", 0.01),
                        bottom=Boundary("concentration", 0.0))
    assert concentration_bounds(drawn, None, YEAR).lo is None
    ref = laplace_reference_full(drawn, z, t[1:], None, dps=20)
    assert ref.concentration.min() < -1e-4  # withdrawn below zero: a bound would be false
    negative = InitialState.uniform([-0.01, 0.0])
    assert concentration_bounds(up, negative, YEAR).lo is None


def test_refusal_names_what_each_engine_failed_when_no_single_engine_vouches():
    """Each quantity vouched for by some engine, but no engine for all of them: the
    message must say which engine failed which quantity (it once said "()")."""
    from transport.solvers.checks import Choice, describe_refusal

    nt = 2
    ok, bad = np.array([1e-12, 1e-12]), np.array([1e-12, 5e-8])
    scale = {q: 1.0 for q in ("concentration", "total_flux", "cumulative_mass", "budget")}
    per = {"modal": {"concentration": ok, "total_flux": ok, "cumulative_mass": bad,
                     "budget": ok},
           "laplace": {"concentration": ok, "total_flux": bad, "cumulative_mass": ok,
                       "budget": ok}}
    choice = Choice(engine=np.array(["modal", ""], dtype=object),
                    error={q: ok.copy() for q in scale},
                    reliable=np.array([True, False]),
                    failed={q: np.zeros(nt, bool) for q in scale}, scale=scale,
                    by_candidate=per)
    text = describe_refusal(np.array([1.0, 2.0]) * 3.15576e7, choice, 1e-8, "modal and laplace")
    assert "no single engine vouches for every quantity" in text
    assert "modal: cumulative mass error up to 5e-08" in text
    assert "laplace: total flux error up to 5e-08" in text
    assert "2 yr" in text and "()" not in text


@pytest.mark.parametrize("cell", ["Pe1000up-one-inlet/free-outflow-deplete-1-clean",
                                  "Pe1000up-thin-concentration/concentration-table-uniform",
                                  "Pe1000dn-contrast-inlet/mass-transfer-step-off-clean"])
def test_no_numpy_arithmetic_warning_reaches_the_user(cell):
    """At column Peclet number 1000 the shots of exponentially small modes overflow, an
    event the engines handle; numpy's "overflow encountered in multiply" once reached
    the command line as a warning saying nothing about the results.  The checked entry
    point raises none, and returns its checked numbers (finite, reliable; their accuracy
    against the mpmath reference is tests/test_regime_matrix.py's, the same cells) or
    refuses."""
    import warnings

    from test_regime_matrix import CELLS, build
    col, times, depths, init = build(next(c for c in CELLS if c.name == cell))
    with warnings.catch_warnings():
        warnings.simplefilter("error", RuntimeWarning)
        try:
            sol = solve_column(col, times, depths, initial=init)
        except UnreliableResultError:
            return
    assert sol.reliable.all()
    for q in ("concentration", "total_flux", "cumulative_mass"):
        assert np.all(np.isfinite(getattr(sol, q)))


def test_an_inlet_without_flow_is_a_sealed_end():
    """Without flow an inlet holds F = q C_in = 0: a sealed end, so the maximum principle
    bounds C and its scale is the data's (once no bound was set, the scale fell to the
    largest output, 5e-6 after 35 years of decay, and a 1e-13 error was refused).  A
    uniformly contaminated column sealed at both ends only decays: C = C0 e^{-mu t},
    the exact solution of dC/dt = -mu C (first-order decay, common practice), here within
    1e-12 of C0 (invented layers).  The bounds [0, 1] are the data's range (maximum
    principle, Protter & Weinberger 1967, ch. 3)."""
    lay = (Layer(0.1, 0.39, 6.6e-10, 1.0, decay_rate=1e-8),
           Layer(0.1, 0.43, 2.8e-11, 1.5, decay_rate=1e-8),
           Layer(1.0, 0.42, 1.9e-11, 20.0, decay_rate=1e-8))
    col = Column(lay, Boundary("free-outflow"), Boundary("inlet", 1.0), darcy_flux=0.0)
    init = InitialState.uniform([0.3, 0.3, 0.3])
    b = concentration_bounds(col, init, YEAR)
    assert b.lo == 0.0 and b.hi == 1.0
    t = np.array([34.9, 1743.0]) * YEAR
    z = np.array([0.0, 0.3, 0.6, 1.2])
    sol = solve_column(col, t, z, initial=init)
    assert sol.reliable.all()
    exact = 0.3 * np.exp(-1e-8 * t)[:, None] * np.ones(z.size)
    assert np.all(np.abs(sol.concentration - exact) <= 1e-12 * 0.3)


def test_late_mass_of_an_advective_column_is_measured_against_its_own_size():
    """Column Peclet number about 300, downward flow through three layers with a thin
    slow one (5 cm, D 1e-11 m2/s), a constant top: at 100 yr about 142 kg/m2 has passed
    1 m (q C t, a mass balance of the steady throughflow; common practice), while the
    column holds about 1 kg/m2. The modal series gives no cumulative mass
    here (NaN), and the scale of the check was taken where both engines had a value
    (min over candidates), so it fell to the column's holding (0.98 kg/m2) and the
    Laplace engine's bound of 1.2e-8 kg/m2 on 142 kg/m2 (8e-11 relative) refused the
    time. Where one candidate has no value, the other's sets the scale, as for an
    engine alone: the time is served, and every quantity matches the mpmath reference
    (tests/reference.py, Talbot inversion after Abate & Valko 2004) within the error it
    states; the budget closes to the tolerance of its own scale."""
    lay = (Layer(0.6, 0.3, 8e-10, 2.0), Layer(0.05, 0.45, 1e-11, 5.0, 1e-9),
           Layer(1.35, 0.25, 1e-9, 1.5))
    col = Column(lay, Boundary("concentration", 1.0), Boundary("free-outflow"),
                 300 * 0.3e-9 / 2.0)
    times = np.array([60.0, 100.0]) * YEAR
    sol = solve_column(col, times, [1.0])
    assert sol.reliable.all()
    assert sol.scale["cumulative_mass"] > 100.0  # its own size, not the holding
    assert sol.cumulative_mass[-1, 0] > 100.0
    _check_against_reference(sol, col, times, [1.0], sol.tolerance)
    terms = [abs(float(np.asarray(v)[-1])) for k, v in sol.budget.items() if k != "residual"]
    assert abs(float(np.asarray(sol.budget["residual"])[-1])) <= sol.tolerance * max(terms)
