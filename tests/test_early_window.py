"""Receptor metrics read from the release (time 0), not from the earliest output time.

A site's receptor curve is the modal series only from the earliest output time on (the
series is sized for the output times); before it the Laplace engine serves it. Where the
screening level is crossed, or the curve peaks, before the earliest output time, the
site reported the earliest output time as the breakthrough and C there as the peak (a
later crossing and a lower peak than the curve's). These columns put both before the
earliest output time (30 yr here), for a deterministic boring (``solve_boring``) and a
Monte Carlo realization (``realization_metrics``).

Reference (outside the code under test): the layered column solved in the Laplace
domain with mpmath and inverted by Talbot's rule (``tests/reference.py``,
``laplace_reference``; Talbot 1979, Abate & Valko 2004, IJNME 60:979). The columns are
invented test inputs, not check values.
"""
from __future__ import annotations

from types import SimpleNamespace

import numpy as np
import pytest

from reference import laplace_reference
from transport.model.column import Boundary, Column, Layer
from transport.model.schedules import Schedule
from transport.site.boring import realization_metrics, solve_boring

YEAR = 365.25 * 86400.0
TOL = 1e-8
LIFE = 50 * YEAR
TIMES = np.array([30.0, 40.0, 60.0, 100.0]) * YEAR
DEPTH = 0.3
LAYERS = (Layer(0.6, 0.3, 8e-10, 2.0), Layer(0.5, 0.45, 2e-10, 5.0, 1e-9),
          Layer(0.9, 0.25, 1e-9, 1.5))


def _site(level):
    return SimpleNamespace(tolerance=TOL, design_life=LIFE, screening_level=level)


def _rising():
    """A constant top concentration of 1 over a clean column, 0.02 m/yr downward."""
    return Column(LAYERS, Boundary("concentration", 1.0), Boundary("free-outflow"),
                  0.02 / YEAR)


def _pulse():
    """A 2 yr release of concentration 1 at the top, then clean water; no flow."""
    top = Boundary("concentration", 0.0,
                   schedule=Schedule.steps([0.0, 2.0 * YEAR], [1.0, 0.0]))
    return Column(LAYERS, top, Boundary("free-outflow"), 0.0)


def _ref(col, t):
    return laplace_reference(col, [DEPTH], np.atleast_1d(t), dps=20)[:, 0]


def test_a_crossing_before_the_earliest_output_time_is_resolved():
    """Rising column, level 0.5: per the reference C is below the level at 1 yr and
    above it at 30 yr. The deterministic boring and the realization both put the
    breakthrough where C equals the level (reference, within twice the tolerance), well
    before 30 yr; the curve stays above the level from then on (under constant inputs a
    clean column's concentration cannot fall in time: the comparison principle of
    parabolic equations, Protter & Weinberger 1967, ch. 3, from memory), so the time
    above the level within the design life is the life less the crossing."""
    col, level = _rising(), 0.5
    below, above = _ref(col, [1.0 * YEAR, TIMES[0]])
    assert below < level < above  # the case
    grid = np.linspace(0.0, 2.0, 11)
    *_, metrics, _ = solve_boring(_site(level), col, DEPTH, TIMES, grid)
    bt, time_above = metrics[0], metrics[7]
    assert 1.0 * YEAR < bt < TIMES[0]
    assert abs(_ref(col, bt)[0] - level) <= 2 * TOL
    assert time_above == pytest.approx(LIFE - bt, rel=1e-9)
    bt_mc, pk_mc, _ = realization_metrics(_site(level), col, DEPTH, TIMES[0], TIMES)
    assert abs(_ref(col, bt_mc)[0] - level) <= 2 * TOL
    assert bt_mc == pytest.approx(bt, rel=1e-8)


def test_a_peak_before_the_earliest_output_time_is_found():
    """A 2 yr pulse, level 0.05: the receptor peaks a few years after the release and
    has fallen far by 30 yr. The peak and its time, the first crossing and the time
    above the level (one excursion: it ends where C falls back to the level) are
    checked against the reference, for the boring and the realization."""
    col, level = _pulse(), 0.05
    grid = np.linspace(0.0, 2.0, 11)
    *_, metrics, _ = solve_boring(_site(level), col, DEPTH, TIMES, grid)
    bt, pk_t, pk, time_above = metrics[0], metrics[1], metrics[2], metrics[7]
    at_start = _ref(col, TIMES[0])[0]
    assert pk_t < TIMES[0] and pk > 10 * at_start  # the case: C at 30 yr is far lower
    near = _ref(col, [0.98 * pk_t, pk_t, 1.02 * pk_t])
    assert abs(near[1] - pk) <= 2 * TOL and near[0] < pk and near[2] < pk
    samples = _ref(col, np.geomspace(0.01, 100.0, 40) * YEAR)
    assert samples.max() <= pk + 2 * TOL
    assert bt < pk_t and abs(_ref(col, bt)[0] - level) <= 2 * TOL
    assert samples[-1] < level  # one excursion above the level, ended by 100 yr
    assert abs(_ref(col, bt + time_above)[0] - level) <= 2 * TOL
    bt_mc, pk_mc, _ = realization_metrics(_site(level), col, DEPTH, TIMES[0], TIMES)
    assert abs(pk_mc - pk) <= 2 * TOL and bt_mc == pytest.approx(bt, rel=1e-8)


