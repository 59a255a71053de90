"""Command ``stratiflux plot``: figures from a NetCDF file written by ``run``."""
from __future__ import annotations

import os
from pathlib import Path

import click

from transport.cli.common import UserError, write_plots
from transport.io.netcdf import read_column_netcdf

__all__ = ["plot"]


@click.command()
@click.argument("file", type=click.Path(dir_okay=False))
@click.option("--out", "out_dir", type=click.Path(file_okay=False), default=None,
              help="Directory for the PNG figures (default: next to FILE).")
def plot(file, out_dir):
    """Draw figures from a NetCDF FILE written by 'stratiflux run'.

    \b
    Example:
      stratiflux plot spill.nc --out figures
    """
    if not os.path.exists(file):
        raise FileNotFoundError(2, "no such file", file)
    try:
        ds = read_column_netcdf(file)
    except (ValueError, OSError) as exc:
        raise UserError(f"Cannot read {file} as a stratiflux NetCDF file: {exc}") from None
    missing = [v for v in ("concentration", "depth", "time") if v not in ds.variables]
    if missing:
        raise UserError(f"{file} lacks the variable(s) {', '.join(missing)}; give a file "
                        "written by 'stratiflux run'.")
    receptor = float(ds["receptor_depth"]) if "receptor_depth" in ds.variables else None
    level = float(ds["screening_level"]) if "screening_level" in ds.variables else None
    out_dir = out_dir or (os.path.dirname(os.path.abspath(file)))
    for path in write_plots(ds, out_dir, Path(file).stem, receptor_depth=receptor,
                            screening_level=level, title=ds.attrs.get("title", "")):
        click.echo(path)
