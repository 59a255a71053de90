"""Receptor metrics on the continuous solution vs brute-force sampling and closed forms."""
import numpy as np
import pytest
from scipy.special import erfcinv

from transport.analysis.metrics import receptor_metrics
from transport.solvers.modal.series import solve
from transport.model.column import Boundary, Column, Layer
from transport.solvers.timeline import Timeline, remove_source, solve_timeline

YEAR = 365.25 * 86400.0


def _column():
    return Column(layers=(Layer(0.5, 0.35, 6e-10, 2.0), Layer(0.4, 0.45, 8e-11, 5.0),
                          Layer(1.1, 0.3, 7e-10, 1.5)),
                  top=Boundary("concentration", 1.0), bottom=Boundary("free-outflow"),
                  darcy_flux=0.01 / YEAR)


def _slow_middle_column():
    """Three layers with a slow, decaying middle one under a constant top, sealed
    bottom, no flow (the metric tests below)."""
    return Column((Layer(0.6, 0.3, 8e-10, 2.0, 0.0), Layer(0.5, 0.45, 2e-10, 5.0, 1e-9),
                   Layer(0.9, 0.25, 1e-9, 1.5, 0.0)), Boundary("concentration", 1.0),
                  Boundary("sealed"), 0.0)


def _dense_first_crossing(conc_at, z, level, t0, t1):
    """Brute force: 200001 samples, then linear interpolation inside the first interval."""
    t = np.linspace(t0, t1, 200001)
    c = conc_at(z, t)
    i = int(np.flatnonzero(c >= level)[0])
    return t[i - 1] + (level - c[i - 1]) * (t[i] - t[i - 1]) / (c[i] - c[i - 1])


def test_breakthrough_matches_dense_sampling():
    """First exceedance by root finding equals brute-force dense sampling to 1e-6 relative
    (the issue's criterion; the sampling's own error is ~1e-9 here)."""
    col = _column()
    sol = solve(col, np.array([0.5, 100.0]) * YEAR, [1.5])
    m = receptor_metrics(sol, 1.5, screening_level=0.01, horizon=100 * YEAR)
    ref = _dense_first_crossing(sol.concentration_at, 1.5, 0.01, 0.5 * YEAR, 100 * YEAR)
    assert m.first_exceedance == pytest.approx(ref, rel=1e-6)


def test_breakthrough_matches_erfc_inversion():
    """Half-space (deep column, early times): C/C0 = erfc(z / (2 sqrt(kappa t))) (Crank
    1975, eq. 2.45, number from memory) inverts to t = z^2 / (4 kappa erfcinv(c)^2)."""
    D, R = 1e-9, 2.0
    col = Column(layers=(Layer(30.0, 0.4, D, R),), top=Boundary("concentration", 1.0),
                 bottom=Boundary("concentration", 0.0))
    z, level = 0.5, 0.05
    t_exact = z ** 2 / (4 * (D / R) * erfcinv(level) ** 2)
    sol = solve(col, np.array([0.1, 30.0]) * YEAR, [z])
    m = receptor_metrics(sol, z, screening_level=level, horizon=30 * YEAR)
    assert m.first_exceedance == pytest.approx(t_exact, rel=1e-7)


def test_never_breaks_through_says_so():
    """A level above the source concentration is never reached: None, not a number."""
    sol = solve(_column(), np.array([1.0, 50.0]) * YEAR, [1.5])
    m = receptor_metrics(sol, 1.5, screening_level=2.0, horizon=50 * YEAR)
    assert m.first_exceedance is None and m.stays_below_level and m.time_above_level == 0


