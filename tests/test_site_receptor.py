"""Receptor metrics of advective borings: breakthrough and peak, deterministic and per
Monte Carlo realization, against an independent reference.

In an advective column (column Peclet number ~40-55, as the benchmark yard's borings)
the modal sum cancels to rounding at early times deep in the column: at the first output
time it can show 1e-6 of the scale where the true value is 1e-50. The site reads its
receptor curve from the modal series only from the time its values are vouched for
(agreement with the Laplace engine at the receptor, or the series' own rounding bound
for a realization), and from the Laplace engine before.

Reference (outside the code under test): the layered column solved in the Laplace
domain with mpmath and inverted by Talbot's rule (``tests/reference.py``,
``laplace_reference``; Talbot 1979, Abate & Valko 2004, IJNME 60:979).  The columns
below are invented test inputs, not check values.
"""
from __future__ import annotations

import math
from types import SimpleNamespace

import numpy as np
import pytest

from reference import laplace_reference
from transport.model.column import Boundary, Column, Layer
from transport.model.schedules import Schedule
from transport.site import boring as site_boring
from transport.site import curves as site_curves
from transport.site import laplace_checks as site_checks
from transport.site.boring import realization_metrics, solve_boring
from transport.solvers.modal.series import build_series, earliest_time_after_change
from transport.site.boring import _Probe

YEAR = 365.25 * 86400.0
TOL = 1e-8
SCALE = 0.04  # the top concentration, kg m-3: the largest value the inputs allow
SILT = dict(water_content=0.22, diffusivity=5.4e-9, retardation=3.0, decay_rate=1.1e-8)
CLAY = dict(water_content=0.46, diffusivity=6.6e-10, retardation=5.9, decay_rate=1.1e-8)


def column(q_m_per_yr):
    """Five layers as the benchmark yard's borings (made ground, silt, clay, silt, clay)."""
    return Column(layers=(Layer(0.87, 0.24, 3.4e-9, 3.6, decay_rate=1.1e-8),
                          Layer(1.194, **SILT), Layer(1.2, **CLAY), Layer(0.87, **SILT),
                          Layer(1.186, **CLAY)),
                  top=Boundary("concentration", SCALE), bottom=Boundary("free-outflow"),
                  darcy_flux=q_m_per_yr / YEAR)


TIMES = np.geomspace(1.0, 100.0, 25) * YEAR
LIFE = 50 * YEAR
DEPTH = 4.32


def site(level):
    return SimpleNamespace(tolerance=TOL, design_life=LIFE, screening_level=level)


def _check_metrics(col, bt, pk_t, pk, level):
    """Breakthrough and peak against the mpmath reference: C(bt) = level and C(pk_t) =
    pk within the tolerance, and no reference sample of the window above the peak."""
    grid = np.geomspace(1.0, 50.0, 6) * YEAR
    probe = [t for t in (bt, pk_t) if np.isfinite(t)]
    ref = laplace_reference(col, [DEPTH], np.concatenate([probe, grid]), dps=20)[:, 0]
    if np.isfinite(bt):
        assert abs(ref[0] - level) <= 2 * TOL * SCALE
    assert abs(ref[len(probe) - 1] - pk) <= 2 * TOL * SCALE
    assert ref[len(probe):].max() <= pk + 2 * TOL * SCALE
    return ref


@pytest.mark.parametrize("modal", [False, True], ids=["laplace alone", "modal curve"])
@pytest.mark.parametrize("q", [0.15, 0.2])
def test_realization_peak_of_a_plume_that_never_arrives(q, modal, request):
    """The plume does not reach the receptor within the design life: no breakthrough,
    and the peak is the value at the end of the life (mpmath reference), not the
    modal series' rounding at the first sample (about 1e-6 of the scale there); both
    as the site reads it (the curve cannot fall: the Laplace engine alone at the end of
    the life) and on the modal curve."""
    if modal:
        request.getfixturevalue("modal_read")
    col = column(q)
    level = 0.5 * SCALE
    probe = _Probe(build_series(col, None, TIMES[0], TOL, masses=False), [DEPTH])
    early = probe.concentration(TIMES[:1])[0, 0]
    bt, pk, _ = realization_metrics(site(level), col, DEPTH, TIMES[0], TIMES)
    assert math.isnan(bt)
    ref = laplace_reference(col, [DEPTH], [TIMES[0], LIFE], dps=20)[:, 0]
    assert abs(ref[0]) < 1e-30 * SCALE  # the front is far away at the first output time
    assert abs(pk - ref[1]) <= 2 * TOL * SCALE
    # the case is a hard one: the raw modal value at the first time is off by more than
    # the tolerance (if this ever fails, the column no longer tests the early rounding)
    assert abs(early - ref[0]) > TOL * SCALE


