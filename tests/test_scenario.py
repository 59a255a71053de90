"""Scenario loading: schema, SI conversion, error messages with key paths, fuzzing."""
import json
import math
import tomllib
from pathlib import Path

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings, strategies as st

from transport.model.column import Column
from transport.scenario.schema import (ScenarioError, load_scenario, parse_scenario,
                                starter_scenario_text)

SCENARIOS = Path(__file__).resolve().parents[1] / "scenarios"
YEAR = 365.25 * 86400.0  # Julian year (IAU)

BASE = """
title = "test column (invented)"
[chemical]
name = "trichloroethene"
[flow]
darcy_flux = "{q}"
[[layers]]
name = "fill"
thickness = "{t1}"
porosity = 0.35
bulk_density = "{rho}"
organic_carbon_fraction = 0.002
dispersivity = "{alpha}"
[[layers]]
name = "clay"
thickness = "{t2}"
porosity = 0.45
bulk_density = "{rho}"
distribution_coefficient = "{kd}"
pore_diffusivity = "{dp}"
half_life = "{half}"
[top]
kind = "concentration"
concentration = "{c0}"
[bottom]
kind = "mass-transfer"
transfer_coefficient = "{h}"
[output]
times = ["{time1}", "{time2}"]
depth_spacing = "{dz}"
receptor_depth = "{zr}"
screening_level = "{level}"
"""

SI_UNITS = dict(q="1.5844043907014474e-9 m/s", t1="0.8 m", t2="1.2 m", rho="1700 kg/m^3",
                alpha="0.05 m", kd="0.0005 m^3/kg", dp="3e-10 m^2/s", half="157788000 s",
                c0="0.12 kg/m^3", h="1e-7 m/s", time1="31557600 s", time2="315576000 s",
                dz="0.1 m", zr="2 m", level="5e-6 kg/m^3")
FIELD_UNITS = dict(q="5 cm/yr", t1="80 cm", t2="1200 mm", rho="1.7 g/cm^3", alpha="5 cm",
                   kd="0.5 L/kg", dp="2.592e-5 m^2/d", half="5 yr", c0="120 mg/L",
                   h="0.864 cm/d", time1="1 yr", time2="10 yr", dz="10 cm", zr="200 cm",
                   level="5 ug/L")


def scenario_text(**changes):
    values = dict(SI_UNITS, **changes)
    return BASE.format(**values)


def error_of(text, path="<string>"):
    with pytest.raises(ScenarioError) as info:
        parse_scenario(text, path)
    return info.value


# --- demo files and starter ---------------------------------------------------------

@pytest.mark.parametrize("name", ["spill-layered-column.toml", "landfill-composite-liner.toml",
                                  "sediment-cap.toml"])
def test_demo_scenarios_load(name):
    scenario = load_scenario(SCENARIOS / name)
    assert isinstance(scenario.column, Column)
    assert 10 <= scenario.times.size <= 30
    assert scenario.depths.size <= 500
    assert scenario.depths[0] == 0.0 and scenario.depths[-1] == scenario.column.length
    assert scenario.output.receptor_depth in scenario.depths
    assert scenario.source_text == (SCENARIOS / name).read_text(encoding="utf-8")


def test_liner_demo_has_partition_jumps_and_no_flow():
    scenario = load_scenario(SCENARIOS / "landfill-composite-liner.toml")
    assert scenario.column.darcy_flux == 0.0
    sheet = scenario.column.layers[1]
    assert sheet.thickness == pytest.approx(2e-3)
    assert scenario.column.layers[0].partition_to_next == 30.0


def test_starter_scenario_loads():
    scenario = parse_scenario(starter_scenario_text())
    assert scenario.column.top.kind == "concentration"
    assert scenario.initial.kind == "clean"


# --- SI conversion -----------------------------------------------------------------

