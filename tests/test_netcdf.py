"""CF NetCDF output of one column: compliance, units, round trip, atomic write.

External references used here:

* CF Conventions 1.11 (cfconventions.org), checked with the IOOS compliance-checker
  (``cf:1.11`` suite), a general-purpose reference implementation of the conventions;
* UDUNITS-2 unit grammar, checked with cf-units (the UDUNITS-2 C library binding);
* netCDF4-python reading the file independently of xarray.

The solution written is a :class:`transport.solvers.result.Solution` (the type every
engine returns) filled by hand; its fields are the semi-infinite fixed-surface
diffusion solution C = C0 erfc(z / (2 sqrt(D t / R))) (Crank 1975, *The Mathematics of
Diffusion*, 2nd ed., eq. 2.45 with a retarded time) so the file holds realistic data.
The checks below are on the file, not on the physics.
"""
from __future__ import annotations

import contextlib
import io
import json
import os
import re
from dataclasses import replace
from pathlib import Path

import netCDF4
import numpy as np
import pytest
from scipy.special import erfc

from transport.caution import CAUTION
from transport.io import netcdf_file
from transport.io.netcdf import (
    column_dataset,
    elapsed_seconds,
    read_column_netcdf,
    write_column_netcdf,
)
from transport.model.column import Boundary, Column, Layer
from transport.solvers.result import Solution

YEAR = 365.25 * 86400.0
BUDGET_KEYS = ("stored", "initial_stored", "entered_top", "left_bottom", "decayed",
               "produced", "residual")


def crank_surface(depth, times, c0=0.12, diffusivity=1e-9, retardation=2.0):
    """Crank (1975) eq. 2.45, continuous in time (0 at t = 0 below the surface)."""
    t = np.asarray(times, dtype=float)
    scale = np.sqrt(4.0 * diffusivity * np.maximum(t, 1e-300) / retardation)
    return np.where(t > 0, c0 * erfc(depth / scale), 0.0 if depth > 0 else c0)


def fake_solution(times_yr=(0.0, 1.0, 5.0, 10.0, 50.0), nz=41) -> Solution:
    """A two-layer column (invented demo values) with erfc fields."""
    layers = (Layer(0.8, 0.35, 1e-9, 2.0, name="fill"),
              Layer(1.2, 0.45, 4e-10, 6.0, decay_rate=1e-9, name="silty clay"))
    column = Column(layers, Boundary("concentration", 0.12), Boundary("free-outflow"),
                    darcy_flux=1e-9)
    times = np.asarray(times_yr, dtype=float) * YEAR
    depths = np.linspace(0.0, column.length, nz)
    conc = np.array([crank_surface(z, times) for z in depths]).T
    theta_d = 0.35 * 1e-9
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        t = np.maximum(times[:, None], 1e-300)
        flux = np.where(times[:, None] > 0, theta_d * 0.12 * np.exp(
            -depths[None, :] ** 2 * 2.0 / (4e-9 * t)) / np.sqrt(np.pi * 1e-9 * t / 2.0), 0.0)
    cumulative = np.cumsum(np.vstack([np.zeros(depths.size),
                                      np.diff(times)[:, None] * flux[1:]]), axis=0)
    budget = {key: np.linspace(0.0, 0.01 * (i + 1), times.size)
              for i, key in enumerate(BUDGET_KEYS)}
    return Solution(column=column, times=times, depths=depths, concentration=conc,
                    total_flux=flux, cumulative_mass=cumulative, budget=budget,
                    engine="modal", eigenvalues=np.array([1e-10, 4e-10, 9e-10]), n_modes=3,
                    evaluator=crank_surface)


def write_example(path, **kwargs):
    kwargs.setdefault("title", "Invented depot, boring B-3, no action")
    kwargs.setdefault("scenario_text",
                      'title = "Invented depot"\n[flow]\ndarcy_flux = "0.03 m/yr"\n')
    kwargs.setdefault("screening_level", 5e-6)
    kwargs.setdefault("receptor_depth", 1.5)
    kwargs.setdefault("history", "stratiflux run depot.toml")
    solution = kwargs.pop("solution", None) or fake_solution()
    write_column_netcdf(solution, path, **kwargs)
    return solution