@pytest.mark.parametrize("fraction", [0.2, 0.8])
def test_realization_breakthrough_and_peak_match_the_reference(fraction):
    """A level crossed within the life: the crossing time and the peak against mpmath."""
    col = column(0.4)
    at_life = laplace_reference(col, [DEPTH], [LIFE], dps=20)[0, 0]
    level = fraction * at_life
    bt, pk, _ = realization_metrics(site(level), col, DEPTH, TIMES[0], TIMES)
    assert np.isfinite(bt)
    # the peak time is not returned for a realization: check pk against the reference
    # curve's samples and its value at the end of the life
    ref = _check_metrics(col, bt, LIFE, at_life, level)
    assert pk >= ref.max() - 2 * TOL * SCALE
    assert pk <= max(ref.max(), at_life) + 2 * TOL * SCALE


def test_deterministic_boring_metrics_and_receptor_curve(monkeypatch):
    """solve_boring on an advective column: breakthrough and peak against mpmath, and
    the receptor curve read from the modal series once it is vouched for: at this
    flow (column Peclet number ~140) the raw modal value at the receptor is off by 5e5
    times the scale at 1 yr and agrees with the Laplace engine from about 12 yr on, so
    the Laplace engine is asked for curve samples before 20 yr only, and the modal
    series serves the scan samples from 20 yr to the end of the life."""
    col = column(0.4)
    at_life = laplace_reference(col, [DEPTH], [LIFE], dps=20)[0, 0]
    level = 0.5 * at_life
    grid = np.arange(0.0, 5.4, 0.2)
    asked = []
    real, real_curve = site_boring.solve_laplace, site_checks.laplace_concentration

    def counting(col_, t, z, **kw):
        asked.append(np.atleast_1d(t))
        return real(col_, t, z, **kw)

    def counting_curve(col_, t, z, **kw):
        asked.append(np.atleast_1d(t))
        return real_curve(col_, t, z, **kw)
    monkeypatch.setattr(site_boring, "solve_laplace", counting)
    monkeypatch.setattr(site_checks, "laplace_concentration", counting_curve)
    keep, conc, cum, metrics, notes = solve_boring(site(level), col, DEPTH, TIMES, grid)
    bt, pk_t, pk = metrics[:3]
    _check_metrics(col, bt, pk_t, pk, level)
    # one field check at every output time and the end of the life, then only early
    # samples of the curve
    assert asked[0].size == TIMES.size + 1
    # (not a reference value: the agreement starts at about 12 yr, measured on this
    # column; 20 yr leaves margin, and reading the whole curve from the Laplace engine,
    # as before this change, asks for samples up to the 50 yr life)
    assert max(t.max() for t in asked[1:]) < 20 * YEAR


def test_a_realization_no_engine_can_vouch_for_is_refused(monkeypatch):
    """Fault injection: the Laplace engine reports an error bound of 1e-3 of the scale
    at every time (as it would where neither contour converges). The realization's
    breakthrough and peak can then be vouched for by neither engine, and the run is
    refused with a message naming the tolerance, not returned as a result (the rule of
    transport.solvers.checks.choose: |difference| + the Laplace bound within the
    tolerance)."""
    from transport.solvers.checks import UnreliableResultError

    def loosened(real):
        def loose(*args, **kw):
            conc, err = real(*args, **kw)
            return conc, np.full_like(err, 1e-3 * SCALE)
        return loose
    for name in ("laplace_concentration", "laplace_lone_times"):  # curves; checks
        monkeypatch.setattr(site_checks, name, loosened(getattr(site_checks, name)))
    col = column(0.4)
    with pytest.raises(UnreliableResultError, match="tolerance 1e-08"):
        realization_metrics(site(0.001), col, DEPTH, TIMES[0], TIMES)


