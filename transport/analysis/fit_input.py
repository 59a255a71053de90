"""Inputs of ``stratiflux fit``: the ``[fit]`` table, the measured profile and the text.

The ``[fit]`` table of a scenario file names the free parameters by the scenario's own
key paths (layers counted from 1, as in every message)::

    [fit]
    data = "../data/clay-core-profile.csv"  # optional; --data on the command line wins
    time = "46 yr"                          # profile time without a time column
    confidence = 0.95                       # of the intervals (default 0.95)
    error_model = "scaled"                  # or "absolute": sigma is the true error
    max_evaluations = 300                   # model runs before giving up

    [[fit.free]]
    key = "layers[2].pore_diffusivity"      # any numeric key of the scenario
    low = "1e-11 m^2/s"
    high = "1e-8 m^2/s"
    scale = "log"                           # or "linear" (default)
    start = "3e-10 m^2/s"                   # optional; default the scenario's value

``key = "source_age"`` is the elapsed time from t = 0 (the source starting) to the
earliest sampling; the other sampling times keep their distance from it.

The measured profile is a CSV file whose header names the columns and their units in
brackets, in any order: ``depth [m], concentration [mg/L], sigma [mg/L], time [yr]``
(sigma, the standard deviation of each measurement, and time are optional; ``#`` lines
are comments). Concentrations are pore-water concentrations.

Each evaluation writes the trial values into the scenario text (:func:`place_values`)
and reads it again with :func:`transport.scenario.schema.parse_scenario`, so every
derived property comes from the one place that computes it. The same placement gives
the fitted scenario file.
"""
from __future__ import annotations

import csv
import difflib
import io
import json
import math
import re
import tomllib
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from transport.scenario.reader import (MAX_TABLE_BYTES, MISSING, Reader, ScenarioError,
                                       read_input_file)
from transport.units import DIMENSIONS, UnitError, si_unit, to_si

__all__ = ["FreeParameter", "FitSpec", "MeasuredProfile", "LEAF_DIMENSIONS", "SOURCE_AGE",
           "FIT_KEYS", "FREE_KEYS", "read_fit_spec", "read_profile", "value_text"]

SOURCE_AGE = "source_age"
FIT_KEYS = ("data", "time", "confidence", "error_model", "max_evaluations", "free")
FREE_KEYS = ("key", "low", "high", "scale", "start")
ERROR_MODELS = ("scaled", "absolute")
#: Numeric keys a fit may free, by the last part of their key path, and their dimension.
LEAF_DIMENSIONS = {
    "thickness": "length", "porosity": "dimensionless", "water_content": "dimensionless",
    "bulk_density": "density", "organic_carbon_fraction": "dimensionless",
    "distribution_coefficient": "specific_volume", "retardation_factor": "dimensionless",
    "tortuosity": "dimensionless", "pore_diffusivity": "diffusivity",
    "dispersivity": "length", "half_life": "time", "source_rate": "mass_rate_density",
    "partition_to_next": "dimensionless", "initial_concentration": "concentration",
    "free_water_diffusivity": "diffusivity", "organic_carbon_partition": "specific_volume",
    "darcy_flux": "velocity", "concentration": "concentration", "flux": "mass_flux",
    "transfer_coefficient": "velocity", "outside_concentration": "concentration",
    "initial": None, "rate": "rate", "start": "time", "at": "time",
    "inventory": "areal_mass",
}
_ROOTS = ("chemical", "flow", "layers", "top", "bottom", "actions")
_SEGMENT = re.compile(r"^([A-Za-z_][A-Za-z0-9_]*)((?:\[\d+\])*)$")
_COLUMNS = {"depth": "length", "concentration": "concentration", "sigma": "concentration",
            "time": "time"}
_COLUMN_ALIASES = {"sd": "sigma", "standard deviation": "sigma", "depth below top": "depth"}


