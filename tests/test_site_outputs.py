"""Site output files: CF DSG NetCDF, CRS, GeoJSON/GeoPackage/CSV, resumable runs.

External references used here:

* CF Conventions 1.11 (cfconventions.org), checked with the IOOS compliance-checker
  (``cf:1.11`` suite, as in NETCDF.md); UDUNITS-2 units checked with cf-units;
  netCDF4-python and xarray reading the file independently;
* pyproj (PROJ) for the CRS round trip (CRS.from_cf) and the lon/lat <-> UTM
  transformations;
* RFC 7946 (IETF 2016, The GeoJSON Format): sec. 3.3 FeatureCollection, sec. 3.1.1
  positions as [longitude, latitude] in WGS 84 (sec. 4), no "crs" member;
* pandas / pyogrio reading the CSV and GeoPackage back.

The site is the invented test yard of ``test_site.py``.
"""
from __future__ import annotations

import json

import netCDF4
import numpy as np
import pytest
import xarray as xr

from test_netcdf import failed_items, run_cf_checker
from test_site import write_small_site
from transport.caution import CAUTION
from transport.site.config import load_site
from transport.site.batch import solve_site
from transport.site.run import run_site

MC = """
[uncertainty]
realizations = 8
seed = 5
sampling = "random"
[[uncertainty.parameters]]
parameter = "materials.clay.distribution_coefficient"
distribution = "lognormal"
median = "1.0 L/kg"
log_sd = 0.5
[[uncertainty.parameters]]
parameter = "chemical.half_life"
distribution = "triangular"
low = "5 yr"
mode = "10 yr"
high = "30 yr"
"""


@pytest.fixture(scope="module")
def run(tmp_path_factory):
    folder = tmp_path_factory.mktemp("site-out")
    site = load_site(write_small_site(folder, extra=MC))
    files = run_site(site, folder / "out", workers=1, chunk_size=2)
    return site, files


def test_cf_checker_no_high_or_medium_failures(run):
    """CF-1.11 (IOOS compliance-checker 6.1, cf:1.11): zero failed HIGH and MEDIUM."""
    report = run_cf_checker(run[1].netcdf)
    assert failed_items(report, "high") == []
    assert failed_items(report, "medium") == []


def test_units_parse_and_long_names(run):
    """Every data variable's units parse with cf-units (UDUNITS-2), each has a
    long_name, time units read '<unit> since <date>' (CF 4.4)."""
    cf_units = pytest.importorskip("cf_units")
    with netCDF4.Dataset(run[1].netcdf) as nc:
        for name, var in nc.variables.items():
            if name in ("crs", "station_id", "depth_bnds"):
                continue
            assert "long_name" in var.ncattrs(), name
            if "units" in var.ncattrs():
                cf_units.Unit(var.units)
        assert " since " in nc["time"].units


def test_dsg_layout_opens_with_xarray_and_netcdf4(run):
    """Orthogonal multidimensional timeSeriesProfile (CF 9.3.1, H.5.1): dims
    (station, time, depth), station_id the only cf_role, fill below a boring's
    bottom, caution in the global comment; values equal the in-memory solve exactly
    (double precision)."""
    site, files = run
    with xr.open_dataset(files.netcdf, engine="netcdf4") as ds:
        assert ds.attrs["featureType"] == "timeSeriesProfile"
        assert ds.attrs["comment"] == CAUTION
        assert ds["concentration"].dims == ("station", "time", "depth")
        roles = [v for v in ds.variables if "cf_role" in ds[v].attrs]
        assert roles == ["station_id"]
        assert list(ds["station_id"].values) == site.ids
        conc = ds["concentration"].values
        p = ds["exceedance_probability"].values
    result = solve_site(site, workers=1, chunk_size=5)
    ref = result.fields["concentration"]
    assert np.array_equal(np.isnan(conc), np.isnan(ref))
    ok = ~np.isnan(ref)
    np.testing.assert_array_equal(conc[ok], ref[ok])
    np.testing.assert_array_equal(p, result.metrics["exceedance_probability"])
    with netCDF4.Dataset(files.netcdf) as nc:
        assert nc["concentration"]._FillValue == -9999.0
        assert nc["concentration"].grid_mapping == "crs"


def test_crs_round_trips_through_pyproj(run):
    """The crs variable (pyproj CRS.to_cf) reads back with CRS.from_cf as EPSG:32631."""
    import pyproj

    with netCDF4.Dataset(run[1].netcdf) as nc:
        attrs = {k: nc["crs"].getncattr(k) for k in nc["crs"].ncattrs()}
    assert pyproj.CRS.from_cf(attrs).to_epsg() == 32631
    assert "epsg_code" not in attrs


