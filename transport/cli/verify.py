"""Command line: ``stratiflux verify [--out DIR] [--quick]``.

Runs the verification suite of :mod:`transport.verify.report` (published closed forms against
the engines, cross-engine agreement, identities), writes ``verification.md`` and PNG
figures into DIR and exits with status 1 if any case fails.
"""
from __future__ import annotations

import click

from transport.caution import CAUTION
from transport.verify import report as suite

__all__ = ["verify"]

EXIT_FAILED = 1


@click.command()
@click.option("--out", "out_dir", type=click.Path(file_okay=False), default="verification",
              show_default=True, help="Directory for verification.md and the figures.")
@click.option("--quick", is_flag=True,
              help="Smaller meshes and the fast cases only (about a minute or less).")
def verify(out_dir, quick):
    """Check the engines against published solutions and each other; write a report.

    \b
    Example:
      stratiflux verify --quick --out verification
    """
    names = suite.case_names(quick)
    click.echo(f"running {len(names)} verification case(s) ({'quick' if quick else 'full'})",
               err=True)
    counter = iter(range(1, len(names) + 1))
    results = suite.run_suite(quick, progress=lambda name: click.echo(
        f"[{next(counter)}/{len(names)}] {name}", err=True))
    path = suite.write_report(results, out_dir, quick)
    failed = [r for r in results if not r.passed]
    for r in results:
        click.echo(f"{'pass' if r.passed else 'FAIL'}  {r.name:34s} error {r.error:.2e} "
                   f"(tolerance {r.tolerance:.0e})  {r.seconds:.2f} s")
    click.echo(f"\n{len(results) - len(failed)} of {len(results)} cases passed. "
               f"Report: {path}")
    click.echo("")
    click.echo(CAUTION)
    if failed:
        raise click.exceptions.Exit(EXIT_FAILED)