@dataclass(frozen=True)
class FreeParameter:
    """One free parameter: its key path, dimension, bounds and start (SI floats), the
    scale it is searched on and the unit it is shown in (that of its bounds)."""

    key: str
    dimension: str
    low: float
    high: float
    scale: str = "linear"
    start: float | None = None
    unit: str = ""

    @property
    def per_unit(self) -> float:
        """SI value of one shown unit."""
        if not self.unit:
            return 1.0
        # 15 digits: pint's conversions carry rounding noise (1 mg/L = 0.000999...98)
        return float(f"{to_si(f'1 {self.unit}', self.dimension):.15g}")


@dataclass(frozen=True)
class FitSpec:
    """The ``[fit]`` table, read and checked (SI floats)."""

    free: tuple
    data: str | None = None
    time: float | None = None
    confidence: float = 0.95
    error_model: str = "scaled"
    max_evaluations: int = 300


@dataclass(frozen=True)
class MeasuredProfile:
    """A measured profile: depth (m), pore-water concentration and its standard
    deviation (kg m-3; ``sigma`` None when not given), sampling time (s; None when not
    given), one entry per row; ``units`` the header's unit text per column."""

    path: str
    depths: np.ndarray
    values: np.ndarray
    sigma: np.ndarray | None = None
    times: np.ndarray | None = None
    units: tuple = ()

    def unit(self, column: str) -> str:
        return dict(self.units).get(column, "")


# ----------------------------------------------------------------------- key paths
def _segments(r: Reader, key: str, where: str):
    """``"layers[2].porosity"`` -> [("layers", [2]), ("porosity", [])]."""
    if not isinstance(key, str) or not key.strip():
        raise r.error(where, key, "must be a key path", fix='e.g. key = '
                      '"layers[2].pore_diffusivity"')
    out = []
    for part in key.strip().split("."):
        m = _SEGMENT.match(part.strip())
        if m is None:
            raise r.error(where, key, f"cannot read the key path at {part!r}",
                          fix='write it as in messages, e.g. "layers[2].pore_diffusivity"')
        out.append((m.group(1), [int(i) for i in re.findall(r"\d+", m.group(2))]))
    return out


def _resolve(r: Reader, data: dict, key: str, where: str):
    """(dimension, current value or None) of the numeric key ``key`` in ``data``."""
    segs = _segments(r, key, where)
    if segs[0][0] not in _ROOTS:
        raise r.error(where, key, f"a fit cannot free {segs[0][0]!r}",
                      allowed="keys under " + ", ".join(_ROOTS) + f", or {SOURCE_AGE!r}",
                      fix=_suggest(key, segs[-1][0]))
    node, path = data, ""
    for depth, (name, indices) in enumerate(segs):
        last = depth == len(segs) - 1
        if last and (indices or name not in LEAF_DIMENSIONS):
            problem = ("a list index on the last part" if indices else
                       f"{name!r} is not a numeric key a fit can free")
            raise r.error(where, key, problem, allowed=", ".join(LEAF_DIMENSIONS),
                          fix=_suggest(key, name))
        path = f"{path}.{name}" if path else name
        if last:
            value = node.get(name)
            if isinstance(value, (dict, list)):
                raise r.error(where, key, f"{path} is a table (a schedule), not one value",
                              fix=f"free one of its values, e.g. {path}.initial")
            return _dimension(segs), value
        if name not in node or not isinstance(node[name], (dict, list)):
            raise r.error(where, key, f"the scenario has no table {path}",
                          fix=f"add [{path}] to the scenario, or check the key path")
        node = node[name]
        for i in indices:
            if not isinstance(node, list) or not 1 <= i <= len(node):
                size = len(node) if isinstance(node, list) else 0
                raise r.error(where, key, f"{path} has {size} entries; [{i}] is out of "
                              "range (entries count from 1)", fix="check the index")
            node = node[i - 1]
            path += f"[{i}]"
        if not isinstance(node, dict):
            raise r.error(where, key, f"{path} is not a table", fix="check the key path")
    raise AssertionError("unreachable")  # pragma: no cover


