"""``stratiflux run`` of a scenario with a decay chain: every species solved, read and
written to one NetCDF file with a species dimension."""
from __future__ import annotations

import os
import re
import shlex
from pathlib import Path

import click
import numpy as np

from transport.caution import CAUTION
from transport.cli.common import (echo_wrapped, progress, read_receptor, setting, solve,
                                  write_plots)
from transport.io.atomic import OutputSet, terminate_as_exit
from transport.io.netcdf_chain import write_chain_netcdf

__all__ = ["run_chain"]


def _slug(name: str) -> str:
    return re.sub(r"[^A-Za-z0-9]+", "-", name).strip("-").lower() or "species"


def _chain_figure(solutions, names, levels, receptor, design_life, title, plots_dir, stem,
                  stage):
    """Every species' receptor curve on one figure (400 samples of the continuous
    solution from the first output time)."""
    from transport.plot.chain import plot_chain_breakthrough  # matplotlib: lazily
    from transport.plot.style import allowed_error, rounding_as_zero

    times = solutions[0].times
    t = np.linspace(float(times[times > 0].min()), float(times.max()), 400)
    # rounding-level negatives (within each species' allowed error) drawn as 0
    curves = [rounding_as_zero(sol.concentration_at(receptor, t), allowed_error(sol))
              for sol in solutions]
    return plot_chain_breakthrough(t, curves, names,
                                   os.path.join(plots_dir, f"{stem}_chain_breakthrough.png"),
                                   stage=stage, receptor_depth=receptor, levels=levels,
                                   design_life=design_life, title=title)


def run_chain(sc, scenario, output, plots_dir, engine, tolerance, allow_unreliable,
              command):
    """Solve, read and write a chain scenario ``sc`` (``command``: the history list)."""
    total = 4 if plots_dir else 3
    names = sc.chain.names
    progress(2, total, f"solving a decay chain of {len(names)} species "
                       f"({' -> '.join(names)}), {len(sc.column.layers)} layer(s), "
                       f"{len(sc.times)} time(s) x {len(sc.depths)} depth(s)")
    solutions = solve(sc, engine=engine, tolerance=tolerance,
                      allow_unreliable=allow_unreliable, species=True)
    click.echo(f"      engine: laplace for every species (a chain is solved exactly in the "
               f"Laplace domain); tolerance {solutions[0].tolerance:g}", err=True)
    receptor = setting(sc, "receptor_depth")
    design_life = setting(sc, "design_life")
    levels = (setting(sc, "screening_level"),) + tuple(sc.chain_levels)
    views, lines, notes = [], [], []
    for name, sol, level in zip(names, solutions, levels):
        v, species_lines, note = read_receptor(
            sol, receptor, level, design_life, title=f"{sc.title}; species {name}",
            allow_unreliable=allow_unreliable, start_date=setting(sc, "start_date"))
        views.append(v)
        notes.append(note)
        lines += species_lines
        if level is None and receptor is not None:
            lines.append(f"No screening level given for {name}: add screening_level to its "
                         "[[chain]] table to read its receptor curve against one.")
        lines.append("")
    progress(3, total, f"writing {output}")
    with terminate_as_exit(), OutputSet() as stage:
        write_chain_netcdf(solutions, names, output, stage=stage, title=sc.title,
                           yields=sc.chain.yields, screening_levels=levels,
                           receptor_depth=receptor, metrics=views, metrics_notes=notes,
                           scenario_text=getattr(sc, "source_text", None),
                           history=shlex.join(command), start_date=setting(sc, "start_date"))
        figures = []
        if plots_dir:
            progress(4, total, f"drawing figures in {plots_dir}")
            os.makedirs(plots_dir, exist_ok=True)
            if receptor is not None:
                figures.append(_chain_figure(solutions, names, levels, receptor, design_life,
                                             sc.title, plots_dir, Path(output).stem, stage))
            for name, sol, level in zip(names, solutions, levels):
                figures += write_plots(sol, plots_dir, f"{Path(output).stem}_{_slug(name)}",
                                       receptor_depth=receptor, screening_level=level,
                                       title=f"{sc.title}: {name}", stage=stage,
                                       design_life=design_life)
    for path in figures:
        click.echo(f"      {path}", err=True)
    click.echo("")
    for line in lines:
        if line:
            echo_wrapped(line)
        else:
            click.echo("")
    click.echo(f"Results: {output}")
    click.echo("")
    echo_wrapped(CAUTION)