def test_unit_invariance():
    """The same scenario in field units (cm, mm, mg/L, g/cm3, L/kg, yr, d) and in SI gives
    the same Column, initial state and output to 1e-12 relative (SI definitions of the
    units, SI Brochure 2019; Julian year)."""
    a = parse_scenario(scenario_text())
    b = parse_scenario(BASE.format(**FIELD_UNITS))
    assert a.column.top.kind == b.column.top.kind and a.column.bottom.kind == b.column.bottom.kind
    assert b.column.darcy_flux == pytest.approx(a.column.darcy_flux, rel=1e-12)
    for la, lb in zip(a.column.layers, b.column.layers, strict=True):
        for attr in ("thickness", "water_content", "diffusivity", "retardation", "decay_rate",
                     "source_rate", "partition_to_next"):
            assert getattr(lb, attr) == pytest.approx(getattr(la, attr), rel=1e-12, abs=0)
    for attr in ("value", "transfer_coefficient"):
        assert getattr(b.column.top, attr) == pytest.approx(getattr(a.column.top, attr), rel=1e-12)
        assert getattr(b.column.bottom, attr) == pytest.approx(getattr(a.column.bottom, attr),
                                                               rel=1e-12)
    np.testing.assert_allclose(b.times, a.times, rtol=1e-12)
    np.testing.assert_allclose(b.depths, a.depths, rtol=1e-12)
    assert b.output.screening_level == pytest.approx(a.output.screening_level, rel=1e-12)


def test_layer_matches_published_forms():
    """Layer 1: R = 1 + rho_b Koc foc / theta (Freeze & Cherry 1979; Karickhoff et al. 1979),
    D = D_w theta^(1/3) + alpha |q|/theta (Millington & Quirk 1961 saturated; Bear 1972),
    with TCE D_w = 9.65e-10 (Hayduk & Laudie 1974) and Koc = 94.3 L/kg (US EPA 1996)."""
    s = parse_scenario(scenario_text())
    fill, clay = s.column.layers
    q = s.column.darcy_flux
    assert fill.retardation == pytest.approx(1 + 1700 * 94.3e-3 * 0.002 / 0.35, rel=1e-13)
    assert fill.diffusivity == pytest.approx(9.65e-10 * 0.35 ** (1 / 3) + 0.05 * q / 0.35,
                                             rel=1e-13)
    assert clay.diffusivity == pytest.approx(3e-10, rel=1e-13)
    assert clay.decay_rate == pytest.approx(math.log(2) / (5 * YEAR), rel=1e-13)
    assert fill.decay_rate == 0.0  # the chemical has no half_life: none applied


def test_derived_table_reports_published_forms():
    """The derived table gives Kd = Koc foc (Karickhoff et al. 1979, Koc 94.3 L/kg of TCE,
    US EPA 1996), tau = n^(1/3) for a saturated layer (Millington & Quirk 1961), the
    dispersion alpha |q| / theta (Bear 1972) and, for a layer with a given pore
    diffusivity, no tortuosity (NaN) and no Kd-free retardation."""
    s = parse_scenario(scenario_text())
    fill, clay = s.derived_table()
    q = s.column.darcy_flux
    assert fill["distribution_coefficient"] == pytest.approx(94.3e-3 * 0.002, rel=1e-13)
    assert fill["tortuosity"] == pytest.approx(0.35 ** (1 / 3), rel=1e-13)
    assert fill["dispersion"] == pytest.approx(0.05 * q / 0.35, rel=1e-13)
    assert fill["pore_diffusivity"] == pytest.approx(9.65e-10 * 0.35 ** (1 / 3), rel=1e-13)
    assert math.isnan(clay["tortuosity"])
    assert clay["pore_diffusivity"] == pytest.approx(3e-10, rel=1e-13)
    assert clay["retardation_factor"] == pytest.approx(1 + 1700 * 5e-4 / 0.45, rel=1e-13)
    assert clay["half_life"] == pytest.approx(5 * YEAR, rel=1e-13)


def test_derived_table_columns():
    s = parse_scenario(scenario_text())
    table = s.derived_table()
    assert [row["name"] for row in table] == ["fill", "clay"]
    row = table[0]
    assert row["pore_velocity"] == pytest.approx(s.column.darcy_flux / 0.35, rel=1e-14)
    assert row["peclet_number"] == pytest.approx(
        abs(row["pore_velocity"]) * 0.8 / row["diffusivity"], rel=1e-14)
    assert row["diffusion_time"] == pytest.approx(
        row["retardation_factor"] * 0.64 / row["diffusivity"], rel=1e-14)
    assert table[1]["top"] == pytest.approx(0.8)
    assert "Hayduk" in row["diffusion_source"]


