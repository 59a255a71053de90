"""Calendar start date of a run (``output.start_date``): the NetCDF time axis counts days
from it (CF Conventions 1.11 section 4.4, proleptic Gregorian calendar) and the printed
points in time carry their calendar date; without it nothing changes.

References: the time coordinate is decoded by cftime and by xarray's own CF decoder
(independent of the writer); printed dates are compared with Python's ``datetime``
arithmetic on the same elapsed seconds. A year of output times is the Julian year,
365.25 d of 86400 s (IAU; as :data:`transport.units.YEAR`).
"""
import datetime as dt
import re

import cftime
import netCDF4
import numpy as np
import pytest
import xarray as xr
from click.testing import CliRunner

from transport.analysis.summary import format_time
from transport.cli.main import main
from transport.model.column import Boundary, Column, Layer
from transport.solvers.modal.series import solve as modal_solve
from transport.solvers.modal.sizing import ModeCapWarning
from transport.scenario.schema import ScenarioError, parse_scenario

JULIAN_YEAR_S = 365.25 * 86400.0  # Julian year (IAU), written out as the reference
UTC = dt.timezone.utc

# An invented single-layer slab (demo inputs only).
SLAB = """\
title = "Invented test slab"

[[layers]]
name = "uniform clay"
thickness = "3 m"
porosity = 0.4
retardation_factor = 2.0
pore_diffusivity = "1e-9 m^2/s"

[top]
kind = "concentration"
concentration = "100 mg/L"

[bottom]
kind = "concentration"
concentration = "0 mg/L"

[output]
times = {{ start = "0.1 yr", stop = "5 yr", count = 6 }}
depth_spacing = "5 cm"
receptor_depth = "0.5 m"
screening_level = "10 mg/L"
{extra}
"""
TIMES_YR = np.linspace(0.1, 5.0, 6)


def run(tmp_path, extra=""):
    path = tmp_path / "slab.toml"
    path.write_text(SLAB.format(extra=extra))
    out = tmp_path / "slab.nc"
    result = CliRunner().invoke(main, ["run", str(path), "-o", str(out)])
    assert result.exit_code == 0, result.output
    return out, " ".join(result.output.split())


@pytest.fixture(scope="module")
def dated(tmp_path_factory):
    return run(tmp_path_factory.mktemp("dated"), 'start_date = "2027-03-01"')


@pytest.fixture(scope="module")
def undated(tmp_path_factory):
    return run(tmp_path_factory.mktemp("undated"))


def expected(start, years):
    """Python datetime arithmetic: start + elapsed seconds (Julian years)."""
    return [start + dt.timedelta(seconds=float(y) * JULIAN_YEAR_S) for y in years]


def test_netcdf_time_decodes_to_start_plus_elapsed_time_with_cftime(dated):
    path, _ = dated
    start = dt.datetime(2027, 3, 1)
    with netCDF4.Dataset(path) as nc:
        time = nc["time"]
        assert time.units == "days since 2027-03-01 00:00:00"
        assert time.calendar == "proleptic_gregorian"
        decoded = cftime.num2date(time[:], time.units, time.calendar,
                                  only_use_cftime_datetimes=False,
                                  only_use_python_datetimes=True)
    for got, want in zip(decoded, expected(start, TIMES_YR)):
        assert abs((got - want).total_seconds()) < 1e-3, (got, want)


def test_netcdf_time_decodes_to_start_plus_elapsed_time_with_xarray(dated):
    path, _ = dated
    start = np.datetime64("2027-03-01T00:00:00", "ns")
    with xr.open_dataset(path, decode_times=True) as ds:
        got = ds["time"].values
    want = [start + np.timedelta64(int(round(y * JULIAN_YEAR_S * 1e9)), "ns")
            for y in TIMES_YR]
    err = np.abs((got - np.array(want)) / np.timedelta64(1, "ms"))
    assert err.max() < 1.0


