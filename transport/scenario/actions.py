"""Scenario files: boundary schedules and remediation actions (parsed into SI objects).

Boundary values (``concentration``, ``flux``, ``outside_concentration``) may be a table:

    concentration = { steps = [["0 yr", "120 mg/L"], ["10 yr", "0 mg/L"]] }
    concentration = { table = [["0 yr", "0 mg/L"], ["2 yr", "80 mg/L"], ["9 yr", "10 mg/L"]] }
    concentration = { table_file = "leachate.csv" }      # header e.g. "time [yr],conc [mg/L]"
    concentration = { initial = "120 mg/L", half_life = "8 yr" }   # or rate = "0.1 1/yr"

Actions change the column at a time (``[[actions]]``, in time order; several actions may
share a time and are then applied in the order written, with no time in between):

    kind = "remove-source"   top becomes clean (or give a new [actions.top] table)
    kind = "set-top" | "set-bottom"   a new boundary table (top = {...} / bottom = {...})
    kind = "excavate"        depth = "0.5 m"; the excavated soil and the source in it
                             leave (the new surface gets the top's kind with no source),
                             unless residual = "2 mg/L" (a source left in the ground),
                             source = "kept" (the top boundary stays) or top = {...}
    kind = "place-cap"       layers = [{...}, ...] (layer tables, top first; optional top)
    kind = "amend-layer"     layer = "silt", then any layer keys to change
    kind = "set-flow"        darcy_flux = "0.01 m/yr" (dispersion follows the new velocity)
"""
from __future__ import annotations

import csv
import difflib
import io
import re

import numpy as np

from transport.model.column import InputError
from transport.model.schedules import Schedule
from transport.solvers.stages import (EXCAVATION_SOURCE, Timeline, amend_layer, excavate,
                                      place_cap, remove_source, set_boundary, set_flow)

__all__ = ["parse_value", "parse_actions", "check_inlet", "ACTION_KINDS"]

SCHEDULE_KEYS = ("steps", "table", "table_file", "initial", "half_life", "rate", "start")
ACTION_KINDS = ("remove-source", "set-top", "set-bottom", "excavate", "place-cap",
                "amend-layer", "set-flow")
#: Most [time, value] pairs of one schedule (about three years of daily values): each
#: change is solved on its own by the Laplace engine, so the cost grows with the count.
MAX_PAIRS = 1000
ACTION_KEYS = {"remove-source": ("top",), "set-top": ("top",), "set-bottom": ("bottom",),
               "excavate": ("depth", "top", "source", "residual"), "place-cap": ("layers", "top"),
               "amend-layer": ("layer",), "set-flow": ("darcy_flux",)}


def parse_value(r, raw, dimension: str, key: str, low=None):
    """A constant (SI float, None) or a schedule (0.0, Schedule) from a TOML value."""
    if not isinstance(raw, dict):
        return r.quantity(raw, dimension, key, low=low), None
    r.keys(raw, SCHEDULE_KEYS, key)
    given = [k for k in ("steps", "table", "table_file", "initial") if k in raw]
    if len(given) != 1:
        raise r.error(key, raw, "a schedule needs exactly one of steps, table, table_file "
                      "or initial (with half_life or rate)",
                      fix='e.g. { steps = [["0 yr", "120 mg/L"], ["10 yr", "0 mg/L"]] }')
    try:
        if given[0] == "initial":
            c0 = r.quantity(raw["initial"], dimension, f"{key}.initial", low=low)
            if ("half_life" in raw) == ("rate" in raw):
                raise r.error(key, raw, "an exponential depletion needs half_life or rate "
                              "(one of them)", fix='add half_life = "8 yr"')
            if "half_life" in raw:
                th = r.quantity(raw["half_life"], "time", f"{key}.half_life", low=0,
                                low_open=True)
                rate = np.log(2.0) / th
            else:
                rate = r.quantity(raw["rate"], "rate", f"{key}.rate", low=0)
            start = r.optional(raw, "start", "time", key, default=0.0, low=0)
            return 0.0, Schedule.depletion(c0, rate, start)
        extra = [k for k in ("half_life", "rate", "start") if k in raw]
        if extra:
            raise r.error(f"{key}.{extra[0]}", raw[extra[0]], f"not used with {given[0]}",
                          fix="remove it")
        if given[0] == "table_file":
            pairs = _read_pairs(r, raw["table_file"], f"{key}.table_file")
        else:
            pairs = raw[given[0]]
        times, values = _pairs(r, pairs, dimension, f"{key}.{given[0]}", low)
        if given[0] == "steps":
            if times[0] != 0.0:
                raise r.error(f"{key}.steps[1][1]", pairs[0][0], "the first step must be at "
                              "time 0", fix='start with ["0 yr", value]')
            return 0.0, Schedule.steps(times, values)
        return 0.0, Schedule.table(times, values)
    except InputError as exc:
        raise r.error(key, raw, str(exc), fix="check the schedule") from None


