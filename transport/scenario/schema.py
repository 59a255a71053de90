"""Scenario files: TOML in, a validated SI :class:`Scenario` out.

Every dimensional value is a string with units (``"0.05 m/yr"``, ``"120 mg/L"``),
read by :func:`transport.units.to_si`; everything after loading is SI. Layers are
counted from 1, top first, in key paths (``layers[2].porosity``). Any problem raises
:class:`ScenarioError` naming the file, the key path, the value, what is allowed and
the fix; unknown keys get a did-you-mean suggestion.

Schema (all keys spelled out; ``docs/scenario-reference.md`` has the full page)::

    title = "..."                                  # optional, default: file name
    [chemical]                                     # optional if every layer gives pore_diffusivity
    name = "trichloroethene"                       # table lookup (transport/data/chemicals.csv)
    free_water_diffusivity = "9.65e-10 m^2/s"      # overrides the table
    organic_carbon_partition = "94 L/kg"           # Koc, overrides the table
    half_life = "5 yr"                             # or "none"; the table's range is never applied
    [flow]
    darcy_flux = "0.2 m/yr"                        # downward positive, default 0
    [[layers]]                                     # one table per layer, top first
    name, thickness (length), porosity (total, 0-1), water_content (0-porosity, default porosity),
    bulk_density (density), ONE OF organic_carbon_fraction | distribution_coefficient
    | retardation_factor (none: R = 1), tortuosity ("millington-quirk" default, or 0-1)
    OR pore_diffusivity (D_w * tau directly), dispersivity (length, default 0),
    half_life (time or "none"; overrides the chemical), source_rate (mass per bulk volume
    per time), partition_to_next (C_next = K C_this, needs darcy_flux = 0),
    initial_concentration (concentration)
    [top] / [bottom]
    kind = "concentration" | "flux" | "inlet" | "free-outflow" | "mass-transfer" | "sealed"
           | "source-zone"
    concentration (concentration, inlet) | flux (flux) | transfer_coefficient and
    outside_concentration (mass-transfer) | concentration and inventory OR thickness,
    water_content [, bulk_density, distribution_coefficient | organic_carbon_fraction]
    [, half_life] (source-zone: finite inventory, transport/scenario/zone.py)
    [initial]
    samples = [["0 m", "80 mg/L"], ...]  OR  samples_file = "profile.csv"
    [output]
    times = ["1 yr", ...]  OR  times = {start = "1 yr", stop = "100 yr", count = 20, spacing = "log"}
    depths = ["0 m", ...]  OR  depth_spacing = "1 cm"    (default: 200 intervals)
    receptor_depth (default: column bottom), screening_level, design_life, tolerance (1e-8)
"""
from __future__ import annotations

import difflib
import math
from dataclasses import dataclass
from importlib import resources
from pathlib import Path

import numpy as np

from transport.model.column import BOUNDARY_KINDS, Boundary, Column, InitialState, InputError
from transport.scenario.actions import check_inlet, parse_actions, parse_value
from transport.scenario.layers import ChemicalSpec, read_chemical, read_layer
from transport.scenario.output import (OutputSpec, check_run_size, read_output, read_samples,
                                       read_samples_file, with_cap_depths)
from transport.scenario.reader import MISSING, Reader, ScenarioError, parse_toml, read_text_file
from transport.scenario.chain import read_chain
from transport.scenario.zone import ZONE_KEYS, read_source_zone

__all__ = ["ScenarioError", "Scenario", "ChemicalSpec", "OutputSpec", "load_scenario",
           "parse_scenario", "parse_alternatives", "load_alternatives", "starter_scenario_text",
           "read_boundary", "DERIVED_UNITS", "MAX_LAYERS", "FLOW_KEYS"]


TOP_KEYS = ("title", "chemical", "flow", "layers", "top", "bottom", "initial", "output",
            "actions", "alternatives", "fit",  # [fit] is read by stratiflux fit
            "sensitivity",  # [sensitivity] is read by stratiflux sensitivity
            "chain")  # [[chain]]: daughters of a decay chain (transport/scenario/chain.py)
ALTERNATIVE_KEYS = ("name", "actions", "top")
FLOW_KEYS = ("darcy_flux",)
BOUNDARY_VALUE_KEYS = {"concentration": ("concentration",), "inlet": ("concentration",),
                       "flux": ("flux",), "mass-transfer": ("transfer_coefficient",
                                                            "outside_concentration"),
                       "free-outflow": (), "sealed": (), "source-zone": ZONE_KEYS}