def test_offset_is_converted_to_utc(tmp_path):
    path, _ = run(tmp_path, 'start_date = "2027-03-01T06:30:00+02:00"')
    with netCDF4.Dataset(path) as nc:
        assert nc["time"].units == "days since 2027-03-01 04:30:00"
        first = cftime.num2date(nc["time"][0], nc["time"].units, "proleptic_gregorian",
                                only_use_python_datetimes=True,
                                only_use_cftime_datetimes=False)
    want = dt.datetime(2027, 3, 1, 4, 30) + dt.timedelta(seconds=0.1 * JULIAN_YEAR_S)
    assert abs((first - want).total_seconds()) < 1e-3


def test_printed_dates_equal_datetime_arithmetic(dated):
    _, text = dated
    start = dt.datetime(2027, 3, 1, tzinfo=UTC)
    pairs = re.findall(r"(\d+(?:\.\d+)?) yr \((\d{4}-\d{2}-\d{2})\)", text)
    assert pairs, text
    # the end of the run (5 yr = 1826.25 d) is named with its date
    end = (start + dt.timedelta(seconds=5 * JULIAN_YEAR_S)).strftime("%Y-%m-%d")
    assert f"up to 5 yr ({end})" in text
    # every printed date is the day on which the printed elapsed time falls, within the
    # rounding of the years to 4 significant digits (half a unit of the 4th) and a day
    for years, date in pairs:
        got = dt.datetime.strptime(date, "%Y-%m-%d").replace(tzinfo=UTC)
        want = start + dt.timedelta(seconds=float(years) * JULIAN_YEAR_S)
        half_digit = 0.5 * 10.0 ** (np.floor(np.log10(float(years))) - 3) * JULIAN_YEAR_S
        assert abs((got - want).total_seconds()) <= 86400 + half_digit, (years, date)


@pytest.mark.parametrize("seconds", [0.0, 86400.0 * 3, 3.512 * JULIAN_YEAR_S,
                                     100 * JULIAN_YEAR_S, 1234.5 * JULIAN_YEAR_S])
def test_format_time_date_is_datetime_arithmetic(seconds):
    start = dt.datetime(2027, 3, 1, tzinfo=UTC)
    want = (start + dt.timedelta(seconds=seconds)).strftime("%Y-%m-%d")
    text = format_time(seconds, start)
    assert text == f"{format_time(seconds)} ({want})"


@pytest.mark.parametrize("raw", ['"2027-13-01"', '"March 2027"', '"2027-03-01T25:00"',
                                 '"01.03.2027"', "2027"])
def test_malformed_date_is_refused_naming_the_key(raw):
    with pytest.raises(ScenarioError) as info:
        parse_scenario(SLAB.format(extra=f"start_date = {raw}"), "slab.toml")
    message = str(info.value)
    assert "output.start_date" in message
    assert "2027-03-01" in message  # the example of a valid date


def test_bare_toml_date_is_taken():
    sc = parse_scenario(SLAB.format(extra="start_date = 2027-03-01"), "slab.toml")
    assert sc.output.start_date == dt.datetime(2027, 3, 1, tzinfo=UTC)


def test_no_start_date_keeps_nominal_units_and_no_dates(undated):
    path, text = undated
    sc = parse_scenario(SLAB.format(extra=""), "slab.toml")
    assert sc.output.start_date is None
    with netCDF4.Dataset(path) as nc:
        # the nominal start the files have always carried (CF 4.4 reference time)
        assert nc["time"].units == "days since 2000-01-01 00:00:00"
        assert "nominal start" in nc["time"].comment
    assert not re.search(r"\d{4}-\d{2}-\d{2}", text.split("Results:")[0])


def test_mode_cap_warning_names_years_not_seconds():
    """A person reads elapsed years in warnings (1 d = 1/365.25 yr, Julian year)."""
    layers = (Layer(3.0, 0.4, 1e-9, 2.0, name="uniform clay"),)
    column = Column(layers, Boundary("concentration", 0.1), Boundary("concentration", 0.0))
    day = 86400.0
    with pytest.warns(ModeCapWarning) as record:
        modal_solve(column, np.array([day, 10 * day]), np.linspace(0, 3, 7), max_modes=20)
    text = str(record[0].message)
    assert f"{day / JULIAN_YEAR_S:.4g} yr after a change" in text
    assert not re.search(r"\d s\b", text)