def test_output_grid_contains_ends_interfaces_receptor():
    s = parse_scenario(scenario_text(zr="1.234 m", dz="0.3 m"))
    for z in (0.0, 0.8, 1.234, 2.0):
        assert np.any(np.isclose(s.depths, z, rtol=0, atol=1e-15))
    assert np.all(np.diff(s.depths) > 0)


def test_times_sorted_and_range_form():
    s = parse_scenario(scenario_text(time1="10 yr", time2="1 yr"))
    assert np.all(np.diff(s.times) > 0)
    text = scenario_text().replace('times = ["31557600 s", "315576000 s"]',
                                   'times = {start = "1 d", stop = "100 d", count = 3, '
                                   'spacing = "log"}')
    s = parse_scenario(text)
    np.testing.assert_allclose(s.times, [86400.0, 864000.0, 8640000.0], rtol=1e-14)


def test_uniform_initial_per_layer():
    text = scenario_text().replace('name = "clay"', 'name = "clay"\ninitial_concentration = "3 mg/L"')
    s = parse_scenario(text)
    assert s.initial.kind == "uniform"
    assert s.initial.values == pytest.approx((0.0, 3e-3))


def test_samples_inline_and_file(tmp_path):
    samples = '[initial]\nsamples = [["0 m", "80 mg/L"], ["50 cm", "40 mg/L"], ["2 m", "0 mg/L"]]\n'
    s = parse_scenario(scenario_text() + samples)
    assert s.initial.kind == "profile"
    assert s.initial.depths == pytest.approx((0.0, 0.5, 2.0), rel=1e-15)
    assert s.initial.values == pytest.approx((0.08, 0.04, 0.0), rel=1e-14)
    (tmp_path / "profile.csv").write_text("# measured (invented)\ndepth [cm],concentration [mg/L]\n"
                                          "0,80\n50,40\n200,0\n")
    scenario_file = tmp_path / "case.toml"
    scenario_file.write_text(scenario_text() + '[initial]\nsamples_file = "profile.csv"\n')
    s2 = load_scenario(scenario_file)
    assert s2.initial.depths == pytest.approx(s.initial.depths, rel=1e-14)
    assert s2.initial.values == pytest.approx(s.initial.values, rel=1e-14)
    assert s2.path == str(scenario_file)


# --- errors --------------------------------------------------------------------------

def test_error_names_file_key_value_and_fix():
    err = error_of(scenario_text(t2="-1.2 m"), "site/case.toml")
    text = str(err)
    assert text.startswith("site/case.toml: layers[2].thickness = '-1.2 m'")
    assert "Fix:" in text
    assert err.key == "layers[2].thickness"


@pytest.mark.parametrize("old, new, key", [
    ("porosity = 0.45", "porosity = 1.2", "layers[2].porosity"),
    ("porosity = 0.45", "porosity = nan", "layers[2].porosity"),
    ("porosity = 0.45", "porosity = 0", "layers[2].porosity"),
    ("porosity = 0.45", 'porosity = "abc"', "layers[2].porosity"),
    ('kind = "mass-transfer"', 'kind = "mass transfer"', "bottom.kind"),
    ('name = "trichloroethene"', 'name = "trichlorethene"', "chemical.name"),
    ('times = ["31557600 s", "315576000 s"]', 'times = ["1 m"]', "output.times[1]"),
    ('times = ["31557600 s", "315576000 s"]', 'times = "soon"', "output.times"),
    ('times = ["31557600 s", "315576000 s"]', 'times = []', "output.times"),
    ('depth_spacing = "0.1 m"', 'depth_spacing = "1 nm"', "output.depth_spacing"),
    ('receptor_depth = "2 m"', 'receptor_depth = "3 m"', "output.receptor_depth"),
    ('transfer_coefficient = "1e-7 m/s"', 'transfer_coefficient = "0 m/s"',
     "bottom.transfer_coefficient"),
    ('half_life = "157788000 s"', 'half_life = "-5 yr"', "layers[2].half_life"),
    ("organic_carbon_fraction = 0.002", "organic_carbon_fraction = 0.002\nretardation_factor = 2",
     "layers[1].retardation_factor"),
])
def test_bad_values_give_key_path(old, new, key):
    text = scenario_text()
    assert old in text
    err = error_of(text.replace(old, new, 1))
    assert err.key == key, str(err)


