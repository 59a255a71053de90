"""Columns whose concentration cannot fall in time, and the Monte Carlo shortcut that
rests on it (:mod:`transport.solvers.monotone`).

Claim (comparison principle; Protter & Weinberger 1967, *Maximum Principles in
Differential Equations*, ch. 3): a clean column with data constant in time that only
put solute in has C(z, t) nondecreasing in t at every depth.  Checked here against an
independent solver: the layered column solved in the Laplace domain with mpmath and
inverted by Talbot's rule (``tests/reference.py``; Talbot 1979, Abate & Valko 2004,
IJNME 60:979), over column Peclet numbers 0 to about 100, both flow directions and the
boundary kinds, and shown to fail for the columns the rule leaves out (a depleting
source zone, a source switched off).  The columns are invented test inputs, not check
values.
"""
from __future__ import annotations

import math
from types import SimpleNamespace

import numpy as np
import pytest

from reference import laplace_reference
from transport.model.column import Boundary, Column, InitialState, Layer
from transport.model.schedules import Schedule
from transport.site import boring as site_boring
from transport.site import laplace_checks as site_checks
from transport.site.boring import _Probe, realization_metrics
from transport.solvers.modal.series import build_series
from transport.solvers.monotone import nondecreasing_in_time

YEAR = 365.25 * 86400.0
C0 = 0.04  # kg m-3


def _layers(mu=1e-8, source=0.0):
    return (Layer(0.8, 0.3, 2e-9, 2.0, decay_rate=mu),
            Layer(0.4, 0.45, 3e-10, 6.0, decay_rate=mu, source_rate=source),
            Layer(0.8, 0.25, 1.5e-9, 1.5, decay_rate=mu))


def _col(top, bottom, q_m_yr=0.0, mu=1e-8, source=0.0):
    return Column(_layers(mu, source), top, bottom, q_m_yr / YEAR)


# (name, column, rises): the classification the rule must give
CASES = {
    "diffusion, fixed top": (_col(Boundary("concentration", C0),
                                  Boundary("concentration", 0.0)), True),
    "downward Pe ~100, free outflow": (_col(Boundary("concentration", C0),
                                           Boundary("free-outflow"), 0.5), True),
    "upward flow, sealed top": (_col(Boundary("sealed"), Boundary("concentration", C0),
                                     -0.3), True),
    "top flux into a sealed column": (_col(Boundary("flux", 1e-12),
                                           Boundary("sealed")), True),
    "mass transfer, upward outflow": (_col(Boundary("mass-transfer", C0,
                                                    transfer_coefficient=1e-9),
                                           Boundary("inlet", 0.0), -0.05), True),
    "layer source, sealed ends": (_col(Boundary("sealed"), Boundary("sealed"),
                                       source=1e-12), True),
    "source zone (depleting)": (_col(Boundary("source-zone", C0, capacity=0.05),
                                     Boundary("free-outflow"), 0.5), False),
    "source switched off at 5 yr": (_col(Boundary("concentration", C0, schedule=
                                                  Schedule.steps([0.0, 5 * YEAR],
                                                                 [1.0, 0.0])),
                                         Boundary("free-outflow"), 0.5), False),
}


def test_the_rule_leaves_out_what_it_cannot_vouch_for():
    """False for every input the argument does not cover (common practice: the
    comparison principle needs data constant in time, a clean start that is a
    subsolution, and positivity)."""
    col = CASES["diffusion, fixed top"][0]
    assert nondecreasing_in_time(col) and nondecreasing_in_time(col, InitialState.clean())
    assert not nondecreasing_in_time(col, InitialState.uniform([C0, 0.0, 0.0]))
    assert not nondecreasing_in_time(_col(Boundary("concentration", -C0),
                                          Boundary("free-outflow"), 0.5))
    assert not nondecreasing_in_time(_col(Boundary("flux", -1e-12), Boundary("sealed")))
    assert not nondecreasing_in_time(_col(Boundary("sealed"), Boundary("flux", 1e-12)))
    assert not nondecreasing_in_time(_col(Boundary("sealed"), Boundary("sealed"),
                                          source=-1e-12))
    # an inlet that water leaves with C_in > 0 withdraws solute (no positivity)
    assert not nondecreasing_in_time(_col(Boundary("concentration", 0.0),
                                          Boundary("inlet", C0), 0.3))
    for name, (column, rises) in CASES.items():
        assert nondecreasing_in_time(column) is rises, name