def test_a_refused_realization_names_its_boring(tmp_path, monkeypatch):
    """The same fault on a whole (invented) site: the refusal names the boring and the
    realization, so the user knows which column to look at."""
    from transport.site.batch import solve_site
    from transport.site.config import load_site
    from transport.solvers.checks import UnreliableResultError
    from test_site_paths import write_random_site

    site_ = load_site(write_random_site(tmp_path, np.random.default_rng(3)))
    def refuse(col, *a, **k):
        raise UnreliableResultError("no engine vouches (injected)", ())
    monkeypatch.setattr(site_boring, "verified_metrics", refuse)
    with pytest.raises(UnreliableResultError,
                       match=r"^boring R-0, Monte Carlo realization 1: no engine vouches"):
        solve_site(site_, workers=1, chunk_size=6)


# ------------------------------------------------------- early samples by the bounds
def _previous_path(col, level):
    """A realization's breakthrough and peak as computed before the early samples could
    be settled by the modal bounds: the switched curve scanned in full (the Laplace
    engine before t_modal), then checked as usual."""
    t_min = earliest_time_after_change(col, TIMES)
    probe = _Probe(build_series(col, None, t_min, TOL, masses=False), [DEPTH])
    t_modal, _ = site_boring.modal_scan(probe, TIMES[0], LIFE, TOL, SCALE, level)
    enough = site_boring.good_enough(col, SCALE, TOL)

    def laplace_at(t):  # the full Laplace solution, as before
        return site_boring.solve_laplace(col, np.atleast_1d(t), [DEPTH],
                                         enough=enough).concentration[:, 0]
    curve = site_boring._switched(laplace_at, lambda t: probe.concentration(t)[:, 0],
                                  t_modal)
    bt, pk_t, pk = site_boring.curve_metrics(curve, TIMES[0], LIFE, level,
                                             site_boring.SCAN_SAMPLES)
    return site_boring.verified_metrics(col, None, DEPTH, TIMES[0], LIFE, level, TOL, bt,
                                        pk_t, pk, SCALE)


def test_quiet_early_samples_are_not_asked_of_the_laplace_engine(monkeypatch, modal_read):
    """A mildly advective column (q = 0.15 m/yr): before about 3.7 yr the modal rounding
    bound at the receptor exceeds the tolerance, but the modal value plus sqrt(n) times
    that bound is far below the screening level and the later peak, so no crossing or
    peak can lie there. The Laplace engine is then not asked for those scan samples
    (only for the check at the peak), the metrics equal the previous path (the whole
    switched curve scanned) exactly, and the peak matches the mpmath reference."""
    col, level = column(0.15), 1e-3 * SCALE
    probe = _Probe(build_series(col, None, TIMES[0], TOL, masses=False), [DEPTH])
    t_modal, scan = site_boring.modal_scan(probe, TIMES[0], LIFE, TOL, SCALE, level)
    assert scan is not None and t_modal > TIMES[0]  # the case exercises the shortcut
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
    bt, pk, _ = realization_metrics(site(level), col, DEPTH, TIMES[0], TIMES)
    assert asked and max(asked) <= 2  # the check at the breakthrough and the peak only
    monkeypatch.setattr(site_checks, "laplace_concentration", real)
    monkeypatch.setattr(site_checks, "laplace_lone_times", real_lone)
    old_bt, old_pk = _previous_path(col, level)
    assert (np.isnan(bt) and np.isnan(old_bt)) or bt == old_bt
    assert pk == old_pk
    ref = laplace_reference(col, [DEPTH], [LIFE], dps=20)[0, 0]
    assert math.isnan(bt) and abs(pk - ref) <= 2 * TOL * SCALE


@pytest.mark.parametrize("q, level, step", [(0.4, 1e-3, None), (0.15, 1e-9, None),
                                            (0.15, 1e-3, 2.0)])
