"""The file of ``stratiflux run`` written with netCDF4-python alone equals the file xarray
writes from the same layout: every dimension, variable (in order), dtype, attribute (in
order, with its type), fill value, compression filter, chunking and stored value.
Reference: xarray's ``Dataset.to_netcdf`` (netcdf4 engine), the writer used before.
The CF checks of tests/test_netcdf.py run on files of the direct writer.
"""
from __future__ import annotations

import datetime as dt
from dataclasses import replace
from pathlib import Path

import numpy as np
import pytest

from netcdf_dump import WRITE_TIME, differences, dump
from test_netcdf import fake_solution
from transport.analysis.summary import run_views
from transport.api import solve_scenario
from transport.io.netcdf import layout_dataset
from transport.io.netcdf_file import write_column_netcdf, write_layout
from transport.io.netcdf_layout import column_layout
from transport.scenario.schema import load_scenario

SCENARIOS = Path(__file__).resolve().parent.parent / "scenarios"


def both_writers(tmp_path, layout):
    """Dumps of ``layout`` written by xarray and by :func:`write_layout`."""
    by_xarray, direct = tmp_path / "xarray.nc", tmp_path / "direct.nc"
    layout_dataset(layout).to_netcdf(by_xarray, mode="w", format="NETCDF4", engine="netcdf4")
    write_layout(layout, direct)
    return dump(by_xarray), dump(direct)


def unreliable_solution():
    """The invented two-layer run with one refused output time (NaN fields, flagged)
    and per-time engines and error bounds, as ``run --allow-unreliable`` writes it."""
    base = fake_solution(nz=7)
    nt = base.times.size
    nan_row = np.where(np.arange(nt)[:, None] == 2, np.nan, 1.0)
    error = {key: np.where(np.arange(nt) == 2, np.nan, 1e-12 * (np.arange(nt) + 1))
             for key in ("concentration", "total_flux", "cumulative_mass", "budget")}
    return replace(base, concentration=base.concentration * nan_row,
                   total_flux=base.total_flux * nan_row,
                   engine_by_time=np.array(["initial", "modal", "", "laplace", "modal"],
                                           dtype=object),
                   reliable=np.array([1, 1, 0, 1, 1], dtype=bool), error=error,
                   tolerance=1e-8, engine="modal+laplace")


def test_invented_run_written_alike(tmp_path):
    """Invented two-layer run with scenario text, screening level, receptor, porosity
    and a calendar start: no item differs."""
    layout = column_layout(fake_solution(), title="Invented depot, boring B-3",
                           scenario_text='title = "Invented depot µg"\n',
                           screening_level=5e-6, receptor_depth=1.5, history="pytest",
                           porosity=[0.4, 0.5],
                           start_date=dt.datetime(2027, 3, 1, tzinfo=dt.timezone.utc))
    a, b = both_writers(tmp_path, layout)
    assert differences(a, b) == []


def test_refused_times_written_alike(tmp_path):
    """Missing values (NaN) become the fill value in both files; engine names, the
    reliable flags and the error bounds are stored alike."""
    layout = column_layout(unreliable_solution(), title="Invented, one time refused")
    a, b = both_writers(tmp_path, layout)
    assert differences(a, b) == []
    conc = b["variables"]["concentration"]["values"]
    assert np.all(conc[2] == -9999.0) and not np.isnan(conc).any()
    assert list(b["variables"]["engine"]["values"]) == [
        "initial", "modal", "none", "laplace", "modal"]


@pytest.mark.parametrize("name", ["spill-layered-column.toml", "spill-finite-source.toml",
                                  "sediment-cap.toml"])
def test_demo_runs_written_alike(tmp_path, name):
    """The demo scenarios as ``run`` writes them (receptor metrics, porosity, source
    zone): no item differs."""
    sc = load_scenario(SCENARIOS / name)
    solution, _ = solve_scenario(sc)
    out = sc.output
    views = run_views(solution, out.receptor_depth, out.screening_level, out.design_life)
    layout = column_layout(solution, title=sc.title, scenario_text=sc.source_text,
                           screening_level=out.screening_level,
                           receptor_depth=out.receptor_depth, history="stratiflux run",
                           metrics=views, start_date=getattr(out, "start_date", None))
    a, b = both_writers(tmp_path, layout)
    assert differences(a, b) == []
    assert layout.metrics or out.receptor_depth is None


def test_comparison_sees_a_changed_attribute_and_value(tmp_path):
    """The comparison can fail: one attribute and one stored value changed are found."""
    layout = column_layout(fake_solution(nz=5), title="Invented")
    a, _ = both_writers(tmp_path, layout)
    changed = dict(layout.data_vars)
    dims, values, attrs, encoding = changed["concentration"]
    values = np.array(values, copy=True)
    values[1, 1] += 1e-15
    changed["concentration"] = (dims, values, {**attrs, "units": "mg L-1"}, encoding)
    write_layout(replace(layout, data_vars=changed), tmp_path / "changed.nc")
    found = differences(a, dump(tmp_path / "changed.nc"))
    assert ("concentration", "values") in found
    assert any(d[:2] == ("concentration", "attributes") for d in found)


def test_run_file_equals_the_xarray_file_of_the_same_run(tmp_path):
    """write_column_netcdf (the command's writer) against the xarray Dataset of the same
    run (``column_dataset`` through ``to_netcdf``); only the write time may differ."""
    from transport.io.netcdf import column_dataset

    solution = fake_solution(nz=9)
    kwargs = dict(title="Invented", screening_level=5e-6, receptor_depth=1.5,
                  history="pytest", porosity=[0.4, 0.5])
    write_column_netcdf(solution, tmp_path / "run.nc", **kwargs)
    column_dataset(solution, **kwargs).to_netcdf(tmp_path / "xr.nc", format="NETCDF4",
                                                 engine="netcdf4")
    assert differences(dump(tmp_path / "xr.nc", drop=WRITE_TIME),
                       dump(tmp_path / "run.nc", drop=WRITE_TIME)) == []
