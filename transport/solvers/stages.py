"""Remediation timelines as data: stages, and the actions that make them.

A :class:`Timeline` is a tuple of :class:`Stage` objects; an action is a function
``Stage -> Stage`` (:func:`excavate`, :func:`place_cap`, ...).  Depths are measured below
the ORIGINAL top of the column (z = 0); a cap placed later occupies negative depths, an
excavation moves the top down.  A stage's local depth is z_local = z - offset.

Carried state: soil that stays keeps its mass per volume, so a layer whose capacity
theta R changes (an amendment) starts with C_new = C_old (theta R)_old / (theta R)_new;
new layers (a cap, backfill) start clean; excavated soil leaves with all it holds.
Several actions at one time are applied in the order given and make one stage
(:meth:`Timeline.then`).  :mod:`transport.solvers.timeline` solves a timeline.
"""
from __future__ import annotations

import math
from dataclasses import dataclass, replace

import numpy as np

from transport.model.column import Boundary, Column, InputError
from transport.model.schedules import Schedule

__all__ = ["Stage", "Timeline", "local_column", "remove_source", "excavate", "place_cap",
           "amend_layer", "set_flow", "set_boundary", "clean_boundary", "compose_carry",
           "EXCAVATION_SOURCE", "boundary_steps_merged"]


@dataclass(frozen=True)
class Stage:
    """From ``start`` (s) on, ``column`` holds, its top at depth ``offset`` (m, original
    frame).  ``carry[i]`` multiplies the carried concentration in layer i (None: the
    layer is new and starts clean)."""

    start: float
    column: Column
    offset: float = 0.0
    carry: tuple = None
    label: str = ""


@dataclass(frozen=True)
class Timeline:
    stages: tuple

    def __post_init__(self):
        stages = tuple(self.stages)
        object.__setattr__(self, "stages", stages)
        if not stages or stages[0].start != 0.0:
            raise InputError("a timeline starts with a stage at time 0")
        starts = [s.start for s in stages]
        if any(b <= a for a, b in zip(starts, starts[1:])):
            raise InputError(f"stage times must increase strictly, got {starts}")

    @classmethod
    def single(cls, column: Column):
        return cls((Stage(0.0, column),))

    def then(self, start: float, action, label: str = ""):
        """A new timeline with ``action`` (a function Stage -> Stage) applied at ``start``.

        ``start`` may equal the last action's time: the action then applies to the
        column that action left (in the order written), with no time in between, and
        the two make one stage (their carry factors multiply, :func:`compose_carry`).
        """
        last = self.stages[-1]
        same_time = len(self.stages) > 1 and start == last.start
        if not math.isfinite(start) or (start <= last.start and not same_time):
            raise InputError(f"an action at {start!r} s must come after the previous one "
                             f"({last.start} s) or at the same time")
        new = action(last)
        column = _global_clock(new.column, last.column, float(start))
        new = replace(new, column=column, start=float(start))
        if same_time:
            new = replace(new, carry=compose_carry(last, new),
                          label=f"{last.label} + {label}" if last.label else label)
            return Timeline(self.stages[:-1] + (new,))
        return Timeline(self.stages + (replace(new, label=label),))


def compose_carry(first: Stage, second: Stage) -> tuple:
    """Carry factors of ``second`` relative to the stage before ``first``, when
    ``second`` is an action applied to ``first`` at the same time.

    Every action keeps, cuts or adds whole layers in the original depth frame, so each
    layer of ``second`` lies inside one layer of ``first`` (found at its mid-depth):
    C_second = carry_second C_first = carry_second carry_first C_before, and a layer
    that is new in either action starts clean (None).
    """
    n1, n2 = len(first.column.layers), len(second.column.layers)
    c1 = first.carry or (1.0,) * n1
    c2 = second.carry or (1.0,) * n2
    faces1 = first.column.interfaces
    faces2 = second.column.interfaces
    out = []
    for i in range(n2):
        if c2[i] is None:
            out.append(None)
            continue
        mid = 0.5 * (faces2[i] + faces2[i + 1]) + second.offset - first.offset
        j = int(np.clip(np.searchsorted(faces1, mid, side="right") - 1, 0, n1 - 1))
        out.append(None if c1[j] is None else c2[i] * c1[j])
    return tuple(out)


def _delayed(schedule, start):
    return None if schedule is None else schedule.shifted(-start)


