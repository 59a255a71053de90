"""Command line: ``stratiflux run | check | modes | plot | new | compare | site | verify``.

A thin layer over the Python API (``transport.scenario.schema``, ``transport.solvers.modal.series``,
``transport.io.netcdf``, ``transport.plot.column``). Input errors end the program with a
one-paragraph message and exit status 2, never a traceback.
"""
from __future__ import annotations

import math
import os
import shlex
import textwrap
import warnings
from pathlib import Path

import click
import numpy as np

from transport import __version__
from transport.caution import CAUTION

__all__ = ["main", "earliest_resolved_time", "format_concentration", "format_time",
           "format_layer_table"]

SECONDS_PER_YEAR = 365.25 * 86400.0  # Julian year, as transport.units
SECONDS_PER_DAY = 86400.0
#: A maximum within this relative distance of the end value is a plateau, not a peak
#: (the series is accurate to the solver tolerance, 1e-8 by default).
PLATEAU_RTOL = 1e-6
#: A breakthrough time is flagged as unreliable when the solver's error estimate at that
#: point exceeds this fraction of the screening level.
RELIABLE_FRACTION = 0.1
EXIT_INPUT = 2
EXIT_REFUSED = 3

# Prefix per error class; a ScenarioError already starts with the file and key path.
_ERROR_KIND = {
    "ScenarioError": "",
    "ClusterError": "",
    "UnitError": "invalid units: ",
    "InputError": "invalid input: ",
    "TOMLDecodeError": "the scenario file is not valid TOML: ",
}


class UserError(click.ClickException):
    """A user-facing failure: printed as one paragraph, exit status 2."""

    exit_code = EXIT_INPUT

    def format_message(self):
        return textwrap.fill(self.message, width=88, break_long_words=False,
                             break_on_hyphens=False)


def _describe(exc: BaseException) -> str:
    if isinstance(exc, OSError):
        target = exc.filename if exc.filename is not None else ""
        reason = exc.strerror or str(exc)
        return (f"Cannot read or write {target!s}: {reason}. Check that the path exists, "
                "that its directory is writable and that no other program holds the file.")
    # other ValueErrors keep their class name so that a bug report can be traced
    kind = _ERROR_KIND.get(type(exc).__name__, f"invalid input ({type(exc).__name__}): ")
    return f"{kind}{exc}"


class _Group(click.Group):
    """Turns the expected input errors into a clean message and exit status 2."""

    def invoke(self, ctx):
        try:
            return super().invoke(ctx)
        except (click.exceptions.ClickException, click.exceptions.Exit,
                click.exceptions.Abort):
            raise
        except (ValueError, OSError) as exc:  # ScenarioError, UnitError, InputError: ValueError
            raise UserError(_describe(exc)) from None
        except RuntimeError as exc:
            from transport.solvers.checks import UnreliableResultError
            if isinstance(exc, UnreliableResultError):
                raise Refused(f"refused: {exc}") from None
            raise


# ----------------------------------------------------------------------------- formatting
def format_concentration(c: float) -> str:
    """A concentration in kg m-3 as mg/L, or ug/L below 0.1 mg/L."""
    mg_per_l = c * 1000.0  # 1 kg m-3 = 1000 mg/L
    if mg_per_l != 0 and abs(mg_per_l) < 0.1:
        return f"{mg_per_l * 1000.0:.4g} ug/L"
    return f"{mg_per_l:.4g} mg/L"


def format_time(t: float) -> str:
    """Elapsed seconds as years (days below one year)."""
    if abs(t) >= SECONDS_PER_YEAR:
        return f"{t / SECONDS_PER_YEAR:.4g} yr"
    return f"{t / SECONDS_PER_DAY:.4g} d"


# ---------------------------------------------------------------------- receptor metrics
def earliest_resolved_time(times) -> float:
    """Earliest positive output time: the series meets its tolerance from there on."""
    times = np.asarray(times, dtype=float)
    positive = times[times > 0]
    if positive.size == 0:
        raise ValueError("the run has no positive output time; add output.times")
    return float(positive.min())


# ------------------------------------------------------------------------------ helpers
def _load(path):
    from transport.scenario.schema import load_scenario

    return load_scenario(path)


def _setting(scenario, name):
    """An output setting (receptor_depth, screening_level, design_life, tolerance).

    Read from the scenario itself, else from its ``output`` specification.
    """
    if hasattr(scenario, name):
        return getattr(scenario, name)
    return getattr(getattr(scenario, "output", None), name, None)


