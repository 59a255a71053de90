"""The file of one column run written with netCDF4-python alone.

``stratiflux run`` writes :func:`transport.io.netcdf_layout.column_layout` here rather
than through ``xarray.Dataset.to_netcdf``: the file is the same (dimensions, variables
and their order, dtypes, attributes, fill values, compression and chunking, values;
tests/test_netcdf_file.py compares the two writers on every item), but xarray, pandas
and the Dask modules xarray loads when Dask is installed cost a single run about 2 s of
its start-up and write (benchmarks/bench_startup.py).

What xarray's CF encoding and netCDF4 backend do for this layout is done here by hand,
in the same order: global attributes, then the dimensions in the order the variables
first use them, then each variable (data variables, coordinates, receptor metrics)
created with the backend's arguments, ``_FillValue`` from its encoding, missing values
(NaN) written as the fill value where the variable has one, the scalar coordinates
named in each data variable's ``coordinates`` attribute (CF 1.11 sec. 5), and a bounds
variable without the attributes its coordinate already gives (:data:`BOUNDS_INHERIT`).
"""
from __future__ import annotations

import os

import netCDF4
import numpy as np

from transport.io.atomic import stage_or_write
from transport.io.netcdf_layout import ColumnLayout, column_layout

__all__ = ["write_layout", "write_column_netcdf"]

#: Attributes that a bounds variable leaves to its coordinate where both hold the same
#: value (CF 1.11 sec. 7.1: the bounds inherit them; xarray's CF encoder drops them).
BOUNDS_INHERIT = ("units", "standard_name", "axis", "positive", "calendar", "long_name",
                  "leap_month", "leap_year", "month_lengths")


def _values(values, encoding: dict) -> np.ndarray:
    """The array stored for ``values``: cast to the encoding's dtype, NaN written as the
    variable's fill value (xarray's CF mask coder does the same)."""
    arr = np.asarray(values)
    if "dtype" in encoding and arr.dtype.kind not in "OU":
        arr = arr.astype(encoding["dtype"], copy=False)
    fill = encoding.get("_FillValue")
    if fill is not None and arr.dtype.kind == "f":
        arr = np.where(np.isnan(arr), arr.dtype.type(fill), arr)
    return arr


def write_layout(layout: ColumnLayout, path) -> None:
    """Write ``layout`` to ``path`` (NETCDF4 format, replacing any file there).

    Parameters
    ----------
    layout : ColumnLayout
        From :func:`transport.io.netcdf_layout.column_layout`.
    path : path-like
        The file to write; :func:`write_column_netcdf` passes a temporary name.
    """
    variables = {**layout.data_vars, **layout.coords, **layout.metrics}
    # coordinates that are not dimensions (the scalar station_id): named in the
    # ``coordinates`` attribute of every data variable whose dimensions include theirs
    auxiliary = {name: set(spec[0]) for name, spec in layout.coords.items()
                 if tuple(spec[0]) != (name,)}
    attributes = {name: dict(spec[2]) for name, spec in variables.items()}
    for name, attrs in list(attributes.items()):
        bounds = attrs.get("bounds")
        if bounds in attributes:
            own = attributes[bounds]
            for key in BOUNDS_INHERIT:
                if key in own and key in attrs and own[key] == attrs[key]:
                    del own[key]
    with netCDF4.Dataset(os.fspath(path), mode="w", clobber=True, format="NETCDF4") as nc:
        for key, value in layout.attrs.items():
            if isinstance(value, list) and value and all(isinstance(v, str) for v in value):
                nc.setncattr_string(key, value)
            else:
                nc.setncattr(key, value)
        arrays = {name: _values(spec[1], spec[3]) for name, spec in variables.items()}
        sizes = {}
        for name, (dims, *_) in variables.items():
            sizes.update(zip(dims, arrays[name].shape))
        for dim, size in sizes.items():
            nc.createDimension(dim, size)
        for name, (dims, _, _, encoding) in variables.items():
            arr, attrs = arrays[name], attributes[name]
            datatype = str if arr.dtype.kind in "OU" else arr.dtype
            fill = encoding.get("_FillValue")
            var = nc.createVariable(
                name, datatype, dims, zlib=encoding.get("zlib", False),
                complevel=encoding.get("complevel", 4), shuffle=encoding.get("shuffle", True),
                fletcher32=False, contiguous=False, chunksizes=None, endian="native",
                least_significant_digit=None,
                fill_value=None if fill is None else arr.dtype.type(fill))
            if name not in layout.coords:
                names = sorted(c for c, c_dims in auxiliary.items() if c_dims <= set(dims))
                if names:
                    attrs["coordinates"] = " ".join(names)
            var.setncatts(attrs)
            var.set_auto_maskandscale(False)
            var[...] = arr


def write_column_netcdf(solution, path, *, title: str, scenario_text: str | None = None,
                        screening_level: float | None = None,
                        receptor_depth: float | None = None,
                        history: str | None = None, stage=None, porosity=None,
                        metrics=None, start_date=None, metrics_note=None) -> str:
    """Write one column run to a CF-1.11 NetCDF file, atomically.

    The file goes to a temporary name in the same directory and is renamed over
    ``path`` only once complete (:func:`transport.io.atomic.stage_or_write`); with
    ``stage`` (a :class:`transport.io.atomic.OutputSet`) it is renamed with the other
    outputs of the run when the set is committed. On any failure an existing ``path``
    is left untouched.

    See :func:`transport.io.netcdf_layout.column_layout` for the parameters and the
    layout; ``metrics_note``: why no receptor metric is written (the global attribute
    ``receptor_metrics``; ``run --allow-unreliable`` where a metric cannot be vouched
    for). Returns the path.

    Examples
    --------
    >>> write_column_netcdf(solution, "b3.nc", title="Invented depot, B-3")  # doctest: +SKIP
    """
    layout = column_layout(solution, title=title, scenario_text=scenario_text,
                           screening_level=screening_level, receptor_depth=receptor_depth,
                           history=history, porosity=porosity, metrics=metrics,
                           start_date=start_date)
    if metrics_note:
        layout.attrs["receptor_metrics"] = str(metrics_note)
    path = os.fspath(path)
    directory = os.path.dirname(os.path.abspath(path))
    if not os.path.isdir(directory):  # name the directory the user asked for
        raise FileNotFoundError(2, f"No such file or directory (directory {directory})",
                                path)
    return stage_or_write(stage, path, lambda tmp: write_layout(layout, tmp))