def _global_clock(column: Column, before: Column, start: float) -> Column:
    """Schedules of a stage column on the run's clock (t = 0 at the start of the run).

    A boundary or source kept from the previous stage keeps its schedule (already on the
    run's clock: a depleting source goes on depleting); one the action brings in (a new
    top, a cap layer's source) starts its schedule at the action time."""
    def bc(new, old):
        if new.schedule is None or new.schedule is old.schedule:
            return new
        return replace(new, schedule=_delayed(new.schedule, start))
    old_sched = {id(l.source_schedule) for l in before.layers if l.source_schedule is not None}
    layers = tuple(l if l.source_schedule is None or id(l.source_schedule) in old_sched
                   else replace(l, source_schedule=_delayed(l.source_schedule, start))
                   for l in column.layers)
    return replace(column, top=bc(column.top, before.top),
                   bottom=bc(column.bottom, before.bottom), layers=layers)


def local_column(stage: Stage) -> Column:
    """The stage's column with its schedules on the stage's own clock (t = 0 at its
    start), as the engines solve it."""
    col, dt = stage.column, stage.start
    if dt == 0:
        return col

    def sh(x):
        return None if x is None else x.shifted(dt)
    return replace(col, top=replace(col.top, schedule=sh(col.top.schedule)),
                   bottom=replace(col.bottom, schedule=sh(col.bottom.schedule)),
                   layers=tuple(replace(l, source_schedule=sh(l.source_schedule))
                                for l in col.layers))


def _from(schedule, start: float):
    """The part of ``schedule`` from ``start`` on (zero before), as atoms: the
    schedule seen from a clock started at ``start`` (:meth:`Schedule.shifted`), moved
    back onto the run's clock."""
    return Schedule(tuple((k, t0 + start, a, r) for k, t0, a, r in
                          schedule.shifted(start).atoms))


def _signal(boundary: Boundary):
    return boundary.schedule or Schedule.constant(boundary.value)


def _boundary_step(before: Boundary, after: Boundary, start: float):
    """One boundary whose value is ``before``'s until ``start`` and ``after``'s from then
    on, or None where the two differ in more than the value in time (another kind or
    law, or a source zone, whose state is not a value in time)."""
    if before == after:
        return before
    if (before.kind != after.kind or before.kind == "source-zone"
            or replace(before, value=0.0, schedule=None)
            != replace(after, value=0.0, schedule=None)):
        return None
    old = _signal(before)
    atoms = (old.atoms + tuple((k, t0, -a, r) for k, t0, a, r in _from(old, start).atoms)
             + _from(_signal(after), start).atoms)
    return replace(before, schedule=Schedule(tuple(a for a in atoms if a[2] != 0.0)))


def boundary_steps_merged(timeline: "Timeline") -> "Timeline":
    """The same run with every stage that changes nothing but the value in time of a
    boundary (the source removed, a new top concentration) folded into the stage
    before it, as a scheduled boundary of that stage: the same problem, solved without
    handing a state over at that time (a stepped boundary value is exact for the
    Laplace engine; a handed-over state loses digits at late times in an advective
    column). Stages that change the layers, the flow, the depth frame or what is carried
    stay as they are."""
    stages = list(timeline.stages[:1])
    for st in timeline.stages[1:]:
        prev = stages[-1]
        pc, nc = prev.column, st.column
        n = len(nc.layers)
        same = (st.offset == prev.offset and replace(pc, top=nc.top, bottom=nc.bottom) == nc
                and (st.carry is None or tuple(st.carry) == (1.0,) * n))
        top = _boundary_step(pc.top, nc.top, st.start) if same else None
        bottom = _boundary_step(pc.bottom, nc.bottom, st.start) if same else None
        if top is None or bottom is None:
            stages.append(st)
            continue
        stages[-1] = replace(prev, column=replace(pc, top=top, bottom=bottom))
    return Timeline(tuple(stages))


# --- actions (Stage -> Stage) ---------------------------------------------------------

def _same(stage, column, offset=None, carry=None):
    n = len(column.layers)
    return Stage(stage.start, column, stage.offset if offset is None else offset,
                 tuple([1.0] * n) if carry is None else tuple(carry))


def set_boundary(end: str, boundary: Boundary):
    """Replace the top or bottom boundary (e.g. the source is removed)."""
    def act(stage):
        col = replace(stage.column, **{end: boundary})
        return _same(stage, col)
    return act


def remove_source(clean: Boundary = None):
    """The source is taken away: the top becomes clean (a zero concentration by default)."""
    return set_boundary("top", clean or Boundary("concentration", 0.0))


#: What an excavation does to the top boundary when no new ``top`` is given.
EXCAVATION_SOURCE = ("removed", "kept")


def clean_boundary(boundary: Boundary) -> Boundary:
    """``boundary`` with its source taken away: the same kind, no schedule, and a zero
    concentration (concentration, inlet, mass-transfer outside) or zero flux (flux).
    Free-outflow and sealed boundaries carry no source and come back unchanged; a source
    zone is taken away whole, leaving a zero concentration."""
    if boundary.kind in ("free-outflow", "sealed"):
        return boundary
    if boundary.kind == "source-zone":  # the zone goes with the soil: a clean surface
        return Boundary("concentration", 0.0)
    return replace(boundary, value=0.0, schedule=None)


