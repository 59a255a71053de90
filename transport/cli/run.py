"""Command ``stratiflux run``: solve one scenario, write its NetCDF file, print its reading."""
from __future__ import annotations

import os
import shlex
from pathlib import Path

import click

from transport.caution import CAUTION
from transport.cli.common import (UserError, echo_wrapped, progress, read_receptor,
                                  setting, solve, write_plots)
from transport.io.atomic import OutputSet, terminate_as_exit
from transport.io.netcdf_file import write_column_netcdf
from transport.scenario.schema import load_scenario

__all__ = ["run"]


def _total_porosity(sc, solution):
    """Total porosity per layer for the NetCDF file, where the file's layers are the
    scenario's (a staged run may end with other layers)."""
    details = getattr(sc, "layer_details", ()) or ()
    if getattr(sc, "timeline", None) is not None or len(details) != len(solution.column.layers):
        return None
    return [d["porosity"] for d in details]


@click.command()
@click.argument("scenario", type=click.Path(dir_okay=False))
@click.option("-o", "--output", type=click.Path(dir_okay=False), default=None,
              help="NetCDF file to write (default: the scenario path with .nc).")
@click.option("--plots", "plots_dir", type=click.Path(file_okay=False), default=None,
              help="Directory for PNG figures (profiles, breakthrough).")
@click.option("--engine", type=click.Choice(["auto", "modal", "laplace", "finite-volume"]),
              default="auto", show_default=True,
              help="Solution method; auto takes the modal value where the Laplace engine "
                   "confirms it, else the Laplace value, per output time.")
@click.option("--tolerance", type=click.FloatRange(min=1e-14, max=0.1), default=None,
              help="Relative tolerance of every reported number (default: the scenario's "
                   "[output] tolerance, 1e-8 unless set).")
@click.option("--allow-unreliable", is_flag=True,
              help="Write the times the engines can vouch for and leave the others empty "
                   "(NaN, flagged) instead of refusing the run; receptor metrics that "
                   "cannot be vouched for are left out, with the reason.")
def run(scenario, output, plots_dir, engine, tolerance, allow_unreliable):
    """Solve SCENARIO, write a CF NetCDF file and print a summary.

    Every number is checked (two independent engines, physical bounds, mass budget);
    a run that cannot be vouched for within the tolerance is refused (exit status 3)
    and writes nothing.

    \b
    Example:
      stratiflux run scenarios/spill-layered-column.toml -o spill.nc --plots figures
    """
    total = 4 if plots_dir else 3
    output = output or str(Path(scenario).with_suffix(".nc"))
    target_dir = os.path.dirname(os.path.abspath(output))
    if not os.path.isdir(target_dir):  # fail before the solve, not after it
        raise UserError(f"Cannot write {output}: the directory {target_dir} does not exist. "
                        "Create it or choose another path with -o.")
    progress(1, total, f"reading {scenario}")
    sc = load_scenario(scenario)
    if sc.chain is not None:
        if engine not in ("auto", "laplace"):
            raise UserError(f"{scenario}: a decay chain is solved by the Laplace engine; "
                            f"use --engine auto or laplace, not {engine}")
        # a chain's file is joined with xarray: loaded only for a chain (start-up time)
        from transport.cli.run_chain import run_chain
        command = ["stratiflux", "run", str(scenario), "-o", str(output), "--engine", engine]
        return run_chain(sc, scenario, output, plots_dir, engine, tolerance,
                         allow_unreliable, command)
    progress(2, total, f"solving {len(sc.column.layers)} layer(s), "
                       f"{len(sc.times)} time(s) x {len(sc.depths)} depth(s)")
    solution = solve(sc, engine=engine, tolerance=tolerance,
                     allow_unreliable=allow_unreliable)
    by_time = solution.engine_by_time
    used = sorted(set([solution.engine] if by_time is None else list(by_time))
                  - {"initial", ""})
    click.echo(f"      engine(s): {', '.join(used) or 'none'}; {solution.n_modes} modes; "
               f"tolerance {solution.tolerance:g}", err=True)
    if solution.diagnostics.get("engine_choice"):  # auto's choice where cost decided it
        click.echo(f"      {solution.diagnostics['engine_choice']}", err=True)
    receptor, level = setting(sc, "receptor_depth"), setting(sc, "screening_level")
    # the reading of the run comes first: a failure there must not cost an old file
    design_life = setting(sc, "design_life")
    views, lines, note = read_receptor(solution, receptor, level, design_life,
                                       title=sc.title, allow_unreliable=allow_unreliable,
                                       start_date=setting(sc, "start_date"))
    progress(3, total, f"writing {output}")
    command = ["stratiflux", "run", str(scenario), "-o", str(output), "--engine", engine]
    if tolerance is not None:
        command += ["--tolerance", f"{tolerance:g}"]
    if allow_unreliable:
        command += ["--allow-unreliable"]
    if plots_dir:
        command += ["--plots", str(plots_dir)]
    # every file is produced under a temporary name; all are renamed together at the end
    # of the block, so a failure in any of them leaves the previous files as they were
    with terminate_as_exit(), OutputSet() as stage:
        write_column_netcdf(solution, output, title=sc.title,
                            scenario_text=getattr(sc, "source_text", None),
                            screening_level=level, receptor_depth=receptor,
                            history=shlex.join(command), stage=stage,
                            porosity=_total_porosity(sc, solution), metrics=views,
                            start_date=setting(sc, "start_date"), metrics_note=note)
        if plots_dir:
            progress(4, total, f"drawing figures in {plots_dir}")
            figures = write_plots(solution, plots_dir, Path(output).stem,
                                  receptor_depth=receptor, screening_level=level,
                                  title=sc.title, stage=stage,
                                  design_life=setting(sc, "design_life"))
    if plots_dir:
        for path in figures:
            click.echo(f"      {path}", err=True)
    click.echo("")
    for line in lines:
        echo_wrapped(line)
    click.echo(f"Results: {output}")
    click.echo("")
    echo_wrapped(CAUTION)
