"""CF-1.11 NetCDF of a whole site, streamed by chunks of stations.

Layout: orthogonal multidimensional ``timeSeriesProfile`` (CF Conventions 1.11,
section 9.3.1 and Appendix H.5.1): dimensions ``(station, time, depth)`` with station
outermost; ``station_id(station)`` the only ``cf_role`` variable (timeseries_id);
float64 x/y (projection_x/y_coordinate, m) and lat/lon in the projection's base
geographic CRS (CF 5.6); a ``crs`` grid-mapping variable from
:meth:`pyproj.crs.CRS.to_cf`; one depth grid for all stations (0 to the deepest boring),
fill values below a boring's bottom. Per-station summaries carry the reduction in their
long_name (no two-dimension cell_methods).

:class:`SiteNetCDFWriter` writes with netCDF4 directly: the file is created in the
output directory under a temporary name, filled chunk by chunk (memory stays at one
chunk) and renamed over the target only when complete (with ``stage``, together with
the other outputs of the run: :mod:`transport.io.atomic`); on failure it is removed.
"""
from __future__ import annotations

import contextlib
import os

import netCDF4
import numpy as np

from transport.caution import CAUTION
from transport.io.atomic import OutputSet
from transport.io.netcdf import (FILL_VALUE, NOMINAL_START, TIME_UNITS, depth_bounds,
                                 package_version, utc_now)
from transport.units import DAY

__all__ = ["SiteNetCDFWriter", "STATION_METRICS", "MC_METRICS"]

_ZLIB = {"zlib": True, "complevel": 4, "shuffle": True}

#: name, units, long_name (time metrics are durations in days since the run start)
STATION_METRICS = (
    ("breakthrough_time", "d", "elapsed time to the first crossing of the screening level "
     "at the receptor depth within the design life, read from time 0 on (fill: not "
     "reached)"),
    ("peak_time", "d", "elapsed time of the highest pore-water concentration at the "
     "receptor depth within the design life"),
    ("peak_concentration", "kg m-3", "highest pore-water concentration at the receptor "
     "depth within the design life"),
    ("receptor_mass", "kg m-2", "cumulative contaminant mass per unit area through the "
     "receptor depth at the end of the design life"),
    ("receptor_depth", "m", "depth of the receptor below ground at the station"),
    ("boring_depth", "m", "depth of the bottom of the station's log below ground"),
    ("time_above_level", "d", "total time at or above the screening level at the receptor "
     "depth within the design life"),
    ("peak_after_design_life", "1", "whether the peak at the receptor depth lies after "
     "the design life, still rising at its end or higher later in the run (1: yes, 0: no)"),
    ("run_breakthrough_time", "d", "elapsed time to the first crossing of the screening "
     "level at the receptor depth over the whole run, read from time 0 on (fill: not "
     "reached)"),
    ("run_time_above_level", "d", "total time at or above the screening level at the "
     "receptor depth over the whole run"),
    ("run_peak_time", "d", "elapsed time of the highest pore-water concentration at the "
     "receptor depth over the whole run"),
    ("run_peak_concentration", "kg m-3", "highest pore-water concentration at the "
     "receptor depth over the whole run"),
    ("run_receptor_mass", "kg m-2", "cumulative contaminant mass per unit area through the "
     "receptor depth at the end of the run"),
    ("peak_after_run_end", "1", "whether the peak at the receptor depth lies after the "
     "end of the run, still rising there (1: yes, 0: no)"),
    ("run_end", "d", "end of the whole run: the last output time, or the design life if "
     "later"),
)
MC_METRICS = (
    ("exceedance_probability", "1", "Monte Carlo fraction of realizations in which the "
     "screening level is reached at the receptor within the design life"),
    ("breakthrough_time_p5", "d", "5th percentile over realizations of the breakthrough "
     "time (fill: not reached within the design life; each realization read from time 0 "
     "on)"),
    ("breakthrough_time_p50", "d", "median over realizations of the breakthrough time "
     "(fill: not reached within the design life; each realization read from time 0 "
     "on)"),
    ("breakthrough_time_p95", "d", "95th percentile over realizations of the breakthrough "
     "time (fill: not reached within the design life; each realization read from time 0 "
     "on)"),
    ("peak_concentration_p5", "kg m-3", "5th percentile over realizations of the peak "
     "concentration at the receptor within the design life"),
    ("peak_concentration_p50", "kg m-3", "median over realizations of the peak "
     "concentration at the receptor within the design life"),
    ("peak_concentration_p95", "kg m-3", "95th percentile over realizations of the peak "
     "concentration at the receptor within the design life"),
)
_FIELDS = (
    ("concentration", "kg m-3", "pore-water concentration of the dissolved contaminant"),
    ("cumulative_mass", "kg m-2", "cumulative contaminant mass per unit area that crossed "
     "the depth downward since time 0"),
)