def _solve(scenario, depths=None, engine="auto", tolerance=None, allow_unreliable=False):
    from transport.solvers.checks import UnreliableResultError
    from transport.api import solve_scenario

    try:
        solution, caught = solve_scenario(
            scenario, depths=depths, engine=engine, tolerance=tolerance,
            on_unreliable="flag" if allow_unreliable else "raise")
    except UnreliableResultError as exc:
        raise Refused(f"{getattr(scenario, 'path', None) or 'scenario'}: refused: {exc}") \
            from None
    for message in caught:
        click.echo(textwrap.fill(f"Warning: {message}", width=88), err=True)
    return solution


class Refused(UserError):
    """No engine could vouch for the results: nothing is written, exit status 3."""

    exit_code = EXIT_REFUSED


def _progress(step: int, total: int, text: str):
    click.echo(f"[{step}/{total}] {text}", err=True)


def _horizon(scenario, solution) -> float:
    t_end = float(np.max(solution.times))
    life = _setting(scenario, "design_life")
    return max(t_end, float(life)) if life else t_end


def _error_at(solution, depth: float, t: float):
    """The error bound of C (kg m-3) the run reports at the output times around t."""
    err = getattr(solution, "error_estimate", None)
    if err is None:
        return None
    times = np.asarray(solution.times, float)
    err = np.asarray(err, float)
    i = int(np.searchsorted(times, t))
    near = err[max(i - 1, 0):i + 1]
    return float(np.max(near)) if near.size else None


def _reliability_note(solution, depth: float, t: float, level: float) -> str:
    """A warning sentence when the solver's error estimate is not small against the level."""
    error = _error_at(solution, depth, t)
    if error is None or error < RELIABLE_FRACTION * level:
        return ""
    return (f" CAUTION: the solver's error estimate there ({format_concentration(error)}) "
            f"is not small compared with the screening level; this time is not reliable. "
            "Use a tighter tolerance or later output times.")


def _refused_lines(solution):
    """What the run could not vouch for (with --allow-unreliable)."""
    reliable = getattr(solution, "reliable", None)
    if reliable is None or np.all(reliable):
        return []
    bad = np.asarray(solution.times, float)[~np.asarray(reliable)]
    shown = ", ".join(format_time(t) for t in bad[:6]) + (" ..." if bad.size > 6 else "")
    return [f"CAUTION: no engine could vouch for {bad.size} output time(s) within the "
            f"tolerance {solution.tolerance:g} ({shown}); their values are left empty "
            "(NaN) and flagged in the file, and no receptor metrics or budget are "
            "reported for this run. Loosen the tolerance or change the output times."]


