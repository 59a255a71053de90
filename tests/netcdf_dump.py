"""Everything a NetCDF file holds, as plain Python, for comparing two files item by item.

Read with netCDF4-python with masking and scaling off (the stored values themselves):
format, dimensions (name, size, unlimited) in file order, global attributes, and per
variable, in file order: dimensions, dtype, attributes in order (value and type),
compression filters, chunking, endianness and the stored values.
"""
from __future__ import annotations

import netCDF4
import numpy as np

#: Global attributes that hold the time of writing.
WRITE_TIME = ("history", "date_created")


def _attr(value):
    """An attribute as (type, value); NaN as the text "nan", so that two NaN compare
    equal."""
    if isinstance(value, np.ndarray):
        return ("array", value.dtype.str, [_nan_text(v) for v in value.ravel().tolist()])
    if isinstance(value, np.generic):
        return (type(value).__name__, _nan_text(value.item()))
    return (type(value).__name__, _nan_text(value))


def _nan_text(value):
    return "nan" if isinstance(value, float) and np.isnan(value) else value


def dump(path, *, drop=()) -> dict:
    """The contents of the file at ``path``; global attributes named in ``drop`` left
    out (the write time of two files written at different moments)."""
    with netCDF4.Dataset(path) as nc:
        out = {
            "format": (nc.data_model, nc.disk_format),
            "dimensions": [(d.name, d.size, d.isunlimited()) for d in nc.dimensions.values()],
            "attributes": [(k, _attr(nc.getncattr(k))) for k in nc.ncattrs() if k not in drop],
            "variables": {},
        }
        for name, var in nc.variables.items():
            var.set_auto_maskandscale(False)
            values = var[...]
            out["variables"][name] = {
                "dimensions": var.dimensions,
                "dtype": str(var.dtype),
                "attributes": [(k, _attr(var.getncattr(k))) for k in var.ncattrs()],
                "filters": var.filters(),
                "chunking": var.chunking(),
                "endian": var.endian(),
                "values": np.asarray(values),
            }
    return out


def differences(a: dict, b: dict) -> list:
    """Every item in which the dumps ``a`` and ``b`` differ (an empty list: none).
    Values must be equal element by element, NaN where NaN, in the same dtype."""
    diffs = [key for key in ("format", "dimensions", "attributes") if a[key] != b[key]]
    if list(a["variables"]) != list(b["variables"]):
        diffs.append(("variable order", list(a["variables"]), list(b["variables"])))
    for name in set(a["variables"]) & set(b["variables"]):
        va, vb = a["variables"][name], b["variables"][name]
        for key in ("dimensions", "dtype", "attributes", "filters", "chunking", "endian"):
            if va[key] != vb[key]:
                diffs.append((name, key, va[key], vb[key]))
        x, y = va["values"], vb["values"]
        same = x.shape == y.shape and x.dtype == y.dtype and (
            np.array_equal(x, y, equal_nan=True) if x.dtype.kind == "f"
            else np.array_equal(x, y))
        if not same:
            diffs.append((name, "values"))
    return diffs