def test_early_samples_that_may_matter_go_to_the_laplace_engine(q, level, step):
    """The early samples are left to the Laplace engine where the bounds cannot settle
    them: a strongly advective column (q = 0.4 m/yr, the modal rounding there exceeds
    the scale by orders of magnitude), a screening level below the bound (1e-9 of the
    scale), and a source switched off inside the early samples (at 2 yr: the series is
    sized for the times after each change only). The metrics then equal the previous
    path."""
    col = column(q)
    if step is not None:
        col = Column(layers=col.layers, top=Boundary("concentration", SCALE,
                                                     schedule=Schedule.steps(
                                                         [0.0, step * YEAR], [1.0, 0.5])),
                     bottom=col.bottom, darcy_flux=col.darcy_flux)
    level *= SCALE
    t_min = earliest_time_after_change(col, TIMES)
    probe = _Probe(build_series(col, None, t_min, TOL, masses=False), [DEPTH])
    t_modal, scan = site_boring.modal_scan(probe, TIMES[0], LIFE, TOL, SCALE, level)
    assert t_modal is not None and t_modal > TIMES[0] and scan is None
    bt, pk, _ = realization_metrics(site(level), col, DEPTH, TIMES[0], TIMES)
    old_bt, old_pk = _previous_path(col, level)
    assert (np.isnan(bt) and np.isnan(old_bt)) or bt == old_bt
    assert pk == old_pk


def test_a_peak_within_the_tolerance_of_zero_is_not_polished(monkeypatch):
    """A plume that decays before it reaches the receptor (half-life about 80 days,
    q = 0.6 m/yr; the source switched off after the design life): the realization's peak is within the tolerance of zero (mpmath
    reference: below 1e-11 of the scale over the whole life), so it is read from the scan
    and not polished (the polish of such a peak chases rounding, at the switch from the
    Laplace engine to the modal series up to 30 Laplace solves). The value is within
    the tolerance of the reference and of the polished one."""
    mu = 1e-7
    silt, clay = dict(SILT, decay_rate=mu), dict(CLAY, decay_rate=mu)
    # the source is switched off after the design life, so that the column is not known
    # to rise (transport.solvers.monotone: a rising curve's peak is the end of the life,
    # not searched)
    off = Schedule.steps([0.0, 60 * YEAR], [1.0, 0.0])
    col = Column(layers=(Layer(0.87, 0.24, 3.4e-9, 3.6, decay_rate=mu), Layer(1.194, **silt),
                         Layer(1.2, **clay), Layer(0.87, **silt), Layer(1.186, **clay)),
                 top=Boundary("concentration", SCALE, schedule=off),
                 bottom=Boundary("free-outflow"), darcy_flux=0.6 / YEAR)
    level = 1e-3 * SCALE
    seen = {"polish": 0}
    real, real_min = site_boring.curve_metrics, site_curves.minimize_scalar

    def spy(*args, **kw):
        before = seen["polish"]
        seen["out"] = real(*args, **kw)
        seen["own"] = seen["polish"] - before  # the realization's own polishes
        seen["polished"] = real(*args[:6])  # the same curve and scan, no floor
        return seen["out"]

    def counting(*args, **kw):
        seen["polish"] += 1
        return real_min(*args, **kw)
    monkeypatch.setattr(site_boring, "curve_metrics", spy)
    monkeypatch.setattr(site_curves, "minimize_scalar", counting)
    bt, pk, _ = realization_metrics(site(level), col, DEPTH, TIMES[0], TIMES)
    assert math.isnan(bt) and 0 <= pk <= TOL * SCALE
    # the peak lies inside the window (so it would be polished) but is not: the only
    # polishes are those of the comparison run without the floor
    scan_t = site_boring.scan_times(TIMES[0], LIFE, site_boring.SCAN_SAMPLES)
    assert scan_t[0] < seen["out"][1] < scan_t[-1] and seen["out"][1] in scan_t
    assert seen["own"] == 0 and seen["polish"] >= 1
    assert abs(seen["polished"][2] - pk) <= TOL * SCALE
    # up to the switch at 60 yr the column is the one with a constant source (causality);
    # the reference is taken of that one (its inversion of a delayed step is less precise)
    steady = Column(layers=col.layers, top=Boundary("concentration", SCALE),
                    bottom=col.bottom, darcy_flux=col.darcy_flux)
    ref = laplace_reference(steady, [DEPTH], np.geomspace(TIMES[0], LIFE, 8), dps=20)[:, 0]
    assert np.all(np.abs(ref) <= 1e-11 * SCALE) and abs(pk - ref.max()) <= TOL * SCALE