INITIAL_KEYS = ("samples", "samples_file")
#: Most layers a column may have (a detailed boring log has tens): the run time and
#: memory of a column grow with its layer count.
MAX_LAYERS = 1000

#: SI units of the columns of :meth:`Scenario.derived_table`.
DERIVED_UNITS = {
    "top": "m", "bottom": "m", "thickness": "m", "porosity": "1", "water_content": "1",
    "bulk_density": "kg m-3", "distribution_coefficient": "m3 kg-1", "retardation_factor": "1",
    "tortuosity": "1", "pore_diffusivity": "m2 s-1", "dispersion": "m2 s-1",
    "diffusivity": "m2 s-1", "half_life": "s", "decay_rate": "s-1", "pore_velocity": "m s-1",
    "peclet_number": "1", "diffusion_time": "s", "advection_time": "s",
    "source_rate": "kg m-3 s-1", "partition_to_next": "1",
}


@dataclass(frozen=True, eq=False)
class Scenario:
    """A loaded, validated scenario (SI inside)."""

    title: str
    path: str | None
    column: Column
    initial: InitialState
    chemical: ChemicalSpec
    output: OutputSpec
    source_text: str
    layer_details: tuple = ()
    timeline: object = None  # transport.solvers.timeline.Timeline when [[actions]] are given
    chain: object = None  # transport.model.chain.Chain when [[chain]] daughters are given
    chain_details: tuple = ()  # per daughter: its derived table (as layer_details)
    chain_levels: tuple = ()  # per daughter: its screening level (kg m-3) or None

    @property
    def times(self) -> np.ndarray:
        return self.output.times

    @property
    def depths(self) -> np.ndarray:
        return self.output.depths

    def derived_table(self) -> list:
        """Per-layer derived properties (SI floats; units in :data:`DERIVED_UNITS`).

        One dict per layer, top first: name, top, bottom, thickness, porosity,
        water_content, bulk_density, distribution_coefficient, retardation_factor,
        tortuosity, pore_diffusivity, dispersion, diffusivity, half_life, decay_rate,
        pore_velocity, peclet_number, diffusion_time, advection_time, source_rate,
        partition_to_next, and the provenance texts sorption_source, diffusion_source.
        """
        return [dict(row) for row in self.layer_details]


def read_boundary(r: Reader, data, end: str, q: float, key: str | None = None,
                  chem=None) -> Boundary:
    """The ``[top]`` or ``[bottom]`` table: its kind and values (constants or schedules).

    Parameters
    ----------
    r : Reader
    data : dict
        The table holding ``end`` (the parsed file, or ``{end: table}``).
    end : {"top", "bottom"}
    q : float
        Darcy flux, m s-1 (an inlet needs water entering at its end).
    key : str, optional
        Key path of the table in messages; default ``end``.
    chem : ChemicalSpec, optional
        The chemical (K_oc and half-life of a source zone, :mod:`transport.scenario.zone`).

    Returns
    -------
    Boundary
    """
    where = key or end
    t = r.table(data.get(end), where, required=True)
    kind = t.get("kind", MISSING)
    if kind is MISSING:
        raise r.error(f"{where}.kind", problem="missing", allowed=" | ".join(BOUNDARY_KINDS),
                      fix=f'add kind = "concentration" (or another kind) to [{where}]')
    if kind not in BOUNDARY_KINDS:
        close = difflib.get_close_matches(str(kind), BOUNDARY_KINDS, n=1)
        raise r.error(f"{where}.kind", kind, "unknown boundary kind",
                      allowed=" | ".join(BOUNDARY_KINDS),
                      fix=f"did you mean {close[0]!r}?" if close else "pick one of the kinds")
    wanted = BOUNDARY_VALUE_KEYS[kind]
    for name in t:
        if name != "kind" and name not in wanted:
            known = {k for ks in BOUNDARY_VALUE_KEYS.values() for k in ks}
            problem = (f"not used by kind {kind!r}" if name in known else "unknown key")
            close = difflib.get_close_matches(str(name), wanted, n=1, cutoff=0.6)
            raise r.error(f"{where}.{name}", t[name], problem,
                          allowed=", ".join(("kind",) + wanted),
                          fix=f"did you mean {close[0]!r}?" if close else "remove it")
    for name in wanted:
        if isinstance(t.get(name), list):
            raise r.error(f"{where}.{name}", t[name], "a list is not a boundary value",
                          fix='give one value, or a schedule table such as '
                          '{ steps = [["0 yr", "120 mg/L"], ["10 yr", "0 mg/L"]] }')
    if kind == "source-zone":
        return read_source_zone(r, t, where, chem)
    if kind in ("concentration", "inlet"):
        if "concentration" not in t:
            raise r.error(f"{where}.concentration", problem=f"missing for kind {kind!r}",
                          fix='add concentration = "120 mg/L" (your value)')
        if kind == "inlet":
            check_inlet(r, f"{where}.kind", end, q)
        value, sched = parse_value(r, t["concentration"], "concentration",
                                   f"{where}.concentration", low=0)
        return Boundary(kind, value, schedule=sched)
    if kind == "flux":
        if "flux" not in t:
            raise r.error(f"{where}.flux", problem="missing for kind 'flux'",
                          fix='add flux = "0 g/m^2/d" (positive downward)')
        value, sched = parse_value(r, t["flux"], "mass_flux", f"{where}.flux")
        return Boundary(kind, value, schedule=sched)
    if kind == "mass-transfer":
        if "transfer_coefficient" not in t:
            raise r.error(f"{where}.transfer_coefficient", problem="missing for kind "
                          "'mass-transfer'", fix='add transfer_coefficient = "1e-6 m/s"')
        h = r.quantity(t["transfer_coefficient"], "velocity", f"{where}.transfer_coefficient",
                       low=0, low_open=True)
        outside, sched = 0.0, None
        if "outside_concentration" in t:
            outside, sched = parse_value(r, t["outside_concentration"], "concentration",
                                         f"{where}.outside_concentration", low=0)
        return Boundary(kind, outside, h, schedule=sched)
    return Boundary(kind)