def test_pulse_time_above_and_peak_match_dense_sampling():
    """Source removed at 5 yr: the receptor sees a pulse; peak and time above the level
    agree with dense sampling (1e-4 relative, the sampling resolution). An output time
    soon after the removal (5.5 yr) lets the modal series serve the pulse: before the
    first output time after a change the curve is the staged Laplace engine's, and
    40,001 samples of it take minutes."""
    tl = Timeline.single(_column()).then(5 * YEAR, remove_source())
    sol = solve_timeline(tl, np.array([0.5, 5.5, 200.0]) * YEAR, [1.0])
    m = receptor_metrics(sol, 1.0, screening_level=0.02, horizon=200 * YEAR)
    t = np.linspace(0.5 * YEAR, 200 * YEAR, 40001)
    c = sol.concentration_at(1.0, t)
    assert m.peak_concentration == pytest.approx(c.max(), rel=1e-6)
    assert m.peak_concentration >= c.max()
    dt = t[1] - t[0]
    assert m.time_above_level == pytest.approx(np.sum(c >= 0.02) * dt, rel=2e-3)


def test_cumulative_mass_is_the_time_integral_of_the_flux():
    """Cumulative mass between the earliest resolved time and the horizon equals the
    quadrature of the total flux in time (scipy.integrate.quad on the continuous flux)."""
    from scipy.integrate import quad
    sol = solve(_column(), np.array([1.0, 30.0]) * YEAR, [1.5])
    m = receptor_metrics(sol, 1.5, screening_level=0.01, horizon=30 * YEAR)
    f = lambda s: float(sol.series.total_flux(np.array([1.5]), np.array([s]))[0, 0])  # noqa
    ref, _ = quad(f, 1.0 * YEAR, 30 * YEAR, limit=400, epsrel=1e-11)
    early = sol.series.cumulative_mass(np.array([1.5]), np.array([1.0 * YEAR]))[0, 0]
    assert m.cumulative_mass - early == pytest.approx(ref, rel=1e-8)


def test_time_to_95_percent_of_steady_state():
    """The reported time is where |C - C_ss| = 0.05 C_ss for the last time (dense check)."""
    sol = solve(_column(), np.array([1.0, 300.0]) * YEAR, [1.5])
    m = receptor_metrics(sol, 1.5, horizon=300 * YEAR)
    c = sol.concentration_at(1.5, np.array([m.time_to_95_percent_steady]))[0]
    assert abs(c - m.steady_concentration) == pytest.approx(0.05 * m.steady_concentration,
                                                            rel=1e-6)
    later = sol.concentration_at(1.5, np.linspace(m.time_to_95_percent_steady * 1.001,
                                                  600 * YEAR, 500))
    assert np.all(np.abs(later - m.steady_concentration) < 0.05 * m.steady_concentration)


# ------------------------------------------------- design life and whole run (Ogata-Banks)
def _ogata_banks_case():
    """A homogeneous 10 m column, C0 = 1 held at the top (invented values): pore velocity
    0.125 m/yr, dispersion 0.0125 m2/yr; the front reaches the 1 m receptor around 8 yr,
    so over a 5 yr design life and a 20 yr run the concentration is still rising at the
    end of both windows. The bottom 10 m down is more than ten spreads below the front
    at 20 yr, so the semi-infinite solution holds to well below the tolerance."""
    from transport.verify.closed_forms import first_type_inlet

    v, d, theta = 0.125 / YEAR, 0.0125 / YEAR, 0.4
    col = Column(layers=(Layer(10.0, theta, d, 1.0),), top=Boundary("concentration", 1.0),
                 bottom=Boundary("free-outflow"), darcy_flux=v * theta)
    sol = solve(col, np.array([0.25, 20.0]) * YEAR, [1.0])

    def exact(t):
        return float(first_type_inlet([1.0], [t], v, d)[0, 0])
    return sol, exact, v, d, theta


