"""Measured initial pore-water profiles per boring in a site run.

Checks against things outside the site code path: the single-column solver
(:func:`transport.solvers.modal.series.solve`, an independent entry point) on the boring's own
scenario, numpy's linear interpolation for the state at t = 0 (the definition of a
piecewise-linear profile), and identity with the clean run for borings without samples.
The test site and its samples are invented.
"""
from __future__ import annotations

import textwrap

import numpy as np
import pytest

from test_site import SITE_TOML, assert_station_equals_column_run, write_small_site
from transport.scenario.schema import ScenarioError
from transport.site.config import boring_scenario, load_site
from transport.site.batch import solve_site
from transport.site.run import run_site

MG_L = 1e-3  # kg m-3

SAMPLES = textwrap.dedent("""\
    id,depth [m],concentration [mg/L]
    # T-2: residual contamination around the clay (invented)
    T-2,0.2,0.4
    T-2,0.9,2.5
    T-2,1.6,0.8
    T-5,1.0,1.2
    """)

TOML = SITE_TOML.replace('log_file = "log.csv"',
                         'log_file = "log.csv"\ninitial_file = "pore-water.csv"').replace(
    'times = ["1 yr", "5 yr", "20 yr"]', 'times = ["0 yr", "1 yr", "5 yr", "20 yr"]')


def _site(folder, samples=SAMPLES):
    (folder / "pore-water.csv").write_text(samples, encoding="utf-8")
    return load_site(write_small_site(folder, toml=TOML))


@pytest.fixture(scope="module")
def runs(tmp_path_factory):
    site = _site(tmp_path_factory.mktemp("initial"))
    clean = load_site(write_small_site(tmp_path_factory.mktemp("clean"),
                                       toml=TOML.replace('initial_file = "pore-water.csv"\n',
                                                         "")))
    return (site, solve_site(site, realizations=0, workers=1, chunk_size=2),
            solve_site(clean, realizations=0, workers=1, chunk_size=2))


def test_station_with_a_profile_equals_the_single_column_run(runs):
    """T-2 with its samples: the station equals modal.solve on the boring's scenario
    (same column, same piecewise-linear initial state) to 1e-12 of the peak, and at
    t = 0 it is the samples' linear interpolation, constant beyond the end samples."""
    site, result, _ = runs
    k = site.ids.index("T-2")
    sc = boring_scenario(site, "T-2")
    assert sc.initial.kind == "profile"
    _, inside = assert_station_equals_column_run(site, result, "T-2", sc)
    got = result.fields["concentration"][k][:, inside]
    expected0 = np.interp(site.depths[inside], [0.2, 0.9, 1.6], [0.4 * MG_L, 2.5 * MG_L, 0.8 * MG_L])
    np.testing.assert_allclose(got[0], expected0, rtol=1e-14, atol=0)


def test_borings_without_samples_are_the_clean_run(runs):
    """Identity: T-1, T-3 and T-4 have no rows in the file, so they start clean and
    equal the run of the same site without an initial file; T-2 differs."""
    site, result, clean = runs
    for bid in ("T-1", "T-3", "T-4"):
        k = site.ids.index(bid)
        np.testing.assert_array_equal(result.fields["concentration"][k],
                                      clean.fields["concentration"][k])
    k = site.ids.index("T-2")
    assert not np.allclose(result.fields["concentration"][k][1],
                           clean.fields["concentration"][k][1], equal_nan=True)


def test_bad_samples_name_every_offending_boring(tmp_path):
    """Unknown boring, a depth below the log, a negative value, two samples at one depth:
    ONE ScenarioError listing each boring with file and line (common practice: report
    all input problems at once)."""
    bad = textwrap.dedent("""\
        id,depth [m],concentration [mg/L]
        T-1,3.0,1.0
        T-2,0.5,-0.1
        T-3,0.4,1.0
        T-3,0.4,2.0
        T-7,0.5,1.0
        T-4,0.5,1.0
        """)
    with pytest.raises(ScenarioError) as info:
        _site(tmp_path, bad)
    message = str(info.value)
    assert set(info.value.borings) == {"T-1", "T-2", "T-3", "T-7"}
    assert "pore-water.csv line 2: depth 3 m outside the log (0 to 2.5 m)" in message
    assert "line 3: negative concentration" in message
    assert "lines 4 and 5: two samples at 0.4 m" in message
    assert "line 6: no such boring in borings.csv" in message


def test_samples_need_units_in_the_header(tmp_path):
    with pytest.raises(ScenarioError) as info:
        _site(tmp_path, "id,depth [m],concentration\nT-1,0.5,1.0\n")
    assert "concentration" in str(info.value) and "unit" in str(info.value)


def test_outputs_record_which_borings_start_contaminated(tmp_path):
    """The site NetCDF carries the sample count per station (a reviewer sees which
    borings did not start clean) and the GIS table repeats it."""
    import csv

    import netCDF4

    site = _site(tmp_path)
    files = run_site(site, tmp_path / "out", realizations=0, workers=1)
    with netCDF4.Dataset(files.netcdf) as nc:
        counts = dict(zip(nc["station_id"][:], nc["initial_samples"][:].tolist()))
    assert counts == {"T-1": 0, "T-2": 3, "T-3": 0, "T-4": 0, "T-5": 1}
    with open(files.csv, newline="", encoding="utf-8") as fh:
        lines = [ln for ln in fh if not ln.startswith("#")]  # the file's comment header
        rows = {r["station_id"]: r["initial_samples"] for r in csv.DictReader(lines)}
    assert rows == {"T-1": "0", "T-2": "3", "T-3": "0", "T-4": "0", "T-5": "1"}
