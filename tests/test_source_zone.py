"""A source zone of finite inventory (``kind = "source-zone"``).

Checked against
* the closed form for a well-stirred zone of limited volume over a semi-infinite medium:
  C_s^ = C_s(0) / (s + a sqrt(s)), a = theta sqrt(D R) / Gamma, whose inverse is
  C_s(0) e^{a^2 t} erfc(a sqrt(t)) (Laplace pair: Abramowitz & Stegun 1964, eq. 29.3.88,
  equation number from memory; the problem: Crank 1975, The Mathematics of Diffusion,
  2nd ed., sec. 3.3, from memory), and that same transform inverted by mpmath's Talbot
  rule, which needs no table;
* the independent mpmath Laplace solution of the layered column (tests/reference.py,
  its own source-zone row), across flow regimes and both ends;
* the zone's mass balance: what it held = released + still held + decayed in it +
  carried through it, each term integrated independently (scipy quad);
* the defining identity of a soil concentration: the zone holds rho_b C_T H (common
  practice: C_T is mass of chemical per mass of dry soil).
"""
from __future__ import annotations

import math

import mpmath as mp
import numpy as np
import pytest
from click.testing import CliRunner
from scipy.integrate import quad
from scipy.special import erfcx

from reference import laplace_reference_full
from transport.cli.main import main
from transport.model.column import Boundary, Column, InputError, Layer
from transport.scenario.reader import ScenarioError
from transport.scenario.schema import parse_scenario
from transport.solvers.engines import solve_column
from transport.solvers.laplace.engine import solve_laplace
from transport.solvers.stages import Stage, Timeline, excavate
from transport.solvers.timeline import solve_timeline
from transport.units import YEAR

LAYERS = (Layer(0.5, 0.3, 1e-9, 2.0, name="sand"),
          Layer(0.05, 0.45, 5e-11, 8.0, name="thin clay"),
          Layer(1.0, 0.25, 3e-9, 1.5, 1e-9, name="silt"))


def _zone(c0=0.1, capacity=0.08, decay=2e-9):
    return Boundary("source-zone", c0, capacity=capacity, decay_rate=decay)


def test_stirred_zone_over_semi_infinite_medium_matches_closed_form():
    theta, D, R, gamma, c0 = 0.35, 5e-10, 3.0, 0.05, 1.0
    col = Column((Layer(1.0, theta, D, R),), _zone(c0, gamma, 0.0), Boundary("sealed"))
    t = np.array([1e3, 1e5, 1e7, 3e8, 3e9, 3e10])
    sol = solve_column(col, t, [0.0], semi_infinite_bottom=True)
    a = theta * math.sqrt(D * R) / gamma
    closed = c0 * erfcx(a * np.sqrt(t))  # A&S 29.3.88 (from memory)
    np.testing.assert_allclose(sol.concentration[:, 0], closed, rtol=1e-10, atol=0)
    with mp.workdps(30):  # the same transform by mpmath's Talbot rule
        for ti, ci in zip(t[::2], sol.concentration[::2, 0]):
            ref = mp.invertlaplace(lambda s: c0 / (s + a * mp.sqrt(s)), ti, method="talbot")
            assert abs(ci - float(ref)) <= 1e-10 * c0
    # released into the medium + still held = the start (no decay, no flow)
    np.testing.assert_allclose(sol.budget["entered_top"] + gamma * sol.concentration[:, 0],
                               gamma * c0, rtol=1e-11)


@pytest.mark.parametrize("end", ["top", "bottom"])
@pytest.mark.parametrize("q_per_year", [0.2, -0.1, 0.0])
def test_layered_column_with_zone_matches_mpmath_reference(end, q_per_year):
    zone = _zone()
    col = Column(LAYERS, zone if end == "top" else Boundary("concentration", 0.0),
                 zone if end == "bottom" else Boundary("free-outflow"), q_per_year / YEAR)
    t = np.array([0.003, 0.3, 3.0, 30.0]) * YEAR
    z = np.array([0.0, 0.3, 0.5, 0.52, 1.2, 1.55])
    ref = laplace_reference_full(col, z, t)
    sol = solve_column(col, t, z)
    assert sol.reliable.all() and set(sol.engine_by_time) == {"laplace"}
    assert np.abs(sol.concentration - ref.concentration).max() <= 1e-9 * zone.value
    flux_scale = np.abs(ref.total_flux).max()
    assert np.abs(sol.total_flux - ref.total_flux).max() <= 1e-8 * flux_scale
    inv = zone.zone_inventory()
    for key in ("entered_top", "left_bottom", "stored", "decayed"):
        assert abs(sol.budget[key] - ref.budget[key]).max() <= 1e-9 * inv, key
    assert sol.concentration.min() >= 0.0


