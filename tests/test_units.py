"""Unit parsing: SI definitions and error messages (transport.units)."""
import importlib.util
import math

import pytest
from hypothesis import given, strategies as st

from transport.units import UnitError, to_si, ureg

JULIAN_YEAR_S = 365.25 * 86400.0  # IAU Julian year (IAU Style Manual, 1989)


def test_year_is_julian_year():
    """1 yr = 365.25 d = 31 557 600 s (IAU Julian year)."""
    assert to_si("1 yr", "time", "t") == JULIAN_YEAR_S
    assert to_si("1 year", "time", "t") == JULIAN_YEAR_S


def test_day_is_86400_s():
    """1 d = 86 400 s (SI Brochure, 9th ed. 2019, Table 8: non-SI units accepted)."""
    assert to_si("30 d", "time", "t") == 30 * 86400.0


@pytest.mark.parametrize("text, dimension, expected", [
    # SI Brochure 2019: 1 L = 1e-3 m3, 1 mg = 1e-6 kg, so 1 mg/L = 1e-3 kg/m3
    ("120 mg/L", "concentration", 120e-3),
    ("5 ug/L", "concentration", 5e-6),
    ("5 µg/L", "concentration", 5e-6),
    ("1.7 g/cm^3", "density", 1700.0),
    ("60 L/kg", "specific_volume", 60e-3),
    ("1.6e-9 m**2/s", "diffusivity", 1.6e-9),
    ("1.6e-9 m^2/s", "diffusivity", 1.6e-9),
    ("1.6e-9 m2/s", "diffusivity", 1.6e-9),  # UDUNITS-style exponent
    ("1 kg m-3", "concentration", 1.0),      # UDUNITS-style exponent
    ("5 cm/d", "velocity", 0.05 / 86400.0),
    ("0.05 m/yr", "velocity", 0.05 / JULIAN_YEAR_S),
    ("5 yr", "time", 5 * JULIAN_YEAR_S),
    ("2 mm", "length", 2e-3),
    ("0.1 1/d", "rate", 0.1 / 86400.0),
    ("2 g/m^2/d", "mass_flux", 2e-3 / 86400.0),
    ("0.5 mg/L/d", "mass_rate_density", 0.5e-3 / 86400.0),
    ("35 %", "dimensionless", 0.35),
    ("0.35", "dimensionless", 0.35),
    (0.35, "dimensionless", 0.35),
])
def test_parse_to_si(text, dimension, expected):
    """Values from the SI definitions of the units (SI Brochure 2019; Julian year)."""
    assert to_si(text, dimension, "k") == pytest.approx(expected, rel=1e-14)


@pytest.mark.parametrize("text, dimension", [
    ("5 m", "time"), ("120 mg/L", "length"), ("abc", "length"), ("", "length"),
    ("1 foo", "length"), ("nan m", "length"), ("1e400 m", "length"), ("inf yr", "time"),
    ("5 m/s/", "velocity"), ("1 m**99**99**99", "length"), (3.0, "length"),
])
def test_bad_values_raise_unit_error_naming_key_and_example(text, dimension):
    """Wrong dimension, unparsable or non-finite text: UnitError naming key and an example."""
    with pytest.raises(UnitError) as info:
        to_si(text, dimension, "layers[2].thickness")
    message = str(info.value)
    assert "layers[2].thickness" in message
    assert "for example" in message
    assert repr(text) in message


def test_bool_and_none_rejected():
    """True/None are not quantities even though bool is an int in Python."""
    for value in (True, None, [1], {"a": 1}):
        with pytest.raises(UnitError):
            to_si(value, "dimensionless", "k")


def test_unit_error_is_value_error():
    assert issubclass(UnitError, ValueError)


def test_pint_quantity_accepted():
    """A pint Quantity from the project registry converts like text."""
    assert to_si(ureg.Quantity(2.0, "cm"), "length", "k") == pytest.approx(0.02, rel=1e-15)


@given(st.text(max_size=40))
def test_fuzz_only_unit_error(text):
    """Arbitrary text either parses to a finite float or raises UnitError."""
    try:
        value = to_si(text, "length", "k")
    except UnitError:
        return
    assert math.isfinite(value)


# --- units practitioners type -------------------------------------------------------

@pytest.mark.parametrize("text, mg_per_l", [("2 ppm", 2.0), ("2.5 PPM", 2.5),
                                            ("7 ppb", 7e-3), ("0 ppb", 0.0)])
def test_ppm_ppb_in_water(text, mg_per_l):
    """In water 1 ppm = 1 mg/L and 1 ppb = 1 ug/L: a mass fraction 1e-6 (1e-9) of a
    dilute solution of density 1 kg/L; 1 L = 1e-3 m^3 (SI Brochure, 9th ed. 2019,
    Table 8), so 1 mg/L = 1e-3 kg m-3.  The fraction is pint's own ppm (1e-6)."""
    frac = ureg.Quantity(1, "ppm").to("dimensionless").magnitude
    assert frac == pytest.approx(1e-6, rel=1e-15)
    assert to_si(text, "concentration", "c") == pytest.approx(
        mg_per_l * 1e-6 * 1e3, rel=1e-12, abs=1e-30)  # mg/L * (kg/mg) / (m^3/L)


@pytest.mark.parametrize("text, dimension", [
    ("3 ppm", "dimensionless"),     # a soil or mass fraction: by mass or volume?
    ("3 ppb", "dimensionless"),
    ("3 ppm", "density"),
    ("1 ppt", "concentration"),     # parts per thousand or per trillion (pint: a pottle)
    ("1 ppm/L", "concentration"),
])
def test_ambiguous_parts_per_are_refused(text, dimension):
    with pytest.raises(UnitError, match="ppm|ppb|ppt"):
        to_si(text, dimension, "key")


@pytest.mark.parametrize("text", ["120 mm/y", "120 mm/yr", "120 mm/a", "120 mm y-1",
                                  "120 mm/year"])
def test_mm_per_year(text):
    """mm/y, mm/yr and mm/a are one millimetre per Julian year, 1e-3 m / 31 557 600 s
    (IAU), as pint converts mm/year."""
    ref = ureg.Quantity(120, "mm/year").to("m/s").magnitude
    assert to_si(text, "velocity", "q") == pytest.approx(ref, rel=1e-14)
    assert to_si(text, "velocity", "q") == pytest.approx(0.12 / JULIAN_YEAR_S, rel=1e-14)


def test_percent_for_fractions():
    """1 % = 1e-2 (ISO 80000-1)."""
    assert to_si("0.4 %", "dimensionless", "foc") == pytest.approx(0.004, rel=1e-15)
    assert to_si("35 %", "dimensionless", "n") == pytest.approx(0.35, rel=1e-15)


def test_pint_loads_without_dask_and_dask_still_imports():
    """transport.units imports pint without letting it load Dask (start-up time,
    benchmarks/bench_startup.py), converts as before, and leaves Dask importable
    afterwards (site runs use it). Checked in a fresh interpreter."""
    import subprocess
    import sys

    code = ("import sys, transport.units as u;"
            "print('dask' in sys.modules, 'dask' in sys.modules and sys.modules['dask'] is None);"
            "print(u.to_si('5 cm/d', 'velocity'));"
            "import importlib.util; print(importlib.util.find_spec('dask') is not None)")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                         check=True).stdout.split("\n")
    assert out[0] == "False False"
    assert float(out[1]) == pytest.approx(0.05 / 86400.0, rel=1e-15)
    if importlib.util.find_spec("dask") is not None:  # installed: found again afterwards
        assert out[2] == "True"