def run_cf_checker(path) -> dict:
    """IOOS compliance-checker, cf:1.11 suite, as in NETCDF.md; returns the JSON report."""
    from compliance_checker.runner import CheckSuite, ComplianceChecker

    CheckSuite.load_all_available_checkers()
    buffer = io.StringIO()
    with contextlib.redirect_stdout(buffer):
        ComplianceChecker.run_checker(str(path), ["cf:1.11"], 0, "normal",
                                      output_filename="-", output_format="json")
    return json.loads(buffer.getvalue())["cf:1.11"]


def failed_items(report, priority) -> list:
    return [(item["name"], item["msgs"]) for item in report[f"{priority}_priorities"]
            if item["value"][0] < item["value"][1]]


@pytest.fixture(scope="module")
def written(tmp_path_factory):
    path = tmp_path_factory.mktemp("nc") / "column.nc"
    solution = write_example(path)
    return path, solution


# ------------------------------------------------------------------------ CF compliance
def test_cf_checker_no_high_or_medium_failures(written):
    """CF-1.11 (IOOS compliance-checker 6.1, cf:1.11): zero failed HIGH and MEDIUM."""
    report = run_cf_checker(written[0])
    assert failed_items(report, "high") == []
    assert failed_items(report, "medium") == []


def test_cf_checker_harness_detects_a_bad_file(tmp_path):
    """The harness can fail: an invented standard_name is a HIGH failure (CF 3.3)."""
    ds = column_dataset(fake_solution(), title="bad")
    ds["concentration"].attrs["standard_name"] = "pore_water_contaminant_thing"
    path = tmp_path / "bad.nc"
    ds.to_netcdf(path, format="NETCDF4")
    assert failed_items(run_cf_checker(path), "high")


def test_every_units_attribute_parses_with_udunits(written):
    """Every ``units`` attribute is valid UDUNITS-2 (cf-units); time is a reference time."""
    import cf_units

    with netCDF4.Dataset(written[0]) as nc:
        units = {name: var.getncattr("units") for name, var in nc.variables.items()
                 if "units" in var.ncattrs()}
        calendar = nc["time"].getncattr("calendar")
    assert {"concentration", "total_flux", "cumulative_mass", "time", "depth"} <= set(units)
    for name, text in units.items():
        unit = cf_units.Unit(text, calendar=calendar if name == "time" else None)
        assert not unit.is_unknown(), name
    assert " since " in units["time"]
    assert cf_units.Unit(units["time"], calendar=calendar).is_time_reference()
    # SI factors (UDUNITS-2): the file unit of each field is the SI unit used inside
    kg_m3 = cf_units.Unit("kg m-3")
    assert cf_units.Unit(units["concentration"]).convert(1.0, kg_m3) == 1.0
    assert cf_units.Unit("mg L-1").convert(1.0, kg_m3) == pytest.approx(1e-3, rel=1e-12)
    assert cf_units.Unit(units["total_flux"]) == cf_units.Unit("kg m-2 s-1")
    assert cf_units.Unit(units["cumulative_mass"]) == cf_units.Unit("kg m-2")


def test_data_variables_describe_themselves(written):
    """CF 3.2 long_name on every data variable; caution in each field and global comment."""
    with netCDF4.Dataset(written[0]) as nc:
        assert nc.getncattr("Conventions") == "CF-1.11"
        assert nc.getncattr("featureType") == "timeSeriesProfile"
        for attr in ("title", "summary", "source", "history", "references", "comment",
                     "date_created", "scenario_text"):
            assert nc.getncattr(attr), attr
        assert nc.getncattr("comment") == CAUTION
        assert "stratiflux run depot.toml" in nc.getncattr("history")
        assert "darcy_flux" in nc.getncattr("scenario_text")
        for name in ("concentration", "total_flux", "cumulative_mass", "stored_mass",
                     "mass_balance_residual"):
            var = nc[name]
            assert var.getncattr("long_name")
            assert var.getncattr("coverage_content_type") == "modelResult"
            assert CAUTION in var.getncattr("comment")
            assert "standard_name" not in var.ncattrs()  # none exists in CF for these
        assert "standard_name_vocabulary" not in nc.ncattrs()
        assert nc["station_id"].getncattr("cf_role") == "timeseries_id"