def _read(text, path):
    file = str(path)
    base_dir = Path(file).parent if file != "<string>" else Path.cwd()
    r = Reader(file, base_dir)
    data = parse_toml(r, text)
    r.keys(data, TOP_KEYS, "")
    return r, data, file


def parse_scenario(text: str, path: str | Path = "<string>") -> Scenario:
    """Parse scenario TOML text (``path`` is used in messages and for relative files).

    The base scenario (the file without its ``[[alternatives]]``) is returned; every
    alternative is validated too, so a file that loads is a file that runs.

    Raises
    ------
    ScenarioError
        Any problem in the text, with file, key path, value and fix.
    """
    r, data, file = _read(text, path)
    base = _parse_data(r, data, text, file)
    _alternatives(r, data, text, file)
    return base


def parse_alternatives(text: str, path: str | Path = "<string>") -> list:
    """The scenarios of a file: one, or one per ``[[alternatives]]`` table.

    Each alternative has a ``name`` (its title) and replaces the file's ``actions``
    (an empty list means no action) and optionally its ``top`` boundary.
    """
    r, data, file = _read(text, path)
    base = _parse_data(r, data, text, file)
    return _alternatives(r, data, text, file) or [base]


def _alternatives(r, data, text, file) -> list:
    """The scenarios of the ``[[alternatives]]`` tables (empty list: none given)."""
    alts = data.get("alternatives")
    if alts is None:
        return []
    if not isinstance(alts, list) or not alts or not all(isinstance(a, dict) for a in alts):
        raise r.error("alternatives", alts, "must be a list of [[alternatives]] tables",
                      fix='add [[alternatives]] tables with name = "..." and actions = [...]')
    out, names = [], set()
    for j, alt in enumerate(alts, start=1):
        key = f"alternatives[{j}]"
        r.keys(alt, ALTERNATIVE_KEYS, key)
        name = r.text(alt, "name", key)
        if not name:
            raise r.error(f"{key}.name", problem="missing", fix='add name = "cap at 5 yr"')
        if name in names:
            raise r.error(f"{key}.name", name, "two alternatives have the same name",
                          fix="give each alternative its own name")
        names.add(name)
        variant = {k: v for k, v in data.items() if k not in ("alternatives", "actions")}
        variant["title"] = name
        if "actions" in alt:
            variant["actions"] = alt["actions"]
        if "top" in alt:
            variant["top"] = alt["top"]
        out.append(_parse_data(r, variant, text, file, prefix=f"{key}."))
    return out