@pytest.mark.parametrize("peclet", [100.0, 1000.0])
def test_zone_at_high_peclet_is_vouched_for_or_refused(peclet):
    # column Peclet number q L / (theta D) on one 2 m layer, downward flow
    theta, D, L = 0.3, 1e-9, 2.0
    q = peclet * theta * D / L
    col = Column((Layer(L, theta, D, 1.0),), _zone(0.1, 0.05, 0.0), Boundary("free-outflow"), q)
    travel = L * theta / q
    t = np.array([0.3, 1.0, 3.0]) * travel
    z = np.array([0.0, 1.0, 2.0])
    ref = laplace_reference_full(col, z, t, dps=30)
    sol = solve_column(col, t, z)
    assert np.abs(sol.concentration - ref.concentration).max() <= 1e-8 * 0.1
    assert np.isclose(sol.budget["entered_top"][-1] + 0.05 * sol.concentration[-1, 0],
                      0.05 * 0.1, rtol=1e-9)


def test_zone_mass_balance_with_decay_and_throughflow():
    """Upward flow through a top zone: it loses mass to the column, by decay and with
    the water leaving through it; each term integrated on its own (scipy quad)."""
    q = -0.1 / YEAR
    zone = _zone(0.1, 0.08, 3e-9)
    col = Column(LAYERS, zone, Boundary("concentration", 0.0), q)
    t_end = 20 * YEAR
    sol = solve_column(col, [t_end], [0.0])
    cs = lambda t: float(solve_laplace(col, [t], [0.0]).concentration[0, 0])  # noqa: E731
    integral, err = quad(cs, 0.0, t_end, limit=200, epsabs=0, epsrel=1e-10)
    decayed = zone.decay_rate * zone.capacity * integral
    through = -q * integral
    released = float(sol.budget["entered_top"][0])
    held = zone.capacity * float(sol.concentration[0, 0])
    assert abs(zone.zone_inventory() - (released + held + decayed + through)) <= \
        1e-8 * zone.zone_inventory()
    assert decayed > 0.05 * zone.zone_inventory() and through > 0.01 * zone.zone_inventory()


def test_zone_kept_across_an_action_equals_the_unstaged_run():
    zone = _zone()
    col = Column(LAYERS, zone, Boundary("free-outflow"), 0.2 / YEAR)
    t = np.array([1.0, 4.0, 9.0]) * YEAR
    z = np.array([0.0, 0.4, 1.5])
    plain = solve_column(col, t, z)
    # a no-op change at 2 yr (the same column, the same zone object): the zone must go on
    # from the concentration it had, not restart full
    staged = solve_timeline(Timeline((Stage(0.0, col, 0.0, (1.0,) * 3),
                                      Stage(2 * YEAR, col, 0.0, (1.0,) * 3))), t, z)
    np.testing.assert_allclose(staged.concentration, plain.concentration, rtol=0,
                               atol=1e-7 * zone.value)


def test_excavation_takes_the_zone_away():
    zone = _zone()
    col = Column(LAYERS, zone, Boundary("free-outflow"), 0.2 / YEAR)
    after = excavate(0.2)(Stage(0.0, col, 0.0, (1.0,) * 3))
    assert after.column.top == Boundary("concentration", 0.0)
    kept = excavate(0.2, source="kept")(Stage(0.0, col, 0.0, (1.0,) * 3))
    assert kept.column.top is zone


def test_engines_that_cannot_take_a_zone_say_so():
    col = Column(LAYERS, _zone(), Boundary("free-outflow"), 0.0)
    for engine in ("modal", "finite-volume"):
        with pytest.raises(InputError, match="source-zone.*use engine auto or laplace"):
            solve_column(col, [YEAR], [0.0], engine=engine)
    with pytest.raises(InputError, match="capacity > 0"):
        Boundary("source-zone", 0.1)


