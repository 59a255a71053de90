"""Per-boring results for GIS: GeoPackage, GeoJSON (RFC 7946) and CSV (the map figure
is drawn by :mod:`transport.plot.site_map`).

A site DSG NetCDF file is not usable as a GIS layer through GDAL, so point exports
ship beside it. Field names carry their unit (``peak_conc_mg_L``); times are in years
(Julian year, 365.25 d, stated in the metadata) from the start of the run; a
breakthrough that does not happen within the design life is empty (NULL), with
``exceeds_in_design_life`` = 0. The same metrics over the whole run carry a ``run_``
prefix, and ``peak_after_design_life`` / ``peak_after_run_end`` (1/0) say whether a
peak lies beyond its window (:data:`WINDOW_NOTE`). GeoJSON follows RFC 7946 (WGS 84 lon/lat, written by
GDAL's GeoJSON driver with ``RFC7946=YES``); the GeoPackage keeps the site CRS. The
``lon_deg``/``lat_deg`` fields are WGS 84 (EPSG:4326) in every export, transformed from
the site CRS with PROJ, whatever the datum of the site CRS (:func:`wgs84_lon_lat`).
Every file is written under a temporary name and renamed when complete (with the other
outputs of the run when a ``stage`` is given: :mod:`transport.io.atomic`); the caution
travels in the layer metadata (GeoPackage), the ``description`` member (GeoJSON) and
``#`` comment lines heading the CSV (pandas: ``read_csv(path, comment="#")``).
"""
from __future__ import annotations

import os
import textwrap

import netCDF4
import numpy as np
import pandas as pd
import pyproj

from transport.caution import CAUTION
from transport.io.atomic import stage_or_write
from transport.units import DAY, MG_PER_L, YEAR

__all__ = ["station_table", "write_geopackage", "write_geojson", "write_metrics_csv",
           "wgs84_lon_lat", "LON_LAT_DECIMALS", "LON_LAT_NOTE", "WINDOW_NOTE"]

#: mg/L per kg m-3: the reciprocal of MG_PER_L is exactly 1000, so a product rounds once
#: (a division by 0.001 would differ in the last bit of some values).
_MG_L_PER_SI = 1.0 / MG_PER_L
#: GeoJSON decimals: 1e-10 degree is about 0.01 mm on the ground (GDAL's default, 7
#: decimals, is about 1 cm: too coarse to round-trip survey coordinates to 1 mm).
GEOJSON_DECIMALS = 10
#: Decimals of ``lon_deg``/``lat_deg`` in the CSV (1e-10 degree, as the GeoJSON).
LON_LAT_DECIMALS = 10
#: What the geographic fields hold, as every export states it.
LON_LAT_NOTE = ("lon_deg, lat_deg: WGS 84 (EPSG:4326) longitude and latitude in degrees, "
                "transformed from x_m, y_m in the site CRS with PROJ (pyproj)")
#: What the design-life and whole-run fields hold, as every export states it.
WINDOW_NOTE = ("breakthrough, peak, mass and time_above_level fields cover the design "
               "life; run_* fields cover the whole run (to run_end_yr); "
               "peak_after_design_life = 1: the peak lies after the design life (still "
               "rising at its end, or higher later in the run), so the design-life peak is "
               "not the peak; peak_after_run_end = 1: still rising at the end of the run")
_TIME = ("breakthrough_time", "peak_time", "breakthrough_time_p5", "breakthrough_time_p50",
         "breakthrough_time_p95", "time_above_level", "run_breakthrough_time",
         "run_time_above_level", "run_peak_time", "run_end")
_CONC = ("peak_concentration", "peak_concentration_p5", "peak_concentration_p50",
         "peak_concentration_p95", "run_peak_concentration")
_NAMES = {"breakthrough_time": "breakthrough_yr", "peak_time": "peak_time_yr",
          "peak_concentration": "peak_conc_mg_L", "receptor_mass": "mass_to_receptor_kg_m2",
          "receptor_depth": "receptor_depth_m", "boring_depth": "boring_depth_m",
          "exceedance_probability": "exceedance_probability",
          "initial_samples": "initial_samples",
          "time_above_level": "time_above_level_yr",
          "peak_after_design_life": "peak_after_design_life",
          "run_breakthrough_time": "run_breakthrough_yr",
          "run_time_above_level": "run_time_above_level_yr",
          "run_peak_time": "run_peak_time_yr", "run_peak_concentration": "run_peak_conc_mg_L",
          "run_receptor_mass": "run_mass_to_receptor_kg_m2",
          "peak_after_run_end": "peak_after_run_end", "run_end": "run_end_yr"}