@pytest.mark.parametrize("name", list(CASES))
def test_rising_columns_never_fall_and_the_others_do(name):
    """The mpmath reference at 3 depths and 12 times from 0.05 to 60 yr: nondecreasing
    (to 1e-12 of C0, the reference's own precision at dps 20) where the rule says so;
    the two columns it leaves out do fall somewhere (so the rule is not vacuous)."""
    column, rises = CASES[name]
    times = np.geomspace(0.05, 60.0, 12) * YEAR
    depths = [0.5, 1.1, 1.9]
    c = laplace_reference(column, depths, times, dps=20)
    drops = np.diff(c, axis=0).min()
    if rises:
        assert drops >= -1e-12 * C0
        assert c[-1].max() > 1e-6 * C0  # something arrived: the check is not on zeros
    else:
        assert drops < -1e-6 * C0


YARD = dict(water_content=0.22, diffusivity=5.4e-9, retardation=3.0, decay_rate=1.1e-8)


def _yard(q):
    """Five layers as the benchmark yard's borings (tests/test_site_receptor.py)."""
    clay = dict(water_content=0.46, diffusivity=6.6e-10, retardation=5.9, decay_rate=1.1e-8)
    return Column(layers=(Layer(0.87, 0.24, 3.4e-9, 3.6, decay_rate=1.1e-8),
                          Layer(1.194, **YARD), Layer(1.2, **clay), Layer(0.87, **YARD),
                          Layer(1.186, **clay)),
                  top=Boundary("concentration", C0), bottom=Boundary("free-outflow"),
                  darcy_flux=q / YEAR)


def test_a_rising_realization_skips_the_early_laplace_scan(monkeypatch, modal_read):
    """A plume that has not arrived by the end of the design life (q = 0.2 m/yr): the
    early modal samples are far below the level but not below half the later ones, so
    a column that might fall needs the Laplace engine for them; a rising one does not
    (its peak is the end of the life).  The Laplace engine is then asked only for the
    check at the peak, and the peak is the mpmath reference at 50 yr within twice the
    tolerance."""
    tol, life, depth = 1e-8, 50 * YEAR, 4.32
    times = np.geomspace(1.0, 100.0, 25) * YEAR
    col, level = _yard(0.2), 0.5 * C0
    assert nondecreasing_in_time(col)
    probe = _Probe(build_series(col, None, times[0], tol, masses=False), [depth])
    t_modal, scan = site_boring.modal_scan(probe, times[0], life, tol, C0, level)
    assert t_modal > times[0] and scan is None  # the case needs the shortcut
    assert site_boring.modal_scan(probe, times[0], life, tol, C0, level, True)[1] is not None
    asked = []
    real = site_checks.laplace_concentration

    real_lone = site_checks.laplace_lone_times

    def counting(col_, t, z, **kw):
        asked.append(np.atleast_1d(t).size)
        return real(col_, t, z, **kw)

    def counting_lone(col_, t, z, **kw):  # the checks: each time on its own contours
        asked.append(1)
        return real_lone(col_, t, z, **kw)
    monkeypatch.setattr(site_checks, "laplace_concentration", counting)
    monkeypatch.setattr(site_checks, "laplace_lone_times", counting_lone)
    site = SimpleNamespace(tolerance=tol, design_life=life, screening_level=level)
    bt, pk, _ = realization_metrics(site, col, depth, times[0], times)
    assert asked and max(asked) <= 2
    ref = laplace_reference(col, [depth], [life], dps=20)[0, 0]
    assert math.isnan(bt) and abs(pk - ref) <= 2 * tol * C0
    assert ref > 1e-3 * tol * C0  # the peak is not zero: the check has something to see


# column Peclet number q L / (theta D) of the layers in series: 0, ~60 upward, ~300 down
REGIMES = {
    "diffusion": _col(Boundary("concentration", C0), Boundary("concentration", 0.0)),
    "upward, sealed top": _col(Boundary("sealed"), Boundary("concentration", C0), -0.3),
    "downward Pe ~300": Column(tuple(Layer(lay.thickness, lay.water_content, 2e-10,
                                           lay.retardation, decay_rate=1e-9)
                                     for lay in _layers()),
                               Boundary("concentration", C0), Boundary("free-outflow"),
                               0.3 / YEAR),
}


@pytest.mark.parametrize("name", list(REGIMES))
def test_rising_realizations_match_the_reference(name):
    """Breakthrough and peak of rising Monte Carlo columns across flow regimes, with the
    peak read at the end of the life: C(breakthrough) is the level and the peak is
    C(50 yr) of the mpmath reference within twice the tolerance, and no reference
    sample of the life lies above the peak (the rule's premise, checked again)."""
    col, tol, life = REGIMES[name], 1e-8, 50 * YEAR
    depth = 0.4 if col.darcy_flux < 0 else 1.6  # away from the source: a rise to see
    assert nondecreasing_in_time(col)
    times = np.geomspace(0.5, 100.0, 25) * YEAR
    grid = np.geomspace(0.5, 50.0, 8) * YEAR
    at_life = laplace_reference(col, [depth], [life], dps=20)[0, 0]
    level = 0.3 * at_life
    site = SimpleNamespace(tolerance=tol, design_life=life, screening_level=level)
    bt, pk, _ = realization_metrics(site, col, depth, times[0], times)
    ref = laplace_reference(col, [depth], np.concatenate([[bt], grid]), dps=20)[:, 0]
    assert times[0] < bt < life  # crossed inside the window, not at its first sample
    assert abs(ref[0] - level) <= 2 * tol * C0
    assert abs(pk - at_life) <= 2 * tol * C0
    assert ref[1:].max() <= pk + 2 * tol * C0