def _dimension(segs) -> str:
    """The dimension of a leaf; a schedule's ``initial`` takes its boundary value's."""
    name = segs[-1][0]
    if LEAF_DIMENSIONS[name] is not None:
        return LEAF_DIMENSIONS[name]
    parent = segs[-2][0] if len(segs) > 1 else ""
    return LEAF_DIMENSIONS.get(parent) or "concentration"


def _suggest(key, name) -> str:
    close = difflib.get_close_matches(str(name), list(LEAF_DIMENSIONS), n=1, cutoff=0.6)
    if close:
        return f"did you mean {str(key).rsplit('.', 1)[0] + '.' if '.' in str(key) else ''}" \
               f"{close[0]}?"
    return 'use a key path of the scenario, e.g. "layers[2].pore_diffusivity"'


def _unit_text(value) -> str:
    """The unit text of a value as written (``"1e-11 m^2/s"`` -> ``"m^2/s"``)."""
    if not isinstance(value, str):
        return ""
    m = re.match(r"^\s*[+-]?(?:\d+(?:\.\d*)?|\.\d+)(?:[eE][+-]?\d+)?\s*(.*?)\s*$", value)
    return m.group(1) if m else ""


# ------------------------------------------------------------------------- [fit]
def read_fit_spec(text: str, path, data_override=None, time_override=None) -> FitSpec:
    """The ``[fit]`` table of a scenario text, checked against the scenario's keys.

    Parameters
    ----------
    text : str
        The scenario TOML.
    path : str
        Its file name (messages; relative ``data`` is read from its folder).
    data_override : str, optional
        Data file named on the command line (replaces ``fit.data``).
    time_override : str, optional
        Profile time as text (``"46 yr"``), replaces ``fit.time``.

    Raises
    ------
    ScenarioError
        Naming the file, the key (``fit.free[2].low``) and the fix.
    """
    r = Reader(str(path), _folder(path))
    try:
        data = tomllib.loads(text.lstrip("\ufeff"))
    except tomllib.TOMLDecodeError as exc:
        raise r.error("(TOML syntax)", problem=str(exc), fix="correct the TOML syntax") \
            from None
    fit = r.table(data.get("fit"), "fit", required=True)
    r.keys(fit, FIT_KEYS, "fit")
    raw_free = fit.get("free")
    if not isinstance(raw_free, list) or not raw_free or \
            not all(isinstance(f, dict) for f in raw_free):
        raise r.error("fit.free", raw_free, "at least one [[fit.free]] table is needed",
                      fix='add [[fit.free]] with key = "layers[1].pore_diffusivity", '
                      'low = "1e-11 m^2/s", high = "1e-8 m^2/s"')
    free, seen = [], set()
    for j, t in enumerate(raw_free, start=1):
        p = _free(r, data, t, f"fit.free[{j}]")
        if p.key in seen:
            raise r.error(f"fit.free[{j}].key", p.key, "freed twice",
                          fix="keep one [[fit.free]] table per key")
        seen.add(p.key)
        free.append(p)
    time = time_override if time_override is not None else fit.get("time")
    time = None if time is None else r.quantity(time, "time", "fit.time", low=0,
                                                low_open=True)
    conf = r.quantity(fit.get("confidence", 0.95), "dimensionless", "fit.confidence",
                      low=0.5, high=0.999)
    model = fit.get("error_model", "scaled")
    if model not in ERROR_MODELS:
        raise r.error("fit.error_model", model, "unknown error model",
                      allowed=" | ".join(ERROR_MODELS), fix='write "scaled" (sigma gives '
                      'relative weights) or "absolute" (sigma is the true error)')
    most = fit.get("max_evaluations", 300)
    if isinstance(most, bool) or not isinstance(most, int) or not 1 <= most <= 100_000:
        raise r.error("fit.max_evaluations", most, "must be a whole number from 1 to "
                      "100000", fix="e.g. max_evaluations = 300")
    source = data_override if data_override is not None else fit.get("data")
    if source is not None and (not isinstance(source, str) or not source.strip()):
        raise r.error("fit.data", source, "must be a file name", fix='e.g. data = '
                      '"profile.csv"')
    return FitSpec(tuple(free), source, time, float(conf), model, most)