def test_whole_run_metrics_match_ogata_banks_with_peak_after_design_life():
    """Ogata & Banks (1961), USGS Prof. Paper 411-A, eq. 20 (first-type inlet, clean
    semi-infinite column; transport.verify.closed_forms.first_type_inlet):

    * both windows end while C still rises, so each peak is C at the window's end and
      the design-life view flags the peak as lying after the design life;
    * first exceedance: the root of the closed form minus the level (brentq);
    * time above the level: end of the run minus that root (C rises monotonically);
    * cumulative mass through the receptor: the mass below it at the end of the run,
      theta * integral of the closed form from 1 m down (scipy quad; a clean column
      gains below z only what crosses z)."""
    from scipy.integrate import quad
    from scipy.optimize import brentq

    from transport.analysis.metrics import receptor_views
    from transport.verify.closed_forms import first_type_inlet

    sol, exact, v, d, theta = _ogata_banks_case()
    level, life, end = 0.05, 5 * YEAR, 20 * YEAR
    views = receptor_views(sol, 1.0, level, design_life=life)
    design, run = views.design_life, views.whole_run
    assert run.horizon == end and design.horizon == life
    t_first = brentq(lambda t: exact(t) - level, 0.5 * YEAR, life, xtol=1e-6, rtol=1e-13)
    for m in (design, run):
        assert m.peak_time == pytest.approx(m.horizon, rel=1e-9)
        assert m.peak_concentration == pytest.approx(exact(m.horizon), rel=1e-6)
        assert m.first_exceedance == pytest.approx(t_first, rel=1e-7)
        assert m.time_above_level == pytest.approx(m.horizon - t_first, rel=1e-7)
        assert m.trend_at_end == "rising" and m.peak_beyond_horizon
    assert views.peak_after_design_life
    assert run.peak_concentration > 5 * design.peak_concentration
    below, _ = quad(lambda z: float(first_type_inlet([z], [end], v, d)[0, 0]), 1.0, 10.0,
                    epsabs=1e-13, limit=200)
    assert run.cumulative_mass == pytest.approx(theta * below, rel=1e-6)


def test_peak_inside_the_window_is_not_flagged():
    """Source removed at 5 yr (the pulse of test_pulse_time_above_and_peak_match_dense_
    sampling): over 100 yr the peak lies inside the window and C falls at its end, so
    neither view flags a peak beyond it; a window ending on the rising limb does.
    Criterion: the sign of C(t_end) - C(t_end - step) against brute-force sampling."""
    from transport.analysis.metrics import receptor_views

    tl = Timeline.single(_column()).then(5 * YEAR, remove_source())
    # (an output time soon after the removal: see the pulse test)
    sol = solve_timeline(tl, np.array([0.5, 5.5, 100.0]) * YEAR, [1.5])
    t = np.linspace(0.5, 100.0, 4001) * YEAR
    c = sol.concentration_at(1.5, t)
    t_peak = t[int(np.argmax(c))]
    views = receptor_views(sol, 1.5, 0.01, design_life=0.5 * t_peak, run_end=100 * YEAR)
    assert views.whole_run.trend_at_end == "falling"
    assert not views.whole_run.peak_beyond_horizon
    assert views.design_life.trend_at_end == "rising" and views.peak_after_design_life


def test_a_crossing_before_the_earliest_output_time_is_resolved_or_flagged():
    """No flow, three layers, a constant top concentration; receptor 0.3 m, level 0.37
    of the source, output times from 11.4 yr. Per the mpmath reference
    (tests/reference.py; Talbot 1979, Abate & Valko 2004) C crosses the level near
    4.4 yr, before the earliest output time. A checked run reads its curve from the
    release on (the Laplace engine before the earliest output time): the crossing is
    found (C there equals the level per the reference) and not flagged. A modal series
    alone is sized for the output times only: its window starts at 11.4 yr, and its
    first exceedance, that time, is flagged (exceeded_at_start), as it is in the NetCDF
    flag and the comparison table."""
    from reference import laplace_reference
    from transport.analysis.compare import _at_start
    from transport.analysis.metrics import receptor_views
    from transport.io.netcdf_metrics import metric_variables
    from transport.solvers.engines import solve_column

    year = 365.25 * 86400
    col = _slow_middle_column()
    level, depth = 0.37, 0.3
    late = np.array([11.4, 40.0, 100.0]) * year
    ref = laplace_reference(col, [depth], np.array([2.0, 11.4]) * year, dps=20)[:, 0]
    assert ref[0] < level < ref[1]  # the case: the crossing lies before 11.4 yr
    checked = receptor_views(solve_column(col, late, [depth]), depth, level)
    m = checked.whole_run
    assert m.window_start == 0.0 and 2.0 * year < m.first_exceedance < late[0]
    assert not m.exceeded_at_start and _at_start(m) == "no"
    c_cross = laplace_reference(col, [depth], [m.first_exceedance], dps=20)[0, 0]
    assert abs(c_cross - level) <= 2e-8  # the resolved crossing, per the reference
    variables = metric_variables(checked)
    assert variables["exceedance_at_metrics_start_whole_run"][1] == 0
    assert variables["metrics_start"][1] == 0.0
    alone = receptor_views(solve(col, late, [depth]), depth, level).whole_run
    assert alone.first_exceedance == alone.window_start == late[0]
    assert alone.exceeded_at_start and _at_start(alone) == "yes"
    flagged = metric_variables(receptor_views(solve(col, late, [depth]), depth, level))
    assert flagged["exceedance_at_metrics_start_whole_run"][1] == 1
    assert flagged["metrics_start"][1] == pytest.approx(11.4 * 365.25)


