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


# ------------------------------------------------------------ WGS 84 geographic fields
#: Ordnance Survey (2020), A guide to coordinate systems in Great Britain, Annexe A
#: (Airy 1830 ellipsoid of OSGB36) and sec. 6.6, Table 6 (the 7-parameter Helmert
#: transformation between WGS 84 and OSGB36, "accurate to about 5 m"), here inverted
#: (OSGB36 -> WGS 84, signs changed): tx, ty, tz (m), scale (ppm), rx, ry, rz (arc-s).
AIRY_1830 = (6377563.396, 6356256.909)
WGS84_ELLIPSOID = (6378137.0, 6356752.314245)
OSGB36_TO_WGS84 = (446.448, -125.157, 542.060, -20.4894, 0.1502, 0.2470, 0.8421)
#: Invented positions on the British National Grid (EPSG:27700), m.
BNG_BORINGS = """\
id,x [m],y [m],ground_elevation [m]
T-1,451210.0,206340.0,20.0
T-2,451240.5,206350.25,20.4
T-3,451271.0,206360.5,20.9
T-4,451301.5,206370.75,21.1
T-5,451332.0,206381.0,21.6
"""


def _geocentric(lon, lat, ellipsoid):
    """Geodetic (deg, on the ellipsoid surface) -> Earth-centred X, Y, Z (m)
    (Ordnance Survey 2020, Annexe B, eq. B1-B3)."""
    a, b = ellipsoid
    e2 = 1 - b * b / (a * a)
    phi, lam = np.radians(lat), np.radians(lon)
    nu = a / np.sqrt(1 - e2 * np.sin(phi) ** 2)
    return (nu * np.cos(phi) * np.cos(lam), nu * np.cos(phi) * np.sin(lam),
            (1 - e2) * nu * np.sin(phi))


def _geodetic(x, y, z, ellipsoid):
    """Earth-centred X, Y, Z -> geodetic lon, lat (deg), by the iteration of Ordnance
    Survey (2020), Annexe B, eq. B5-B7 (converged to far below a millimetre)."""
    a, b = ellipsoid
    e2 = 1 - b * b / (a * a)
    p = np.hypot(x, y)
    phi = np.arctan2(z, p * (1 - e2))
    for _ in range(10):
        nu = a / np.sqrt(1 - e2 * np.sin(phi) ** 2)
        phi = np.arctan2(z + e2 * nu * np.sin(phi), p)
    return np.degrees(np.arctan2(y, x)), np.degrees(phi)


def _helmert_osgb36_to_wgs84(lon, lat):
    tx, ty, tz, s, rx, ry, rz = OSGB36_TO_WGS84
    x, y, z = _geocentric(lon, lat, AIRY_1830)
    rx, ry, rz = np.radians(np.array([rx, ry, rz]) / 3600.0)
    k = 1 + s * 1e-6
    return _geodetic(tx + k * (x - rz * y + ry * z), ty + k * (rz * x + y - rx * z),
                     tz + k * (-ry * x + rx * y + z), WGS84_ELLIPSOID)


def _metres(dlon, dlat, lat):
    """Ground distance of a small lon/lat difference (m, mean Earth radius 6371 km)."""
    r = 6371000.0
    return np.hypot(np.radians(dlon) * r * np.cos(np.radians(lat)), np.radians(dlat) * r)


@pytest.fixture(scope="module", params=["EPSG:27700", "EPSG:32631"])
def geo_run(request, tmp_path_factory):
    from test_site import BORINGS, SITE_TOML

    crs = request.param
    folder = tmp_path_factory.mktemp("site-geo")
    toml = SITE_TOML.replace('crs = "EPSG:32631"', f'crs = "{crs}"')
    borings = BNG_BORINGS if crs == "EPSG:27700" else BORINGS
    site = load_site(write_small_site(folder, borings=borings, toml=toml))
    return crs, site, run_site(site, folder / "out", workers=1, chunk_size=8)


def test_geographic_fields_are_wgs84(geo_run):
    """lon_deg/lat_deg in the CSV, GeoPackage and GeoJSON properties equal an
    independent pyproj transform site CRS -> EPSG:4326 (always_xy) to 1e-9 degree, and
    the CSV header says they are WGS 84. For the British grid they differ from the
    OSGB36 (base geographic CRS) values of the NetCDF file by the datum shift of the
    Ordnance Survey Helmert transformation (OS 2020, Table 6) within its stated 5 m,
    a shift of 50 to 150 m; for a UTM zone on WGS 84 the two agree (no datum shift)."""
    import geopandas as gpd
    import pandas as pd
    import pyproj

    crs, site, files = geo_run
    x = np.array([b.x for b in site.borings])
    y = np.array([b.y for b in site.borings])
    lon, lat = pyproj.Transformer.from_crs(crs, "EPSG:4326", always_xy=True).transform(x, y)
    csv = pd.read_csv(files.csv, comment="#")
    gpkg = gpd.read_file(files.geopackage, engine="pyogrio")
    with open(files.geojson, encoding="utf-8") as fh:
        doc = json.load(fh)
    props = pd.DataFrame([f["properties"] for f in doc["features"]])
    for table in (csv, gpkg, props):
        assert list(table["station_id"]) == [b.id for b in site.borings]
        np.testing.assert_allclose(table["lon_deg"], lon, rtol=0, atol=1e-9)
        np.testing.assert_allclose(table["lat_deg"], lat, rtol=0, atol=1e-9)
    with open(files.csv, encoding="utf-8") as fh:
        head = fh.read(3000)
    assert "lon_deg, lat_deg: WGS 84 (EPSG:4326)" in head
    assert "WGS 84 (EPSG:4326)" in doc["description"]
    with netCDF4.Dataset(files.netcdf) as nc:
        base_lon, base_lat = nc["lon"][:].filled(np.nan), nc["lat"][:].filled(np.nan)
    shift = _metres(csv["lon_deg"] - base_lon, csv["lat_deg"] - base_lat, base_lat)
    if crs == "EPSG:27700":
        want_lon, want_lat = _helmert_osgb36_to_wgs84(base_lon, base_lat)
        assert np.all(_metres(csv["lon_deg"] - want_lon, csv["lat_deg"] - want_lat,
                              want_lat) < 5.0)
        assert np.all((shift > 50.0) & (shift < 150.0))
    else:
        assert shift.max() < 1e-3


