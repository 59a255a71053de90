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

    A site file (the one `stratiflux site` reads) is validated too, with the two CSV
    files it names, before a long run: every problem of both files in one message.

    \b
    Example:
      stratiflux check scenarios/spill-layered-column.toml
      stratiflux check data/site-demo/site.toml
    """
    if _is_site_file(scenario):
        _check_site(scenario)
        return
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


#: Keys only a site file has (a scenario file refuses them as unknown).
_SITE_ONLY = ("crs", "borings_file", "log_file", "materials")


def _is_site_file(path) -> bool:
    """Whether ``path`` holds TOML with a key only a site file has (anything that cannot
    be read or parsed goes to the scenario reader, whose message names the problem)."""
    import tomllib

    from transport.scenario.reader import read_text_file

    try:
        data = tomllib.loads(read_text_file(path))
    except (ValueError, OSError):
        return False
    return isinstance(data, dict) and any(k in data for k in _SITE_ONLY)


def _check_site(path):
    """Load and validate a site file and its CSVs; print what a run would do."""
    from transport.site.config import load_site
    from transport.units import UG_PER_L

    site = load_site(path)
    click.echo(f"Site: {site.title}")
    crs = site.crs
    click.echo(f"CRS: {crs.name}" + (f" (EPSG:{site.epsg})" if site.epsg else ""))
    n = len(site.borings)
    layers = [len(b.intervals) for b in site.borings]
    depths = [b.intervals[-1][1] for b in site.borings]
    used = sorted({m for b in site.borings for _, _, m in b.intervals})
    click.echo(f"Borings: {n}; {min(layers)} to {max(layers)} interval(s) each, logs "
               f"{min(depths):g} to {max(depths):g} m deep; "
               f"{sum(bool(b.initial) for b in site.borings)} with a measured initial "
               "profile")
    click.echo(f"Materials: {len(site.materials)} defined ({', '.join(site.materials)}); "
               f"used by the logs: {', '.join(used)}")
    unused = [m for m in site.materials if m not in used]
    if unused:
        click.echo(f"Note: material(s) defined but not used by any log: {', '.join(unused)}")
    click.echo(f"Output: {site.times.size} time(s) to {site.times.max() / YEAR:.4g} yr, "
               f"{site.depths.size} depth(s) to {site.depths.max():g} m; screening level "
               f"{site.screening_level / UG_PER_L:.4g} ug/L, design life "
               f"{site.design_life / YEAR:.4g} yr, tolerance {site.tolerance:g}")
    if site.distributions:
        click.echo(f"Monte Carlo: {site.realizations} realization(s) per boring of "
                   f"{len(site.distributions)} uncertain parameter(s), {site.sampling} "
                   "sampling")
    click.echo(f"OK: {path} is valid ({n} boring(s); column solves of a run: "
               f"{n * (1 + (site.realizations if site.distributions else 0))}).")
