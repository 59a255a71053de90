"""The receptor curve between output times right after a signal changes.

The modal series is sized for the gaps from each signal change to the output times
(and vouched for there by the Laplace engine); between a change and the first output
time after it the truncated sum rings: before this was handled, a top concentration
switched off at 8 yr read, between the output times 5 and 20 yr, up to 7.7e5 times
the source concentration at 4.32 m in an advective column (Peclet ~50), and 0.1-7 times
it in slower ones; after a source removal in a staged run, up to 0.09 of it. The curve
is now the Laplace engine's there (``resolved`` of the modal and the staged series).

Reference (outside the code under test): the layered column solved in the Laplace
domain with mpmath and inverted by Talbot's rule (``tests/reference.py``; Talbot 1979,
Abate & Valko 2004, IJNME 60:979). The columns are invented test inputs, not check
values.
"""
from __future__ import annotations

import math
from types import SimpleNamespace

import numpy as np
import pytest

from reference import laplace_reference
from test_site_receptor import DEPTH, SCALE, TOL, YEAR, column
from transport.analysis.metrics import receptor_metrics
from transport.model.column import Boundary, Column, Layer
from transport.model.schedules import Schedule
from transport.site.boring import solve_boring
from transport.solvers.engines import solve_column
from transport.solvers.timeline import Timeline, remove_source, solve_timeline

TIMES = np.array([1.0, 5.0, 20.0, 40.0]) * YEAR  # sparse: 12 yr from the change to 20 yr
AFTER = 8 + np.array([0.05, 0.2, 0.5, 1.0, 2.0, 5.0, 11.9])  # yr


def switched_off(q):
    """The five-layer yard column, its top concentration switched off at 8 yr."""
    base = column(q)
    off = Schedule.steps([0.0, 8 * YEAR], [1.0, 0.0])
    return Column(layers=base.layers, top=Boundary("concentration", SCALE, schedule=off),
                  bottom=base.bottom, darcy_flux=base.darcy_flux)


@pytest.mark.parametrize("q", [0.0, 0.05, 0.15])
@pytest.mark.parametrize("depth", [1.0, DEPTH])
def test_the_curve_after_a_change_matches_the_reference(q, depth):
    """solve_column's C(t) at one depth between the output times after the switch:
    within the tolerance of the scale of the mpmath reference, with the modal series
    serving the output times on both sides (so the case is the one that rang)."""
    col = switched_off(q)
    sol = solve_column(col, TIMES, [0.0, depth])
    assert list(sol.engine_by_time[1:3]) == ["modal", "modal"]
    t = AFTER * YEAR
    ref = laplace_reference(col, [depth], t, dps=20)[:, 0]
    assert np.abs(sol.concentration_at(depth, t) - ref).max() <= TOL * SCALE


def test_a_boring_peak_just_after_the_switch_matches_the_reference():
    """A site boring whose receptor keeps rising for a while after its source is
    switched off (q = 0.15 m/yr, receptor 1 m deep): the peak lies between the switch
    and the next output time; its concentration is the mpmath reference's largest
    value over a fine grid around it (within twice the tolerance), and the reference at
    the reported peak time equals the peak."""
    col, depth = switched_off(0.15), 1.0
    site = SimpleNamespace(tolerance=TOL, design_life=30 * YEAR,
                           screening_level=1e-3 * SCALE)
    grid = np.array([0.0, 0.5, depth])
    out = solve_boring(site, col, depth, TIMES, grid)
    bt, pk_t, pk = out[3][:3]
    assert 8 * YEAR < pk_t < 20 * YEAR  # the peak lies in the window that rang
    fine = np.linspace(max(8.0, pk_t / YEAR - 1.0), pk_t / YEAR + 1.0, 21) * YEAR
    ref = laplace_reference(col, [depth], np.append(fine, pk_t), dps=20)[:, 0]
    assert abs(ref[-1] - pk) <= 2 * TOL * SCALE
    assert ref[:-1].max() <= pk + 2 * TOL * SCALE
    assert math.isfinite(bt)


