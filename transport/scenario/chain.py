"""``[[chain]]``: the daughters of a straight decay chain whose parent is ``[chemical]``.

    [chemical]
    name = "tetrachloroethene"        # the parent, with the [[layers]] as written
    [[chain]]
    name = "trichloroethene"          # table lookup (or free_water_diffusivity,
    yield = "molar"                   #   organic_carbon_partition); default "molar":
    half_life = "2 yr"                #   M_daughter / M_parent; or a number (kg/kg)
    top = "0 mg/L"                    # value at the top, the parent's kind (default 0)
    screening_level = "5 ug/L"        # the daughter's own level (default: none)
    [[chain]]
    name = "cis-1,2-dichloroethene"

Each daughter moves through the same layers: every layer is read again with the
daughter's own chemical (its D_w, K_oc and half-life), so the retardation follows from
the layer's ``organic_carbon_fraction`` and the daughter's K_oc.  What a layer gives for
the parent only is adapted: a ``pore_diffusivity`` is scaled by the ratio of free-water
diffusivities (the same tortuosity, common practice); a layer ``half_life`` and
``initial_concentration`` belong to the parent (daughters start clean and decay with
their own half-life); ``retardation_factor`` and ``distribution_coefficient`` are
refused (they are the parent's: give ``organic_carbon_fraction``).
"""
from __future__ import annotations

import difflib

from transport.model import chemicals
from transport.model.chain import Chain
from transport.model.column import Boundary, Column, InputError
from transport.scenario.actions import parse_value
from transport.scenario.layers import ChemicalSpec, read_layer
from transport.scenario.reader import MISSING, Reader

__all__ = ["CHAIN_KEYS", "read_chain"]

CHAIN_KEYS = ("name", "free_water_diffusivity", "organic_carbon_partition", "half_life",
              "yield", "top", "bottom", "screening_level")
#: Value key and dimension of a daughter's boundary, by the parent's boundary kind.
_VALUE = {"concentration": "concentration", "inlet": "concentration",
          "mass-transfer": "concentration", "flux": "mass_flux"}


def _species(r: Reader, t: dict, key: str) -> ChemicalSpec:
    name = r.text(t, "name", key)
    if name is None:
        raise r.error(f"{key}.name", problem="missing", fix='add name = "trichloroethene" '
                      "(a species of the property table, or any name with its properties)")
    entry, sources = None, {}
    try:
        entry = chemicals.lookup(name)
    except chemicals.ChemicalError:
        entry = None
    dw = r.optional(t, "free_water_diffusivity", "diffusivity", key, low=0, low_open=True)
    koc = r.optional(t, "organic_carbon_partition", "specific_volume", key, low=0)
    if entry is None and dw is None:
        close = difflib.get_close_matches(name, chemicals.names(), n=1)
        raise r.error(f"{key}.name", name, "not in the property table and no "
                      "free_water_diffusivity given",
                      fix=(f"did you mean {close[0]!r}? " if close else "")
                      + "or give free_water_diffusivity (and organic_carbon_partition)")
    if dw is None:
        dw, sources["free_water_diffusivity"] = entry.free_water_diffusivity, entry.diffusivity_source
    if koc is None and entry is not None:
        koc, sources["organic_carbon_partition"] = entry.organic_carbon_partition, entry.koc_source
    half_life = r.half_life(t, key)
    half_life = None if half_life is MISSING else half_life
    return ChemicalSpec(entry.name if entry else name, dw, koc, half_life, sources, entry)


def _yield(r, t, key, parent: ChemicalSpec, spec: ChemicalSpec) -> float:
    raw = t.get("yield", "molar")
    if isinstance(raw, str) and raw.strip().lower() == "molar":
        if parent.table_entry is None or spec.table_entry is None:
            raise r.error(f"{key}.yield", raw, "the molar masses of parent and daughter are "
                          "not both in the property table",
                          fix="give the yield as a number (kg of daughter per kg of parent)")
        return spec.table_entry.molar_mass / parent.table_entry.molar_mass
    return r.quantity(raw, "dimensionless", f"{key}.yield", low=0)