def test_a_peak_before_the_earliest_output_time_is_found():
    """A depleting source zone over three layers with downward flow; receptor 0.3 m,
    output times from 30 yr. The receptor peaks within the first years, long before
    the earliest output time; the peak read there (C at 30 yr) was 175 x too low. A
    checked run reads the curve from the release: its peak time and value are checked
    against the mpmath reference (tests/reference.py; Talbot 1979, Abate & Valko
    2004): C at the peak equals the reference within the tolerance, and C a little
    before and after it is lower per the reference."""
    from reference import laplace_reference
    from transport.model.column import Boundary, Column, Layer
    from transport.solvers.engines import solve_column

    col = Column((Layer(0.2, 0.3, 1e-9, 2.0), Layer(0.3, 0.45, 2e-10, 4.0),
                  Layer(1.5, 0.25, 1e-9, 1.5)),
                 Boundary("source-zone", 1.0, capacity=0.05, decay_rate=0.0),
                 Boundary("free-outflow"), 0.05 / YEAR)
    depth = 0.3
    times = np.array([30.0, 60.0, 100.0]) * YEAR
    sol = solve_column(col, times, [depth])
    m = receptor_metrics(sol, depth, None, times[-1])
    at_start = laplace_reference(col, [depth], [times[0]], dps=20)[0, 0]
    assert m.window_start == 0.0 and m.peak_time < times[0]
    assert m.peak_concentration > 10 * at_start  # the case: the start value is far off
    t = np.array([0.97, 1.0, 1.03]) * m.peak_time
    ref = laplace_reference(col, [depth], t, dps=20)[:, 0]
    assert abs(m.peak_concentration - ref[1]) <= 1e-8 * 1.0  # tolerance x the zone's C0
    assert ref[0] < ref[1] and ref[2] < ref[1]


