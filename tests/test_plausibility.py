"""Plausibility warnings: values the model accepts but that lie outside the usual field
range of their key warn (PlausibilityWarning) with the range and its source; a fraction
that looks like a percentage gets the percent reading; errors stay errors.

Ranges and sources as in ``transport.scenario.reader.PLAUSIBLE_RANGES``: porosity of
unconsolidated deposits 0.25-0.70 (Freeze & Cherry 1979, table 2.4); field
dispersivities (Gelhar, Welty & Rehfeldt 1992); the others "from memory", marked so.
"""
import warnings
from pathlib import Path

import pytest

from transport.scenario.reader import PLAUSIBLE_RANGES, PlausibilityWarning
from transport.scenario.schema import ScenarioError, parse_scenario
from transport.site.config import parse_site

BASE = """
[chemical]
free_water_diffusivity = "1e-9 m^2/s"
organic_carbon_partition = "{koc}"
[flow]
darcy_flux = "{q}"
[[layers]]
name = "fill"
thickness = "1 m"
porosity = {n}
bulk_density = "{rho}"
organic_carbon_fraction = {foc}
dispersivity = "{alpha}"
half_life = "{hl}"
[top]
kind = "concentration"
concentration = "1 mg/L"
[bottom]
kind = "free-outflow"
[output]
times = ["1 yr"]
"""
GOOD = dict(koc="100 L/kg", q="0.1 m/yr", n="0.35", rho="1.6 g/cm^3", foc="0.002",
            alpha="0.1 m", hl="5 yr")


def _load(**changes):
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        parse_scenario(BASE.format(**{**GOOD, **changes}), "site.toml")
    return [w.message for w in caught if issubclass(w.category, PlausibilityWarning)]


def test_usual_values_do_not_warn():
    assert _load() == []


@pytest.mark.parametrize("change, key, source", [
    (dict(n="0.85"), "porosity", "Freeze & Cherry 1979"),       # above 0.70, table 2.4
    (dict(n="0.12"), "porosity", "Freeze & Cherry 1979"),       # below 0.25
    (dict(rho="2.6 g/cm^3"), "bulk_density", "from memory"),    # a particle density
    (dict(foc="0.4"), "organic_carbon_fraction", "from memory"),
    (dict(koc="3e7 L/kg"), "organic_carbon_partition", "from memory"),
    (dict(hl="2 h"), "half_life", "from memory"),
    (dict(q="5 m/yr"), "darcy_flux", "from memory"),
    (dict(alpha="40 m"), "dispersivity", "Gelhar"),
])
def test_each_range_warns_with_its_source(change, key, source):
    got = _load(**change)
    assert len(got) == 1
    w = got[0]
    assert w.file == "site.toml" and w.key.endswith(key) and source in w.source
    text = str(w)
    assert "\n" not in text and "site.toml" in text and key in text and "usual range" in text
    assert PLAUSIBLE_RANGES[key][4] == w.source


def test_fraction_that_looks_like_a_percent_gets_the_percent_reading():
    """foc 0.4 read as 0.4 % = 0.004 (inside the usual range <= 0.1)."""
    (w,) = _load(foc="0.4")
    assert 'did you mean 0.4 % = 0.004? write "0.4 %"' in str(w)


def test_percent_units_are_accepted_for_fractions():
    """ "0.4 %" is 0.004 (percent = 1e-2, ISO 80000-1) and warns about nothing."""
    assert _load(foc='"0.4 %"', n='"35 %"') == []
    sc = parse_scenario(BASE.format(**{**GOOD, "n": '"35 %"'}))
    assert sc.column.layers[0].water_content == pytest.approx(0.35, rel=1e-12)


def test_porosity_as_a_percent_stays_an_error_with_the_percent_reading():
    with pytest.raises(ScenarioError, match=r'did you mean 35 % = 0.35\? write "35 %" or 0.35'):
        parse_scenario(BASE.format(**{**GOOD, "n": "35"}))


def test_site_materials_warn_too():
    """A site's materials are read by the same reader (transport/site/columns.py)."""
    site = Path(__file__).resolve().parent.parent / "data" / "site-demo" / "site.toml"
    text = site.read_text()
    assert "porosity = 0.38" in text
    bad = text.replace("porosity = 0.38", "porosity = 0.9", 1)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        parse_site(bad, site)
    got = [w.message for w in caught if issubclass(w.category, PlausibilityWarning)]
    assert got and got[0].key.startswith("materials.") and got[0].key.endswith("porosity")
