"""CF-1.11 NetCDF output for one layered column.

The file is a single-station ``timeSeriesProfile`` (CF Conventions 1.11, section 9 and
Appendix H.5, "single time series profile"): dimensions ``(time, depth)``, a scalar
``station_id`` with ``cf_role = "timeseries_id"``, depth positive down with cell
bounds, time as float64 ``days since 2000-01-01 00:00:00`` (a nominal start: the model
knows elapsed time only, and says so in the ``comment``). Units follow UDUNITS-2.

Per-layer properties (``layer`` dimension) and the mass budget ``(time,)`` are stored
beside the fields so that a reviewer can re-check the run from the file alone.

The layout itself is :func:`transport.io.netcdf_layout.column_layout`; this module
turns it into an ``xarray.Dataset`` (:func:`column_dataset`) and reads files back.
``stratiflux run`` writes it with netCDF4-python alone
(:func:`transport.io.netcdf_file.write_column_netcdf`, re-exported here), which gives
the same file without loading xarray.

Writing is atomic (:mod:`transport.io.atomic`): the dataset goes to a temporary file in
the output directory, which is renamed over the target with :func:`os.replace` only once
it is complete, together with the other outputs of the run. On any failure the temporary
file is removed and an existing output is left untouched.
"""
from __future__ import annotations

import os

import numpy as np
import xarray as xr

from transport.io.atomic import stage_or_write
from transport.io.cf_time import NOMINAL_START, TIME_UNITS, time_start
from transport.io.netcdf_file import write_column_netcdf
from transport.io.netcdf_layout import (FILL_VALUE, ColumnLayout, column_layout,
                                        depth_bounds, package_version, source_text,
                                        utc_now)
from transport.units import DAY

__all__ = [
    "NOMINAL_START",
    "TIME_UNITS",
    "FILL_VALUE",
    "column_dataset",
    "layout_dataset",
    "write_column_netcdf",
    "read_column_netcdf",
    "elapsed_seconds",
    "write_dataset_atomic",
    "package_version",
    "utc_now",
    "depth_bounds",
    "source_text",
]


def column_dataset(solution, *, title: str, scenario_text: str | None = None,
                   screening_level: float | None = None,
                   receptor_depth: float | None = None,
                   history: str | None = None, station_id: str = "column",
                   porosity=None, metrics=None, start_date=None) -> xr.Dataset:
    """Build the CF dataset of one column run (no file is written).

    Parameters
    ----------
    solution : Solution
        What an engine returns (:class:`transport.solvers.result.Solution`), or any
        object with the same attributes
        (``column, times, depths, concentration, total_flux, cumulative_mass, budget,
        n_modes, engine``), SI units.
    title : str
        Short title of the run (the scenario title).
    scenario_text, screening_level, receptor_depth, history, station_id : optional
        As :func:`transport.io.netcdf_layout.column_layout`, which holds the layout.
    porosity, metrics, start_date : optional
        As :func:`transport.io.netcdf_layout.column_layout`.

    Returns
    -------
    xarray.Dataset
        Encodings (compression, fill values, dtypes) are set on each variable.
    """
    return layout_dataset(column_layout(
        solution, title=title, scenario_text=scenario_text, screening_level=screening_level,
        receptor_depth=receptor_depth, history=history, station_id=station_id,
        porosity=porosity, metrics=metrics, start_date=start_date))


def layout_dataset(layout: ColumnLayout) -> xr.Dataset:
    """The ``xarray.Dataset`` of a :class:`ColumnLayout`, variables in the file's order
    and with their encodings (what ``to_netcdf`` writes is the layout's file)."""
    ds = xr.Dataset(data_vars=layout.data_vars, coords=layout.coords, attrs=layout.attrs)
    return ds.assign(layout.metrics)


def write_dataset_atomic(ds: xr.Dataset, path, *, stage=None) -> str:
    """Write ``ds`` to ``path`` as NETCDF4 through a temporary file and a rename.

    The temporary file lives in the same directory (same file system, so
    :func:`os.replace` is atomic on POSIX and Windows). On any exception it is removed
    and the exception re-raised; an existing ``path`` is then untouched. With ``stage``
    (a :class:`transport.io.atomic.OutputSet`) the file is only staged: it is renamed
    into place with the other outputs of the run when the set is committed.
    """
    path = os.fspath(path)
    directory = os.path.dirname(os.path.abspath(path))
    if not os.path.isdir(directory):  # name the directory the user asked for
        raise FileNotFoundError(2, f"No such file or directory (directory {directory})",
                                path)
    return stage_or_write(stage, path, lambda tmp: ds.to_netcdf(
        tmp, mode="w", format="NETCDF4", engine="netcdf4"))


def read_column_netcdf(path, *, decode_times: bool = True) -> xr.Dataset:
    """Read a column file written by :func:`write_column_netcdf` into memory.

    With ``decode_times`` (default) the time coordinate becomes ``datetime64[ms]``
    counted from the file's start (``start_date``, else nominal): millisecond
    resolution over +-2.9e8 years, so long design lives stay exact numpy datetimes.
    (xarray's own decoder silently switches to nanoseconds, which overflow after 2262,
    when float days are not whole units.)
    ``units``/``calendar`` move to ``encoding`` so the dataset can be written back.
    Pass ``decode_times=False`` to keep the stored float days. :func:`elapsed_seconds`
    gives elapsed seconds either way. The file is closed on return.
    """
    with xr.open_dataset(path, engine="netcdf4", decode_times=False,
                         decode_timedelta=False) as ds:
        ds = ds.load()
    if not decode_times or "time" not in ds.variables:
        return ds
    time = ds["time"]
    units = time.attrs.get("units", "")
    try:
        start = time_start(units.replace("T", " "))
    except ValueError:
        raise ValueError(f"{path}: time units {units!r} are not 'days since <date>' "
                         f"(e.g. {TIME_UNITS!r}); read it with decode_times=False") from None
    milliseconds = np.round(np.asarray(time.values, dtype=float) * DAY * 1e3)  # ms
    attrs = {k: v for k, v in time.attrs.items() if k not in ("units", "calendar")}
    decoded = xr.Variable(("time",), start + milliseconds.astype("int64").astype(
        "timedelta64[ms]"), attrs)
    decoded.encoding = {"units": units, "calendar": time.attrs.get(
        "calendar", "proleptic_gregorian"), "dtype": "float64", "_FillValue": None}
    return ds.assign_coords(time=decoded)


def elapsed_seconds(ds: xr.Dataset) -> np.ndarray:
    """Elapsed time of each ``time`` value in seconds, decoded or not."""
    time = ds["time"]
    values = np.asarray(time.values)
    if np.issubdtype(values.dtype, np.datetime64):
        start = time_start(time.encoding.get("units", TIME_UNITS).replace("T", " "))
        return (values - start) / np.timedelta64(1, "s")
    units = time.attrs.get("units", TIME_UNITS)
    time_start(units.replace("T", " "))  # refuses units other than 'days since <date>'
    return values.astype(float) * DAY
