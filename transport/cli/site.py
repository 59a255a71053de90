"""Command ``stratiflux site``: every boring of a site, with maps and Monte Carlo.

A thin layer over :func:`transport.site.config.load_site` and
:func:`transport.site.run.run_site`; input errors end with one paragraph and exit
status 2 (the group's handler in ``transport.cli.main``; this command also handles them
itself, through :func:`transport.cli.common.fail`, so that it works on its own).
"""
from __future__ import annotations

import shlex
import sys
import textwrap
from pathlib import Path

import click

from transport.caution import CAUTION
from transport.cli.common import fail
from transport.io.atomic import terminate_as_exit
from transport.io.gis import station_table
from transport.site.batch import WORKER_WAIT
from transport.site.config import load_site
from transport.site.run import run_site

__all__ = ["site"]


@click.command("site")
@click.argument("site_file", metavar="SITE.toml", type=click.Path(dir_okay=False))
@click.option("-o", "--output", "out_dir", type=click.Path(file_okay=False), default=None,
              help="Output directory (default: <SITE>-results next to the site file).")
@click.option("--realizations", type=click.IntRange(min=0), default=None,
              help="Monte Carlo realizations (default: the site file's [uncertainty]; "
                   "0: deterministic only).")
@click.option("--seed", type=click.IntRange(min=0), default=None,
              help="Random seed (default: the site file's; else one is drawn and reported).")
@click.option("--sampling", type=click.Choice(["random", "latin-hypercube"]), default=None,
              help="Monte Carlo sampling (default: the site file's, else random).")
@click.option("--scheduler", metavar="ADDRESS", default=None,
              help="Run on a dask.distributed cluster, e.g. tcp://10.0.0.5:8786.")
@click.option("--workers", type=click.IntRange(min=1), default=None,
              help="Local worker processes (default: CPU count; ignored with --scheduler).")
@click.option("--chunk-size", type=click.IntRange(min=1), default=16, show_default=True,
              help="Borings per chunk (unit of work and of resumption).")
@click.option("--worker-wait", type=click.FloatRange(min=0), default=WORKER_WAIT,
              show_default=True, metavar="SECONDS",
              help="With --scheduler: how long to wait while no Dask worker is connected "
                   "before stopping (finished chunks are kept: run again to resume); "
                   "0: wait indefinitely.")
def site(site_file, out_dir, realizations, seed, sampling, scheduler, workers, chunk_size,
         worker_wait):
    """Solve every boring of SITE.toml; write NetCDF, GeoPackage, GeoJSON, CSV and a map.

    An interrupted run continues where it stopped when started again with the same
    inputs (finished chunks are kept beside the output, with checksums, until the run
    completes; damaged ones are computed again). All five files are renamed into place
    together once all are written: a failed run leaves the previous ones unchanged.

    \b
    Examples:
      stratiflux site data/site-demo/site.toml -o results
      stratiflux site data/site-demo/site.toml --realizations 500 --seed 7 \\
          --sampling latin-hypercube
      stratiflux site site.toml --scheduler tcp://10.0.0.5:8786 -o results
    """
    try:
        loaded = load_site(site_file)
    except (ValueError, OSError) as exc:
        fail(exc)
    out_dir = out_dir or str(Path(site_file).with_name(Path(site_file).stem + "-results"))
    n_real = loaded.realizations if realizations is None else realizations
    mc = bool(n_real and loaded.distributions)
    where = f"cluster {scheduler}" if scheduler else f"{workers or 'all'} local worker(s)"
    click.echo(f"Site: {loaded.title}: {len(loaded.borings)} borings, "
               + (f"{n_real} Monte Carlo realizations, " if mc else "deterministic, ")
               + f"on {where}", err=True)
    command = ["stratiflux", "site", str(site_file), "-o", str(out_dir)]
    for flag, value in (("--realizations", realizations), ("--seed", seed),
                        ("--sampling", sampling), ("--scheduler", scheduler),
                        ("--workers", workers)):
        if value is not None:
            command += [flag, str(value)]
    try:
        # SIGTERM ends the run like Ctrl-C: temporary files are removed on the way out
        with terminate_as_exit(), click.progressbar(
                length=len(loaded.borings), label="borings",
                file=sys.stderr) as bar:
            files = run_site(loaded, out_dir, realizations=realizations, seed=seed,
                             sampling=sampling, workers=workers, scheduler=scheduler,
                             chunk_size=chunk_size, progress=bar.update,
                             history=shlex.join(command), worker_wait=worker_wait)
    except (ValueError, OSError) as exc:
        fail(exc)
    if files.chunks_damaged:
        click.echo(f"{files.chunks_damaged} saved chunk(s) of the interrupted run were "
                   "damaged (checksum mismatch) and were computed again.", err=True)
    if files.chunks_reused:
        click.echo(f"Resumed: {files.chunks_reused} chunk(s) reused from the interrupted run.",
                   err=True)
    seen = set()
    for bid, message in files.warnings:
        if message not in seen:
            seen.add(message)
            click.echo(textwrap.fill(f"Warning (boring {bid}): {message}", 88), err=True)
    if mc:
        click.echo(f"Monte Carlo seed: {files.seed} (pass --seed {files.seed} to repeat)")
    _summary(files)
    for path in (files.netcdf, files.geopackage, files.geojson, files.csv, files.map):
        click.echo(f"Wrote {path}")
    click.echo("")
    click.echo(textwrap.fill(CAUTION, 88))


def _summary(files):
    """The site's reading: borings reaching the level, earliest, exceedance spread."""
    table = station_table(files.netcdf)
    bt = table["breakthrough_yr"]
    n, hit = len(table), int(bt.notna().sum())
    level, life = table.attrs["screening_level_mg_L"], table.attrs["design_life_yr"]
    line = (f"{hit} of {n} borings reach the screening level {level:.4g} mg/L at the "
            f"receptor within the {life:.4g} yr design life")
    if hit:
        first = table.loc[bt.idxmin()]
        line += f"; earliest {first['station_id']} at {first['breakthrough_yr']:.3g} yr"
    click.echo(textwrap.fill(line + ".", 88))
    if "exceedance_probability" in table and table.attrs.get("realizations"):
        p = table["exceedance_probability"]
        click.echo(f"Exceedance probability per boring: min {p.min():.2f}, median "
                   f"{p.median():.2f}, max {p.max():.2f}.")