def _summary_lines(scenario, solution):
    lines = [f"Scenario: {scenario.title}"]
    refused = _refused_lines(solution)
    if refused:
        return lines + refused
    err = getattr(solution, "error", None)
    receptor = _setting(scenario, "receptor_depth")
    level = _setting(scenario, "screening_level")
    t_end = _horizon(scenario, solution)
    t_start = earliest_resolved_time(solution.times)
    if receptor is not None:
        from transport.analysis.metrics import receptor_metrics

        where = f"Receptor at {receptor:g} m"
        m = receptor_metrics(solution, receptor, level, t_end)
        if level is not None:
            t_cross = m.first_exceedance
            shown = format_concentration(level)
            if t_cross is None:
                lines.append(f"{where}: screening level {shown} not reached within the run "
                             f"({format_time(t_start)} to {format_time(t_end)}).")
            elif t_cross <= t_start:
                lines.append(f"{where}: screening level {shown} already reached at the "
                             f"earliest output time {format_time(t_start)}; earlier times "
                             "are not resolved (add earlier output times)."
                             + _reliability_note(solution, receptor, t_start, level))
            else:
                life = _setting(scenario, "design_life")
                against = ""
                if life:
                    side = "within" if t_cross <= life else "after"
                    against = f", {side} the {format_time(life)} design life"
                lines.append(f"{where}: screening level {shown} first reached at "
                             f"{format_time(t_cross)}{against}; above it for "
                             f"{format_time(m.time_above_level)} up to {format_time(t_end)}."
                             + _reliability_note(solution, receptor, t_cross, level))
        t_peak, c_peak = m.peak_time, m.peak_concentration
        c_end = float(np.asarray(solution.concentration_at(receptor, np.array([t_end])))[0])
        if c_peak - c_end <= PLATEAU_RTOL * max(abs(c_peak), 1e-300):
            lines.append(f"{where}: highest concentration {format_concentration(c_end)} at "
                         f"the end of the run ({format_time(t_end)}); it is still rising or "
                         "at steady state, so the peak lies beyond the run.")
        else:
            lines.append(f"{where}: peak {format_concentration(c_peak)} at "
                         f"{format_time(t_peak)}.")
        if m.cumulative_mass is not None:
            lines.append(f"{where}: {m.cumulative_mass * 1e6:.4g} mg/m2 passed downward up to "
                         f"{format_time(t_end)}.")
        if m.time_to_95_percent_steady is not None:
            lines.append(f"{where}: 95 % of the steady value "
                         f"{format_concentration(m.steady_concentration)} is reached at "
                         f"{format_time(m.time_to_95_percent_steady)}.")
    budget = getattr(solution, "budget", None) or {}
    if budget:
        last = {k: float(np.asarray(v)[-1]) for k, v in budget.items()}
        scale = max([abs(v) for k, v in last.items() if k != "residual"] + [1e-300])
        lines.append(
            f"Mass budget at {format_time(float(solution.times[-1]))} (kg/m2): "
            f"stored {last.get('stored', math.nan):.6g}, initial "
            f"{last.get('initial_stored', math.nan):.6g}, entered top "
            f"{last.get('entered_top', math.nan):.6g}, left bottom "
            f"{last.get('left_bottom', math.nan):.6g}, decayed "
            f"{last.get('decayed', math.nan):.6g}, produced {last.get('produced', math.nan):.6g}; "
            f"residual {last.get('residual', math.nan):.3g} "
            f"({abs(last.get('residual', math.nan)) / scale:.2g} of the largest term).")
    if err is not None and getattr(solution, "scale", None):
        from transport.solvers.checks import QUANTITIES
        names = {"concentration": "concentration", "total_flux": "flux",
                 "cumulative_mass": "cumulative mass", "budget": "budget"}
        worst = ", ".join(
            f"{names[q]} {np.nanmax(np.asarray(err[q], float)) / solution.scale[q]:.1g}"
            for q in QUANTITIES)
        lines.append(f"Checked (tolerance {solution.tolerance:g}): largest error bound "
                     f"relative to the scale of each quantity: {worst}; physical bounds and "
                     "the mass budget hold at every output time.")
    return lines


def _total_porosity(sc, solution):
    """Total porosity per layer for the NetCDF file, where the file's layers are the
    scenario's (a staged run may end with other layers)."""
    details = getattr(sc, "layer_details", ()) or ()
    if getattr(sc, "timeline", None) is not None or len(details) != len(solution.column.layers):
        return None
    return [d["porosity"] for d in details]


def _write_plots(source, out_dir, stem, *, receptor_depth, screening_level, title,
                 stage=None):
    """The run's figures; with ``stage`` (an OutputSet) they are renamed with the other
    outputs of the run, else both appear together once both are drawn."""
    from transport.io.atomic import OutputSet
    from transport.plot.column import plot_breakthrough, plot_profiles

    if stage is None:
        with OutputSet() as own:
            return _write_plots(source, out_dir, stem, receptor_depth=receptor_depth,
                                screening_level=screening_level, title=title, stage=own)
    out_dir = Path(out_dir)
    out_dir.mkdir(parents=True, exist_ok=True)
    written = [plot_profiles(source, out_dir / f"{stem}_profiles.png",
                             screening_level=screening_level, title=title, stage=stage)]
    if receptor_depth is not None:
        written.append(plot_breakthrough(source, out_dir / f"{stem}_breakthrough.png",
                                         receptor_depth=receptor_depth,
                                         screening_level=screening_level, title=title,
                                         stage=stage))
    return written


