"""Command ``stratiflux modes``: the decay rates (eigenvalues) of a scenario's column."""
from __future__ import annotations

import click
import numpy as np

from transport.analysis.summary import format_time
from transport.cli.common import setting, solve
from transport.scenario.schema import load_scenario

__all__ = ["modes"]


@click.command()
@click.argument("scenario", type=click.Path(dir_okay=False))
@click.option("-n", "--show", default=10, show_default=True,
              help="How many of the slowest modes to list.")
def modes(scenario, show):
    """List the decay rates (eigenvalues) and time constants of SCENARIO's column.

    The mode count is the one the solver needs for the scenario's earliest output
    time and tolerance.

    \b
    Example:
      stratiflux modes scenarios/sediment-cap.toml -n 5
    """
    sc = load_scenario(scenario)
    solution = solve(sc, depths=[0.0, sc.column.length])
    lam = np.asarray(solution.eigenvalues, dtype=float)
    click.echo(f"Scenario: {sc.title}")
    tolerance = setting(sc, "tolerance")
    click.echo(f"Modes used: {solution.n_modes} (tolerance {tolerance:g}, earliest "
               f"output time {format_time(float(np.min(sc.times)))})")
    click.echo(f"{'mode':>5}  {'eigenvalue (1/s)':>17}  {'time constant 1/lambda':>22}")
    for i, value in enumerate(lam[:show], start=1):
        tau = format_time(1.0 / value) if value > 0 else "inf"
        click.echo(f"{i:>5}  {value:>17.6e}  {tau:>22}")
    if lam.size > show:
        click.echo(f"  ... {lam.size - show} more; fastest {lam[-1]:.6e} 1/s "
                   f"({format_time(1.0 / lam[-1])})")