@pytest.mark.parametrize("case", ["flux top, upward flow", "source off, slow exit"])
def test_realization_of_a_column_whose_data_bound_nothing(case, monkeypatch):
    """Where water leaves through an end that holds the flux (mass piles up there) the
    data give no largest concentration. The realization is then measured on the
    column's own largest C at the end of the life (or the peak, if larger) instead of
    its receptor peak, which for a front held back by upward flow is ~1e-30 of the
    column's values and cannot be vouched for to 1e-8 of itself (these columns were
    refused). Against the mpmath reference: the peak within twice the tolerance of the
    reference's largest value over the column and the life, and no reference sample
    above it; the reference at the peak's time equals the peak."""
    base = column(0.0)
    if case == "flux top, upward flow":
        col = Column(layers=base.layers, top=Boundary("flux", 5e-6 / 86400),
                     bottom=Boundary("concentration", 0.0), darcy_flux=-0.5 / YEAR)
    else:  # the source switched off at 8 yr, an exit slower than the flow
        off = Schedule.steps([0.0, 8 * YEAR], [1.0, 0.0])
        col = Column(layers=base.layers, top=Boundary("concentration", SCALE, schedule=off),
                     bottom=Boundary("mass-transfer", 0.0,
                                     transfer_coefficient=0.1 / YEAR),
                     darcy_flux=1.0 / YEAR)
    level = 1e-3 * SCALE
    found, real = [], site_boring.curve_metrics

    def spy(*args, **kw):
        found.append(real(*args, **kw))
        return found[-1]
    monkeypatch.setattr(site_boring, "curve_metrics", spy)
    bt, pk, _ = realization_metrics(site(level), col, DEPTH, TIMES[0], TIMES)
    pk_t = [m[1] for m in found if m[2] == pk][-1]
    grid = np.geomspace(TIMES[0], LIFE, 12)
    depths = np.linspace(0.0, col.length, 9)
    ref = laplace_reference(col, np.append(depths, DEPTH), np.append(grid, pk_t), dps=20)
    big = float(np.abs(ref).max())
    assert big > 0 and np.all(np.isfinite(ref))
    assert ref[:, -1].max() <= pk + 2 * TOL * big
    assert abs(ref[-1, -1] - pk) <= 2 * TOL * big  # at the peak's time
    if case == "flux top, upward flow":  # rising: the peak is the end of the life
        assert math.isnan(bt) and pk_t == LIFE


def test_a_crossing_within_rounding_of_a_sample_is_that_sample():
    """A curve that rounds differently evaluated alone than on the whole scan (here by
    construction: +-1e-15 of the level), crossing the level exactly at a scan sample:
    Brent's bracket then shows no sign change, and the crossing is the sample (C there
    is the level to rounding) instead of scipy's ValueError reaching the user (common
    practice: the root of a bracket that rounding closed is its end)."""
    t_start, t_end, level = 1.0, 50.0, 1.0
    t = site_curves.scan_times(t_start, t_end, 32)
    k = 20
    slope = 1.0 / t[k]  # C = t / t_k: the level exactly at sample k

    def conc(times):
        times = np.atleast_1d(times)
        bump = -1e-15 if times.size > 1 else 1e-15  # scan below, alone above
        return times * slope + bump
    bt, _, _ = site_curves.curve_metrics(conc, t_start, t_end, level, 32)
    assert bt == t[k - 1] or bt == t[k]
    assert abs(conc(np.array([bt]))[0] - level) <= abs(slope * (t[k] - t[k - 1])) + 1e-14
    # and on a curve that rounds alike both ways, Brent's root (exact to TIME_RTOL)
    bt2, _, _ = site_curves.curve_metrics(lambda x: np.atleast_1d(x) * 0.9 * slope,
                                          t_start, t_end, level, 32)
    assert abs(bt2 - t[k] / 0.9) <= 1e-9 * t[k]