#: Columns of the ``check`` table: (key in derived_table rows, heading, SI -> shown factor,
#: format). Shown units: m, m2/s, years, m/yr.
_TABLE_COLUMNS = (
    ("top", "top m", 1.0, "{:.3g}"),
    ("bottom", "bottom m", 1.0, "{:.3g}"),
    ("water_content", "theta", 1.0, "{:.3g}"),
    ("retardation_factor", "R", 1.0, "{:.4g}"),
    ("diffusivity", "D m2/s", 1.0, "{:.3e}"),
    ("half_life", "half-life yr", 1.0 / SECONDS_PER_YEAR, "{:.4g}"),
    ("pore_velocity", "v m/yr", SECONDS_PER_YEAR, "{:.4g}"),
    ("peclet_number", "Peclet", 1.0, "{:.3g}"),
    ("diffusion_time", "t_diff yr", 1.0 / SECONDS_PER_YEAR, "{:.4g}"),
    ("advection_time", "t_adv yr", 1.0 / SECONDS_PER_YEAR, "{:.4g}"),
)


def format_layer_table(rows) -> str:
    """Plain-text table of derived per-layer properties (rows of SI floats).

    t_diff = R h^2 / D and t_adv = R h / v are the usual layer time scales
    (common practice); "-" marks a value that does not apply (no decay, no flow).
    """
    header = ["layer"] + [heading for _, heading, _, _ in _TABLE_COLUMNS]
    body = []
    for i, row in enumerate(rows, start=1):
        cells = [str(row.get("name") or f"layer {i}")]
        for key, _, factor, fmt in _TABLE_COLUMNS:
            value = row.get(key)
            if value is None or (isinstance(value, float) and not math.isfinite(value)):
                cells.append("-")
            else:
                cells.append(fmt.format(float(value) * factor))
        body.append(cells)
    widths = [max(len(r[j]) for r in [header] + body) for j in range(len(header))]
    lines = ["  ".join(c.ljust(w) if j == 0 else c.rjust(w)
                       for j, (c, w) in enumerate(zip(r, widths)))
             for r in [header] + body]
    sources = []
    for row in rows:
        for key in ("sorption_source", "diffusion_source"):
            text = row.get(key)
            if text and text not in sources:
                sources.append(text)
    if sources:
        lines.append("Sources: " + "; ".join(sources))
    return "\n".join(lines)


def _echo_wrapped(text: str):
    click.echo(textwrap.fill(text, width=88))


# ----------------------------------------------------------------------------- commands
@click.group(cls=_Group, context_settings={"help_option_names": ["-h", "--help"]})
@click.version_option(__version__, prog_name="stratiflux")
def main():
    """stratiflux: dissolved contaminants through layered soil columns (1-D).

    \b
    Example:
      stratiflux new site.toml && stratiflux run site.toml --plots figures

    A screening-level model under stated assumptions; decisions rest with the
    regulator, local codes and licensed professionals.
    """


@main.command()
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
                   "(NaN, flagged) instead of refusing the run.")
def run(scenario, output, plots_dir, engine, tolerance, allow_unreliable):
    """Solve SCENARIO, write a CF NetCDF file and print a summary.

    Every number is checked (two independent engines, physical bounds, mass budget);
    a run that cannot be vouched for within the tolerance is refused (exit status 3)
    and writes nothing.

    \b
    Example:
      stratiflux run scenarios/spill-layered-column.toml -o spill.nc --plots figures
    """
    from transport.io.atomic import OutputSet, terminate_as_exit
    from transport.io.netcdf import write_column_netcdf

    total = 4 if plots_dir else 3
    output = output or str(Path(scenario).with_suffix(".nc"))
    target_dir = os.path.dirname(os.path.abspath(output))
    if not os.path.isdir(target_dir):  # fail before the solve, not after it
        raise UserError(f"Cannot write {output}: the directory {target_dir} does not exist. "
                        "Create it or choose another path with -o.")
    _progress(1, total, f"reading {scenario}")
    sc = _load(scenario)
    _progress(2, total, f"solving {len(sc.column.layers)} layer(s), "
                        f"{len(sc.times)} time(s) x {len(sc.depths)} depth(s)")
    solution = _solve(sc, engine=engine, tolerance=tolerance,
                      allow_unreliable=allow_unreliable)
    by_time = getattr(solution, "engine_by_time", None)
    used = sorted(set([solution.engine] if by_time is None else list(by_time))
                  - {"initial", ""})
    click.echo(f"      engine(s): {', '.join(used) or 'none'}; {solution.n_modes} modes; "
               f"tolerance {solution.tolerance:g}", err=True)
    # the reading of the run comes first: a failure there must not cost an old file
    lines = _summary_lines(sc, solution)
    _progress(3, total, f"writing {output}")
    command = ["stratiflux", "run", str(scenario), "-o", str(output), "--engine", engine]
    if tolerance is not None:
        command += ["--tolerance", f"{tolerance:g}"]
    if allow_unreliable:
        command += ["--allow-unreliable"]
    if plots_dir:
        command += ["--plots", str(plots_dir)]
    receptor, level = _setting(sc, "receptor_depth"), _setting(sc, "screening_level")
    # every file is produced under a temporary name; all are renamed together at the end
    # of the block, so a failure in any of them leaves the previous files as they were
    with terminate_as_exit(), OutputSet() as stage:
        write_column_netcdf(solution, output, title=sc.title,
                            scenario_text=getattr(sc, "source_text", None),
                            screening_level=level, receptor_depth=receptor,
                            history=shlex.join(command), stage=stage,
                            porosity=_total_porosity(sc, solution))
        if plots_dir:
            _progress(4, total, f"drawing figures in {plots_dir}")
            figures = _write_plots(solution, plots_dir, Path(output).stem,
                                   receptor_depth=receptor, screening_level=level,
                                   title=sc.title, stage=stage)
    if plots_dir:
        for path in figures:
            click.echo(f"      {path}", err=True)
    click.echo("")
    for line in lines:
        _echo_wrapped(line)
    click.echo(f"Results: {output}")
    click.echo("")
    _echo_wrapped(CAUTION)