def test_unknown_key_suggests_spelling():
    err = error_of(scenario_text().replace("porosity = 0.45", "porosty = 0.45"))
    assert err.key == "layers[2].porosty"
    assert "did you mean 'porosity'" in str(err)
    err = error_of(scenario_text().replace("[flow]", "[flwo]"))
    assert "did you mean 'flow'" in str(err)


def test_partition_with_flow_rejected_with_key_path():
    """A partition jump needs q = 0 (model.Column rule), reported at the layer key."""
    text = scenario_text().replace('name = "fill"', 'name = "fill"\npartition_to_next = 20')
    err = error_of(text)
    assert err.key == "layers[1].partition_to_next"
    assert "darcy_flux" in str(err)
    ok = parse_scenario(text.replace(SI_UNITS["q"], "0 m/s"))
    assert ok.column.layers[0].partition_to_next == 20.0


def test_sample_below_bottom_rejected():
    text = scenario_text() + '[initial]\nsamples = [["0 m", "1 mg/L"], ["2.5 m", "0 mg/L"]]\n'
    err = error_of(text)
    assert err.key == "initial.samples[2][1]"
    assert "below the column bottom" in str(err)


def test_samples_file_nan_and_missing(tmp_path):
    (tmp_path / "p.csv").write_text("depth [m],concentration [mg/L]\n0,nan\n")
    (tmp_path / "a.toml").write_text(scenario_text() + '[initial]\nsamples_file = "p.csv"\n')
    with pytest.raises(ScenarioError, match="not a finite"):
        load_scenario(tmp_path / "a.toml")
    (tmp_path / "b.toml").write_text(scenario_text() + '[initial]\nsamples_file = "none.csv"\n')
    with pytest.raises(ScenarioError, match="cannot read"):
        load_scenario(tmp_path / "b.toml")


def test_toml_syntax_error_and_missing_file(tmp_path):
    err = error_of("title = \n")
    assert err.key == "(TOML syntax)"
    with pytest.raises(ScenarioError, match="cannot read"):
        load_scenario(tmp_path / "missing.toml")


def test_title_must_be_text():
    err = error_of(scenario_text().replace('title = "test column (invented)"', "title = 5"))
    assert err.key == "title"


def test_inlet_without_flow_rejected():
    text = scenario_text(q="0 m/s").replace('kind = "concentration"', 'kind = "inlet"')
    assert error_of(text).key == "top.kind"


def test_foc_for_metal_rejected():
    text = scenario_text().replace('name = "trichloroethene"', 'name = "cadmium"')
    err = error_of(text)
    assert err.key == "layers[1].organic_carbon_fraction"
    assert "distribution_coefficient" in str(err)


# --- fuzzing -------------------------------------------------------------------------

def _toml_value(value):
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, float):
        if math.isnan(value):
            return "nan"
        if math.isinf(value):
            return "inf" if value > 0 else "-inf"
        return repr(value)
    if isinstance(value, int):
        return str(value)
    if isinstance(value, str):
        return json.dumps(value)
    if isinstance(value, list):
        return "[" + ", ".join(_toml_value(v) for v in value) + "]"
    if isinstance(value, dict):
        return "{" + ", ".join(f"{json.dumps(k)} = {_toml_value(v)}" for k, v in value.items()) + "}"
    raise TypeError(type(value))