def test_a_staged_removal_before_the_earliest_output_time():
    """A staged remedy (the source removed at 3 yr; single-column, solve_timeline) read
    from output times that start at 5 yr, column Peclet number about 100, receptor
    1.5 m. Removing a constant top concentration is the same column with its top
    stepped from 1 to 0 at 3 yr, which the mpmath reference solves (tests/reference.py;
    Talbot 1979, Abate & Valko 2004): the first crossing of 0.05 and the peak, both
    before 5 yr, equal the reference within twice the tolerance (before this change
    the run read a crossing at 5 yr and a peak of C at 5 yr, 0.76 where the curve
    reaches 0.99). The mass budget holds no negative stored or decayed mass (every C
    is >= 0: the maximum principle; Protter & Weinberger 1967, ch. 3, from memory;
    rounding left -3.2e-18 kg/m2 stored at 100 yr), and its residual is the sum of its
    terms (the budget identity stored - initial - entered + left + decayed)."""
    from transport.analysis.metrics import receptor_views
    from transport.solvers.checks import budget_residual
    from transport.solvers.timeline import Timeline, remove_source, solve_timeline

    theta, q, length = 0.3, 0.5, 2.0
    d = q / YEAR * length / (theta * 100)
    layers = (Layer(1.0, theta, d, 1.5), Layer(0.3, 0.45, d / 5, 4.0),
              Layer(0.7, theta, d, 2.0, 1e-9))
    col = Column(layers, Boundary("concentration", 1.0), Boundary("free-outflow"),
                 q / YEAR)
    times = np.array([0.0, 5.0, 10.0, 20.0, 40.0, 100.0]) * YEAR
    sol = solve_timeline(Timeline.single(col).then(3 * YEAR, remove_source()), times,
                         np.linspace(0.0, length, 41))
    m = receptor_views(sol, 1.5, 0.05, design_life=LIFE).whole_run
    assert m.window_start == 0.0 and m.peak_time < times[1]
    stepped = Column(layers, Boundary("concentration", 0.0, schedule=Schedule.steps(
        [0.0, 3 * YEAR], [1.0, 0.0])), Boundary("free-outflow"), q / YEAR)
    ref = laplace_reference(stepped, [1.5], [m.first_exceedance, m.peak_time,
                                             times[1]], dps=30)[:, 0]
    assert abs(ref[0] - 0.05) <= 2 * TOL and abs(ref[1] - m.peak_concentration) <= 2 * TOL
    assert ref[2] < m.peak_concentration - 0.1  # the case: C at 5 yr is far lower
    assert np.all(sol.budget["stored"] >= 0) and np.all(sol.budget["decayed"] >= 0)
    res, big = budget_residual(sol.budget)
    np.testing.assert_allclose(np.abs(sol.budget["residual"]), res, rtol=0,
                               atol=1e-15 * big.max())
    assert np.all(res <= TOL * big)


def test_a_boring_metric_read_on_the_laplace_curve_is_vouched_by_its_own_bound(monkeypatch):
    """The 2 yr pulse: the deterministic boring's crossing and peak lie before the
    earliest output time, where the Laplace engine serves the receptor curve, so the
    boring checks that engine's own error bound there. The peak matches the mpmath
    reference (tests/reference.py; Talbot 1979, Abate & Valko 2004) within twice the
    tolerance of the pulse's concentration, 1. The check can fail:
    with the Laplace engine's bounds made 1e9 x larger (its values left as they are),
    the boring is refused, naming the first metric read there (the breakthrough) and its
    time, instead of written."""
    from transport.site import laplace_checks
    from transport.solvers.checks import UnreliableResultError

    col, level = _pulse(), 0.05
    grid = np.linspace(0.0, 2.0, 11)
    *_, metrics, _ = solve_boring(_site(level), col, DEPTH, TIMES, grid)
    pk_t, pk = metrics[1], metrics[2]
    assert pk_t < TIMES[0]
    assert abs(_ref(col, pk_t)[0] - pk) <= 2 * TOL
    real = laplace_checks.laplace_lone_times

    def inflated(*args, **kwargs):
        c, e = real(*args, **kwargs)
        return c, 1e9 * e
    monkeypatch.setattr(laplace_checks, "laplace_lone_times", inflated)
    with pytest.raises(UnreliableResultError, match=r"the breakthrough at the receptor"):
        solve_boring(_site(level), col, DEPTH, TIMES, grid)
