"""Command ``stratiflux sensitivity``: what drives the answer of a scenario."""
from __future__ import annotations

import shlex
import sys
import textwrap
from pathlib import Path

import click

from transport.analysis.sensitivity import (check_runs, load_study, plan_runs, solve_runs,
                                            summarize)
from transport.analysis.sensitivity_output import reading_lines, table_lines, write_outputs
from transport.analysis.sobol import MAX_SAMPLES, MIN_SAMPLES
from transport.caution import CAUTION
from transport.cli.common import WIDTH, Refused, UserError, echo_wrapped
from transport.io.atomic import terminate_as_exit
from transport.solvers.checks import UnreliableResultError

__all__ = ["sensitivity"]


@click.command()
@click.argument("scenario", type=click.Path(dir_okay=False))
@click.option("-o", "--out", "out_dir", type=click.Path(file_okay=False), default=None,
              help="Directory for the table (CSV), every run (NetCDF) and the figures "
                   "(default: <scenario>-sensitivity beside the scenario file).")
@click.option("--samples", type=int, default=None,
              help="Base sample size N of the variance-based indices, a power of two "
                   "(N (d + 2) runs for d inputs with a distribution); overrides the file.")
@click.option("--seed", type=click.IntRange(min=0, max=2 ** 63 - 1), default=None,
              help="Seed of the Sobol' sequence and of the bootstrap; overrides the file.")
@click.option("--one-at-a-time", "oat_only", is_flag=True,
              help="Only the one-at-a-time runs: no variance-based indices.")
@click.option("--tolerance", type=click.FloatRange(min=1e-14, max=0.1), default=None,
              help="Relative tolerance of every run (default: the scenario's [output] "
                   "tolerance).")
def sensitivity(scenario, out_dir, samples, seed, oat_only, tolerance):
    """What drives the answer: vary the inputs of SCENARIO's [sensitivity] table.

    One at a time, each input goes to its low and its high value with the others at
    the scenario's values (a tornado of the swings of the chosen receptor metric);
    inputs given as distributions also get first-order and total-effect variance-based
    indices (Saltelli et al. 2010 design and estimators, Jansen 1999 total effect) with
    bootstrap intervals. Every run is checked like `stratiflux run`; a run no engine can
    vouch for stops the study (exit status 3) and writes nothing.

    \b
    Example:
      stratiflux sensitivity scenarios/sensitivity-demo.toml -o sensitivity
    """
    if samples is not None and (not MIN_SAMPLES <= samples <= MAX_SAMPLES
                                or samples & (samples - 1)):
        raise UserError(f"--samples {samples}: the base sample size must be a power of two "
                        f"from {MIN_SAMPLES} to {MAX_SAMPLES} (the balance of the Sobol' "
                        "sequence); use e.g. --samples 64.")
    study = load_study(scenario)
    out_dir = out_dir or str(Path(scenario).with_name(Path(scenario).stem + "-sensitivity"))
    stem = Path(scenario).stem
    plan = plan_runs(study, samples, seed, oat_only)
    spec = study.spec
    n_sampled = len(spec.sampled) if plan.samples else 0
    click.echo(f"Sensitivity: {study.title}: {len(spec.inputs)} input(s), {n_sampled} with a "
               f"distribution; {plan.size} runs"
               + (f" (N = {plan.samples}, seed {plan.seed})" if plan.samples else ""),
               err=True)
    command = ["stratiflux", "sensitivity", str(scenario), "-o", str(out_dir)]
    for flag, value in (("--samples", samples), ("--seed", seed),
                        ("--tolerance", tolerance)):
        if value is not None:
            command += [flag, f"{value:g}" if isinstance(value, float) else str(value)]
    if oat_only:
        command.append("--one-at-a-time")
    try:
        with terminate_as_exit():
            with click.progressbar(length=plan.size, label="checking inputs",
                                   file=sys.stderr) as bar:
                check_runs(study, plan, progress=bar.update)
            with click.progressbar(length=plan.size, label="solving runs",
                                   file=sys.stderr) as bar:
                metric, censored, notes = solve_runs(study, plan, progress=bar.update,
                                                     tolerance=tolerance)
    except UnreliableResultError as exc:
        raise Refused(f"refused: {exc}") from None
    result = summarize(study, plan, metric, censored, notes)
    paths = write_outputs(result, out_dir, stem, history=shlex.join(command))
    for note in notes:
        click.echo(textwrap.fill(f"Warning: {note}", width=WIDTH), err=True)
    click.echo("")
    echo_wrapped(f"{study.title}: what drives the {spec.metric.label}")
    click.echo("")
    for line in table_lines(result):
        click.echo(line)
    click.echo("")
    for line in reading_lines(result):
        echo_wrapped(line)
    if plan.samples:
        click.echo(f"Seed: {plan.seed} (pass --seed {plan.seed} to repeat)")
    click.echo("")
    for path in paths:
        click.echo(f"Wrote {path}")
    click.echo("")
    echo_wrapped(CAUTION)