@pytest.mark.parametrize("peclet, q", [(100, 0.5), (1000, 5.0), (300, -1.0)])
def test_a_plateau_at_the_source_concentration_is_not_reported_above_it(peclet, q):
    """Two layers, column Peclet number 100 to 1000, downward and upward flow, a
    constant concentration of 1 at the inflow end, no decay: the receptor rises to the
    source concentration and stays there. No concentration can exceed the largest
    boundary value (the maximum principle of parabolic equations; Protter & Weinberger
    1967, *Maximum Principles in Differential Equations*, ch. 3, from memory), but the
    scan's largest sample on the plateau lay above it by rounding (up to 2.8e-10 at
    Peclet 1000, the end value 1.6e-10; a Monte Carlo realization 1.6e-10). The peak and
    end values are now moved onto the bound within their error bound, as the fields
    are; they still equal the mpmath reference (tests/reference.py; Talbot 1979, Abate
    & Valko 2004) at the end of the run within twice the tolerance. Single-column
    metrics, a site's deterministic boring and a Monte Carlo realization."""
    from types import SimpleNamespace

    from reference import advection_guard_digits, laplace_reference
    from transport.analysis.metrics import receptor_views
    from transport.site.boring import realization_metrics, solve_boring
    from transport.solvers.engines import solve_column

    theta, length = 0.3, 2.0
    d = abs(q) / YEAR * length / (theta * peclet)
    inflow, outflow = Boundary("concentration", 1.0), Boundary("free-outflow")
    col = Column((Layer(1.0, theta, d, 1.5), Layer(1.0, theta, d, 3.0)),
                 inflow if q > 0 else outflow, outflow if q > 0 else inflow, q / YEAR)
    z = 1.5 if q > 0 else 0.5
    times = np.array([20.0, 40.0, 100.0]) * YEAR
    views = receptor_views(solve_column(col, times, [z]), z, 0.5, design_life=50 * YEAR)
    site = SimpleNamespace(tolerance=1e-8, design_life=50 * YEAR, screening_level=0.5)
    *_, det, _ = solve_boring(site, col, z, times, np.linspace(0.0, length, 5))
    mc = realization_metrics(site, col, z, times[0], times)[1]
    peaks = [views.design_life.peak_concentration, views.whole_run.peak_concentration,
             views.whole_run.end_concentration, det[2], det[12], mc]
    assert max(peaks) <= 1.0
    ref = laplace_reference(col, [z], [times[-1]],
                            dps=20 + advection_guard_digits(col))[0, 0]
    assert abs(views.whole_run.end_concentration - ref) <= 2e-8
    assert min(peaks) >= ref - 2e-8


def test_a_metric_read_on_the_laplace_curve_is_vouched_by_its_own_bound(inflate_own_errors):
    """The column of the test above (crossing near 4.4 yr, output times from 11.4 yr):
    the crossing is read where the Laplace engine serves the curve, so the run checks
    that engine's own error bound there. Its bound at the crossing is the bound
    solve_laplace reports at that time, and within the tolerance times the scale of C;
    C there equals the level per the mpmath reference (tests/reference.py; Talbot 1979,
    Abate & Valko 2004). The check can fail: with the Laplace engine's bounds made
    1e9 x larger after the solve, the metric is refused (naming the first exceedance
    and its time), never printed; the peak, read at the last output time where the
    modal series serves the curve, is not."""
    from reference import laplace_reference
    from transport.analysis.metrics import vouch_read_times
    from transport.solvers import engines
    from transport.solvers.checks import UnreliableResultError, own_errors
    from transport.solvers.engines import solve_column
    from transport.solvers.laplace import solve_laplace

    col = _slow_middle_column()
    level, depth = 0.37, 0.3
    late = np.array([11.4, 40.0, 100.0]) * YEAR
    sol = solve_column(col, late, [depth])
    m = receptor_metrics(sol, depth, level)
    t_cross = m.first_exceedance
    assert t_cross < late[0]
    bound = sol.evaluator.laplace_bound(depth, [t_cross, late[-1]])
    lap = solve_laplace(col, [t_cross], [depth])
    assert bound[0] == pytest.approx(own_errors(lap)["concentration"][0], rel=1e-12)
    limit = sol.tolerance * sol.scale["concentration"]
    assert 0 < bound[0] <= limit
    assert bound[1] == 0.0  # the modal series serves the last output time
    c_ref = laplace_reference(col, [depth], [t_cross], dps=20)[0, 0]
    assert abs(c_ref - level) <= 2 * limit

    inflate_own_errors(engines, 1e9)
    with pytest.raises(UnreliableResultError, match="first exceedance at 0.3 m"):
        receptor_metrics(sol, depth, level)
    # the peak of this rising curve lies at the end, where the series serves
    vouch_read_times(sol, depth, limit, (("peak", late[-1]),))