def _folder(path):
    return Path(str(path)).parent if str(path) != "<string>" else Path.cwd()


def _free(r: Reader, data, t, where) -> FreeParameter:
    r.keys(t, FREE_KEYS, where)
    key = t.get("key")
    if key == SOURCE_AGE:  # starts at the profile time of [fit] where it gives one
        dim, current = "time", (data.get("fit") or {}).get("time")
    else:
        dim, current = _resolve(r, data, key, f"{where}.key")
    for name in ("low", "high"):
        if name not in t:
            ex = DIMENSIONS[dim][2]
            raise r.error(f"{where}.{name}", problem="missing", fix=f"add {name} = {ex} "
                          "(your bound)")
    low = _bound(r, t["low"], dim, f"{where}.low", key)
    high = _bound(r, t["high"], dim, f"{where}.high", key)
    if not low < high:
        raise r.error(f"{where}.high", t["high"], f"bounds reversed or equal: low = "
                      f"{t['low']!r} is not below high",
                      fix="swap low and high" if low > high else "give a range")
    scale = t.get("scale", "linear")
    if scale not in ("linear", "log"):
        raise r.error(f"{where}.scale", scale, "unknown scale", allowed="linear | log",
                      fix='write scale = "log" for a positive quantity spanning decades')
    if key == SOURCE_AGE and low <= 0:
        raise r.error(f"{where}.low", t["low"], "the source age must stay after t = 0",
                      fix='give low > 0, e.g. low = "1 yr"')
    if scale == "log" and low <= 0:
        raise r.error(f"{where}.low", t["low"], "a log scale needs a positive lower bound",
                      fix='give low > 0, or scale = "linear"')
    start = None
    if "start" in t:
        start = _bound(r, t["start"], dim, f"{where}.start", key)
    elif current is not None:
        try:
            start = to_si(current, dim, key)
        except UnitError:
            start = None  # the scenario reader reports it
    if start is not None and not low < start < high:
        if "start" in t:
            raise r.error(f"{where}.start", t["start"], "outside (low, high)",
                          fix="give a start value between the bounds, or leave it out")
        start = None  # the scenario's value lies outside the bounds: start mid-range
    unit = _unit_text(t["low"]) or _unit_text(t["high"])
    if dim == "dimensionless" or (unit and not _unit_ok(unit, dim)):
        unit = ""
    if dim != "dimensionless" and not unit:
        unit = si_unit(dim)
    return FreeParameter(key, dim, low, high, scale, start, unit)


def _unit_ok(unit, dim) -> bool:
    try:
        to_si(f"1 {unit}", dim)
    except (UnitError, ValueError):
        return False
    return True


def _bound(r: Reader, raw, dim, where, key) -> float:
    try:
        return to_si(raw, dim, where)
    except UnitError as exc:
        raise r.error(where, raw, f"not a valid {dim.replace('_', ' ')} for {key}: "
                      f"{exc.reason}", fix=f"write e.g. {exc.example}") from None