def test_coordinates_layout_and_encoding(written):
    """CF 4.3 depth positive down with contiguous bounds (CF 7.1); encoding per NETCDF.md."""
    path, solution = written
    with netCDF4.Dataset(path) as nc:
        depth = nc["depth"]
        assert depth.getncattr("positive") == "down"
        assert depth.getncattr("standard_name") == "depth"
        assert depth.getncattr("units") == "m"
        bounds = nc[depth.getncattr("bounds")][:]
        assert bounds[0, 0] == 0.0 and bounds[-1, 1] == pytest.approx(solution.column.length)
        np.testing.assert_array_equal(bounds[1:, 0], bounds[:-1, 1])
        assert np.all((bounds[:, 0] <= depth[:]) & (depth[:] <= bounds[:, 1]))
        time = nc["time"]
        assert time.dtype == np.float64
        assert time.getncattr("calendar") == "proleptic_gregorian"
        assert time.getncattr("units_metadata") == "leap_seconds: none"
        assert "nominal" in time.getncattr("comment")
        for name in ("time", "depth", "depth_bnds", "layer", "layer_top"):
            assert "_FillValue" not in nc[name].ncattrs(), name
        conc = nc["concentration"]
        # double precision: the stated tolerance (1e-8 by default) is below float32's 6e-8
        assert conc.dtype == np.float64
        assert conc.getncattr("_FillValue") == -9999.0
        assert conc.filters()["zlib"] and conc.filters()["shuffle"]
        assert conc.filters()["complevel"] == 4
        assert nc["stored_mass"].dtype == np.float64
        assert not any(dim.isunlimited() for dim in nc.dimensions.values())
        assert nc.data_model == "NETCDF4"


# --------------------------------------------------------------------------- round trip
def test_round_trip_xarray_and_netcdf4_agree(written):
    """xarray and netCDF4-python read the same numbers and units as were written."""
    path, solution = written
    ds = read_column_netcdf(path)
    expected = {
        "concentration": solution.concentration,
        "total_flux": solution.total_flux,
        "cumulative_mass": solution.cumulative_mass,
        "stored_mass": solution.budget["stored"],
        "mass_balance_residual": solution.budget["residual"],
    }
    with netCDF4.Dataset(path) as nc:
        for name, values in expected.items():
            np.testing.assert_array_equal(ds[name].values, values)
            np.testing.assert_array_equal(np.ma.getdata(nc[name][:]), values)
            assert ds[name].attrs["units"] == nc[name].getncattr("units")
        np.testing.assert_array_equal(nc["depth"][:], solution.depths)
        np.testing.assert_allclose(nc["time"][:] * 86400.0, solution.times, rtol=1e-15)
    np.testing.assert_array_equal(ds["depth"].values, solution.depths)
    np.testing.assert_allclose(elapsed_seconds(ds), solution.times, rtol=1e-15)
    assert list(ds["layer_name"].values) == ["fill", "silty clay"]
    np.testing.assert_array_equal(ds["layer_bottom"].values, solution.column.interfaces[1:])
    assert float(ds["screening_level"]) == 5e-6 and float(ds["receptor_depth"]) == 1.5


def test_long_design_life_times_survive_decoding(tmp_path):
    """Elapsed times of 1e5 yr (beyond datetime64[ns]) round-trip to the millisecond."""
    solution = fake_solution(times_yr=(0.0, 0.5, 1e3, 1e5), nz=5)
    path = tmp_path / "long.nc"
    write_example(path, solution=solution)
    decoded = elapsed_seconds(read_column_netcdf(path))
    raw = elapsed_seconds(read_column_netcdf(path, decode_times=False))
    np.testing.assert_allclose(decoded, solution.times, rtol=0, atol=5e-4)  # ms resolution
    np.testing.assert_allclose(raw, solution.times, rtol=1e-15)


def test_round_trip_property(tmp_path_factory):
    """Any finite field round-trips exactly (double precision; hypothesis property test)."""
    hypothesis = pytest.importorskip("hypothesis")
    from hypothesis import strategies as st
    from hypothesis.extra.numpy import arrays

    directory = tmp_path_factory.mktemp("prop")
    base = fake_solution(nz=6)
    finite = st.floats(-1e3, 1e3, allow_nan=False, width=32)

    @hypothesis.settings(max_examples=15, deadline=None)
    @hypothesis.given(arrays(np.float64, base.concentration.shape, elements=finite))
    def check(values):
        solution = replace(base, concentration=values, total_flux=values,
                           cumulative_mass=values)
        path = directory / "p.nc"
        write_column_netcdf(solution, path, title="property")
        np.testing.assert_array_equal(read_column_netcdf(path)["concentration"].values,
                                      values)

    check()


def test_rejects_mismatched_shapes():
    """A field whose shape is not (times, depths) is refused before any file is made."""
    good = fake_solution(nz=5)
    bad = replace(good, concentration=good.concentration[:, :-1])
    with pytest.raises(ValueError, match="concentration"):
        column_dataset(bad, title="bad")


