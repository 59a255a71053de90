"""Command ``stratiflux new``: write a commented starter scenario."""
from __future__ import annotations

import os

import click

from transport.cli.common import UserError
from transport.io.atomic import write_text
from transport.scenario.schema import starter_scenario_text

__all__ = ["new"]


@click.command()
@click.argument("path", type=click.Path(dir_okay=False), default="scenario.toml")
@click.option("--force", is_flag=True, help="Overwrite PATH if it exists.")
def new(path, force):
    """Write a commented starter scenario to PATH (default: scenario.toml).

    \b
    Example:
      stratiflux new my-site.toml
    """
    if os.path.exists(path) and not force:
        raise UserError(f"{path} already exists; choose another name or pass --force to "
                        "overwrite it.")
    write_text(path, starter_scenario_text())
    click.echo(f"Wrote {path}. Next: stratiflux check {path}  then  stratiflux run {path}")