def _pairs(r, raw, dimension, key, low):
    if not isinstance(raw, list) or not raw:
        raise r.error(key, raw, "must be a list of [time, value] pairs",
                      fix='e.g. [["0 yr", "120 mg/L"], ["10 yr", "0 mg/L"]]')
    times, values = [], []
    if len(raw) > MAX_PAIRS:
        raise r.error(key, problem=f"{len(raw)} pairs", allowed=f"at most {MAX_PAIRS}",
                      fix="resample the schedule more coarsely")
    for j, pair in enumerate(raw, start=1):
        if not isinstance(pair, list) or len(pair) != 2:
            raise r.error(f"{key}[{j}]", pair, "must be a [time, value] pair")
        t = r.quantity(pair[0], "time", f"{key}[{j}][1]", low=0)
        if times and t <= times[-1]:
            raise r.error(f"{key}[{j}][1]", pair[0], "times must increase strictly",
                          fix="list the pairs in time order, each time once")
        times.append(t)
        values.append(r.quantity(pair[1], dimension, f"{key}[{j}][2]", low=low))
    return times, values


def _read_pairs(r, raw, key):
    path, text = r.input_file(raw, key, "a schedule CSV (time [unit],value [unit])",
                              example="leachate.csv")
    lines = [ln for ln in text.splitlines() if ln.strip() and not ln.lstrip().startswith("#")]
    rows = list(csv.reader(io.StringIO("\n".join(lines))))
    units = [(re.search(r"\[(.+)\]", h).group(1).strip() if re.search(r"\[(.+)\]", h) else None)
             for h in (rows[0] if rows else [])]
    if len(units) != 2 or None in units or not rows[1:]:
        raise r.error(key, raw, f"{path.name} needs a two-column header with units and rows",
                      fix="write e.g. 'time [yr],concentration [mg/L]' then one row per time")
    out = []
    for j, row in enumerate(rows[1:], start=1):
        if len(row) != 2:
            raise r.error(f"{key} row {j}", problem=f"{path.name} row {j} has {len(row)} "
                          "cell(s); each row needs exactly two (time, value)",
                          fix="one pair per row: time,value")
        out.append([f"{row[0].strip()} {units[0]}", f"{row[1].strip()} {units[1]}"])
    return out


def check_inlet(r, key: str, end: str, q: float):
    """An inlet (F = q C_in) needs water entering the column at its end: q > 0 at the
    top, q < 0 at the bottom (q positive downward)."""
    if q == 0:
        raise r.error(key, "inlet", "an inlet boundary carries q C_in and needs a nonzero "
                      "flow.darcy_flux", fix='use kind = "concentration" for diffusion only, '
                      "or give the Darcy flux")
    if (end == "top" and q < 0) or (end == "bottom" and q > 0):
        where = "up through the top" if end == "top" else "down through the bottom"
        raise r.error(key, "inlet", f"with darcy_flux = {q:.3g} m/s (positive downward) the "
                      f"water leaves the column {where}, so an inlet there (which carries "
                      "q C_in INTO the column) would draw mass out at a fixed concentration, "
                      "which is not physical",
                      fix='put the inlet at the end where the water enters, and use kind = '
                      f'"free-outflow" at the {end}')


