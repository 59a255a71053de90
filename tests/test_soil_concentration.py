"""Soil concentrations (mg/kg of dry soil) as initial states: converted to pore water by
linear water/sorbed partitioning, C_w = C_T rho_b / (theta_w + Kd rho_b) (US EPA 1996,
Soil Screening Guidance: Technical Background Document, EPA/540/R-95/128, eq. 22, from
memory, without its air term)."""
import math

import pytest

import transport
from transport.scenario.layers import is_soil_concentration, pore_water_from_soil
from transport.scenario.output import sample_layer
from transport.scenario.schema import ScenarioError, parse_scenario
from transport.units import UnitError, to_si

# Two layers with different bulk density, water content and Kd (invented site), so that
# the layer chosen for a sample shows in the result. Plain numbers for the hand checks:
FILL = dict(thickness=0.8, porosity=0.35, theta=0.35, rho=1600.0, kd=0.002)   # kg/m3, m3/kg
CLAY = dict(thickness=1.2, porosity=0.45, theta=0.45, rho=1900.0, kd=0.0005)

LAYERS = """
[chemical]
name = "trichloroethene"
[flow]
darcy_flux = "1 cm/yr"
[[layers]]
name = "fill"
thickness = "0.8 m"
porosity = 0.35
bulk_density = "1.6 g/cm^3"
distribution_coefficient = "2 L/kg"
{fill_extra}
[[layers]]
name = "clay"
thickness = "1.2 m"
porosity = 0.45
{clay_rho}
distribution_coefficient = "0.5 L/kg"
{clay_extra}
[top]
kind = "concentration"
concentration = "0 mg/L"
[bottom]
kind = "free-outflow"
{initial}
[output]
times = ["0.1 yr", "1 yr"]
depth_spacing = "10 cm"
receptor_depth = "2 m"
"""


def text(fill_extra="", clay_extra="", initial="", clay_rho='bulk_density = "1.9 g/cm^3"'):
    return LAYERS.format(fill_extra=fill_extra, clay_extra=clay_extra, initial=initial,
                         clay_rho=clay_rho)


def capacity(layer):
    """theta_w + Kd rho_b, the water plus sorbed capacity per bulk volume."""
    return layer["theta"] + layer["kd"] * layer["rho"]


# --- the conversion ------------------------------------------------------------------

def test_conversion_hand_computation():
    # Hand computation in practitioner units of C_w = C_T rho_b / (theta_w + Kd rho_b)
    # (EPA/540/R-95/128 eq. 22, from memory): 10 mg/kg, rho_b = 1.6 kg/L,
    # theta_w = 0.3, Kd = 2 L/kg: 10 * 1.6 / (0.3 + 2 * 1.6) = 16 / 3.5 mg/L.
    c_w = pore_water_from_soil(to_si("10 mg/kg", "mass_fraction"), to_si("1.6 kg/L", "density"),
                               0.3, to_si("2 L/kg", "specific_volume"))
    assert c_w == pytest.approx(to_si(f"{16 / 3.5!r} mg/L", "concentration"), rel=1e-12)


@pytest.mark.parametrize("total,rho,theta,kd", [(2.5e-6, 1600.0, 0.3, 0.002),
                                                (1e-3, 1900.0, 0.45, 0.0),
                                                (4e-8, 1200.0, 0.05, 0.5)])
def test_conversion_defining_property(total, rho, theta, kd):
    # Mass balance of the partitioning (the equation's defining property): the dissolved
    # plus sorbed mass per bulk volume theta_w C_w + rho_b Kd C_w equals rho_b C_T.
    c_w = pore_water_from_soil(total, rho, theta, kd)
    assert theta * c_w + rho * kd * c_w == pytest.approx(rho * total, rel=1e-12)


def test_unit_invariance():
    # 1 g/kg = 1000 mg/kg = 1e6 ug/kg (SI prefixes).
    values = [to_si(v, "mass_fraction") for v in ("2.5 g/kg", "2500 mg/kg", "2.5e6 ug/kg")]
    assert values == pytest.approx([2.5e-3] * 3, rel=1e-12)
    runs = [parse_scenario(text(fill_extra=f'initial_concentration = "{v}"')).initial.values[0]
            for v in ("2.5 g/kg", "2500 mg/kg", "2.5e6 ug/kg")]
    assert runs == pytest.approx([runs[0]] * 3, rel=1e-12)
    assert runs[0] == pytest.approx(2.5e-3 * FILL["rho"] / capacity(FILL), rel=1e-12)


def test_what_is_a_soil_concentration():
    assert is_soil_concentration("25 mg/kg") and is_soil_concentration("3 ug/kg")
    for value in ("25 mg/L", "25 ppm", "0.3", "35 %", 0.3):
        assert not is_soil_concentration(value)
    # ppm stays refused for soil (by mass or volume, dry or wet soil: ambiguous)
    with pytest.raises(UnitError, match="ambiguous"):
        to_si("25 ppm", "mass_fraction")
    # and is still 1 mg/L in water
    assert to_si("25 ppm", "concentration") == pytest.approx(to_si("25 mg/L", "concentration"))