@main.command()
@click.argument("scenario", type=click.Path(dir_okay=False))
def check(scenario):
    """Validate SCENARIO and print the derived per-layer properties.

    \b
    Example:
      stratiflux check scenarios/spill-layered-column.toml
    """
    sc = _load(scenario)
    click.echo(f"Scenario: {sc.title}")
    table = sc.derived_table()
    click.echo(table if isinstance(table, str) else format_layer_table(table))
    click.echo(f"OK: {scenario} is valid ({len(sc.column.layers)} layer(s), "
               f"{sc.column.length:g} m).")


@main.command()
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
    sc = _load(scenario)
    solution = _solve(sc, depths=[0.0, sc.column.length])
    lam = np.asarray(solution.eigenvalues, dtype=float)
    click.echo(f"Scenario: {sc.title}")
    tolerance = _setting(sc, "tolerance")
    click.echo(f"Modes used: {solution.n_modes} (tolerance {tolerance:g}, earliest "
               f"output time {format_time(float(np.min(sc.times)))})")
    click.echo(f"{'mode':>5}  {'eigenvalue (1/s)':>17}  {'time constant 1/lambda':>22}")
    for i, value in enumerate(lam[:show], start=1):
        tau = format_time(1.0 / value) if value > 0 else "inf"
        click.echo(f"{i:>5}  {value:>17.6e}  {tau:>22}")
    if lam.size > show:
        click.echo(f"  ... {lam.size - show} more; fastest {lam[-1]:.6e} 1/s "
                   f"({format_time(1.0 / lam[-1])})")


@main.command()
@click.argument("file", type=click.Path(dir_okay=False))
@click.option("--out", "out_dir", type=click.Path(file_okay=False), default=None,
              help="Directory for the PNG figures (default: next to FILE).")
def plot(file, out_dir):
    """Draw figures from a NetCDF FILE written by 'stratiflux run'.

    \b
    Example:
      stratiflux plot spill.nc --out figures
    """
    from transport.io.netcdf import read_column_netcdf

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
    for path in _write_plots(ds, out_dir, Path(file).stem, receptor_depth=receptor,
                             screening_level=level, title=ds.attrs.get("title", "")):
        click.echo(path)


@main.command()
@click.argument("path", type=click.Path(dir_okay=False), default="scenario.toml")
@click.option("--force", is_flag=True, help="Overwrite PATH if it exists.")
def new(path, force):
    """Write a commented starter scenario to PATH (default: scenario.toml).

    \b
    Example:
      stratiflux new my-site.toml
    """
    from transport.scenario.schema import starter_scenario_text

    if os.path.exists(path) and not force:
        raise UserError(f"{path} already exists; choose another name or pass --force to "
                        "overwrite it.")
    Path(path).write_text(starter_scenario_text(), encoding="utf-8")
    click.echo(f"Wrote {path}. Next: stratiflux check {path}  then  stratiflux run {path}")


def _register():
    from transport.cli.compare import compare
    from transport.cli.site import site
    from transport.cli.verify import verify

    for command in (compare, site, verify):
        main.add_command(command)


_register()

if __name__ == "__main__":  # pragma: no cover
    main()