def _boundary(r, t, key, end, parent: Boundary) -> Boundary:
    dim = _VALUE.get(parent.kind)
    if end not in t:
        return Boundary(parent.kind, 0.0, parent.transfer_coefficient) if dim else parent
    if dim is None:
        raise r.error(f"{key}.{end}", t[end], f"the parent's {end} is {parent.kind!r}, which "
                      "holds no value", fix="remove it")
    value, sched = parse_value(r, t[end], dim, f"{key}.{end}", low=0 if dim ==
                               "concentration" else None)
    return Boundary(parent.kind, value, parent.transfer_coefficient, schedule=sched)


def _layer_for(r, raw, i, key, parent: ChemicalSpec, spec: ChemicalSpec):
    t = dict(raw) if isinstance(raw, dict) else raw
    if not isinstance(t, dict):
        return t
    for k in ("retardation_factor", "distribution_coefficient"):
        if k in t:
            raise r.error(f"layers[{i}].{k}", t[k], f"belongs to the parent; the daughter "
                          f"{spec.name!r} ({key}) needs its own sorption",
                          fix="give organic_carbon_fraction, so each species' retardation "
                          "follows from its own organic-carbon partition coefficient")
    t.pop("half_life", None)
    t.pop("initial_concentration", None)
    if "pore_diffusivity" in t:
        pd = r.quantity(t["pore_diffusivity"], "diffusivity", f"layers[{i}].pore_diffusivity",
                        low=0, low_open=True)
        if parent.free_water_diffusivity is None:
            raise r.error(f"layers[{i}].pore_diffusivity", t["pore_diffusivity"],
                          "cannot be carried to the daughters without the parent's "
                          "free-water diffusivity", fix="name the parent chemical")
        t["pore_diffusivity"] = (f"{pd * spec.free_water_diffusivity / parent.free_water_diffusivity!r}"
                                 " m^2/s")
    return t


def read_chain(r: Reader, data: dict, parent: ChemicalSpec, column: Column, q: float):
    """The chain of the file (parent: ``column``, read with ``parent``), or None.

    Returns
    -------
    (Chain, tuple of per-daughter derived tables, tuple of per-daughter screening
    levels (kg m-3 or None)) or None
    """
    raw = data.get("chain")
    if raw is None:
        return None
    if not isinstance(raw, list) or not raw:
        raise r.error("chain", raw, "must be a list of [[chain]] tables",
                      fix="write one [[chain]] table per daughter, in the order of decay")
    if parent.half_life is None and not any("half_life" in (l or {}) for l in data["layers"]):
        raise r.error("chemical.half_life", problem="a decay chain needs the parent to decay",
                      fix='add half_life = "2 yr" (your value) to [chemical]')
    prev, columns, names, yields, details = parent, [column], [parent.name or "parent"], [0.0], []
    levels = []
    for j, t in enumerate(raw, start=1):
        key = f"chain[{j}]"
        t = r.table(t, key, required=True)
        r.keys(t, CHAIN_KEYS, key)
        spec = _species(r, t, key)
        layers, rows, top = [], [], 0.0
        n = len(data["layers"])
        for i, lay in enumerate(data["layers"], start=1):
            layer, detail, _ = read_layer(r, _layer_for(r, lay, i, key, parent, spec), i, spec,
                                          q, top, i == n)
            layers.append(layer)
            rows.append(detail)
            top += layer.thickness
        try:
            columns.append(Column(tuple(layers), _boundary(r, t, key, "top", column.top),
                                  _boundary(r, t, key, "bottom", column.bottom), q))
        except InputError as exc:
            raise r.error(key, problem=str(exc), fix="see the message") from None
        names.append(spec.name)
        yields.append(_yield(r, t, key, prev, spec))
        details.append(tuple(rows))
        levels.append(r.optional(t, "screening_level", "concentration", key, low=0,
                                 low_open=True))
        prev = spec
    try:
        chain = Chain(tuple(columns), tuple(names), tuple(yields))
    except InputError as exc:
        raise r.error("chain", problem=str(exc), fix="see the message") from None
    return chain, tuple(details), tuple(levels)
