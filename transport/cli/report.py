"""Command ``stratiflux report``: one self-contained HTML report of a scenario run."""
from __future__ import annotations

import os
import time
from pathlib import Path

import click

from transport.analysis.report import build_report, write_report_html
from transport.api import solve_scenario
from transport.caution import CAUTION
from transport.cli.common import Refused, UserError, echo_wrapped, progress
from transport.io.atomic import terminate_as_exit
from transport.scenario.schema import load_scenario
from transport.solvers.checks import UnreliableResultError
from transport.verify.report import run_suite

__all__ = ["report"]


@click.command()
@click.argument("scenario", type=click.Path(dir_okay=False))
@click.option("-o", "--output", type=click.Path(dir_okay=False), default=None,
              help="HTML file to write (default: the scenario path with .html).")
@click.option("--engine", type=click.Choice(["auto", "modal", "laplace", "finite-volume"]),
              default="auto", show_default=True, help="Solution method, as for run.")
@click.option("--tolerance", type=click.FloatRange(min=1e-14, max=0.1), default=None,
              help="Relative tolerance (default: the scenario's [output] tolerance).")
@click.option("--skip-verification", is_flag=True,
              help="Do not run the quick verification suite (the report says so).")
def report(scenario, output, engine, tolerance, skip_verification):
    """Solve SCENARIO and write one self-contained HTML report to hand in.

    The report holds the job, the inputs as typed and as derived (with sources), the
    assumptions and cautions, the receptor metrics over the design life and the whole
    run, the mass budget, the figures, the engine and error bound per output time, the
    verification status of this installation, the version and the SHA-256 of the
    inputs. It opens in a browser with no network.

    \b
    Example:
      stratiflux report scenarios/spill-layered-column.toml -o report.html
    """
    output = output or str(Path(scenario).with_suffix(".html"))
    target_dir = os.path.dirname(os.path.abspath(output))
    if not os.path.isdir(target_dir):  # fail before the solve, not after it
        raise UserError(f"Cannot write {output}: the directory {target_dir} does not exist. "
                        "Create it or choose another path with -o.")
    progress(1, 4, f"reading {scenario}")
    sc = load_scenario(scenario)
    progress(2, 4, f"solving {len(sc.column.layers)} layer(s), {len(sc.times)} time(s)")
    try:
        solution, caught = solve_scenario(sc, engine=engine, tolerance=tolerance)
    except UnreliableResultError as exc:
        raise Refused(f"{scenario}: refused: {exc}") from None
    for message in caught:
        click.echo(f"Warning: {message}", err=True)
    results = seconds = None
    if skip_verification:
        progress(3, 4, "verification suite skipped")
    else:
        progress(3, 4, "running the quick verification suite")
        t0 = time.perf_counter()
        results = run_suite(quick=True)
        seconds = time.perf_counter() - t0
    progress(4, 4, f"writing {output}")
    content = build_report(sc, solution, verification=results, verification_seconds=seconds,
                           warnings=caught)
    with terminate_as_exit():
        write_report_html(content, output)
    if results is not None:
        failed = [r.name for r in results if not r.passed]
        click.echo(f"Verification: {len(results) - len(failed)} of {len(results)} cases "
                   f"passed in {seconds:.1f} s" + (f"; FAILED: {', '.join(failed)}"
                                                   if failed else "."))
    click.echo(f"Report: {output}")
    click.echo("")
    echo_wrapped(CAUTION)
