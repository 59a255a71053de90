"""Command ``stratiflux plot``: figures from any NetCDF file the tool writes.

The file kind is read from its dimensions: a comparison (``scenario``), a site
(``station``) or a single run (``time`` and ``depth`` only).
"""
from __future__ import annotations

import os
from pathlib import Path

import click
import numpy as np

from transport.cli.common import UserError, write_plots
from transport.io.gis import station_table
from transport.io.netcdf import read_column_netcdf
from transport.units import MG_PER_L, YEAR

__all__ = ["plot", "file_kind"]

_KINDS = {"run": "a single run ('stratiflux run')",
          "comparison": "a comparison ('stratiflux compare')",
          "site": "a site ('stratiflux site')",
          "chain": "a decay-chain run ('stratiflux run' of a scenario with [[chain]])"}


def file_kind(ds) -> str | None:
    """'comparison', 'site' or 'run' from the dimensions of a stratiflux NetCDF dataset;
    None when it is none of them."""
    if "concentration" not in ds.variables or "time" not in ds.dims:
        return None
    dims = ds["concentration"].dims
    if "scenario" in dims and dims[-2:] == ("time", "depth"):
        return "comparison"
    if "station" in ds.dims and "station_id" in ds.variables:
        return "site"
    if dims == ("species", "time", "depth"):
        return "chain"
    if dims == ("time", "depth"):
        return "run"
    return None


def _draw(kind, ds, file, out_dir, stem, receptor, level, life):
    # matplotlib is imported lazily: the other commands start without it
    from transport.plot.compare import view_of_dataset, write_comparison_figures
    from transport.plot.site_map import plot_site_map

    if kind == "site":
        return [plot_site_map(station_table(file), os.path.join(out_dir, f"{stem}_map.png"))]
    if kind == "comparison":
        view = view_of_dataset(ds, receptor_depth=receptor, screening_level=level,
                               design_life=life)
        if not view.curves:
            click.echo("Note: the file holds no receptor depth; give --receptor-depth "
                       "(m) for the breakthrough figure.", err=True)
        return write_comparison_figures(view, out_dir, stem, ds.attrs.get("title") or None)
    if kind == "chain":  # every species on one figure, then one set of figures each
        from transport.plot.chain import curves_of_dataset, plot_chain_breakthrough
        rec = receptor if receptor is not None else float(ds["receptor_depth"])
        names = [str(n) for n in ds["species_name"].values]
        lev_all = [None if not np.isfinite(v) else float(v)
                   for v in np.atleast_1d(ds["screening_level"].values)] \
            if "screening_level" in ds.variables else [level] * len(names)
        t, curves = curves_of_dataset(ds, rec)
        paths = [plot_chain_breakthrough(t, curves, names, os.path.join(
            out_dir, f"{stem}_chain_breakthrough.png"), receptor_depth=rec, levels=lev_all,
            design_life=life, title=ds.attrs.get("title", ""))]
        for i, name in enumerate(ds["species_name"].values):
            one = ds.isel(species=i)
            lev = level
            if lev is None and "screening_level" in one.variables:
                value = float(one["screening_level"])
                lev = value if value == value else None  # NaN: none for this species
                if lev is None:
                    one = one.drop_vars("screening_level")
            slug = "".join(ch if ch.isalnum() else "-" for ch in str(name)).strip("-").lower()
            paths += write_plots(one, out_dir, f"{stem}_{slug}", receptor_depth=receptor if
                                 receptor is not None else float(ds["receptor_depth"]),
                                 screening_level=lev, design_life=life,
                                 title=f"{ds.attrs.get('title', '')}: {name}")
        return paths
    if receptor is None and "receptor_depth" in ds.variables:
        receptor = float(ds["receptor_depth"])
    if level is None and "screening_level" in ds.variables:
        level = float(ds["screening_level"])
    return write_plots(ds, out_dir, stem, receptor_depth=receptor, screening_level=level,
                       title=ds.attrs.get("title", ""), design_life=life)


@click.command()
@click.argument("file", type=click.Path(dir_okay=False))
@click.option("--out", "out_dir", type=click.Path(file_okay=False), default=None,
              help="Directory for the PNG figures (default: next to FILE).")
@click.option("--receptor-depth", type=click.FloatRange(min=0), default=None,
              help="Receptor depth in m, where the file holds none (a comparison).")
@click.option("--screening-level", type=click.FloatRange(min=0, min_open=True),
              default=None, help="Screening level in mg/L, where the file holds none.")
@click.option("--design-life", type=click.FloatRange(min=0, min_open=True), default=None,
              help="Design life in years, marked on breakthrough figures.")
def plot(file, out_dir, receptor_depth, screening_level, design_life):
    """Draw figures from a NetCDF FILE written by 'stratiflux run', 'compare' or 'site'.

    \b
    A run gives <stem>_profiles.png and <stem>_breakthrough.png (a decay chain: one
    pair per species); a comparison <stem>_breakthrough.png, _metrics.png and
    _profiles.png; a site <stem>_map.png.

    \b
    Example:
      stratiflux plot spill.nc --out figures
      stratiflux plot comparison/comparison.nc --receptor-depth 4 --design-life 50
    """
    if not os.path.exists(file):
        raise FileNotFoundError(2, "no such file", file)
    try:
        ds = read_column_netcdf(file)
    except (ValueError, OSError, KeyError) as exc:
        raise UserError(f"Cannot read {file} as a stratiflux NetCDF file: {exc}") from None
    kind = file_kind(ds)
    if kind is None:
        raise UserError(
            f"{file} is not a file stratiflux writes: it should hold a 'concentration' "
            "variable over time and depth, as in " + ", ".join(_KINDS.values())
            + f". Found the variables {', '.join(sorted(map(str, ds.data_vars))) or 'none'}.")
    out_dir = out_dir or os.path.dirname(os.path.abspath(file))
    os.makedirs(out_dir, exist_ok=True)
    level = None if screening_level is None else screening_level * MG_PER_L
    life = None if design_life is None else design_life * YEAR
    try:
        paths = _draw(kind, ds, file, out_dir, Path(file).stem, receptor_depth, level, life)
    except (ValueError, KeyError, IndexError, TypeError) as exc:
        raise UserError(f"Cannot draw {file}, {_KINDS[kind]}: {exc}. Check that the "
                        "file was written by this version of stratiflux and is "
                        "complete.") from None
    for path in paths:
        click.echo(path)
