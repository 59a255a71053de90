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
    concentration (concentration, inlet) | flux (flux) | transfer_coefficient and
    outside_concentration (mass-transfer)
    [initial]
    samples = [["0 m", "80 mg/L"], ...]  OR  samples_file = "profile.csv"
    [output]
    times = ["1 yr", ...]  OR  times = {start = "1 yr", stop = "100 yr", count = 20, spacing = "log"}
    depths = ["0 m", ...]  OR  depth_spacing = "1 cm"    (default: 200 intervals)
    receptor_depth (default: column bottom), screening_level, design_life, tolerance (1e-8)
"""
from __future__ import annotations

import csv
import difflib
import io
import math
import re
import tomllib
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from . import chemicals, media
from .model import BOUNDARY_KINDS, Boundary, Column, InitialState, InputError, Layer
from .scenario_stages import parse_actions, parse_value
from .units import UnitError, si_unit, to_si

__all__ = ["ScenarioError", "Scenario", "ChemicalSpec", "OutputSpec", "load_scenario",
           "parse_scenario", "parse_alternatives", "load_alternatives", "starter_scenario_text", "DERIVED_UNITS"]

MAX_TIMES = 10_000  # output times; more is a typo, not a use case
MAX_DEPTHS = 20_001  # output depths
DEFAULT_DEPTH_INTERVALS = 200
DEFAULT_TOLERANCE = 1e-8
_MISSING = object()

TOP_KEYS = ("title", "chemical", "flow", "layers", "top", "bottom", "initial", "output",
            "actions", "alternatives")
ALTERNATIVE_KEYS = ("name", "actions", "top")
CHEMICAL_KEYS = ("name", "free_water_diffusivity", "organic_carbon_partition", "half_life")
FLOW_KEYS = ("darcy_flux",)
LAYER_KEYS = ("name", "thickness", "porosity", "water_content", "bulk_density",
              "organic_carbon_fraction", "distribution_coefficient", "retardation_factor",
              "tortuosity", "pore_diffusivity", "dispersivity", "half_life", "source_rate",
              "partition_to_next", "initial_concentration")
BOUNDARY_VALUE_KEYS = {"concentration": ("concentration",), "inlet": ("concentration",),
                       "flux": ("flux",), "mass-transfer": ("transfer_coefficient",
                                                            "outside_concentration"),
                       "free-outflow": (), "sealed": ()}
INITIAL_KEYS = ("samples", "samples_file")
OUTPUT_KEYS = ("times", "depths", "depth_spacing", "receptor_depth", "screening_level",
               "design_life", "tolerance")
TIME_RANGE_KEYS = ("start", "stop", "count", "spacing")

#: SI units of the columns of :meth:`Scenario.derived_table`.
DERIVED_UNITS = {
    "top": "m", "bottom": "m", "thickness": "m", "porosity": "1", "water_content": "1",
    "bulk_density": "kg m-3", "distribution_coefficient": "m3 kg-1", "retardation_factor": "1",
    "tortuosity": "1", "pore_diffusivity": "m2 s-1", "dispersion": "m2 s-1",
    "diffusivity": "m2 s-1", "half_life": "s", "decay_rate": "s-1", "pore_velocity": "m s-1",
    "peclet_number": "1", "diffusion_time": "s", "advection_time": "s",
    "source_rate": "kg m-3 s-1", "partition_to_next": "1",
}


class ScenarioError(ValueError):
    """A scenario problem: file, key path, value given, what is allowed, the fix."""

    def __init__(self, file, key, value=_MISSING, problem="", allowed="", fix=""):
        self.file, self.key, self.problem, self.allowed, self.fix = file, key, problem, allowed, fix
        self.value = None if value is _MISSING else value
        shown = "" if value is _MISSING else f" = {_short(value)}"
        msg = f"{file}: {key}{shown}: {str(problem).rstrip('.')}"
        if allowed:
            msg += f". Allowed: {allowed}"
        if fix:
            msg += f". Fix: {fix}"
        super().__init__(msg)


def _short(value) -> str:
    text = repr(value)
    return text if len(text) <= 80 else text[:77] + "..."


@dataclass(frozen=True)
class ChemicalSpec:
    """Chemical properties in force (SI) and where each came from."""

    name: str | None
    free_water_diffusivity: float | None
    organic_carbon_partition: float | None
    half_life: float | None  # s; None: no decay unless a layer gives one
    sources: dict = field(default_factory=dict)
    table_entry: chemicals.Chemical | None = None


@dataclass(frozen=True, eq=False)
class OutputSpec:
    """What to compute: times (s), depths (m), receptor and screening settings."""

    times: np.ndarray
    depths: np.ndarray
    receptor_depth: float
    screening_level: float | None = None
    design_life: float | None = None
    tolerance: float = DEFAULT_TOLERANCE


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
    timeline: object = None  # transport.timeline.Timeline when [[actions]] are given

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


class _Reader:
    """Validation helpers bound to one file (for messages)."""

    def __init__(self, file: str, base_dir: Path):
        self.file, self.base_dir = file, base_dir

    def error(self, key, value=_MISSING, problem="", allowed="", fix=""):
        return ScenarioError(self.file, key, value, problem, allowed, fix)

    def table(self, value, key, required=False):
        if value is None and not required:
            return {}
        if not isinstance(value, dict):
            raise self.error(key, _MISSING if value is None else value,
                             "missing" if value is None else "must be a table",
                             fix=f"add a [{key}] table")
        return value

    def keys(self, table, allowed, key):
        for name in table:
            if name not in allowed:
                close = difflib.get_close_matches(str(name), allowed, n=1, cutoff=0.6)
                hint = f"did you mean {close[0]!r}?" if close else "remove it"
                raise self.error(f"{key}.{name}" if key else str(name), problem="unknown key",
                                 allowed=", ".join(allowed), fix=hint)

    def quantity(self, value, dimension, key, low=None, high=None, low_open=False,
                 high_open=False):
        try:
            si = to_si(value, dimension, key)
        except UnitError as exc:
            what = "number" if dimension == "dimensionless" else dimension.replace("_", " ")
            if dimension == "dimensionless":
                allowed, fix = "a plain number", f"write e.g. {key.rsplit('.', 1)[-1]} = {exc.example}"
            else:
                allowed = f"a quoted number with {what} units"
                fix = f"write e.g. {key.rsplit('.', 1)[-1]} = {exc.example}"
            raise self.error(key, value, f"not a valid {what}: {exc.reason}", allowed,
                             fix) from None
        unit = "" if dimension == "dimensionless" else f" {si_unit(dimension)}"
        if low is not None and (si < low or (low_open and si == low)):
            raise self.error(key, value, f"must be {'>' if low_open else '>='} {low:g}{unit}",
                             fix="check the value and its units")
        if high is not None and (si > high or (high_open and si == high)):
            raise self.error(key, value, f"must be {'<' if high_open else '<='} {high:g}{unit}",
                             fix="check the value and its units")
        return si

    def optional(self, table, name, dimension, key, default=None, **limits):
        if name not in table:
            return default
        return self.quantity(table[name], dimension, f"{key}.{name}", **limits)

    def text(self, table, name, key, default=None):
        value = table.get(name, default)
        if value is not None and not isinstance(value, str):
            raise self.error(f"{key}.{name}" if key else name, value, "must be text",
                             fix="put it in quotes")
        return value

    def half_life(self, table, key):
        if "half_life" not in table:
            return _MISSING
        value = table["half_life"]
        if isinstance(value, str) and value.strip().lower() in ("none", "inf", "infinite"):
            return None
        return self.quantity(value, "time", f"{key}.half_life", low=0, low_open=True)


def _chemical(r: _Reader, data) -> ChemicalSpec:
    table = r.table(data.get("chemical"), "chemical")
    r.keys(table, CHEMICAL_KEYS, "chemical")
    name = r.text(table, "name", "chemical")
    entry, sources = None, {}
    if name is not None:
        try:
            entry = chemicals.lookup(name)
        except chemicals.ChemicalError as exc:
            raise r.error("chemical.name", name, str(exc),
                          fix="correct the name or give the properties directly") from None
    dw = r.optional(table, "free_water_diffusivity", "diffusivity", "chemical", low=0, low_open=True)
    if dw is not None:
        sources["free_water_diffusivity"] = "scenario file"
    elif entry is not None:
        dw, sources["free_water_diffusivity"] = (entry.free_water_diffusivity,
                                                 entry.diffusivity_source)
    koc = r.optional(table, "organic_carbon_partition", "specific_volume", "chemical", low=0)
    if koc is not None:
        sources["organic_carbon_partition"] = "scenario file"
    elif entry is not None:
        koc, sources["organic_carbon_partition"] = entry.organic_carbon_partition, entry.koc_source
    half_life = r.half_life(table, "chemical")
    half_life = None if half_life is _MISSING else half_life
    sources["half_life"] = "scenario file" if "half_life" in table else "not given: no decay"
    return ChemicalSpec(entry.name if entry else None, dw, koc, half_life, sources, entry)


def _layer(r: _Reader, raw, i: int, chem: ChemicalSpec, q: float, top: float, last: bool,
           key: str = None):
    key = key or f"layers[{i}]"
    t = r.table(raw, key, required=True)
    r.keys(t, LAYER_KEYS, key)
    name = r.text(t, "name", key, default=f"layer {i}")
    if "thickness" not in t or "porosity" not in t:
        missing = "thickness" if "thickness" not in t else "porosity"
        raise r.error(f"{key}.{missing}", problem="missing", fix=f"add {missing} to layer {i}")
    thickness = r.quantity(t["thickness"], "length", f"{key}.thickness", low=0, low_open=True)
    n = r.quantity(t["porosity"], "dimensionless", f"{key}.porosity", low=0, high=1,
                   low_open=True)
    theta = r.optional(t, "water_content", "dimensionless", key, default=n, low=0, high=n,
                       low_open=True)
    rho_b = r.optional(t, "bulk_density", "density", key, low=0, low_open=True)
    routes = [k for k in ("organic_carbon_fraction", "distribution_coefficient",
                          "retardation_factor") if k in t]
    if len(routes) > 1:
        raise r.error(f"{key}.{routes[1]}", t[routes[1]], f"given together with {routes[0]}",
                      fix="keep only one way of giving sorption")
    kd, sorption_source = None, "none given: R = 1"
    if routes == ["retardation_factor"]:
        retardation = r.quantity(t["retardation_factor"], "dimensionless",
                                 f"{key}.retardation_factor", low=0, low_open=True)
        sorption_source = "retardation_factor from scenario file"
    elif routes:
        if routes[0] == "organic_carbon_fraction":
            foc = r.quantity(t["organic_carbon_fraction"], "dimensionless",
                             f"{key}.organic_carbon_fraction", low=0, high=1)
            if chem.organic_carbon_partition is None:
                why = (f"{chem.name} has no Koc ({chem.sources.get('organic_carbon_partition')})"
                       if chem.table_entry else "the chemical has no Koc")
                raise r.error(f"{key}.organic_carbon_fraction", t["organic_carbon_fraction"],
                              why, fix="give distribution_coefficient, or "
                              "chemical.organic_carbon_partition")
            kd = media.kd_from_koc(chem.organic_carbon_partition, foc)
            sorption_source = ("Kd = Koc foc, Koc: "
                               + chem.sources.get("organic_carbon_partition", ""))
        else:
            kd = r.quantity(t["distribution_coefficient"], "specific_volume",
                            f"{key}.distribution_coefficient", low=0)
            sorption_source = "distribution_coefficient from scenario file"
        if rho_b is None:
            raise r.error(f"{key}.bulk_density", problem=f"missing, needed with {routes[0]}",
                          fix='add bulk_density, e.g. "1.7 g/cm^3"')
        retardation = media.retardation_factor(rho_b, theta, kd)
    else:
        retardation = 1.0

    if "pore_diffusivity" in t:
        if "tortuosity" in t:
            raise r.error(f"{key}.tortuosity", t["tortuosity"], "given together with "
                          "pore_diffusivity", fix="keep one: pore_diffusivity already "
                          "includes the tortuosity")
        molecular = r.quantity(t["pore_diffusivity"], "diffusivity", f"{key}.pore_diffusivity",
                               low=0, low_open=True)
        tau, diffusion_source = math.nan, "pore_diffusivity from scenario file"
    else:
        tort = t.get("tortuosity", "millington-quirk")
        if isinstance(tort, str) and tort.strip().lower() == "millington-quirk":
            tau = media.millington_quirk_tortuosity(theta, n)
            diffusion_source = "Millington & Quirk 1961 tortuosity"
        elif isinstance(tort, str):
            raise r.error(f"{key}.tortuosity", tort, "unknown tortuosity model",
                          allowed='"millington-quirk" or a number in (0, 1]',
                          fix='write tortuosity = "millington-quirk" or e.g. 0.5')
        else:
            tau = r.quantity(tort, "dimensionless", f"{key}.tortuosity", low=0, high=1,
                             low_open=True)
            diffusion_source = "tortuosity factor from scenario file"
        if chem.free_water_diffusivity is None:
            raise r.error(f"{key}.pore_diffusivity", problem="no diffusivity for this layer",
                          fix="give chemical.name or chemical.free_water_diffusivity, or "
                          "pore_diffusivity in this layer")
        molecular = chem.free_water_diffusivity * tau
        diffusion_source += "; D_w: " + chem.sources.get("free_water_diffusivity", "")
    alpha = r.optional(t, "dispersivity", "length", key, default=0.0, low=0)
    v = media.pore_velocity(q, theta)
    dispersion = alpha * abs(v)
    half_life = r.half_life(t, key)
    half_life = chem.half_life if half_life is _MISSING else half_life
    source = r.optional(t, "source_rate", "mass_rate_density", key, default=0.0)
    partition = r.optional(t, "partition_to_next", "dimensionless", key, default=1.0, low=0,
                           low_open=True)
    if last and partition != 1.0:
        raise r.error(f"{key}.partition_to_next", t["partition_to_next"], "the last layer has "
                      "no layer below", fix="remove it, or model the outside with the bottom "
                      "boundary")
    if partition != 1.0 and q != 0:
        raise r.error(f"{key}.partition_to_next", t["partition_to_next"],
                      f"a partition jump with nonzero Darcy flux ({q} m/s) is not physical in "
                      "this 1-D model", fix="set flow.darcy_flux to 0 or partition_to_next to 1")
    try:
        layer = Layer(thickness=thickness, porosity=theta, diffusivity=molecular + dispersion,
                      retardation=retardation, decay_rate=media.decay_rate_from_half_life(half_life),
                      source_rate=source, partition_to_next=partition, name=name)
    except InputError as exc:
        raise r.error(key, problem=str(exc), fix="correct the layer's properties") from None
    detail = {
        "name": name, "top": top, "bottom": top + thickness, "thickness": thickness,
        "porosity": n, "water_content": theta, "bulk_density": rho_b,
        "distribution_coefficient": kd, "retardation_factor": layer.retardation,
        "tortuosity": tau, "pore_diffusivity": molecular, "dispersion": dispersion,
        "diffusivity": layer.diffusivity, "half_life": half_life,
        "decay_rate": layer.decay_rate, "pore_velocity": v,
        "peclet_number": media.peclet_number(v, thickness, layer.diffusivity),
        "diffusion_time": media.diffusion_time(thickness, layer.diffusivity, layer.retardation),
        "advection_time": media.advection_time(thickness, v, layer.retardation),
        "source_rate": source, "partition_to_next": partition,
        "sorption_source": sorption_source, "diffusion_source": diffusion_source,
    }
    initial = r.optional(t, "initial_concentration", "concentration", key, low=0)
    return layer, detail, initial


def _boundary(r: _Reader, data, end: str, q: float, key: str = None) -> Boundary:
    where = key or end
    t = r.table(data.get(end), where, required=True)
    kind = t.get("kind", _MISSING)
    if kind is _MISSING:
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
    if kind in ("concentration", "inlet"):
        if "concentration" not in t:
            raise r.error(f"{where}.concentration", problem=f"missing for kind {kind!r}",
                          fix='add concentration = "120 mg/L" (your value)')
        if kind == "inlet" and q == 0:
            raise r.error(f"{where}.kind", kind, "an inlet boundary carries q C_in and needs a "
                          "nonzero flow.darcy_flux", fix='use kind = "concentration" for '
                          "diffusion only, or give the Darcy flux")
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


def _read_samples_file(r: _Reader, raw, length: float):
    key = "initial.samples_file"
    if not isinstance(raw, str) or not raw.strip():
        raise r.error(key, raw, "must be a file name", fix='e.g. samples_file = "profile.csv"')
    path = Path(raw) if Path(raw).is_absolute() else r.base_dir / raw
    try:
        text = path.read_text(encoding="utf-8")
    except (OSError, UnicodeError) as exc:
        raise r.error(key, raw, f"cannot read {path}: {exc}", fix="check the path (relative to "
                      "the scenario file)") from None
    lines = [ln for ln in text.splitlines() if ln.strip() and not ln.lstrip().startswith("#")]
    rows = list(csv.reader(io.StringIO("\n".join(lines))))
    header_units = [re.search(r"\[(.+)\]", h).group(1).strip() if re.search(r"\[(.+)\]", h)
                    else None for h in (rows[0] if rows else [])]
    if len(header_units) != 2 or not rows[1:]:
        raise r.error(key, raw, f"{path.name} must have a header of two columns and at least "
                      "one sample", fix="write e.g. 'depth [m],concentration [mg/L]' then rows")
    pairs = []
    for j, row in enumerate(rows[1:], start=1):
        if len(row) != 2:
            raise r.error(f"{key} row {j}", row, "needs exactly two cells (depth, concentration)")
        pairs.append([c.strip() + (f" {u}" if u else "") for c, u in zip(row, header_units)])
    return _samples(r, pairs, length, f"{key}({path.name}) row", base=1)


def _samples(r: _Reader, raw, length: float, key="initial.samples", base=0):
    if not isinstance(raw, list) or not raw:
        raise r.error(key, raw, "must be a list of [depth, concentration] pairs",
                      fix='e.g. samples = [["0 m", "80 mg/L"], ["1 m", "0 mg/L"]]')
    depths, values = [], []
    for j, pair in enumerate(raw, start=base):
        where = f"{key}[{j}]"
        if not isinstance(pair, list) or len(pair) != 2:
            raise r.error(where, pair, "must be a [depth, concentration] pair",
                          fix='e.g. ["0.5 m", "40 mg/L"]')
        z = r.quantity(pair[0], "length", f"{where}[0]", low=0)
        if z > length * (1 + 1e-12):
            raise r.error(f"{where}[0]", pair[0], f"sample below the column bottom "
                          f"({length:g} m)", fix="drop the sample or add the layer it was taken in")
        if depths and z <= depths[-1]:
            raise r.error(f"{where}[0]", pair[0], "sample depths must increase strictly",
                          fix="list samples top to bottom, each depth once")
        depths.append(min(z, length))
        values.append(r.quantity(pair[1], "concentration", f"{where}[1]", low=0))
    return InitialState.profile(depths, values)


def _times(r: _Reader, raw):
    key = "output.times"
    if raw is None:
        raise r.error(key, problem="missing", fix='add times = ["1 yr", "10 yr"] or '
                      'times = {start = "1 yr", stop = "100 yr", count = 20}')
    if isinstance(raw, dict):
        r.keys(raw, TIME_RANGE_KEYS, key)
        for name in ("start", "stop", "count"):
            if name not in raw:
                raise r.error(f"{key}.{name}", problem="missing", fix="give start, stop and count")
        start = r.quantity(raw["start"], "time", f"{key}.start", low=0)
        stop = r.quantity(raw["stop"], "time", f"{key}.stop", low=start)
        count = raw["count"]
        if isinstance(count, bool) or not isinstance(count, int) or not 1 <= count <= MAX_TIMES:
            raise r.error(f"{key}.count", count, "must be a whole number",
                          allowed=f"1 to {MAX_TIMES}", fix="e.g. count = 20")
        spacing = raw.get("spacing", "linear")
        if spacing not in ("linear", "log"):
            raise r.error(f"{key}.spacing", spacing, "unknown spacing", allowed="linear | log")
        if spacing == "log" and start <= 0:
            raise r.error(f"{key}.start", raw["start"], "log spacing needs start > 0",
                          fix='e.g. start = "1 d"')
        times = (np.geomspace(start, stop, count) if spacing == "log"
                 else np.linspace(start, stop, count))
    elif isinstance(raw, list) and raw:
        if len(raw) > MAX_TIMES:
            raise r.error(key, problem=f"{len(raw)} times", allowed=f"at most {MAX_TIMES}")
        times = np.array([r.quantity(v, "time", f"{key}[{j}]", low=0) for j, v in enumerate(raw)])
    else:
        raise r.error(key, raw, "must be a list of times or a {start, stop, count} table",
                      fix='e.g. times = ["1 yr", "10 yr", "50 yr"]')
    times = np.unique(times)
    if not np.all(np.isfinite(times)):
        raise r.error(key, raw, "times must be finite")
    return times


def _depths(r: _Reader, out, column: Column, receptor: float):
    length = column.length
    if "depths" in out and "depth_spacing" in out:
        raise r.error("output.depth_spacing", out["depth_spacing"], "given together with "
                      "output.depths", fix="keep one of them")
    if "depths" in out:
        raw = out["depths"]
        if not isinstance(raw, list) or not raw or len(raw) > MAX_DEPTHS:
            raise r.error("output.depths", raw, "must be a non-empty list of depths",
                          allowed=f"at most {MAX_DEPTHS}", fix='e.g. depths = ["0 m", "1 m"]')
        grid = [r.quantity(v, "length", f"output.depths[{j}]", low=0, high=length)
                for j, v in enumerate(raw)]
    else:
        step = r.optional(out, "depth_spacing", "length", "output",
                          default=length / DEFAULT_DEPTH_INTERVALS, low=0, low_open=True)
        count = length / step
        if not math.isfinite(count) or count > MAX_DEPTHS - 1:
            raise r.error("output.depth_spacing", out.get("depth_spacing"), f"gives "
                          f"{count:.3g} depths", allowed=f"at most {MAX_DEPTHS}",
                          fix="use a coarser spacing")
        grid = list(np.arange(int(math.ceil(count * (1 - 1e-12)))) * step)
    grid = np.unique(np.concatenate([grid, column.interfaces, [receptor]]))
    return grid[(grid >= 0) & (grid <= length)]


def _output(r: _Reader, data, column: Column) -> OutputSpec:
    out = r.table(data.get("output"), "output", required=True)
    r.keys(out, OUTPUT_KEYS, "output")
    times = _times(r, out.get("times"))
    receptor = r.optional(out, "receptor_depth", "length", "output", default=column.length,
                          low=0, high=column.length)
    depths = _depths(r, out, column, receptor)
    level = r.optional(out, "screening_level", "concentration", "output", low=0, low_open=True)
    life = r.optional(out, "design_life", "time", "output", low=0, low_open=True)
    tol = r.optional(out, "tolerance", "dimensionless", "output", default=DEFAULT_TOLERANCE,
                     low=1e-14, high=1e-2)
    times.setflags(write=False)
    depths.setflags(write=False)
    return OutputSpec(times, depths, receptor, level, life, tol)


def parse_scenario(text: str, path: str | Path = "<string>") -> Scenario:
    """Parse scenario TOML text (``path`` is used in messages and for relative files).

    Raises
    ------
    ScenarioError
        Any problem in the text, with file, key path, value and fix.
    """
    file = str(path)
    base_dir = Path(file).parent if file != "<string>" else Path.cwd()
    r = _Reader(file, base_dir)
    if not isinstance(text, str):
        raise r.error("(file)", problem="scenario text must be a string")
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise r.error("(TOML syntax)", problem=str(exc), fix="correct the TOML syntax "
                      "(strings with units need quotes)") from None
    r.keys(data, TOP_KEYS, "")
    return _parse_data(r, data, text, file)


def parse_alternatives(text: str, path: str | Path = "<string>") -> list:
    """The scenarios of a file: one, or one per ``[[alternatives]]`` table.

    Each alternative has a ``name`` (its title) and replaces the file's ``actions``
    (an empty list means no action) and optionally its ``top`` boundary.
    """
    base = parse_scenario(text, path)
    file = str(path)
    r = _Reader(file, Path(file).parent if file != "<string>" else Path.cwd())
    data = tomllib.loads(text)
    alts = data.get("alternatives")
    if alts is None:
        return [base]
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
    chem = _chemical(r, data)
    flow = r.table(data.get("flow"), "flow")
    r.keys(flow, FLOW_KEYS, "flow")
    q = r.optional(flow, "darcy_flux", "velocity", "flow", default=0.0)

    raw_layers = data.get("layers")
    if not isinstance(raw_layers, list) or not raw_layers:
        raise r.error("layers", _MISSING if raw_layers is None else raw_layers,
                      "at least one [[layers]] table is needed", fix="add [[layers]] tables, "
                      "top first")
    layers, details, initial_values, top = [], [], [], 0.0
    for i, raw in enumerate(raw_layers, start=1):
        layer, detail, init = _layer(r, raw, i, chem, q, top, i == len(raw_layers))
        layers.append(layer)
        details.append(detail)
        initial_values.append(init)
        top += layer.thickness

    bottom_boundary = _boundary(r, data, "bottom", q)
    try:
        column = Column(tuple(layers), _boundary(r, data, "top", q, key=f"{prefix}top"),
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
        initial = _samples(r, init_table["samples"], column.length)
    elif "samples_file" in init_table:
        initial = _read_samples_file(r, init_table["samples_file"], column.length)
    elif per_layer:
        initial = InitialState.uniform([v or 0.0 for v in initial_values])
    else:
        initial = InitialState.clean()

    output = _output(r, data, column)
    timeline = parse_actions(
        r, data, column, q, raw_layers,
        make_layer=lambda raw, key, q_, top_, last_: _layer(r, raw, 0, chem, q_, top_, last_,
                                                             key=key)[0],
        make_boundary=lambda table, end, q_, key: _boundary(r, table, end, q_, key=key),
        t_end=float(output.times.max()), prefix=prefix)
    if timeline is not None:
        output = _with_cap_depths(output, timeline)
    return Scenario(title=title, path=None if file == "<string>" else file, column=column,
                    initial=initial, chemical=chem, output=output, source_text=text,
                    layer_details=tuple(details), timeline=timeline)


def _with_cap_depths(output: OutputSpec, timeline) -> OutputSpec:
    """Add output depths above the original top where a cap is placed (negative depths)."""
    top = min(st.offset for st in timeline.stages)
    if top >= 0:
        return output
    d = np.asarray(output.depths)
    step = float(np.min(np.diff(d))) if d.size > 1 else -top / 20
    faces = [f + st.offset for st in timeline.stages for f in st.column.interfaces]
    extra = np.concatenate([np.arange(top, 0.0, step), faces])
    depths = np.unique(np.concatenate([d, extra[extra < d.max()]]))
    depths.setflags(write=False)
    return OutputSpec(output.times, depths, output.receptor_depth, output.screening_level,
                      output.design_life, output.tolerance)


def load_scenario(path: str | Path) -> Scenario:
    """Read and validate a scenario file (TOML, UTF-8)."""
    try:
        text = Path(path).read_text(encoding="utf-8")
    except (OSError, UnicodeError) as exc:
        raise ScenarioError(str(path), "(file)", problem=f"cannot read the file: {exc}",
                            fix="check the path") from None
    return parse_scenario(text, path)


def load_alternatives(path: str | Path) -> list:
    """The scenarios of a file (see :func:`parse_alternatives`)."""
    try:
        text = Path(path).read_text(encoding="utf-8")
    except (OSError, UnicodeError) as exc:
        raise ScenarioError(str(path), "(file)", problem=f"cannot read the file: {exc}",
                            fix="check the path") from None
    return parse_alternatives(text, path)


def starter_scenario_text() -> str:
    """A commented starter scenario (the text ``stratiflux new`` writes)."""
    return _STARTER


_STARTER = '''\
# stratiflux scenario: edit the values, keep the units in the quotes.
# Screening-level model under stated assumptions (1-D, linear sorption, steady flow,
# homogeneous layers); decisions rest with regulators, local codes and licensed professionals.
title = "New scenario (fictional site)"

[chemical]
name = "trichloroethene"          # looked up in the property table (with sources)
# free_water_diffusivity = "9.65e-10 m^2/s"   # overrides the table
# organic_carbon_partition = "94 L/kg"        # Koc, overrides the table
# half_life = "5 yr"                          # no decay unless you give one

[flow]
darcy_flux = "0.1 m/yr"           # downward positive; 0 for diffusion only

[[layers]]                        # top layer first
name = "fill"
thickness = "1 m"
porosity = 0.35                   # total porosity
# water_content = 0.25            # water-filled porosity if unsaturated
bulk_density = "1.7 g/cm^3"
organic_carbon_fraction = 0.002   # or distribution_coefficient = "0.2 L/kg", or retardation_factor
tortuosity = "millington-quirk"   # or a number, or pore_diffusivity = "3e-10 m^2/s"
dispersivity = "0.05 m"

[[layers]]
name = "sand"
thickness = "2 m"
porosity = 0.30
bulk_density = "1.8 g/cm^3"
organic_carbon_fraction = 0.0005
dispersivity = "0.1 m"

[top]
kind = "concentration"            # concentration | flux | inlet | free-outflow | mass-transfer | sealed
concentration = "10 mg/L"

[bottom]
kind = "free-outflow"

# [initial]                       # clean unless given
# samples = [["0 m", "5 mg/L"], ["0.5 m", "1 mg/L"], ["1 m", "0 mg/L"]]

[output]
times = { start = "1 yr", stop = "50 yr", count = 20 }
depth_spacing = "2 cm"
receptor_depth = "3 m"
screening_level = "5 ug/L"
design_life = "30 yr"
'''