class SiteNetCDFWriter:
    """Context manager writing one site file atomically, chunk by chunk.

    Parameters
    ----------
    path : target file
    site : transport.site.config.Site (stations, CRS, grid, settings)
    monte_carlo : dict or None, {"realizations", "seed", "sampling"} when MC ran
    history : command line or call, prefixed with the UTC time
    stage : transport.io.atomic.OutputSet or None; with a set the finished file stays
        under its temporary name (``self.tmp``) until the set is committed
    """

    def __init__(self, path, site, *, monte_carlo=None, history=None, stage=None):
        self.path, self.site, self.mc = os.fspath(path), site, monte_carlo
        self.history = history or "transport.site.run.run_site"
        self.tmp, self.nc = None, None
        self._own = stage is None
        self.stage = OutputSet() if stage is None else stage

    def __enter__(self):
        self.tmp = self.stage.reserve(self.path)
        try:
            self.nc = netCDF4.Dataset(self.tmp, "w", format="NETCDF4")
            self._define()
        except OSError as exc:
            self._discard()
            if exc.filename is not None and os.fspath(exc.filename) == self.tmp:
                # name the file the user asked for, not the temporary one
                raise type(exc)(exc.errno, exc.strerror or str(exc), self.path) from exc
            raise
        except BaseException:
            self._discard()
            raise
        return self

    def __exit__(self, kind, value, tb):
        if kind is not None:
            self._discard()
            return False
        try:
            self.nc.close()
        except BaseException:
            self._discard()
            raise
        self.nc = None
        if self._own:
            self.stage.commit()
        return False

    def _discard(self):
        if self.nc is not None:
            with contextlib.suppress(Exception):
                self.nc.close()
            self.nc = None
        with contextlib.suppress(OSError):
            os.remove(self.tmp)
        if self._own:
            self.stage.discard()

    def _var(self, name, dtype, dims, attrs, fill=None, **kw):
        v = self.nc.createVariable(name, dtype, dims, fill_value=fill, **kw)
        v.setncatts(attrs)
        return v

    def _define(self):
        site, nc = self.site, self.nc
        crs = site.crs
        ns, nt, nz = len(site.borings), site.times.size, site.depths.size
        nc.createDimension("station", ns)
        nc.createDimension("time", nt)
        nc.createDimension("depth", nz)
        nc.createDimension("nv", 2)
        created = utc_now()
        mc = self.mc
        nc.setncatts({
            "Conventions": "CF-1.11", "featureType": "timeSeriesProfile",
            "title": site.title,
            "summary": (f"Pore-water concentration and cumulative mass versus depth and "
                        f"elapsed time at {ns} borings of a site (one 1-D layered column per "
                        "boring), with per-boring breakthrough, peak and mass metrics at the "
                        "receptor" + (" and Monte Carlo exceedance probabilities" if mc
                                      else "") + "."),
            "source": f"stratiflux {package_version()}; one column per boring, each "
                      "solved by eigenfunction expansion on the exact layered spectrum and "
                      "checked by numerical Laplace inversion; where the two disagree at an "
                      "output time the Laplace value (within its own error bound) is written",
            "history": f"{created} {self.history}",
            "references": "CF Conventions 1.11 (https://cfconventions.org), section 9 and "
                          "Appendix H.5.1; Carr and Turner 2016, Appl. Math. Model. 40:7034",
            "comment": CAUTION, "date_created": created,
            "site_file_text": site.source_text,
            "screening_level_description": "screening level in kg m-3, see the "
                                           "screening_level variable",
        })
        if mc:
            nc.setncatts({"monte_carlo_realizations": int(mc["realizations"]),
                          "monte_carlo_seed": str(mc["seed"]),
                          "monte_carlo_sampling": str(mc["sampling"]),
                          "monte_carlo_parameters": "; ".join(
                              f"{d.parameter}: {d.kind}{tuple(d.values)} SI, bounds "
                              f"({d.lower}, {d.upper})" for d in site.distributions)})
        t = self._var("time", "f8", ("time",), {
            "standard_name": "time", "long_name": "elapsed time since the start of the run",
            "units": TIME_UNITS, "calendar": "proleptic_gregorian",
            "units_metadata": "leap_seconds: none", "axis": "T",
            "comment": f"The run starts at time 0; {NOMINAL_START} is a nominal start date, "
                       "not a real one: read the values as elapsed days."})
        t[:] = np.asarray(site.times) / DAY
        z = self._var("depth", "f8", ("depth",), {
            "standard_name": "depth", "long_name": "depth below the ground surface",
            "units": "m", "positive": "down", "axis": "Z", "bounds": "depth_bnds"})
        z[:] = site.depths
        self._var("depth_bnds", "f8", ("depth", "nv"), {})[:] = depth_bounds(
            np.asarray(site.depths), float(site.depths[-1]))
        aux_coords = "station_id lat lon x y"
        sid = self._var("station_id", str, ("station",), {
            "long_name": "boring identifier", "cf_role": "timeseries_id"})
        sid[:] = np.array(site.ids, dtype=object)
        coords = {"x": ("projection_x_coordinate", "m", "easting in the site CRS"),
                  "y": ("projection_y_coordinate", "m", "northing in the site CRS"),
                  "lon": ("longitude", "degrees_east", "longitude in the base geographic "
                          "CRS of the site CRS"),
                  "lat": ("latitude", "degrees_north", "latitude in the base geographic "
                          "CRS of the site CRS")}
        for name, (std, units, long_name) in coords.items():
            v = self._var(name, "f8", ("station",), {"standard_name": std, "units": units,
                                                     "long_name": long_name})
            v[:] = [getattr(b, name) for b in site.borings]
        self._var("ground_elevation", "f8", ("station",), {
            "long_name": "ground elevation at the boring (datum of the borings file)",
            "units": "m"})[:] = [b.ground_elevation for b in site.borings]
        self._var("initial_samples", "i4", ("station",), {
            "long_name": "number of measured initial pore-water samples of the boring "
                         "(0: the column starts clean)", "units": "1",
            "coordinates": aux_coords, "coverage_content_type": "auxiliaryInformation"})[:] = [
            len(getattr(b, "initial", ())) for b in site.borings]
        grid = self._var("crs", "i4", (), crs.to_cf())
        grid.assignValue(0)
        self._var("screening_level", "f8", (), {
            "long_name": "screening level of pore-water concentration used in the metrics",
            "units": "kg m-3", "comment": CAUTION}).assignValue(site.screening_level)
        self._var("design_life", "f8", (), {
            "long_name": "design life: window of the receptor metrics from the start",
            "units": "d"}).assignValue(site.design_life / DAY)
        aux = "station_id lat lon x y"
        chunks = (1, min(nt, 1024), nz)
        for name, units, long_name in _FIELDS:
            # double precision: single precision (6e-8) would break the stated tolerance
            self._var(name, "f8", ("station", "time", "depth"), {
                "long_name": long_name, "units": units, "coordinates": aux,
                "grid_mapping": "crs", "coverage_content_type": "modelResult",
                "comment": "Fill value below the bottom of the boring's log. " + CAUTION},
                fill=FILL_VALUE, chunksizes=chunks, **_ZLIB)
        for name, units, long_name in STATION_METRICS + (MC_METRICS if mc else ()):
            self._var(name, "f8", ("station",), {
                "long_name": long_name, "units": units, "coordinates": aux,
                "grid_mapping": "crs", "coverage_content_type": "modelResult",
                "comment": CAUTION}, fill=FILL_VALUE)

    def flush(self):
        """Write what is buffered (compressing the finished chunks) to the temporary file."""
        self.nc.sync()

    def write_chunk(self, start: int, result: dict):
        """Write the arrays of one chunk (station axis first, SI units) at ``start``."""
        n = len(result["breakthrough_time"])
        sl = slice(start, start + n)
        for name, _, _ in _FIELDS:
            values = np.asarray(result[name], dtype=float)
            self.nc[name][sl] = np.ma.masked_invalid(values)
        for name, units, _ in STATION_METRICS + (MC_METRICS if self.mc else ()):
            values = np.asarray(result[name], dtype=float)
            if units == "d":
                values = values / DAY
            self.nc[name][sl] = np.ma.masked_invalid(values)