def _excavation_source(r, act, key, top):
    """(source, residual) of an excavate action: what happens to the top boundary's source
    (``source = "removed"`` by default, or ``"kept"``) and an optional residual
    concentration (kg m-3); at most one of top, source and residual is given."""
    given = [k for k in ("top", "source", "residual") if k in act]
    if len(given) > 1:
        raise r.error(f"{key}.{given[1]}", act[given[1]], f"given together with {given[0]}",
                      fix="keep one: top (a new boundary), residual (a source left in the "
                      "ground) or source = \"kept\" (the top boundary stays)")
    source = act.get("source", "removed")
    if source not in EXCAVATION_SOURCE:
        raise r.error(f"{key}.source", source, "unknown excavation source",
                      allowed=" | ".join(f'"{s}"' for s in EXCAVATION_SOURCE),
                      fix='"removed" (the default: the source leaves with the soil) or '
                      '"kept" (the top boundary stays as it was)')
    residual = None
    if "residual" in act:
        residual = r.quantity(act["residual"], "concentration", f"{key}.residual", low=0)
        if top.kind not in ("concentration", "inlet", "mass-transfer"):
            raise r.error(f"{key}.residual", act["residual"], f"the top boundary is "
                          f"{top.kind!r}, which holds no concentration",
                          fix="give the new top boundary instead: top = { kind = ... }")
    return source, residual


