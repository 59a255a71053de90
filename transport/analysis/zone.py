"""The account of a source zone of finite inventory at the end of a run.

A zone's mass balance (:class:`transport.model.column.Boundary`, kind "source-zone"):
what it held at the start, Gamma C_s(0), equals what it released into the column (the
total flux through that end), what it still holds, Gamma C_s(t) with C_s the column's
concentration at that end, and what left it otherwise (decay in the zone, water passing
through it away from the column).
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from transport.units import MG_PER_L, MG_PER_M2, YEAR

__all__ = ["ZoneAccount", "zone_accounts", "zone_lines", "describe_zone"]


@dataclass(frozen=True)
class ZoneAccount:
    """The mass account of one source zone at time ``time`` (kg m-2, s, kg m-3)."""

    end: str
    time: float
    initial: float
    released: float
    remaining: float
    concentration: float

    @property
    def otherwise(self) -> float:
        """Mass that left the zone by decay or with water passing through it (kg m-2);
        a rounding-level remainder (below 1e-9 of the start) is 0."""
        rest = self.initial - self.released - self.remaining
        return 0.0 if abs(rest) <= 1e-9 * abs(self.initial) else rest


def zone_accounts(solution) -> list:
    """One :class:`ZoneAccount` per source-zone end of an unstaged run at its last
    output time (``[]`` for other runs or when the run has no budget there)."""
    col = solution.column
    if solution.timeline is not None and len(solution.timeline.stages) > 1:
        return []  # an action may remove or refill the zone; the staged budget holds it
    budget = solution.budget or {}
    out = []
    t = float(solution.times[-1])
    for end in ("top", "bottom"):
        bc = getattr(col, end)
        if bc.kind != "source-zone" or t <= 0:
            continue
        through = budget.get("entered_top" if end == "top" else "left_bottom")
        if through is None:
            continue
        released = float(np.asarray(through)[-1]) * (1.0 if end == "top" else -1.0)
        depth = 0.0 if end == "top" else col.length
        c = float(np.asarray(solution.concentration_at(depth, [t]), float)[0])
        out.append(ZoneAccount(end, t, bc.zone_inventory(), released, bc.capacity * c, c))
    return out


def zone_lines(solution, when: str) -> list:
    """One sentence per source zone (``when``: the end of the run as the reader sees it,
    e.g. "100 yr")."""
    lines = []
    for a in zone_accounts(solution):
        lines.append(
            f"Source zone at the {a.end}: {a.initial / MG_PER_M2:.4g} mg/m2 at the start; by "
            f"{when} {a.released / MG_PER_M2:.4g} mg/m2 released into the column, "
            f"{a.remaining / MG_PER_M2:.4g} mg/m2 left (pore water "
            f"{a.concentration / MG_PER_L:.4g} mg/L), {a.otherwise / MG_PER_M2:.4g} mg/m2 "
            f"decayed in the zone or carried away through it.")
    return lines


def describe_zone(boundary) -> str:
    """A source-zone boundary in words and the units a reader uses."""
    lam = boundary.decay_rate
    half = f"{np.log(2) / lam / YEAR:.4g} yr" if lam > 0 else "none"
    return (f"source zone of finite inventory: {boundary.value / MG_PER_L:.4g} mg/L pore water "
            f"at the start, capacity {boundary.capacity:.4g} m (mass per area per unit "
            f"concentration), {boundary.zone_inventory() / MG_PER_M2:.4g} mg/m2 at the start, "
            f"half-life in the zone {half}")