SCENARIO = """
title = "Fenwick allotments (fictional): finite source zone"
[chemical]
name = "trichloroethene"
[flow]
darcy_flux = "0.1 m/yr"
[[layers]]
name = "loam"
thickness = "1.5 m"
porosity = 0.4
water_content = 0.3
bulk_density = "1.6 g/cm^3"
distribution_coefficient = "0.2 L/kg"
[top]
kind = "source-zone"
{zone}
[bottom]
kind = "free-outflow"
[output]
times = ["1 yr", "5 yr", "20 yr"]
depths = ["0 m", "1.5 m"]
"""


def test_soil_concentration_of_the_zone_holds_rho_b_ct_h():
    sc = parse_scenario(SCENARIO.format(zone='concentration = "250 mg/kg"\nthickness = "0.4 m"\n'
                                        'water_content = 0.25\nbulk_density = "1.7 g/cm^3"\n'
                                        'distribution_coefficient = "0.5 L/kg"'))
    zone = sc.column.top
    # rho_b C_T H, the mass the zone holds (common practice)
    assert math.isclose(zone.zone_inventory(), 1700.0 * 250e-6 * 0.4, rel_tol=1e-12)
    assert math.isclose(zone.capacity, 0.4 * (0.25 + 1700.0 * 0.5e-3), rel_tol=1e-12)


def test_inventory_form_and_half_life():
    sc = parse_scenario(SCENARIO.format(zone='concentration = "80 mg/L"\n'
                                        'inventory = "40 g/m^2"\nhalf_life = "4 yr"'))
    zone = sc.column.top
    assert math.isclose(zone.capacity, 0.040 / 0.080, rel_tol=1e-12)
    assert math.isclose(zone.decay_rate, math.log(2) / (4 * YEAR), rel_tol=1e-12)


@pytest.mark.parametrize("zone, key, words", [
    ('concentration = "80 mg/L"', "top.thickness", "size is missing"),
    ('concentration = "80 mg/L"\ninventory = "4 g/m^2"\nthickness = "1 m"', "top.inventory",
     "both given"),
    ('concentration = "80 mg/kg"\ninventory = "4 g/m^2"', "top.concentration",
     "soil concentration"),
    ('concentration = "80 mg/kg"\nthickness = "1 m"\nwater_content = 0.3', "top.bulk_density",
     "missing"),
    ('concentration = "80 mg/L"\nthickness = "1 m"', "top.water_content", "missing"),
    ('concentration = "80 mg/L"\nthickness = "1 m"\nwater_content = 0.3\n'
     'distribution_coefficient = "1 L/kg"', "top.bulk_density", "needs the zone"),
    ('concentration = "80 mg/L"\ninventory = "4 g/m"', "top.inventory", ""),
])
def test_zone_input_errors_name_the_key_and_the_fix(zone, key, words):
    with pytest.raises(ScenarioError) as info:
        parse_scenario(SCENARIO.format(zone=zone), "zone.toml")
    text = str(info.value)
    assert "zone.toml" in text and key in text and words in text


def test_cli_run_prints_the_zone_account(tmp_path):
    path = tmp_path / "zone.toml"
    path.write_text(SCENARIO.format(zone='concentration = "80 mg/L"\ninventory = "40 g/m^2"'))
    out = tmp_path / "zone.nc"
    res = CliRunner().invoke(main, ["run", str(path), "-o", str(out)])
    assert res.exit_code == 0, res.output
    assert "Source zone at the top: 4e+04 mg/m2 at the start" in res.output
    assert "Laplace engine alone" in res.output
    import xarray as xr
    with xr.open_dataset(out) as ds:
        assert "finite inventory" in ds.attrs["source_zone_top"]
        assert "regulator" in ds.attrs["comment"]
    refused = CliRunner().invoke(main, ["run", str(path), "-o", str(out), "--engine", "modal"])
    assert refused.exit_code == 2
    assert "use engine auto or laplace" in " ".join(refused.output.split())


def test_check_describes_the_zone(tmp_path):
    path = tmp_path / "zone.toml"
    path.write_text(SCENARIO.format(zone='concentration = "80 mg/L"\ninventory = "40 g/m^2"\n'
                                    'half_life = "4 yr"'))
    res = CliRunner().invoke(main, ["check", str(path)])
    assert res.exit_code == 0, res.output
    # 40 g/m^2 = 4e4 mg/m2; capacity 0.04 kg/m^2 / 0.08 kg/m^3 = 0.5 m
    assert ("Top: source zone of finite inventory: 80 mg/L pore water at the start, "
            "capacity 0.5 m") in res.output
    assert "4e+04 mg/m2 at the start, half-life in the zone 4 yr" in res.output