def test_geojson_is_rfc7946_and_reprojects_within_1mm(run):
    """RFC 7946: FeatureCollection of Points, [lon, lat] in WGS 84 ranges, no "crs"
    member; projecting the positions back to EPSG:32631 with pyproj gives the borings'
    x/y within 1 mm."""
    import pyproj

    site, files = run
    with open(files.geojson, encoding="utf-8") as fh:
        doc = json.load(fh)
    assert doc["type"] == "FeatureCollection"
    assert "crs" not in doc
    assert CAUTION in doc["description"]
    coords = np.array([f["geometry"]["coordinates"] for f in doc["features"]])
    assert all(f["geometry"]["type"] == "Point" for f in doc["features"])
    assert np.all((-180 <= coords[:, 0]) & (coords[:, 0] <= 180))
    assert np.all((-90 <= coords[:, 1]) & (coords[:, 1] <= 90))
    # lon first: the site is near 3 deg E, 50.5 deg N (UTM zone 31N, central meridian 3 E)
    assert np.all(np.abs(coords[:, 0] - 3.0) < 1.0) and np.all(coords[:, 1] > 50)
    x, y = pyproj.Transformer.from_crs(4326, 32631, always_xy=True).transform(
        coords[:, 0], coords[:, 1])
    ids = [f["properties"]["station_id"] for f in doc["features"]]
    want = {b.id: (b.x, b.y) for b in site.borings}
    err = np.hypot(x - [want[i][0] for i in ids], y - [want[i][1] for i in ids])
    assert err.max() < 1e-3


def test_geopackage_and_csv_read_back(run):
    """GeoPackage in the site CRS (pyogrio) and CSV (pandas, '#' comments) carry the
    NetCDF metrics with unit-named fields."""
    import geopandas as gpd
    import pandas as pd

    site, files = run
    gdf = gpd.read_file(files.geopackage, engine="pyogrio")
    assert gdf.crs.to_epsg() == 32631
    np.testing.assert_allclose(gdf.geometry.x, [b.x for b in site.borings], atol=1e-6)
    csv = pd.read_csv(files.csv, comment="#")
    for column in ("station_id", "x_m", "y_m", "lon_deg", "lat_deg", "breakthrough_yr",
                   "peak_conc_mg_L", "mass_to_receptor_kg_m2", "exceedance_probability",
                   "breakthrough_p50_yr", "peak_conc_p95_mg_L"):
        assert column in csv.columns
    with netCDF4.Dataset(files.netcdf) as nc:
        peak = nc["peak_concentration"][:] * 1000.0  # kg m-3 -> mg/L
    np.testing.assert_allclose(csv["peak_conc_mg_L"], peak, rtol=1e-9)
    with open(files.csv, encoding="utf-8") as fh:
        head = fh.read(2000)
    assert "EPSG:32631" in head and "CAUTION" in head


def test_interrupted_run_resumes_without_recomputing(tmp_path):
    """A run stopped after its first chunk leaves no output file but a sidecar; the
    next run reuses the finished chunk and gives the same file contents as an
    uninterrupted run (identity)."""
    site = load_site(write_small_site(tmp_path))

    class Stop(Exception):
        pass

    def stop_after_first(_):
        raise Stop

    out = tmp_path / "out"
    with pytest.raises(Stop):
        run_site(site, out, realizations=0, workers=1, chunk_size=2, progress=stop_after_first)
    assert not (out / "site.nc").exists()
    assert not [p for p in out.iterdir() if p.name.endswith(".part")]  # no partial file
    sidecar = json.loads((out / "site.nc.progress.json").read_text())
    assert sidecar["done"] == [0]
    files = run_site(site, out, realizations=0, workers=1, chunk_size=2)
    assert (files.chunks_reused, files.chunks_computed) == (1, 2)
    assert not (out / "site.nc.progress.json").exists()
    fresh = run_site(site, tmp_path / "fresh", realizations=0, workers=1, chunk_size=2)
    with netCDF4.Dataset(files.netcdf) as a, netCDF4.Dataset(fresh.netcdf) as b:
        for name in ("concentration", "cumulative_mass", "breakthrough_time"):
            np.testing.assert_array_equal(a[name][:].filled(np.nan), b[name][:].filled(np.nan))
    leftovers = [p.name for p in out.iterdir() if ".part" in p.name or p.name.startswith(".")]
    assert leftovers == []
