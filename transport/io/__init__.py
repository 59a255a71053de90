"""File input and output: CF NetCDF (``transport.io.netcdf``, ``transport.io.site_netcdf``),
GIS exports (``transport.io.gis``), and the all-or-nothing writing every output goes
through (``transport.io.atomic``)."""
from transport.io.netcdf import (
    NOMINAL_START,
    column_dataset,
    elapsed_seconds,
    read_column_netcdf,
    write_column_netcdf,
)

__all__ = [
    "NOMINAL_START",
    "column_dataset",
    "elapsed_seconds",
    "read_column_netcdf",
    "write_column_netcdf",
]
