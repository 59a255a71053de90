"""What every command shares: user-facing errors, progress lines, settings, solving.

Input errors end a command with one paragraph and exit status 2 (:class:`UserError`);
a run no engine can vouch for ends with exit status 3 (:class:`Refused`). Both are
raised by the commands and by the group's handler in :mod:`transport.cli.main`.
"""
from __future__ import annotations

import textwrap
from pathlib import Path

import click

from transport.analysis.summary import run_views, summary_lines
from transport.api import solve_scenario
from transport.io.atomic import OutputSet
from transport.solvers.checks import UnreliableResultError

__all__ = ["EXIT_INPUT", "EXIT_REFUSED", "UserError", "Refused", "describe", "fail",
           "progress", "echo_wrapped", "setting", "solve", "read_receptor",
           "write_plots"]

EXIT_INPUT = 2
EXIT_REFUSED = 3
#: Width of every wrapped paragraph the commands print.
WIDTH = 88

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
        # each line wrapped on its own: a list in the message (the problems of every
        # boring, one per line) stays a list; a wrapped line keeps its indent
        out = []
        for line in self.message.split("\n"):
            indent = line[:len(line) - len(line.lstrip())]
            out.append(textwrap.fill(line.strip(), width=WIDTH, initial_indent=indent,
                                     subsequent_indent=indent + "  ",
                                     break_long_words=False, break_on_hyphens=False))
        return "\n".join(out)


class Refused(UserError):
    """No engine could vouch for the results: nothing is written, exit status 3."""

    exit_code = EXIT_REFUSED


def describe(exc: BaseException) -> str:
    """The one-paragraph message shown for an expected input error.

    Parameters
    ----------
    exc : BaseException
        An ``OSError`` (named file and reason, with what to check) or a ``ValueError``
        (``ScenarioError``, ``UnitError``, ``InputError``, ...: its message behind a
        prefix naming the kind of error; other classes keep their name so that a bug
        report can be traced).

    Returns
    -------
    str
    """
    if isinstance(exc, OSError):
        target = exc.filename if exc.filename is not None else ""
        reason = exc.strerror or str(exc)
        return (f"Cannot read or write {target!s}: {reason}. Check that the path exists, "
                "that its directory is writable and that no other program holds the file.")
    kind = _ERROR_KIND.get(type(exc).__name__, f"invalid input ({type(exc).__name__}): ")
    return f"{kind}{exc}"


def fail(exc: BaseException):
    """Raise :class:`UserError` with :func:`describe`'s message for ``exc``."""
    raise UserError(describe(exc)) from None


def progress(step: int, total: int, text: str):
    """A progress line ``[step/total] text`` on stderr."""
    click.echo(f"[{step}/{total}] {text}", err=True)


def echo_wrapped(text: str):
    """Print ``text`` as one paragraph wrapped at the commands' width."""
    click.echo(textwrap.fill(text, width=WIDTH))


def setting(scenario, name):
    """An output setting (receptor_depth, screening_level, design_life, tolerance).

    Read from the scenario itself, else from its ``output`` specification; None when
    neither has it.
    """
    if hasattr(scenario, name):
        return getattr(scenario, name)
    return getattr(getattr(scenario, "output", None), name, None)


def solve(scenario, depths=None, engine="auto", tolerance=None, allow_unreliable=False,
          species=False):
    """Solve ``scenario`` (:func:`transport.api.solve_scenario`), print its warnings.

    A run no engine can vouch for raises :class:`Refused`, unless ``allow_unreliable``
    (then its refused output times are left empty and flagged).
    """
    try:
        solution, caught = solve_scenario(
            scenario, depths=depths, engine=engine, tolerance=tolerance,
            on_unreliable="flag" if allow_unreliable else "raise", species=species)
    except UnreliableResultError as exc:
        raise Refused(f"{getattr(scenario, 'path', None) or 'scenario'}: refused: {exc}") \
            from None
    for message in caught:
        click.echo(textwrap.fill(f"Warning: {message}", width=WIDTH), err=True)
    return solution


def read_receptor(solution, receptor_depth, screening_level, design_life, *, title: str,
                  allow_unreliable=False, start_date=None):
    """The receptor reading of a run and its printed summary: (views, lines, note).

    ``views``: :func:`transport.analysis.summary.run_views`; ``lines``:
    :func:`transport.analysis.summary.summary_lines`.  A metric read where no engine's
    bound vouches for it refuses the run (:class:`Refused`, nothing written) unless
    ``allow_unreliable``: then no receptor metric is reported (``views`` None), the
    summary says so under its title line, and ``note`` holds the reason (for the file's
    ``receptor_metrics`` attribute); the fields at the output times are written as
    vouched for. ``note`` is None when the metrics are reported."""
    try:
        views = run_views(solution, receptor_depth, screening_level, design_life)
    except UnreliableResultError as exc:
        if not allow_unreliable:
            raise
        note = (f"not reported: {exc}. The output times were vouched for and their "
                "values are written; no breakthrough, peak, time above the level or "
                "mass is given for this run.")
        lines = summary_lines(solution, title=title, design_life=design_life,
                              start_date=start_date)
        return None, lines[:1] + [f"CAUTION: receptor metrics {note}"] + lines[1:], note
    return views, summary_lines(solution, title=title, receptor_depth=receptor_depth,
                                screening_level=screening_level, design_life=design_life,
                                views=views, start_date=start_date), None


def write_plots(source, out_dir, stem, *, receptor_depth, screening_level, title,
                stage=None, design_life=None) -> list:
    """The figures of a run: ``<stem>_profiles.png`` and, with a receptor,
    ``<stem>_breakthrough.png`` in ``out_dir`` (created if needed).

    Parameters
    ----------
    source : Solution or xarray.Dataset
        A run, or a file read with :func:`transport.io.netcdf.read_column_netcdf`.
    out_dir : path
    stem : str
    receptor_depth, screening_level : float or None
        m and kg m-3.
    title : str
    stage : transport.io.atomic.OutputSet, optional
        With a set the figures are renamed into place with the other outputs of the
        run; without one both appear together once both are drawn.
    design_life : float, optional
        s; marked on the breakthrough figure.

    Returns
    -------
    list of str
        The paths written.
    """
    # matplotlib is imported lazily: commands that draw nothing start faster
    from transport.plot.column import plot_breakthrough, plot_profiles

    if stage is None:
        with OutputSet() as own:
            return write_plots(source, out_dir, stem, receptor_depth=receptor_depth,
                               screening_level=screening_level, title=title, stage=own,
                               design_life=design_life)
    out_dir = Path(out_dir)
    out_dir.mkdir(parents=True, exist_ok=True)
    written = [plot_profiles(source, out_dir / f"{stem}_profiles.png",
                             screening_level=screening_level, title=title, stage=stage)]
    if receptor_depth is not None:
        written.append(plot_breakthrough(source, out_dir / f"{stem}_breakthrough.png",
                                         receptor_depth=receptor_depth,
                                         screening_level=screening_level, title=title,
                                         design_life=design_life, stage=stage))
    return written