# ------------------------------------------------------------------------ profile
def read_profile(path) -> MeasuredProfile:
    """A measured profile CSV (see the module docstring), checked row by row.

    Raises
    ------
    ScenarioError
        Naming the file, the column or row, and the fix (missing column, unknown
        units, a cell that is not a number, sigma <= 0 ...).
    """
    file = str(path)
    text = read_input_file(path, MAX_TABLE_BYTES, "a measured profile CSV")
    lines = [ln for ln in text.splitlines() if ln.strip() and not ln.lstrip().startswith("#")]
    rows = list(csv.reader(io.StringIO("\n".join(lines))))

    def error(key, problem, fix, value=None):
        return ScenarioError(file, key, MISSING if value is None else value, problem,
                             fix=fix)

    example = "depth [m], concentration [mg/L], sigma [mg/L], time [yr]"
    if not rows:
        raise error("header", "the file holds no header and no rows",
                    f"write a header such as '{example}', then one sample a row")
    columns, units, factors = [], [], []
    for cell in rows[0]:
        m = re.match(r"^\s*([^\[\]]*?)\s*(?:\[(.*)\])?\s*$", cell)
        name = (m.group(1) if m else cell).strip().lower()
        name = _COLUMN_ALIASES.get(name, name)
        if name not in _COLUMNS:
            close = difflib.get_close_matches(name, list(_COLUMNS), n=1)
            raise error(f"header column {cell.strip()!r}", "unknown column",
                        f"did you mean {close[0]!r}?" if close else
                        f"name the columns {', '.join(_COLUMNS)} (e.g. '{example}')")
        if name in columns:
            raise error(f"header column {cell.strip()!r}", "given twice", "keep one")
        unit = (m.group(2) or "").strip() if m else ""
        dim = _COLUMNS[name]
        if not unit:
            raise error(f"column {name!r}", "the header gives no units",
                        f"write the units in brackets, e.g. '{name} "
                        f"[{ {'length': 'm', 'time': 'yr'}.get(dim, 'mg/L') }]'")
        if dim == "concentration" and _unit_ok(unit, "mass_fraction"):
            raise error(f"column {name!r} [{unit}]", "a soil concentration (mass over "
                        "mass); the fit compares pore-water concentrations and a "
                        "conversion would depend on the Kd being fitted",
                        "give pore-water concentrations (e.g. mg/L)")
        try:
            factor = to_si(f"1 {unit}", dim, f"column {name!r}")
        except UnitError as exc:
            raise error(f"column {name!r} [{unit}]", f"unknown units: {exc.reason}",
                        f"give {dim} units, e.g. {exc.example}") from None
        columns.append(name)
        units.append(unit)
        factors.append(factor)
    for needed in ("depth", "concentration"):
        if needed not in columns:
            raise error(f"column {needed!r}", "missing", f"add a {needed!r} column with "
                        f"units, e.g. '{example}'")
    if len(rows) < 2:
        raise error("rows", "no samples below the header", "add one sample a row")
    table = np.empty((len(rows) - 1, len(columns)))
    for j, row in enumerate(rows[1:], start=1):
        if len(row) != len(columns):
            raise error(f"row {j}", f"{len(row)} cell(s) where the header has "
                        f"{len(columns)}", "give one value per column in every row")
        for k, cell in enumerate(row):
            try:
                v = float(cell)
            except ValueError:
                v = math.nan
            if not math.isfinite(v):
                raise error(f"row {j}, column {columns[k]!r}", "not a finite number",
                            f"write a plain number (the units are in the header: "
                            f"[{units[k]}])", cell.strip())
            table[j - 1, k] = v * factors[k]
    col = {name: table[:, k] for k, name in enumerate(columns)}
    checks = (("depth", lambda x: x >= 0, "must be >= 0 (depth below the top of the "
               "column, positive down)"),
              ("sigma", lambda x: x > 0, "must be > 0 (the standard deviation of the "
               "measurement)"),
              ("time", lambda x: x >= 0, "must be >= 0"))
    for name, ok, why in checks:
        if name in col and not np.all(ok(col[name])):
            j = int(np.argmin(ok(col[name]))) + 1
            raise error(f"row {j}, column {name!r}", why, "correct the value or drop the "
                        "row", rows[j][columns.index(name)].strip())
    return MeasuredProfile(file, col["depth"], col["concentration"], col.get("sigma"),
                           col.get("time"), tuple(zip(columns, units)))


# ------------------------------------------------------------- values in the text
def value_text(p: FreeParameter, si: float, digits: int = 17) -> str:
    """``si`` as a TOML value in the parameter's unit (``"2.5e-10 m^2/s"``, ``0.41``)."""
    shown = si / p.per_unit
    number = f"{shown:.{digits}g}"
    if p.dimension == "dimensionless":
        return number if re.search(r"[.eEn]", number) else number + ".0"
    return json.dumps(f"{number} {p.unit}")