def excavate(thickness: float, top: Boundary = None, source: str = "removed",
             residual: float = None):
    """Remove ``thickness`` (m) from the top; the soil that stays keeps its state.

    The excavated soil and everything in it leave the column (the budget's ``removed``
    term).  What the new surface sees:

    * ``top`` given: that boundary;
    * else ``residual`` (kg m-3) given: the top boundary's kind with this constant
      concentration (a residual source left in the ground; concentration, inlet or
      mass-transfer tops only);
    * else ``source="removed"`` (default): the source was in the excavated soil and
      leaves with it; the new surface gets the top boundary's kind with no source
      (:func:`clean_boundary`: zero concentration or flux, the clean backfill or clean
      infiltration an engineer means by digging out the source);
    * ``source="kept"``: the top boundary stays as it was, schedule and all (a source
      that is not in the soil, e.g. contaminated water ponding on the new surface).
    """
    if source not in EXCAVATION_SOURCE:
        raise InputError(f"excavation source {source!r} is unknown; use "
                         f"{' or '.join(EXCAVATION_SOURCE)}")

    def act(stage):
        col = stage.column
        if not (thickness > 0 and thickness < col.length):
            raise InputError(f"excavation depth {thickness!r} m must be > 0 and less than "
                             f"the column ({col.length} m)")
        layers, cut = [], thickness
        for lay in col.layers:
            if cut >= lay.thickness * (1 - 1e-12):
                cut -= lay.thickness
                continue
            layers.append(replace(lay, thickness=lay.thickness - cut) if cut > 0 else lay)
            cut = 0.0
        if top is not None:
            new_top = top
        elif residual is not None:
            if col.top.kind not in ("concentration", "inlet", "mass-transfer"):
                raise InputError(f"a residual concentration needs a concentration, inlet or "
                                 f"mass-transfer top, not {col.top.kind!r}; give the new "
                                 f"top boundary instead")
            new_top = replace(col.top, value=float(residual), schedule=None)
        elif source == "kept":
            new_top = col.top
        else:
            new_top = clean_boundary(col.top)
        new = replace(col, layers=tuple(layers), top=new_top)
        return _same(stage, new, offset=stage.offset + thickness)
    return act


def place_cap(layers, top: Boundary = None):
    """Place new clean layers (top first) on the column."""
    layers = tuple(layers)

    def act(stage):
        col = stage.column
        if col.darcy_flux != 0 and any(l.partition_to_next != 1 for l in layers):
            raise InputError("cap layers with partition jumps need a zero Darcy flux")
        if top is None and col.top.kind == "source-zone":
            raise InputError("a cap placed on a source-zone top would bury the zone, which "
                             "this model cannot hold between the cap and the soil; give the "
                             "cap's own top boundary (e.g. a zero concentration) and, to keep "
                             "the zone's mass, model the zone as a layer under the cap")
        new = Column(layers=layers + col.layers, top=top or col.top, bottom=col.bottom,
                     darcy_flux=col.darcy_flux)
        cap = sum(l.thickness for l in layers)
        carry = (None,) * len(layers) + (1.0,) * len(col.layers)
        return Stage(stage.start, new, stage.offset - cap, carry)
    return act


def amend_layer(name: str, **changes):
    """Change properties of the layer called ``name`` (retardation, decay_rate,
    diffusivity, water_content ...); its mass in place is kept."""
    def act(stage):
        col = stage.column
        names = [l.name for l in col.layers]
        if name not in names:
            raise InputError(f"no layer named {name!r} to amend; layers are {names}")
        carry, layers = [], []
        for lay in col.layers:
            if lay.name == name:
                new = replace(lay, **changes)
                carry.append(lay.water_content * lay.retardation / (new.water_content * new.retardation))
                layers.append(new)
            else:
                carry.append(1.0)
                layers.append(lay)
        return _same(stage, replace(col, layers=tuple(layers)), carry=carry)
    return act


def set_flow(darcy_flux: float, diffusivities=None):
    """Change the Darcy flux (and, since dispersion follows the pore velocity, optionally
    each layer's diffusivity)."""
    def act(stage):
        col = stage.column
        layers = col.layers
        if diffusivities is not None:
            layers = tuple(replace(l, diffusivity=d) for l, d in zip(layers, diffusivities))
        return _same(stage, Column(layers=layers, top=col.top, bottom=col.bottom,
                                   darcy_flux=darcy_flux))
    return act