# -------------------------------------------------------------------------- atomic write
def _leftovers(directory, keep):
    return sorted(p.name for p in directory.iterdir() if p.name not in keep)


def test_failure_mid_write_keeps_existing_file(tmp_path, monkeypatch):
    """A crash while writing leaves the previous output byte-identical, no temp file."""
    path = tmp_path / "out.nc"
    write_example(path, title="first run")
    before = path.read_bytes()
    real_write = netcdf_file.write_layout

    def crash_after_partial_write(layout, target):
        real_write(replace(layout, metrics={}), target)
        with open(target, "ab") as handle:
            handle.write(b"\0" * 128)  # the disk filled up half-way
        raise OSError(28, "No space left on device", str(target))

    monkeypatch.setattr(netcdf_file, "write_layout", crash_after_partial_write)
    with pytest.raises(OSError, match="No space left"):
        write_example(path, title="second run")
    assert path.read_bytes() == before
    assert _leftovers(tmp_path, {"out.nc"}) == []
    assert read_column_netcdf(path).attrs["title"] == "first run"


def test_failure_at_rename_removes_temp_file(tmp_path, monkeypatch):
    """If the final rename fails, the temporary file is removed and no output appears."""
    path = tmp_path / "new.nc"

    def refuse(src, dst):
        raise PermissionError(13, "Permission denied", str(dst))

    monkeypatch.setattr(os, "replace", refuse)
    with pytest.raises(PermissionError):
        write_example(path)
    assert _leftovers(tmp_path, set()) == []


def test_interrupt_during_write_removes_temp_file(tmp_path, monkeypatch):
    """Ctrl-C (KeyboardInterrupt) during the write also cleans up."""
    path = tmp_path / "out.nc"

    def interrupted(layout, target):
        raise KeyboardInterrupt

    monkeypatch.setattr(netcdf_file, "write_layout", interrupted)
    with pytest.raises(KeyboardInterrupt):
        write_example(path)
    assert _leftovers(tmp_path, set()) == []


def test_successful_write_replaces_file_and_leaves_no_temp(tmp_path):
    """A second successful write replaces the file in place; nothing else is left."""
    path = tmp_path / "out.nc"
    write_example(path, title="first run")
    write_example(path, title="second run")
    assert read_column_netcdf(path).attrs["title"] == "second run"
    assert _leftovers(tmp_path, {"out.nc"}) == []


def test_source_names_the_finite_volume_engine_of_a_finite_volume_run():
    """A run solved by the finite-volume engine says so in ``source`` (CF 1.11 section
    2.6.2: "the method of production of the original data"), and nothing of modes."""
    from transport.solvers.engines import solve_column

    column = Column((Layer(0.3, 0.4, 1e-9, 2.0), Layer(0.2, 0.3, 5e-10, 3.0)),
                    Boundary("concentration", 0.1), Boundary("free-outflow"))
    solution = solve_column(column, np.array([0.0, 0.5, 2.0]) * YEAR,
                            np.linspace(0.0, 0.5, 11), engine="finite-volume")
    served = {str(e) for e, t in zip(solution.engine_by_time, solution.times) if t > 0}
    assert served == {"finite-volume"}
    source = column_dataset(solution, title="fv").attrs["source"]
    assert "engine finite-volume: finite-volume method of lines" in source
    assert "eigenfunction" not in source and "modes" not in source


def test_source_counts_the_output_times_of_each_engine_of_a_mixed_run():
    """With per-time engine choices ``source`` names every engine with the number of
    output times it served (counted here from ``engine_by_time`` by hand), and gives no
    mode count where the run kept no modal series (n_modes = 0)."""
    base = fake_solution(times_yr=(0.0, 0.01, 1.0, 5.0, 10.0))
    by_time = np.array(["initial", "laplace", "modal", "modal", "modal"], dtype=object)
    solution = replace(base, engine_by_time=by_time, tolerance=1e-8, engine="laplace+modal",
                       n_modes=0)
    source = column_dataset(solution, title="mixed").attrs["source"]
    assert "engine laplace+modal:" in source
    assert "Talbot or parabolic contours (at 1 of 4 output times)" in source
    assert ("eigenfunction expansion on the exact layered spectrum, confirmed by numerical "
            "Laplace inversion (at 3 of 4 output times)") in source
    assert "0 modes" not in source