def _parse_data(r, data, text, file, prefix=""):
    title = r.text(data, "title", "", default=Path(file).stem)
    chem = read_chemical(r, data)
    flow = r.table(data.get("flow"), "flow")
    r.keys(flow, FLOW_KEYS, "flow")
    q = r.optional(flow, "darcy_flux", "velocity", "flow", default=0.0)

    raw_layers = data.get("layers")
    if not isinstance(raw_layers, list) or not raw_layers:
        raise r.error("layers", MISSING if raw_layers is None else raw_layers,
                      "at least one [[layers]] table is needed", fix="add [[layers]] tables, "
                      "top first")
    if len(raw_layers) > MAX_LAYERS:
        raise r.error("layers", problem=f"{len(raw_layers)} layers, more than the "
                      f"{MAX_LAYERS} a column may have", allowed=f"1 to {MAX_LAYERS} layers",
                      fix="merge neighbouring layers of the same material")
    layers, details, initial_values, top = [], [], [], 0.0
    for i, raw in enumerate(raw_layers, start=1):
        layer, detail, init = read_layer(r, raw, i, chem, q, top, i == len(raw_layers))
        layers.append(layer)
        details.append(detail)
        initial_values.append(init)
        top += layer.thickness

    bottom_boundary = read_boundary(r, data, "bottom", q, chem=chem)
    try:
        column = Column(tuple(layers), read_boundary(r, data, "top", q, key=f"{prefix}top",
                                                     chem=chem),
                        bottom_boundary, q)
    except InputError as exc:
        raise r.error("flow.darcy_flux", q, str(exc), fix="see the message") from None
    if not math.isfinite(column.length) or column.length <= 0:
        raise r.error("layers", problem="total thickness is not a finite positive length")

    init_table = r.table(data.get("initial"), "initial")
    r.keys(init_table, INITIAL_KEYS, "initial")
    per_layer = any(v is not None for v in initial_values)
    if len(init_table) > 1:
        raise r.error("initial.samples_file", init_table["samples_file"], "given together "
                      "with initial.samples", fix="keep one")
    if init_table and per_layer:
        raise r.error("initial", problem="a measured profile and layers[].initial_concentration "
                      "are both given", fix="keep one way of giving the initial state")
    if "samples" in init_table:
        initial = read_samples(r, init_table["samples"], column.length, layers=details)
    elif "samples_file" in init_table:
        initial = read_samples_file(r, init_table["samples_file"], column.length,
                                    layers=details)
    elif per_layer:
        initial = InitialState.uniform([v or 0.0 for v in initial_values])
    else:
        initial = InitialState.clean()

    output = read_output(r, data, column)
    timeline = parse_actions(
        r, data, column, q, raw_layers,
        make_layer=lambda raw, key, q_, top_, last_: read_layer(r, raw, 0, chem, q_, top_,
                                                                last_, key=key)[0],
        make_boundary=lambda table, end, q_, key: read_boundary(r, table, end, q_, key=key,
                                                                chem=chem),
        t_end=float(output.times.max()), prefix=prefix)
    if timeline is not None:
        output = with_cap_depths(output, timeline)
    check_run_size(r, output, column, initial, timeline)
    chain = read_chain(r, data, chem, column, q)
    if chain is not None and timeline is not None:
        raise r.error("chain", problem="a decay chain with [[actions]] is not available yet",
                      fix="run the chain without actions, or the parent alone with them")
    return Scenario(title=title, path=None if file == "<string>" else file, column=column,
                    initial=initial, chemical=chem, output=output, source_text=text,
                    layer_details=tuple(details), timeline=timeline,
                    chain=None if chain is None else chain[0],
                    chain_details=() if chain is None else chain[1],
                    chain_levels=() if chain is None else chain[2])


def load_scenario(path: str | Path) -> Scenario:
    """Read and validate a scenario file (TOML, UTF-8)."""
    text = read_text_file(path)
    return parse_scenario(text, path)


def load_alternatives(path: str | Path) -> list:
    """The scenarios of a file (see :func:`parse_alternatives`)."""
    text = read_text_file(path)
    return parse_alternatives(text, path)


def starter_scenario_text() -> str:
    """A commented starter scenario (the text ``stratiflux new`` writes)."""
    return resources.files("transport").joinpath("data/starter.toml").read_text(
        encoding="utf-8")
