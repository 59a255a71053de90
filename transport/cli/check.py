"""Command ``stratiflux check``: validate a scenario and show its derived layer table."""
from __future__ import annotations

import math

import click

from transport.analysis.zone import describe_zone
from transport.scenario.schema import load_scenario
from transport.units import YEAR

__all__ = ["check", "format_layer_table"]

#: Columns of the ``check`` table: (key in derived_table rows, heading, SI -> shown factor,
#: format). Shown units: m, m2/s, years, m/yr.
_TABLE_COLUMNS = (
    ("top", "top m", 1.0, "{:.3g}"),
    ("bottom", "bottom m", 1.0, "{:.3g}"),
    ("water_content", "theta", 1.0, "{:.3g}"),
    ("retardation_factor", "R", 1.0, "{:.4g}"),
    ("diffusivity", "D m2/s", 1.0, "{:.3e}"),
    ("half_life", "half-life yr", 1.0 / YEAR, "{:.4g}"),
    ("pore_velocity", "v m/yr", YEAR, "{:.4g}"),
    ("peclet_number", "Peclet", 1.0, "{:.3g}"),
    ("diffusion_time", "t_diff yr", 1.0 / YEAR, "{:.4g}"),
    ("advection_time", "t_adv yr", 1.0 / YEAR, "{:.4g}"),
)


def format_layer_table(rows) -> str:
    """Plain-text table of derived per-layer properties.

    t_diff = R h^2 / D and t_adv = R h / v are the usual layer time scales
    (common practice); "-" marks a value that does not apply (no decay, no flow).

    Parameters
    ----------
    rows : sequence of dict
        One dict of SI floats per layer (keys as in ``_TABLE_COLUMNS``, plus ``name``
        and the optional ``sorption_source`` / ``diffusion_source`` texts).

    Returns
    -------
    str
        The table, then a ``Sources:`` line when the rows name any.
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


@click.command()
@click.argument("scenario", type=click.Path(dir_okay=False))
def check(scenario):
    """Validate SCENARIO and print the derived per-layer properties.

    \b
    Example:
      stratiflux check scenarios/spill-layered-column.toml
    """
    sc = load_scenario(scenario)
    click.echo(f"Scenario: {sc.title}")
    table = sc.derived_table()
    click.echo(table if isinstance(table, str) else format_layer_table(table))
    if sc.chain is not None:  # each daughter's layers, derived with its own chemical
        for name, y, rows in zip(sc.chain.names[1:], sc.chain.yields[1:], sc.chain_details):
            click.echo(f"Daughter {name} (yield {y:.4g} kg per kg of its parent decayed):")
            click.echo(format_layer_table([dict(row) for row in rows]))
    for end in ("top", "bottom"):
        if getattr(sc.column, end).kind == "source-zone":
            click.echo(f"{end.capitalize()}: {describe_zone(getattr(sc.column, end))}")
    click.echo(f"OK: {scenario} is valid ({len(sc.column.layers)} layer(s), "
               f"{sc.column.length:g} m).")