#: Fields of the whole-run view and the flags saying whether a peak lies beyond its
#: window (design life or end of the run), in table order after ``mass_to_receptor``.
_WINDOW_FIELDS = ("time_above_level", "peak_after_design_life", "run_end",
                  "run_breakthrough_time", "run_time_above_level", "run_peak_time",
                  "run_peak_concentration", "run_receptor_mass", "peak_after_run_end")


def station_table(path):
    """Per-station metrics of a site NetCDF file as a pandas DataFrame (export units).

    Parameters
    ----------
    path : path
        A site file written by :class:`transport.io.site_netcdf.SiteNetCDFWriter`.

    Returns
    -------
    pandas.DataFrame
        One row per station; times in years, concentrations in mg/L (column names
        carry the unit); ``attrs`` hold the title, screening level (mg/L), design life
        (yr), CRS WKT and the Monte Carlo realization count.
    """
    with netCDF4.Dataset(path) as nc:
        cols = {"station_id": list(nc["station_id"][:]),
                "x_m": nc["x"][:].filled(np.nan), "y_m": nc["y"][:].filled(np.nan),
                "lon_deg": np.nan, "lat_deg": np.nan,
                "ground_elevation_m": nc["ground_elevation"][:].filled(np.nan)}
        for name in ("initial_samples", "receptor_depth", "boring_depth",
                     "breakthrough_time", "peak_time",
                     "peak_concentration", "receptor_mass", *_WINDOW_FIELDS,
                     "exceedance_probability",
                     "breakthrough_time_p5", "breakthrough_time_p50", "breakthrough_time_p95",
                     "peak_concentration_p5", "peak_concentration_p50",
                     "peak_concentration_p95"):
            if name not in nc.variables:
                continue
            values = np.ma.filled(nc[name][:].astype(float), np.nan)
            if name in ("initial_samples", "peak_after_design_life", "peak_after_run_end"):
                values = values.astype(int)
            if name in _TIME:
                values = values * DAY / YEAR
                label = _NAMES.get(name, name.replace("breakthrough_time", "breakthrough")
                                   + "_yr")
            elif name in _CONC:
                values = values * _MG_L_PER_SI
                label = _NAMES.get(name, name.replace("peak_concentration", "peak_conc")
                                   + "_mg_L")
            else:
                label = _NAMES[name]
            cols[label] = values
            if name == "breakthrough_time":
                cols["exceeds_in_design_life"] = (~np.isnan(values)).astype(int)
            elif name == "run_breakthrough_time":
                cols["exceeds_in_run"] = (~np.isnan(values)).astype(int)
        meta = {"title": nc.title, "screening_level_mg_L": float(nc["screening_level"][...])
                * _MG_L_PER_SI, "design_life_yr": float(nc["design_life"][...]) * DAY
                / YEAR, "crs_wkt": nc["crs"].crs_wkt,
                "realizations": int(getattr(nc, "monte_carlo_realizations", 0))}
    # the file's lon/lat are in the base geographic CRS of the site CRS (CF grid
    # mapping); a GIS reader takes geographic fields as WGS 84, so they are made so
    cols["lon_deg"], cols["lat_deg"] = wgs84_lon_lat(cols["x_m"], cols["y_m"],
                                                     meta["crs_wkt"])
    table = pd.DataFrame(cols)
    table.attrs.update(meta)
    return table


