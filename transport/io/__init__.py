"""File input and output: CF NetCDF (``transport.io.netcdf``, ``transport.io.site_netcdf``),
GIS exports (``transport.io.gis``), and the all-or-nothing writing every output goes
through (``transport.io.atomic``).

The names below are loaded on first use (PEP 562): importing ``transport.io.atomic``
or ``transport.io.netcdf_file`` does not load xarray through ``transport.io.netcdf``.
"""
from __future__ import annotations

import importlib
from typing import TYPE_CHECKING

__all__ = [
    "NOMINAL_START",
    "column_dataset",
    "elapsed_seconds",
    "read_column_netcdf",
    "write_column_netcdf",
]

if TYPE_CHECKING:  # pragma: no cover - for static analysis and IDEs only
    from transport.io.netcdf import (NOMINAL_START, column_dataset, elapsed_seconds,
                                     read_column_netcdf, write_column_netcdf)


def __getattr__(name: str):
    if name not in __all__:
        raise AttributeError(f"module 'transport.io' has no attribute {name!r}")
    value = getattr(importlib.import_module("transport.io.netcdf"), name)
    globals()[name] = value
    return value


def __dir__():
    return sorted(__all__)
