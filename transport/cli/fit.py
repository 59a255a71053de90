"""Command ``stratiflux fit``: estimate scenario parameters from a measured profile."""
from __future__ import annotations

import os
import sys
import textwrap
from pathlib import Path

import click

from transport.analysis.fit import FitError, FitRefused, fit_scenario
from transport.analysis.fit_input import read_fit_spec, read_profile
from transport.analysis.fit_report import (estimates_csv, fitted_scenario_text,
                                           residuals_csv, summary_lines)
from transport.caution import CAUTION
from transport.cli.common import WIDTH, Refused, UserError, echo_wrapped
from transport.io.atomic import OutputSet, terminate_as_exit, write_text
from transport.scenario.reader import read_text_file

__all__ = ["fit"]


@click.command()
@click.argument("scenario", type=click.Path(dir_okay=False))
@click.option("--data", type=click.Path(dir_okay=False), default=None,
              help="Measured profile CSV with units in its header, e.g. 'depth [m], "
                   "concentration [mg/L], sigma [mg/L], time [yr]' (default: [fit] data, "
                   "relative to the scenario).")
@click.option("--time", "profile_time", default=None, metavar="TIME",
              help='Time of the profile when the data have no time column, e.g. "46 yr" '
                   "(default: [fit] time, else the scenario's last output time).")
@click.option("-o", "--out", "out_dir", type=click.Path(file_okay=False), default="fit",
              show_default=True, help="Directory for the figure, the tables and the "
                                      "fitted scenario.")
@click.option("--engine", type=click.Choice(["auto", "laplace"]), default="auto",
              show_default=True, help="Solution method of every evaluation.")
@click.option("--tolerance", type=click.FloatRange(min=1e-14, max=0.1), default=None,
              help="Relative tolerance of every model evaluation (default: the "
                   "scenario's [output] tolerance).")
def fit(scenario, data, profile_time, out_dir, engine, tolerance):
    """Fit the free parameters of SCENARIO's [fit] table to a measured pore-water
    profile by weighted least squares.

    Writes, into the output directory, <name>_fit.png (measured with error bars against
    the fitted profiles, and the residuals), <name>_fit_estimates.csv (estimates,
    linearised confidence intervals, correlations), <name>_fit_residuals.csv and
    <name>_fitted.toml (the scenario with the fitted values, marked as fitted). A
    parameter the data cannot determine is reported as not identifiable. A fit that
    fails writes nothing.

    \b
    Example:
      stratiflux fit scenarios/clay-core-fit.toml --data data/clay-core-profile.csv -o fit
    """
    text = read_text_file(scenario)
    spec = read_fit_spec(text, scenario, data_override=data, time_override=profile_time)
    profile = read_profile(data) if data is not None else None
    stem = Path(scenario).stem
    paths = {kind: os.path.join(out_dir, f"{stem}{suffix}") for kind, suffix in (
        ("figure", "_fit.png"), ("estimates", "_fit_estimates.csv"),
        ("residuals", "_fit_residuals.csv"), ("scenario", "_fitted.toml"))}
    click.echo(f"fitting {len(spec.free)} parameter(s) of {scenario} "
               f"(engine {engine}; at most {spec.max_evaluations} evaluations)", err=True)
    with click.progressbar(length=spec.max_evaluations, label="model evaluations",
                           file=sys.stderr, show_pos=True) as bar:
        def step(count):
            bar.update(count - bar.pos)
        try:
            result = fit_scenario(text, scenario, profile, spec=spec, engine=engine,
                                  tolerance=tolerance, progress=step)
        except FitRefused as exc:
            raise Refused(str(exc)) from None
        except FitError as exc:
            raise UserError(str(exc)) from None
        bar.update(bar.length - bar.pos)  # converged: the budget is no longer needed
    title = result.scenario.title
    data_name = os.path.basename(data or spec.data or "")
    fitted, missed = fitted_scenario_text(result, text, scenario, paths["scenario"],
                                          data_name=data_name)
    lines = summary_lines(result, title, data_name)
    # matplotlib is imported lazily: the rest of the command line starts faster
    from transport.plot.fit import plot_fit

    os.makedirs(out_dir, exist_ok=True)
    # all four files appear together, or none changes (transport.io.atomic)
    with terminate_as_exit(), OutputSet() as stage:
        write_text(paths["estimates"], estimates_csv(result, title), stage=stage)
        write_text(paths["residuals"], residuals_csv(result), stage=stage)
        write_text(paths["scenario"], fitted, stage=stage)
        plot_fit(result, paths["figure"], title=title, stage=stage)
    for message in result.warnings:
        click.echo(textwrap.fill(f"Warning (at the fitted values): {message}", width=WIDTH),
                   err=True)
    for key in missed:
        click.echo(textwrap.fill(f"Warning: {key} could not be written in place in "
                                 f"{paths['scenario']}; its fitted value is in the file's "
                                 "header comment", width=WIDTH), err=True)
    click.echo("")
    for line in lines:
        if line.startswith("  "):
            click.echo(line)
        else:
            echo_wrapped(line)
    click.echo("")
    for path in paths.values():
        click.echo(f"wrote {path}")
    click.echo("")
    echo_wrapped(CAUTION)
