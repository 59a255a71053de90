"""File input and output: CF NetCDF (``transport.io.netcdf``)."""
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