def _three_layers(top, peclet):
    """Fill, clay, sand (2.7 m) at the column Peclet number sum q l / (theta D)."""
    layers = (Layer(0.8, 0.3, 5e-10, 2.0), Layer(0.4, 0.45, 1e-10, 6.0),
              Layer(1.5, 0.25, 8e-10, 1.5))
    q = peclet / sum(lay.thickness / (lay.water_content * lay.diffusivity) for lay in layers)
    return Column(layers=layers, top=top, bottom=Boundary("free-outflow"), darcy_flux=q)


@pytest.mark.parametrize("peclet", [0.0, 10.0])
@pytest.mark.parametrize("depth", [0.5, 2.0])
def test_the_curve_after_a_remedy_matches_the_reference(peclet, depth):
    """A staged run (the source removed at 8 yr): C(t) between the output times after
    the removal, where the new stage's series rang (0.09 of the source before this was
    handled), within the tolerance of the source (1 kg/m3) of the mpmath reference of
    the same column with the source as a step-off schedule (one clock, no hand-over)."""
    tl = Timeline.single(_three_layers(Boundary("concentration", 1.0), peclet)).then(
        8 * YEAR, remove_source())
    sol = solve_timeline(tl, TIMES, [0.0, depth], tolerance=TOL)
    assert list(sol.engine_by_time) == ["modal"] * TIMES.size
    step = Boundary("concentration", schedule=Schedule.steps([0.0, 8 * YEAR], [1.0, 0.0]))
    t = AFTER * YEAR
    ref = laplace_reference(_three_layers(step, peclet), [depth], t, dps=20)[:, 0]
    assert np.abs(sol.concentration_at(depth, t) - ref).max() <= TOL * 1.0


def _assert_peak(col, depth, pk_t, pk, scale):
    """The reported peak against the mpmath reference: the reference at the peak time
    equals the peak, and no reference sample of a fine grid 1 yr either side lies
    above it (each within twice the tolerance of the scale)."""
    fine = np.linspace(max(8.0, pk_t / YEAR - 1.0), pk_t / YEAR + 1.0, 21) * YEAR
    ref = laplace_reference(col, [depth], np.append(fine, pk_t), dps=20)[:, 0]
    assert abs(ref[-1] - pk) <= 2 * TOL * scale
    assert ref[:-1].max() <= pk + 2 * TOL * scale


def test_a_run_metric_peak_in_the_window_once_skipped_matches_the_reference():
    """The receptor metrics of a single-column run (``receptor_metrics``, what ``run``
    prints): the peak 1 m deep lies 0.86 yr after the switch-off at 8 yr, inside the
    window that the metrics used to skip (the series' tail bound, 0.91 yr); it is now
    read on the curve served there by the Laplace engine, and it is the mpmath
    reference's peak."""
    col, depth = switched_off(0.15), 1.0
    sol = solve_column(col, TIMES, [0.0, depth])
    m = receptor_metrics(sol, depth, 1e-3 * SCALE, 30 * YEAR)
    skipped = sol.series.resolved_after(TOL)
    assert 8 * YEAR < m.peak_time < 8 * YEAR + skipped  # where the old scan never looked
    _assert_peak(col, depth, m.peak_time, m.peak_concentration, SCALE)


def test_a_staged_run_metric_peak_after_the_removal_matches_the_reference():
    """A staged run whose receptor (0.5 m, column Peclet number 10) peaks 2.7 yr after
    the source is removed at 8 yr, between the output times 5 and 20 yr: the metrics'
    peak is that of the mpmath reference of the same column with a step-off source."""
    tl = Timeline.single(_three_layers(Boundary("concentration", 1.0), 10.0)).then(
        8 * YEAR, remove_source())
    sol = solve_timeline(tl, TIMES, [0.0, 0.5], tolerance=TOL)
    m = receptor_metrics(sol, 0.5, 1e-3, 40 * YEAR)
    assert 8 * YEAR < m.peak_time < 20 * YEAR
    step = Boundary("concentration", schedule=Schedule.steps([0.0, 8 * YEAR], [1.0, 0.0]))
    _assert_peak(_three_layers(step, 10.0), 0.5, m.peak_time, m.peak_concentration, 1.0)