def _to_toml(data):
    """Minimal TOML writer for the fuzz test (top-level keys, tables, arrays of tables)."""
    lines = [f"{json.dumps(k)} = {_toml_value(v)}" for k, v in data.items()
             if not isinstance(v, dict) and not (isinstance(v, list) and v
                                                 and all(isinstance(x, dict) for x in v))]
    for k, v in data.items():
        if isinstance(v, dict):
            lines.append(f"[{json.dumps(k)}]")
            lines += [f"{json.dumps(kk)} = {_toml_value(vv)}" for kk, vv in v.items()]
        elif isinstance(v, list) and v and all(isinstance(x, dict) for x in v):
            for item in v:
                lines.append(f"[[{json.dumps(k)}]]")
                lines += [f"{json.dumps(kk)} = {_toml_value(vv)}" for kk, vv in item.items()]
    return "\n".join(lines) + "\n"


_scalars = st.one_of(
    st.text(max_size=12), st.integers(-10**6, 10**6), st.floats(allow_nan=True),
    st.booleans(),
    st.sampled_from(["-1 m", "0 m", "1e300 m", "nan mg/L", "5 yr", "2 m/s", "1 kg", "inf d",
                     "0.5", "1e-30 m^2/s", "abc", "millington-quirk", "none", "3 cm/d",
                     "1 L/kg", "-3 mg/L", "1e-300 m", ""]))
_values = st.one_of(_scalars, st.lists(_scalars, max_size=3),
                    st.lists(st.lists(_scalars, max_size=3), max_size=3),
                    st.dictionaries(st.sampled_from(["start", "stop", "count", "spacing", "x"]),
                                    _scalars, max_size=4))


def _paths(data, prefix=()):
    for k, v in data.items():
        yield prefix + (k,)
        if isinstance(v, dict):
            yield from _paths(v, prefix + (k,))
        elif isinstance(v, list) and v and all(isinstance(x, dict) for x in v):
            for i, item in enumerate(v):
                yield from _paths(item, prefix + (k, i))


def mutate(base, mutations):
    """A deep copy of ``base`` with each (path, new_key, value) put in place."""
    data = json.loads(json.dumps(base))
    for path, new_key, value in mutations:
        node = data
        for part in path[:-1]:
            # an earlier mutation may have replaced a parent: skip what no longer exists
            if isinstance(node, dict) and part in node:
                node = node[part]
            elif isinstance(node, list) and isinstance(part, int) and part < len(node):
                node = node[part]
            else:
                node = None
                break
        if isinstance(node, dict):
            if new_key is None or not isinstance(node.get(path[-1]), dict):
                node[path[-1] if new_key is None else new_key] = value
    return data


STARTER = tomllib.loads(starter_scenario_text())
STARTER_PATHS = list(_paths(STARTER))
MUTABLE_KEYS = ["thickness", "porosity", "water_content", "half_life", "partition_to_next",
                "kind", "times", "depths", "receptor_depth", "samples", "tortuosity",
                "pore_diffusivity", "darcy_flux", "concentration", "initial_concentration",
                "retardation_factor", "depth_spacing", "tolerance", "name", "porosty"]


@settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(st.lists(st.tuples(st.sampled_from(STARTER_PATHS), st.sampled_from(MUTABLE_KEYS + [None]),
                          _values), min_size=1, max_size=3))
def test_fuzz_mutated_scenarios_raise_only_scenario_error(mutations):
    """Valid starter scenario with random values put at random keys: parse_scenario
    either succeeds or raises ScenarioError, never anything else."""
    parses_or_raises_scenario_error(mutate(STARTER, mutations))


def parses_or_raises_scenario_error(data):
    """Parse ``data`` written as TOML (skipped if TOML cannot hold it): the only
    exception allowed is a ScenarioError with a message."""
    try:
        text = _to_toml(data)
    except TypeError:
        return
    try:
        parse_scenario(text)
    except ScenarioError as exc:
        assert exc.args


@settings(max_examples=150, deadline=None)
@given(st.text(alphabet=st.sampled_from(list('[]{}="\',.#\n -_0123456789abcdefkmsLgyrnt')),
               max_size=120))
def test_fuzz_random_text_raises_only_scenario_error(text):
    """Random TOML-ish text: only ScenarioError may escape."""
    try:
        parse_scenario(text)
    except ScenarioError:
        pass