def test_a_staged_metric_read_on_the_laplace_curve_is_vouched_by_its_own_bound(
        inflate_own_errors):
    """The column above with its source removed at 6 yr (a staged run), output times
    from 11.4 yr: the crossing (stage one) and the peak of the pulse (stage two) are both
    read on the staged Laplace engine's curve. Its bound there (the stage's inversion
    bound plus the hand-over's carried error) is within the tolerance times the scale
    of C, and C at both times equals the mpmath reference of the same column with a
    stepped top (tests/reference.py; Talbot 1979, Abate & Valko 2004) within 2 x that
    limit. With the staged engine's own bounds made 1e9 x larger after the solve, the
    run refuses the metric, naming it; the peak alone is refused too."""
    from reference import laplace_reference
    from transport.analysis.metrics import vouch_read_times
    from transport.model.schedules import Schedule
    from transport.solvers import staged
    from transport.solvers.checks import UnreliableResultError

    col = _slow_middle_column()
    layers = col.layers
    level, depth, removal = 0.37, 0.3, 6.0 * YEAR
    late = np.array([11.4, 40.0, 100.0]) * YEAR
    sol = solve_timeline(Timeline.single(col).then(removal, remove_source()), late, [depth])
    m = receptor_metrics(sol, depth, level)
    t_cross, t_peak = m.first_exceedance, m.peak_time
    assert t_cross < removal < t_peak < late[0]
    bound = sol.evaluator.laplace_bound(depth, [t_cross, t_peak, late[-1]])
    limit = sol.tolerance * sol.scale["concentration"]
    assert 0 < bound[0] <= limit and 0 < bound[1] <= limit
    assert bound[2] == 0.0  # the modal stages serve the last output time
    pulse = Column(layers, Boundary("concentration", 1.0, schedule=Schedule.steps(
        [0.0, removal], [1.0, 0.0])), Boundary("sealed"), 0.0)
    ref = laplace_reference(pulse, [depth], [t_cross, t_peak], dps=20)[:, 0]
    assert abs(ref[0] - level) <= 2 * limit
    assert abs(ref[1] - m.peak_concentration) <= 2 * limit

    inflate_own_errors(staged, 1e9)
    with pytest.raises(UnreliableResultError, match="first exceedance at 0.3 m"):
        receptor_metrics(sol, depth, level)
    with pytest.raises(UnreliableResultError, match="peak at 0.3 m"):
        vouch_read_times(sol, depth, limit, (("peak", t_peak),))


def test_a_finite_volume_metric_read_between_output_times_is_cross_checked(
        inflate_own_errors):
    """The column of the tests above on the finite-volume engine (tolerance 1e-4),
    output times from 11.4 yr: the crossing near 4.4 yr is read on the finite-volume
    curve, away from the cross-checked output times. Its bound there is the
    distance of the finite-volume value from solve_laplace's plus that engine's own
    estimate (computed here independently), within the tolerance times the scale of
    C; C there equals the level per the mpmath reference (tests/reference.py; Talbot
    1979, Abate & Valko 2004) within 2 x that limit. With the Laplace engine's bounds
    made 1e12 x larger after the solve, the metric is refused."""
    from reference import laplace_reference
    from transport.solvers import engines
    from transport.solvers.checks import UnreliableResultError, own_errors
    from transport.solvers.engines import solve_column
    from transport.solvers.laplace import solve_laplace

    col = _slow_middle_column()
    level, depth = 0.37, 0.3
    late = np.array([11.4, 40.0, 100.0]) * YEAR
    sol = solve_column(col, late, [depth], engine="finite-volume", tolerance=1e-4)
    m = receptor_metrics(sol, depth, level)
    t_cross = m.first_exceedance
    assert t_cross < late[0]
    bound = sol.evaluator.laplace_bound(depth, [t_cross])[0]
    lap = solve_laplace(col, [t_cross], [depth])
    fv_c = sol.concentration_at(depth, [t_cross])[0]
    want = abs(fv_c - lap.concentration[0, 0]) + own_errors(lap)["concentration"][0]
    assert bound == pytest.approx(want, rel=1e-6)
    limit = sol.tolerance * sol.scale["concentration"]
    assert 0 < bound <= limit
    c_ref = laplace_reference(col, [depth], [t_cross], dps=20)[0, 0]
    assert abs(c_ref - level) <= 2 * limit

    inflate_own_errors(engines, 1e12)
    with pytest.raises(UnreliableResultError, match="first exceedance at 0.3 m"):
        receptor_metrics(sol, depth, level)