@pytest.mark.parametrize("name", ["diffusion", "downward Pe ~300"])
def test_a_rising_realization_below_the_level_is_read_on_the_laplace_engine_alone(
        name, monkeypatch):
    """A rising column whose curve ends below the level (the level at twice C(50 yr)),
    its C bounded by the data (the source concentration):
    no breakthrough, and the peak is C(50 yr) of the mpmath reference within twice the
    tolerance, read without modes or a series: the Laplace engine is asked once, at the
    end of the life. The modal curve read in full (the shortcut turned off) agrees
    within twice the tolerance."""
    col, tol, life = REGIMES[name], 1e-8, 50 * YEAR
    depth = 0.4 if col.darcy_flux < 0 else 1.6
    times = np.geomspace(0.5, 100.0, 25) * YEAR
    at_life = laplace_reference(col, [depth], [life], dps=20)[0, 0]
    site = SimpleNamespace(tolerance=tol, design_life=life, screening_level=2 * at_life)
    asked = []
    real_lone = site_checks.laplace_lone_times

    def counting_lone(col_, t, z, **kw):
        asked.append(np.atleast_1d(t).tolist())
        return real_lone(col_, t, z, **kw)

    def no_series(*args, **kwargs):
        raise AssertionError("a modal series was built")
    monkeypatch.setattr(site_checks, "laplace_lone_times", counting_lone)
    monkeypatch.setattr(site_boring, "site_series", no_series)
    bt, pk, notes = realization_metrics(site, col, depth, times[0], times)
    assert math.isnan(bt) and notes == ()
    assert asked == [[life]]
    assert abs(pk - at_life) <= 2 * tol * C0
    assert at_life > 1e-3 * tol * C0  # a peak to see
    monkeypatch.undo()
    monkeypatch.setattr(site_boring, "stays_below", lambda *args, **kwargs: None)
    bt_modal, pk_modal, _ = realization_metrics(site, col, depth, times[0], times)
    assert math.isnan(bt_modal) and abs(pk_modal - pk) <= 2 * tol * C0


def test_the_laplace_alone_reading_declines_what_it_cannot_settle(monkeypatch):
    """:func:`stays_below` reads only a curve that cannot fall and ends below the level
    by more than the Laplace engine's own bound there; it declines (None: the curve is
    then read in full) a level below C(50 yr) (a crossing to find), a level at the
    Laplace value itself, a source switched off at 5 yr (the curve may fall), a column
    whose data bound no scale of C (``concentration_bounds`` gives none for upward
    flow against a sealed top) and a Laplace bound above the tolerance times the scale (made so after
    the solve). The one it reads is C(50 yr) of the mpmath reference within twice the
    tolerance."""
    col, tol, life, depth = REGIMES["diffusion"], 1e-8, 50 * YEAR, 1.6
    t0 = 0.5 * YEAR
    at_life = laplace_reference(col, [depth], [life], dps=20)[0, 0]
    read = site_checks.stays_below(col, None, depth, t0, life, 2 * at_life, tol)
    assert math.isnan(read[0]) and abs(read[1] - at_life) <= 2 * tol * C0
    assert site_checks.stays_below(col, None, depth, t0, life, 0.5 * at_life, tol) is None
    c, e = site_checks.laplace_lone_times(col, [life], depth)
    assert site_checks.stays_below(col, None, depth, t0, life, float(c[0]), tol) is None
    off = Column(col.layers, Boundary("concentration", C0, schedule=Schedule.steps(
        [0.0, 5 * YEAR], [1.0, 0.0])), col.bottom, col.darcy_flux)
    assert site_checks.stays_below(off, None, depth, t0, life, 2 * at_life, tol) is None
    assert site_checks.stays_below(REGIMES["upward, sealed top"], None, 0.4, t0, life,
                                   2 * at_life, tol) is None
    real_lone = site_checks.laplace_lone_times
    monkeypatch.setattr(site_checks, "laplace_lone_times", lambda *a, **k: (
        real_lone(*a, **k)[0], np.full(1, 2 * tol * C0)))
    assert site_checks.stays_below(col, None, depth, t0, life, 2 * at_life, tol) is None
