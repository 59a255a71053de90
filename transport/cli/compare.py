"""Command ``stratiflux compare``: remediation alternatives side by side."""
from __future__ import annotations

import shlex
import sys
import textwrap

import click

from transport.analysis.compare import (compare_alternatives, comparison_table, table_text,
                                        verdict_lines, write_outputs)
from transport.caution import CAUTION
from transport.scenario.schema import load_alternatives

__all__ = ["compare"]


@click.command()
@click.argument("scenarios", nargs=-1, required=True, type=click.Path(dir_okay=False))
@click.option("-o", "--out", "out_dir", type=click.Path(file_okay=False), default="comparison",
              show_default=True, help="Directory for the table (CSV, Markdown), NetCDF and "
              "figures.")
@click.option("--engine", type=click.Choice(["auto", "modal", "laplace", "finite-volume"]),
              default="auto", show_default=True,
              help="Solution method (staged alternatives: auto, modal or laplace).")
@click.option("--tolerance", type=click.FloatRange(min=1e-14, max=0.1), default=None,
              help="Relative tolerance of every reported number (default: each "
                   "scenario's [output] tolerance).")
def compare(scenarios, out_dir, engine, tolerance):
    """Run remediation alternatives and compare them: one scenario file each, or one file
    with [[alternatives]] tables (each a name and its own actions).

    Every alternative is solved on a common time and depth grid; the table reports
    breakthrough at the receptor, time above the screening level, peak and mass to the
    receptor over the design life and over the whole run, whether the peak lies after
    the design life (still rising at its end), time to steady state and the mass budget.

    \b
    Example:
      stratiflux compare scenarios/alternatives/*.toml -o comparison
      stratiflux compare scenarios/depot-alternatives.toml -o comparison
    """
    loaded = [sc for p in scenarios for sc in load_alternatives(p)]
    if len(loaded) < 2:
        raise click.UsageError("give two or more scenario files, or one file with "
                               "[[alternatives]] tables")
    labels = [sc.title for sc in loaded]
    with click.progressbar(length=len(loaded), label="solving alternatives",
                           file=sys.stderr) as bar:
        def step(label):
            bar.update(1)
        alts = compare_alternatives(loaded, labels, engine=engine, progress=step,
                                    tolerance=tolerance)
    for a in alts:
        for message in a.warnings:
            click.echo(textwrap.fill(f"Warning ({a.label}): {message}", width=88), err=True)
    history = shlex.join(["stratiflux", "compare", *scenarios, "-o", out_dir, "--engine",
                          engine] + ([] if tolerance is None else
                                     ["--tolerance", f"{tolerance:g}"]))
    paths = write_outputs(alts, out_dir, history=history, title="Comparison of alternatives")
    click.echo(table_text(comparison_table(alts)))
    click.echo("")
    for line in verdict_lines(alts):
        click.echo(textwrap.fill(line, width=88))
    click.echo("")
    for p in paths:
        click.echo(f"wrote {p}")
    click.echo("")
    click.echo(textwrap.fill(CAUTION, width=88))
