"""Command line: ``stratiflux run | check | modes | plot | new | compare | site | verify |
report | sensitivity | fit``.

This module holds the ``stratiflux`` group and registers the commands, one module each
(:mod:`transport.cli.run`, ``check``, ``modes``, ``plot``, ``new``, ``compare``,
``site``, ``verify``, ``report``, ``sensitivity``, ``fit``); what they share is in :mod:`transport.cli.common`. Every command
is a thin layer over the library. Input errors end the program with a one-paragraph
message and exit status 2, never a traceback; a run no engine can vouch for ends with
exit status 3.
"""
from __future__ import annotations

import warnings

import click

import importlib

from transport import __version__
from transport.cli.common import Refused, UserError, describe
from transport.scenario.reader import PlausibilityWarning
from transport.solvers.checks import UnreliableResultError

__all__ = ["main"]


#: Command name -> module under transport.cli holding the click command of that name.
#: A command's module is imported only when that command runs (or when the help lists
#: the commands), so ``stratiflux run`` does not pay for the site, sensitivity or fit
#: machinery at start-up (the lazy-loading pattern of click's documentation,
#: "Lazily Loading Subcommands").
COMMANDS = {name: name for name in ("run", "check", "modes", "plot", "new", "compare",
                                    "site", "verify", "report", "sensitivity", "fit")}


class _Group(click.Group):
    """Turns the expected input errors into a clean message and exit status 2; loads
    each command's module when it is needed."""

    def list_commands(self, ctx):
        return sorted(set(super().list_commands(ctx)) | set(COMMANDS))

    def get_command(self, ctx, name):
        if name in COMMANDS and name not in self.commands:
            module = importlib.import_module(f"transport.cli.{COMMANDS[name]}")
            self.add_command(getattr(module, name), name)
        return super().get_command(ctx, name)

    def invoke(self, ctx):
        with warnings.catch_warnings():  # restores showwarning on the way out
            warnings.showwarning = _one_line(warnings.showwarning)
            return self._invoke(ctx)

    def _invoke(self, ctx):
        try:
            return super().invoke(ctx)
        except (click.exceptions.ClickException, click.exceptions.Exit,
                click.exceptions.Abort):
            raise
        except (ValueError, OSError) as exc:  # ScenarioError, UnitError, InputError: ValueError
            raise UserError(describe(exc)) from None
        except UnreliableResultError as exc:
            raise Refused(f"refused: {exc}") from None


def _one_line(show):
    """A ``warnings.showwarning`` printing a PlausibilityWarning (load time: file, key,
    value, usual range, source) as one ``Warning:`` line on stderr; others go to ``show``."""
    def shown(message, category, filename, lineno, file=None, line=None):
        if issubclass(category, PlausibilityWarning):
            click.echo(f"Warning: {message}", err=True)
        else:
            show(message, category, filename, lineno, file, line)
    return shown


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


if __name__ == "__main__":  # pragma: no cover
    main()