# ------------------------------------------------------------- receptor metrics variables
SPILL = Path(__file__).resolve().parent.parent / "scenarios" / "spill-layered-column.toml"


@pytest.fixture(scope="module")
def run_with_metrics(tmp_path_factory):
    from click.testing import CliRunner

    from transport.cli.main import main

    path = tmp_path_factory.mktemp("metrics") / "spill.nc"
    result = CliRunner().invoke(main, ["run", str(SPILL), "-o", str(path)])
    assert result.exit_code == 0, result.output
    return path, " ".join(result.output.split())


def _printed(text, pattern):
    found = re.search(pattern, text)
    assert found, pattern
    return found.groups()


def test_metrics_variables_equal_the_printed_ones(run_with_metrics):
    """The receptor metrics written as scalar variables are the numbers ``run`` prints
    (to the 4 significant digits printed), for the design life and the whole run, and
    the flags say what the printed text says. Reference: the printed reading."""
    path, text = run_with_metrics
    with netCDF4.Dataset(path) as nc:
        var = {name: float(nc[name][...]) for name in nc.variables
               if name.endswith(("_design_life", "_whole_run")) or name.startswith("peak_after")}
        units = {name: nc[name].units for name in var if "units" in nc[name].ncattrs()}
        assert all(CAUTION in nc[name].comment for name in var)
    yr = 365.25  # the variables hold days
    life_peak, life_peak_t, life_first, life_above, life_mass, life_flag = _printed(
        text, r"within the [\d.]+ yr design life: peak ([\d.e+-]+) mg/L at ([\d.e+-]+) yr; "
              r"screening level [\d.]+ ug/L first reached at ([\d.e+-]+) yr, above it for "
              r"([\d.e+-]+) yr; ([\d.e+-]+) mg/m2 passed downward; peak after the design "
              r"life: (\w+)")
    run_first, run_above = _printed(text, r"first reached at ([\d.e+-]+) yr, within the "
                                          r"[\d.]+ yr design life; above it for "
                                          r"([\d.e+-]+) yr up to")
    run_peak, = _printed(text, r"highest concentration ([\d.e+-]+) mg/L at the end")
    run_mass, = _printed(text, r"([\d.e+-]+) mg/m2 passed downward up to")
    run_flag, = _printed(text, r"peak after the end of the run: (\w+)")
    digits = 5e-4  # 4 significant digits
    checks = {"peak_concentration_design_life": float(life_peak) * 1e-3,
              "peak_time_design_life": float(life_peak_t) * yr,
              "first_exceedance_time_design_life": float(life_first) * yr,
              "time_above_level_design_life": float(life_above) * yr,
              "receptor_cumulative_mass_design_life": float(life_mass) * 1e-6,
              "first_exceedance_time_whole_run": float(run_first) * yr,
              "time_above_level_whole_run": float(run_above) * yr,
              "peak_concentration_whole_run": float(run_peak) * 1e-3,
              "receptor_cumulative_mass_whole_run": float(run_mass) * 1e-6}
    for name, printed in checks.items():
        assert var[name] == pytest.approx(printed, rel=digits), name
    assert var["peak_after_design_life"] == (life_flag == "yes")
    assert var["peak_after_run_end"] == (run_flag == "yes")
    assert units["peak_concentration_whole_run"] == "kg m-3"
    assert units["receptor_cumulative_mass_design_life"] == "kg m-2"
    assert units["peak_time_whole_run"] == "d"


def test_metrics_variables_pass_cf_checker(run_with_metrics):
    """CF-1.11 (IOOS compliance-checker, cf:1.11) with the metrics variables: zero failed
    HIGH and MEDIUM; every units attribute parses with UDUNITS-2 (cf-units)."""
    import cf_units

    path, _ = run_with_metrics
    report = run_cf_checker(path)
    assert failed_items(report, "high") == [] and failed_items(report, "medium") == []
    with netCDF4.Dataset(path) as nc:
        names = [n for n in nc.variables if n.endswith(("_design_life", "_whole_run"))]
        # six metrics and the flag of an exceedance at the start per window, and
        # peak_after_design_life
        assert len(names) == 2 * 7 + 1
        assert nc["peak_after_run_end"].flag_meanings == "no yes"
        assert nc["metrics_start"].units == "d"
        for name in names:
            assert nc[name].long_name
            if not name.startswith(("peak_after", "exceedance_at")):  # flags: no units
                assert not cf_units.Unit(nc[name].units).is_unknown(), name