def parse_actions(r, data, column, q, raw_layers, make_layer, make_boundary, t_end,
                  prefix=""):
    """The [[actions]] list as a Timeline (None when there are none).

    make_layer(raw, key, q, top, last) -> Layer ; make_boundary(table_dict, end, q) -> Boundary
    """
    raw = data.get("actions")
    if raw is None or raw == []:
        return None
    if not isinstance(raw, list) or not all(isinstance(a, dict) for a in raw):
        raise r.error(f"{prefix}actions", raw, "must be a list of [[actions]] tables")
    timeline = Timeline.single(column)
    # raw layer tables of the current stage, one per layer (top first), to re-derive
    # amended layers and dispersion under a new flow: by position, so two layers that
    # share a name keep their own properties
    tables = [dict(t) for t in raw_layers]
    current_q, prev_t = q, 0.0
    for j, act in enumerate(raw, start=1):
        key = f"{prefix}actions[{j}]"
        kind = act.get("kind")
        if kind not in ACTION_KINDS:
            close = difflib.get_close_matches(str(kind), ACTION_KINDS, n=1)
            raise r.error(f"{key}.kind", kind, "unknown or missing action kind",
                          allowed=" | ".join(ACTION_KINDS),
                          fix=f"did you mean {close[0]!r}?" if close else "pick one")
        allowed = ("at", "kind") + ACTION_KEYS[kind]
        if kind != "amend-layer":
            r.keys(act, allowed, key)
        if "at" not in act:
            raise r.error(f"{key}.at", problem="missing", fix='add at = "10 yr"')
        at = r.quantity(act["at"], "time", f"{key}.at", low=0, low_open=True)
        if at >= t_end:
            raise r.error(f"{key}.at", act["at"], "the action comes at or after the last "
                          "output time, outside the run", fix="move it earlier or extend "
                          "output.times")
        if at < prev_t:
            raise r.error(f"{key}.at", act["at"], "actions must be in time order (several "
                          "at one time are applied in the order written)",
                          fix="sort the [[actions]] by time")
        prev_t = at
        stage = timeline.stages[-1]
        try:
            if kind in ("remove-source", "set-top", "set-bottom"):
                end = "bottom" if kind == "set-bottom" else "top"
                if end in act:
                    bc = make_boundary({end: act[end]}, end, current_q, f"{key}.{end}")
                elif kind == "remove-source":
                    bc = None
                else:
                    raise r.error(f"{key}.{end}", problem="missing",
                                  fix=f'add {end} = {{ kind = "sealed" }} (or another boundary)')
                action = remove_source(bc) if kind == "remove-source" else set_boundary(end, bc)
            elif kind == "excavate":
                if "depth" not in act:
                    raise r.error(f"{key}.depth", problem="missing", fix='add depth = "0.5 m"')
                d = r.quantity(act["depth"], "length", f"{key}.depth", low=0, low_open=True)
                if d >= stage.column.length:
                    raise r.error(f"{key}.depth", act["depth"], "excavating the whole column "
                                  f"or more ({stage.column.length:g} m remain)",
                                  fix="excavate less than the remaining column")
                top = make_boundary({"top": act["top"]}, "top", current_q,
                                    f"{key}.top") if "top" in act else None
                source, residual = _excavation_source(r, act, key, stage.column.top)
                action = excavate(d, top, source=source, residual=residual)
            elif kind == "place-cap":
                layers_raw = act.get("layers")
                if not isinstance(layers_raw, list) or not layers_raw:
                    raise r.error(f"{key}.layers", layers_raw, "a cap needs at least one layer",
                                  fix='layers = [{ name = "clay cap", thickness = "0.5 m", ... }]')
                new = []
                for k, lt in enumerate(layers_raw, start=1):
                    new.append(make_layer(lt, f"{key}.layers[{k}]", current_q, 0.0, False))
                cap_tables = [dict(lt) for lt in layers_raw]
                top = make_boundary({"top": act["top"]}, "top", current_q,
                                    f"{key}.top") if "top" in act else None
                action = place_cap(new, top)
            elif kind == "amend-layer":
                name = act.get("layer")
                names = [lay.name for lay in stage.column.layers]
                if not isinstance(name, str) or name not in names:
                    raise r.error(f"{key}.layer", name, "no layer of that name in the column "
                                  f"at {act['at']}", allowed=", ".join(dict.fromkeys(names)),
                                  fix="use a layer name")
                same = [i for i, n in enumerate(names) if n == name]
                if len(same) > 1:
                    first = len(timeline.stages) == 1
                    where = ", ".join(f"layers[{i + 1}]" if first else
                                      f"layer {i + 1} from the top at that time" for i in same)
                    raise r.error(f"{key}.layer", name, f"{len(same)} layers are named "
                                  f"{name!r} ({where}); an action that refers to a layer by "
                                  "name needs a name no other layer has",
                                  fix=f"rename them, e.g. name = \"{name} (upper)\" and "
                                  f"name = \"{name} (lower)\", and refer to the one to amend")
                position = same[0]
                changes = {k: v for k, v in act.items() if k not in ("at", "kind", "layer")}
                if not changes:
                    raise r.error(key, problem="nothing to change",
                                  fix="give the layer keys to change, e.g. half_life")
                for bad in ("thickness", "name", "initial_concentration"):
                    if bad in changes:
                        raise r.error(f"{key}.{bad}", changes[bad], "cannot be amended",
                                      fix="remove it")
                merged = dict(tables[position])
                sorption = ("organic_carbon_fraction", "distribution_coefficient",
                            "retardation_factor")
                if any(s in changes for s in sorption):
                    for s in sorption:
                        merged.pop(s, None)
                merged.update(changes)
                lay = make_layer(merged, key, current_q, 0.0, False)
                tables[position] = merged
                action = amend_layer(name, water_content=lay.water_content, retardation=lay.retardation,
                                     diffusivity=lay.diffusivity, decay_rate=lay.decay_rate,
                                     source_rate=lay.source_rate)
            else:  # set-flow
                if "darcy_flux" not in act:
                    raise r.error(f"{key}.darcy_flux", problem="missing",
                                  fix='add darcy_flux = "0.01 m/yr"')
                q_new = r.quantity(act["darcy_flux"], "velocity", f"{key}.darcy_flux")
                for end in ("top", "bottom"):
                    if getattr(stage.column, end).kind == "inlet":
                        check_inlet(r, f"{key}.darcy_flux", end, q_new)
                diffs = [make_layer(tables[i], f"{key} (layer {lay.name!r})", q_new,
                                    0.0, False).diffusivity
                         for i, lay in enumerate(stage.column.layers)]
                current_q = q_new
                action = set_flow(q_new, diffs)
            timeline = timeline.then(at, action, label=kind)
            after = timeline.stages[-1].column
            if kind == "excavate":  # whole layers dug out from the top
                tables = tables[len(tables) - len(after.layers):]
            elif kind == "place-cap":
                tables = cap_tables + tables
            if len(tables) != len(after.layers):  # pragma: no cover - kept in step above
                raise InputError("internal: layer tables out of step with the column")
            if kind in ("set-top", "remove-source", "excavate", "place-cap") and \
                    after.top.kind == "inlet":
                check_inlet(r, f"{key}.top", "top", current_q)
            if kind == "set-bottom" and after.bottom.kind == "inlet":
                check_inlet(r, f"{key}.bottom", "bottom", current_q)
        except InputError as exc:
            raise r.error(key, problem=str(exc), fix="correct the action") from None
    return timeline
