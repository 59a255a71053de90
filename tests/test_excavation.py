"""Excavation: what it does to the top boundary, its mass balance, and the default
against an independent reference.

The default (``source="removed"``) is what an engineer means by digging out the source:
the excavated soil and the source in it leave; the new surface gets the top boundary's
kind with no source.  Checked against the mpmath Laplace-domain solution of
``tests/reference.py`` (Talbot inversion; Abate & Valko 2004) of the post-excavation
column, started from the pre-excavation reference state carried by Chebyshev
interpolation (Trefethen 2013, ch. 4 and 8).
"""
import numpy as np
import pytest
from scipy.integrate import quad

from reference import interpolated_state, laplace_reference
from transport.model.column import Boundary, Column, InputError, Layer
from transport.scenario.schema import ScenarioError, parse_scenario
from transport.solvers.modal.series import solve
from transport.solvers.timeline import (Timeline, clean_boundary, excavate, solve_timeline)
from transport.units import YEAR

TE = 12 * YEAR          # excavation time
CUT = 0.6               # the fill (0.5 m) and 0.1 m of the silt


def _column(top=None):
    return Column(layers=(Layer(0.5, 0.35, 6e-10, 2.0, name="fill"),
                          Layer(0.4, 0.45, 8e-11, 5.0, name="silt", decay_rate=2e-9),
                          Layer(1.1, 0.3, 7e-10, 1.5, name="sand")),
                  top=top or Boundary("concentration", 1.0), bottom=Boundary("free-outflow"),
                  darcy_flux=0.01 / YEAR)


def test_default_excavation_takes_the_source_away():
    """The default new top is the old kind with no source; "kept" keeps it; a residual
    is a constant concentration of the old kind; an explicit top wins."""
    col = _column()
    tl = Timeline.single(col)
    assert tl.then(TE, excavate(CUT)).stages[-1].column.top == Boundary("concentration", 0.0)
    kept = tl.then(TE, excavate(CUT, source="kept")).stages[-1].column.top
    assert kept == col.top
    res = tl.then(TE, excavate(CUT, residual=0.02)).stages[-1].column.top
    assert (res.kind, res.value) == ("concentration", 0.02)
    sealed = tl.then(TE, excavate(CUT, top=Boundary("sealed"))).stages[-1].column.top
    assert sealed.kind == "sealed"
    assert clean_boundary(Boundary("flux", 3e-9)).value == 0.0
    assert clean_boundary(Boundary("sealed")) == Boundary("sealed")
    with pytest.raises(InputError, match="source"):
        excavate(CUT, source="gone")


def test_default_excavation_against_laplace_reference():
    """C after the default excavation (new top C = 0) equals the mpmath Laplace solution
    of the 1.4 m column left, started from the reference state at 12 yr (carried by
    Chebyshev interpolation), within 1e-7 of the source concentration."""
    col = _column()
    tl = Timeline.single(col).then(TE, excavate(CUT))
    after = tl.stages[-1]
    t = np.array([14.0, 25.0, 60.0]) * YEAR
    z = np.array([0.6, 0.8, 1.2, 2.0])  # original frame: the part that stays
    got = solve_timeline(tl, t, z, tolerance=1e-9).concentration

    def sample(zl):  # reference state at TE on the new column's local depths
        return laplace_reference(col, zl + CUT, [TE], dps=25)[0]

    state = interpolated_state(after.column, sample, pieces_per_layer=4, degree=12)
    ref = laplace_reference(after.column, z - after.offset, t - TE, initial=state, dps=25)
    assert np.abs(got - ref).max() <= 1e-7


def test_excavation_removes_the_dug_out_mass_and_the_budget_closes():
    """The excavated soil's content, theta R C integrated over the top 0.6 m of the
    pre-excavation profile (scipy.integrate.quad, per layer), is the budget's "removed"
    term; the budget closes before and after (1e-9 of its largest term)."""
    col = _column()
    before = solve(col, [TE], [0.0])

    def content(a, b, cap):
        return quad(lambda zz: cap * before.concentration_at(zz, [TE])[0], a, b,
                    epsabs=1e-14, epsrel=1e-12)[0]
    removed = content(0.0, 0.5, 0.35 * 2.0) + content(0.5, CUT, 0.45 * 5.0)
    tl = Timeline.single(col).then(TE, excavate(CUT))
    sol = solve_timeline(tl, np.array([5.0, 15.0, 40.0]) * YEAR, [0.6, 1.5])
    b = sol.budget
    assert b["removed"][0] == 0.0
    assert b["removed"][-1] == pytest.approx(removed, rel=1e-8)
    scale = max(np.abs(b[k]).max() for k in ("stored", "entered_top", "left_bottom"))
    assert np.abs(b["residual"]).max() <= 1e-9 * scale


def test_digging_out_the_source_lowers_the_receptor_peak():
    """The issue this fixes: with the source removed, the receptor sees less than doing
    nothing; with source = "kept" (the old behaviour) it sees more, since the source
    then sits 0.6 m closer to it (maximum principle: every C lies between 0 and the
    source's 1, so the comparison is about the same physical source)."""
    col = _column()
    t = np.linspace(13.0, 150.0, 30) * YEAR
    z = [2.0]
    nothing = solve(col, t, z).concentration[:, 0].max()
    dug = solve_timeline(Timeline.single(col).then(TE, excavate(CUT)), t, z)
    kept = solve_timeline(Timeline.single(col).then(TE, excavate(CUT, source="kept")), t, z)
    assert dug.concentration[:, 0].max() < nothing < kept.concentration[:, 0].max()


_SCENARIO = """
[chemical]
free_water_diffusivity = "1e-9 m^2/s"
[flow]
darcy_flux = "0.05 m/yr"
[[layers]]
name = "backfill"
thickness = "0.6 m"
porosity = 0.35
[[layers]]
name = "sand"
thickness = "1.4 m"
porosity = 0.3
[top]
kind = "concentration"
concentration = "10 mg/L"
[bottom]
kind = "free-outflow"
[output]
times = ["1 yr", "5 yr", "20 yr"]
[[actions]]
at = "2 yr"
kind = "excavate"
depth = "0.6 m"
"""


@pytest.mark.parametrize("extra, kind, value", [
    ("", "concentration", 0.0),
    ('source = "kept"', "concentration", 10e-3),
    ('residual = "2 mg/L"', "concentration", 2e-3),
    ('top = { kind = "free-outflow" }', "free-outflow", 0.0),
])
def test_scenario_excavation_keys(extra, kind, value):
    """The scenario keys give the documented new top (mg/L -> kg m-3: SI brochure,
    1 L = 1e-3 m^3)."""
    sc = parse_scenario(_SCENARIO + extra + "\n")
    top = sc.timeline.stages[-1].column.top
    assert top.kind == kind and top.value == pytest.approx(value, rel=1e-12)


@pytest.mark.parametrize("extra, where", [
    ('source = "gone"', "actions[1].source"),
    ('source = "kept"\nresidual = "1 mg/L"', "actions[1]"),
    ('residual = "-1 mg/L"', "actions[1].residual"),
])
def test_scenario_excavation_errors(extra, where):
    with pytest.raises(ScenarioError, match=where.replace("[", r"\[").replace("]", r"\]")):
        parse_scenario(_SCENARIO + extra + "\n")