# --- where the conversion applies ---------------------------------------------------

def test_layer_initial_concentration_per_layer():
    s = parse_scenario(text(fill_extra='initial_concentration = "5 mg/kg"',
                            clay_extra='initial_concentration = "2 mg/kg"'))
    assert s.initial.values[0] == pytest.approx(5e-6 * FILL["rho"] / capacity(FILL), rel=1e-12)
    assert s.initial.values[1] == pytest.approx(2e-6 * CLAY["rho"] / capacity(CLAY), rel=1e-12)
    # pore-water values are unchanged
    s = parse_scenario(text(fill_extra='initial_concentration = "5 mg/L"'))
    assert s.initial.values[0] == pytest.approx(5e-3, rel=1e-12)


def test_layer_face_rule():
    rows = [{"top": 0.0, "bottom": 0.8}, {"top": 0.8, "bottom": 2.0}]
    assert sample_layer(rows, 0.8) == 1            # at a face: the layer below
    assert sample_layer(rows, 0.8, above=True) == 0  # first of a step: the layer above
    assert sample_layer(rows, 0.0) == 0 and sample_layer(rows, 0.0, above=True) == 0
    assert sample_layer(rows, 2.0) == 1 and sample_layer(rows, 0.5) == 0
    # in a scenario: a single sample at the face uses the clay's properties
    s = parse_scenario(text(initial='[initial]\nsamples = [["0 m", "5 mg/kg"], '
                            '["0.8 m", "5 mg/kg"], ["2 m", "5 mg/kg"]]'))
    assert s.initial.values[1] == pytest.approx(5e-6 * CLAY["rho"] / capacity(CLAY), rel=1e-12)
    assert s.initial.values[0] == pytest.approx(5e-6 * FILL["rho"] / capacity(FILL), rel=1e-12)


def test_samples_file_header_unit(tmp_path):
    (tmp_path / "profile.csv").write_text("depth [m],concentration [ug/kg]\n0,4000\n2,4000\n")
    s = parse_scenario(text(initial='[initial]\nsamples_file = "profile.csv"'),
                       tmp_path / "site.toml")
    assert s.initial.values[0] == pytest.approx(4e-6 * FILL["rho"] / capacity(FILL), rel=1e-12)
    assert s.initial.values[1] == pytest.approx(4e-6 * CLAY["rho"] / capacity(CLAY), rel=1e-12)


def test_refused_without_bulk_density():
    with pytest.raises(ScenarioError) as info:
        parse_scenario(text(clay_rho="", clay_extra='initial_concentration = "2 mg/kg"')
                       .replace('distribution_coefficient = "0.5 L/kg"', "retardation_factor = 3"))
    err = info.value
    assert err.key == "layers[2].initial_concentration"
    assert "bulk density" in str(err) and "bulk_density" in err.fix and "mg/L" in err.fix


def test_ppm_soil_sample_is_water():
    # "ppm" keeps its water meaning (1 mg/L), it is never taken as mg/kg of soil
    s = parse_scenario(text(fill_extra='initial_concentration = "3 ppm"'))
    assert s.initial.values[0] == pytest.approx(3e-3, rel=1e-12)


# --- end to end ----------------------------------------------------------------------

def test_initial_stored_mass_equals_soil_mass():
    # The stored mass per area at t = 0 is the soil inventory sum(rho_b C_T h) (the
    # defining property of the partitioning, integrated over the column).
    s = parse_scenario(text(fill_extra='initial_concentration = "5 mg/kg"',
                            clay_extra='initial_concentration = "2 mg/kg"'))
    solution = transport.solve(s)
    expected = FILL["rho"] * 5e-6 * FILL["thickness"] + CLAY["rho"] * 2e-6 * CLAY["thickness"]
    assert math.isclose(float(solution.budget["initial_stored"][0]), expected, rel_tol=1e-9)


def test_initial_stored_mass_from_profile_with_step():
    # a step at the face: 5 mg/kg in the fill, 2 mg/kg in the clay
    s = parse_scenario(text(initial='[initial]\nsamples = [["0 m", "5 mg/kg"], '
                            '["0.8 m", "5 mg/kg"], ["0.8 m", "2 mg/kg"], ["2 m", "2 mg/kg"]]'))
    solution = transport.solve(s)
    expected = FILL["rho"] * 5e-6 * FILL["thickness"] + CLAY["rho"] * 2e-6 * CLAY["thickness"]
    assert math.isclose(float(solution.budget["initial_stored"][0]), expected, rel_tol=1e-9)


def test_converted_value_within_model_range():
    # 0.5 kg/kg in a dry, non-sorbing layer gives C_w = 0.5 * 1600 / 0.01 = 8e4 kg/m3,
    # above the largest dissolved concentration the model takes (1e3 kg/m3, reader's
    # range: a litre of water weighs about 1 kg)
    with pytest.raises(ScenarioError, match="outside what the model represents"):
        parse_scenario(text(fill_extra='water_content = 0.01\ninitial_concentration = "500 g/kg"')
                       .replace('distribution_coefficient = "2 L/kg"', "", 1))