def test_typed_lon_lat_are_wgs84_on_the_british_grid(tmp_path):
    """Borings typed as lon/lat are WGS 84: on EPSG:27700 they land at pyproj's
    EPSG:4326 -> EPSG:27700 x/y (1 mm), not at the OSGB36 reading (about 100 m away)."""
    import pyproj
    from test_site import SITE_TOML

    lon, lat = [-1.26001, -1.25957], [51.75015, 51.75024]
    rows = "id,lon [deg],lat [deg],ground_elevation [m]\n" + "".join(
        f"T-{i + 1},{a},{b},20\n" for i, (a, b) in enumerate(zip(lon, lat)))
    log = "id,top [m],bottom [m],material\nT-1,0,2.5,sand\nT-2,0,2.5,sand\n"
    toml = SITE_TOML.replace('crs = "EPSG:32631"', 'crs = "EPSG:27700"')
    site = load_site(write_small_site(tmp_path, borings=rows, log=log, toml=toml))
    x, y = pyproj.Transformer.from_crs(4326, 27700, always_xy=True).transform(lon, lat)
    np.testing.assert_allclose([b.x for b in site.borings], x, rtol=0, atol=1e-3)
    np.testing.assert_allclose([b.y for b in site.borings], y, rtol=0, atol=1e-3)


@pytest.fixture(scope="module")
def short_life(tmp_path_factory):
    """The test yard read over an 8 yr design life and a 60 yr run: the plume is still
    arriving at the receptor when the design life ends."""
    from test_site import SITE_TOML

    folder = tmp_path_factory.mktemp("site-windows")
    toml = (SITE_TOML.replace('times = ["1 yr", "5 yr", "20 yr"]',
                              'times = ["1 yr", "5 yr", "20 yr", "60 yr"]')
            .replace('design_life = "30 yr"', 'design_life = "8 yr"'))
    site = load_site(write_small_site(folder, toml=toml))
    return site, run_site(site, folder / "out", workers=1, chunk_size=2)


def test_design_life_and_whole_run_fields_match_single_column_runs(short_life):
    """Per boring, the GIS fields of both windows (design life and whole run) and the
    flags saying whether a peak lies beyond its window equal the receptor metrics of the
    same column solved alone (transport.solvers.engines.solve_column, checked by two
    engines, read by transport.analysis.metrics.receptor_views on 800 samples per
    window against the site's 128): times and peaks to 1e-6 relative."""
    import pandas as pd

    from transport.analysis.metrics import receptor_views
    from transport.site.columns import boring_column, material_layers
    from transport.solvers.engines import solve_column

    site, files = short_life
    table = pd.read_csv(files.csv, comment="#")
    yr = 365.25 * 86400.0
    layers, q = material_layers(site)
    times = np.asarray(site.times, float)
    assert table["peak_after_design_life"].sum() >= 1  # the flag is exercised
    for boring in site.borings:
        row = table.set_index("station_id").loc[boring.id]
        col = boring_column(site, boring, layers, q)
        sol = solve_column(col, times, [boring.receptor_depth],
                           initial=boring.initial_state, tolerance=site.tolerance)
        views = receptor_views(sol, boring.receptor_depth, site.screening_level,
                               site.design_life)
        d, w = views.design_life, views.whole_run
        assert row["run_end_yr"] == pytest.approx(w.horizon / yr, rel=1e-12)
        assert row["peak_conc_mg_L"] == pytest.approx(d.peak_concentration * 1e3, rel=1e-6)
        assert row["run_peak_conc_mg_L"] == pytest.approx(w.peak_concentration * 1e3,
                                                          rel=1e-6)
        assert row["run_peak_conc_mg_L"] >= row["peak_conc_mg_L"] * (1 - 1e-8)
        assert row["time_above_level_yr"] == pytest.approx(d.time_above_level / yr,
                                                           rel=1e-6)
        assert row["run_time_above_level_yr"] == pytest.approx(w.time_above_level / yr,
                                                               rel=1e-6)
        assert row["run_breakthrough_yr"] == pytest.approx(w.first_exceedance / yr,
                                                           rel=1e-6)
        assert row["run_mass_to_receptor_kg_m2"] == pytest.approx(w.cumulative_mass,
                                                                  rel=1e-6)
        assert row["peak_after_design_life"] == int(views.peak_after_design_life)
        assert row["peak_after_run_end"] == int(w.peak_beyond_horizon)
    with open(files.csv, encoding="utf-8") as fh:
        head = " ".join(line[2:].strip() for line in fh if line.startswith("#"))
    assert "peak_after_design_life = 1: the peak lies after the design life" in head