def wgs84_lon_lat(x, y, crs):
    """WGS 84 longitude and latitude (EPSG:4326, degrees) of site-CRS positions.

    The base geographic CRS of a projected CRS need not be WGS 84: for the British
    National Grid (EPSG:27700, on OSGB36) its longitude and latitude lie about 100 m
    from WGS 84 ones. PROJ chooses the transformation (pyproj ``Transformer``,
    ``always_xy``: longitude first).

    Parameters
    ----------
    x, y : array_like
        Positions in ``crs`` (metres for a projected CRS).
    crs : pyproj.CRS, str or int
        The site CRS (anything :meth:`pyproj.CRS.from_user_input` takes: WKT, EPSG code).

    Returns
    -------
    (numpy.ndarray, numpy.ndarray)
        Longitude and latitude, degrees (WGS 84).

    Examples
    --------
    >>> lon, lat = wgs84_lon_lat([500000.0], [0.0], 32631)
    >>> float(lon[0]), float(lat[0])
    (3.0, 0.0)
    """
    transformer = pyproj.Transformer.from_crs(pyproj.CRS.from_user_input(crs), "EPSG:4326",
                                              always_xy=True)
    lon, lat = transformer.transform(np.asarray(x, float), np.asarray(y, float))
    return np.asarray(lon, float), np.asarray(lat, float)


def _frame(table):
    # geopandas is imported lazily: it is slow to load and only the site exports need it
    import geopandas as gpd

    return gpd.GeoDataFrame(table.copy(), geometry=gpd.points_from_xy(table["x_m"],
                                                                     table["y_m"]),
                            crs=table.attrs["crs_wkt"])


def _atomic(path, write, stage=None):
    def guarded(tmp):
        try:
            write(tmp)
        except Exception as exc:  # GDAL (pyogrio) refusals become one clear input error
            if not type(exc).__module__.startswith("pyogrio"):
                raise
            raise ValueError(
                f"cannot write {os.fspath(path)}: {exc}. Check the boring coordinates "
                "(x and y in the site CRS, in metres for a projected CRS); no output file "
                "was changed") from exc
    return stage_or_write(stage, path, guarded)


def _description(table) -> str:
    a = table.attrs
    return (f"{a['title']}. Per-boring results at the receptor against the screening level "
            f"{a['screening_level_mg_L']:.4g} mg/L over a design life of "
            f"{a['design_life_yr']:.4g} yr; times in years (365.25 d) from the start of the "
            f"run; empty breakthrough: not reached within the design life; "
            f"{WINDOW_NOTE}; {LON_LAT_NOTE}. {CAUTION}")


def write_geopackage(table, path, *, stage=None):
    """GeoPackage 1.3 point layer ``borings`` in the site CRS, caution in the metadata.

    ``stage``: a :class:`transport.io.atomic.OutputSet` (renamed with the run's other
    outputs), else the file is written through its own temporary name and a rename."""
    frame = _frame(table)
    return _atomic(path, lambda tmp: frame.to_file(
        tmp, driver="GPKG", layer="borings", engine="pyogrio",
        dataset_options={"VERSION": "1.3"},
        metadata={"DESCRIPTION": _description(table)}), stage)


def write_geojson(table, path, *, stage=None):
    """GeoJSON per RFC 7946: WGS 84 lon/lat, caution in the ``description`` member."""
    frame = _frame(table).to_crs("EPSG:4326")
    return _atomic(path, lambda tmp: frame.to_file(
        tmp, driver="GeoJSON", engine="pyogrio",
        layer_options={"RFC7946": "YES", "COORDINATE_PRECISION": str(GEOJSON_DECIMALS),
                       "DESCRIPTION": _description(table), "WRITE_NAME": "NO"}), stage)


def write_metrics_csv(table, path, epsg=None, *, stage=None):
    """CSV of per-boring metrics, with ``#`` header lines (CRS, units, caution)."""
    head = [f"# {line}" for line in textwrap.wrap(_description(table), 100)]
    head.append(f"# x_m, y_m: site CRS EPSG:{epsg}" if epsg else
                "# x_m, y_m: site CRS (WKT in the NetCDF crs variable)")
    head.append(f"# {LON_LAT_NOTE}")
    shown = table.copy()
    for name in ("lon_deg", "lat_deg"):  # fixed decimals: 1e-10 degree at any longitude
        if name in shown:
            shown[name] = [f"{v:.{LON_LAT_DECIMALS}f}" if np.isfinite(v) else ""
                           for v in shown[name].to_numpy(float)]

    def write(tmp):
        with open(tmp, "w", encoding="utf-8", newline="") as fh:
            fh.write("\n".join(head) + "\n")
            shown.to_csv(fh, index=False, float_format="%.10g")
    return _atomic(path, write, stage)
