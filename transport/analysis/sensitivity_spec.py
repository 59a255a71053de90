"""The ``[sensitivity]`` table of a scenario file: metric, inputs, ranges, distributions.

::

    [sensitivity]
    metric = "peak_concentration"    # see METRICS
    window = "design-life"           # or "whole-run" (default: design-life if given)
    samples = 64                     # base sample size N of the variance-based part
    seed = 20250101                  # optional; omitted: one is drawn and reported
    resamples = 1000                 # bootstrap resamples of the intervals
    confidence = 0.95

    [[sensitivity.inputs]]
    key = "layers[2].organic_carbon_fraction"   # a key path of this file
    low = "0.1 %"                    # one-at-a-time range, units as the key
    high = "1 %"

    [[sensitivity.inputs]]
    key = "flow.darcy_flux"
    distribution = "lognormal"       # normal | lognormal | uniform | triangular
    median = "0.12 m/yr"
    log_sd = 0.4
    lower = "0.02 m/yr"              # optional truncation

Key paths are the scenario's own (``layers[2].porosity``, lists counted from 1); the
base value is the one the scenario gives there, so the key must be given in the file.
The one-at-a-time range is ``low``/``high``; an input with a distribution and no range
(``normal``, ``lognormal``) varies between the 5th and 95th percentiles of its
distribution (uniform and triangular: their own ``low``/``high``). Inputs given with a
distribution take part in the variance-based indices; the others stay at their base
values there. Distributions are those of :mod:`transport.site.uncertainty`.

Every problem raises :class:`~transport.scenario.reader.ScenarioError` naming the file,
the key path, the value and the fix.
"""
from __future__ import annotations

import difflib
import re
from dataclasses import dataclass

from transport.analysis.sensitivity_keys import VARIABLE_OUTPUT_KEYS, get_value, parse_key_path
from transport.analysis.sobol import MAX_SAMPLES, MIN_SAMPLES
from transport.scenario.reader import MISSING, Reader
from transport.site.uncertainty import DISTRIBUTION_PARAMETERS, Distribution
from transport.units import MG_PER_L, MG_PER_M2, YEAR, UnitError, to_si

__all__ = ["METRICS", "WINDOWS", "SENSITIVITY_KEYS", "INPUT_KEYS", "OAT_PERCENTILES",
           "Metric", "SensitivityInput", "SensitivitySpec", "read_sensitivity", "MAX_RUNS"]


@dataclass(frozen=True)
class Metric:
    """A receptor metric: its field of :class:`transport.analysis.metrics.ReceptorMetrics`,
    words, shown unit (and SI per shown unit), UDUNITS unit of the SI value, and whether
    it needs a screening level."""

    name: str
    field: str
    label: str
    unit: str
    per_unit: float
    udunits: str
    needs_level: bool = False


METRICS = {m.name: m for m in (
    Metric("peak_concentration", "peak_concentration", "peak concentration", "mg/L",
           MG_PER_L, "kg m-3"),
    Metric("peak_time", "peak_time", "time of the peak", "yr", YEAR, "s"),
    Metric("first_exceedance", "first_exceedance", "first exceedance of the screening "
           "level", "yr", YEAR, "s", True),
    Metric("time_above_level", "time_above_level", "time above the screening level", "yr",
           YEAR, "s", True),
    Metric("mass_to_receptor", "cumulative_mass", "mass to the receptor", "mg/m^2",
           MG_PER_M2, "kg m-2"),
)}
_METRIC_ALIASES = {"peak": "peak_concentration"}
WINDOWS = ("design-life", "whole-run")
SENSITIVITY_KEYS = ("metric", "window", "samples", "seed", "resamples", "confidence",
                    "inputs")
INPUT_KEYS = ("key", "low", "high", "distribution", "lower", "upper")
#: Percentiles of a distribution used as the one-at-a-time range when none is given.
OAT_PERCENTILES = (0.05, 0.95)
#: Most model runs one study may ask for (N (d + 2) plus the one-at-a-time runs).
MAX_RUNS = 200_000
#: Top-level tables whose values may not be varied: text, grids and the study itself.
_FIXED = ("title", "sensitivity", "alternatives")
# dimensions tried, in this order, to read the base value of a key (mass fractions
# before plain numbers: "25 mg/kg" is both)
_DIMENSION_ORDER = ("mass_fraction", "dimensionless", "length", "time", "velocity",
                    "diffusivity", "concentration", "specific_volume", "rate", "mass_flux",
                    "mass_rate_density")
_UNIT_TEXT = re.compile(r"^\s*[+-]?(?:\d+(?:\.\d*)?|\.\d+)(?:[eE][+-]?\d+)?\s*(.*?)\s*$")


@dataclass(frozen=True)
class SensitivityInput:
    """One input of a study (SI floats; ``unit`` and ``per_unit`` for display).

    ``key``: key path in the scenario; ``dimension``: of :data:`transport.units.DIMENSIONS`;
    ``base``, ``low``, ``high``: SI; ``range_source``: "given" or "5th-95th percentile";
    ``distribution``: a :class:`~transport.site.uncertainty.Distribution` or None.
    """

    key: str
    path: tuple
    dimension: str
    unit: str
    per_unit: float
    base: float
    low: float
    high: float
    range_source: str
    distribution: Distribution | None = None

    def shown(self, si: float) -> str:
        """``si`` in the unit the scenario gives this key in (``"0.25 %"``)."""
        text = f"{si / self.per_unit:.4g}"
        return f"{text} {self.unit}".strip()


@dataclass(frozen=True)
class SensitivitySpec:
    """The validated ``[sensitivity]`` table."""

    metric: Metric
    window: str
    samples: int
    seed: int | None
    resamples: int
    confidence: float
    inputs: tuple

    @property
    def sampled(self) -> tuple:
        """The inputs given as distributions (those of the variance-based indices)."""
        return tuple(i for i in self.inputs if i.distribution is not None)


# ---------------------------------------------------------------------- the table
def _base_dimension(r, value, where, shown, key):
    """(dimension, unit text, SI per unit, SI value) of a scenario's base value."""
    if isinstance(value, bool) or not isinstance(value, (int, float, str)):
        raise r.error(where, shown, f"{key} is a {type(value).__name__}, not a value",
                      fix="name a single number or quantity of the scenario "
                          "(a key inside a table, with its list index)")
    if not isinstance(value, str):
        return "dimensionless", "", 1.0, float(value)
    for dim in _DIMENSION_ORDER:
        try:
            si = to_si(value, dim, key)
        except UnitError:
            continue
        unit = _UNIT_TEXT.match(value).group(1)
        per_unit = to_si(f"1 {unit}", dim, key) if unit else 1.0
        return dim, unit, per_unit, si
    raise r.error(where, shown, f"the scenario gives {key} = {value!r}, not a number",
                  fix="vary a numeric key (give a number in the scenario, e.g. half_life "
                      "= \"5 yr\" instead of \"none\")")


def _metric(r, table):
    name = table.get("metric", MISSING)
    if name is MISSING:
        raise r.error("sensitivity.metric", problem="missing", allowed=", ".join(METRICS),
                      fix='add metric = "peak_concentration" (or another metric)')
    name = _METRIC_ALIASES.get(name, name)
    if name not in METRICS:
        close = difflib.get_close_matches(str(name), list(METRICS), n=1, cutoff=0.5)
        raise r.error("sensitivity.metric", table["metric"], "unknown metric",
                      allowed=", ".join(METRICS),
                      fix=f"did you mean {close[0]!r}?" if close else "pick one of them")
    return METRICS[name]


def _whole(r, table, name, default, low, high):
    value = table.get(name, default)
    if isinstance(value, bool) or not isinstance(value, int) or not low <= value <= high:
        raise r.error(f"sensitivity.{name}", value, "must be a whole number",
                      allowed=f"{low} to {high}", fix=f"e.g. {name} = {default or 64}")
    return value


def _samples(r, table):
    n = _whole(r, table, "samples", 64, MIN_SAMPLES, MAX_SAMPLES)
    if n & (n - 1):
        below = 1 << (n.bit_length() - 1)
        raise r.error("sensitivity.samples", n, "must be a power of two (the balance of "
                      "the Sobol' sequence)", fix=f"use {below} or {2 * below}")
    return n


def _distribution(r, t, key, inp_key, dim, shown):
    kind = t["distribution"]
    if kind not in DISTRIBUTION_PARAMETERS:
        close = difflib.get_close_matches(str(kind), list(DISTRIBUTION_PARAMETERS), n=1)
        raise r.error(f"{key}.distribution", kind, "unknown distribution",
                      allowed=" | ".join(DISTRIBUTION_PARAMETERS),
                      fix=f"did you mean {close[0]!r}?" if close else "pick one of them")
    names = DISTRIBUTION_PARAMETERS[kind]
    r.keys(t, INPUT_KEYS + names, key)
    values = []
    for pn in names:
        if pn not in t:
            raise r.error(f"{key}.{pn}", problem=f"missing for a {kind} distribution",
                          fix="give " + ", ".join(names) + " (units as the key)")
        values.append(_si(r, t[pn], "dimensionless" if pn == "log_sd" else dim,
                          f"{key}.{pn}", shown))
    lower = _si(r, t["lower"], dim, f"{key}.lower", shown) if "lower" in t else None
    upper = _si(r, t["upper"], dim, f"{key}.upper", shown) if "upper" in t else None
    try:
        dist = Distribution(inp_key, kind, tuple(values), lower, upper)
    except ValueError as exc:
        raise r.error(key, problem=str(exc), fix="correct the distribution's "
                      "parameters") from None
    if dist.degenerate:
        raise r.error(key, problem=f"the {kind} distribution has no spread",
                      fix="give it a spread, or a low/high range without a distribution")
    if dist.support_min() < 0 and dim != "velocity":
        raise r.error(f"{key}.lower", problem=f"the {kind} distribution can draw negative "
                      f"values of {inp_key}", fix="add a lower bound, e.g. lower = 0 "
                      "(in the units of the key)")
    return dist


def _si(r, raw, dim, key, shown):
    try:
        return to_si(raw, dim, key)
    except UnitError as exc:
        what = "a plain number" if dim == "dimensionless" else \
            f"{dim.replace('_', ' ')} units like the scenario's value"
        raise r.error(key, raw, f"not a valid value for {shown}: {exc.reason}",
                      allowed=what, fix=f"write e.g. {key.rsplit('.', 1)[-1]} = "
                      f"{exc.example}") from None


def _input(r, data, t, j):
    key = f"sensitivity.inputs[{j}]"
    t = r.table(t, key, required=True)
    raw_key = t.get("key", MISSING)
    if raw_key is MISSING:
        raise r.error(f"{key}.key", problem="missing",
                      fix='add key = "layers[2].organic_carbon_fraction" (a key path of '
                          "the scenario)")
    path = parse_key_path(raw_key)
    if path is None:
        raise r.error(f"{key}.key", raw_key, "not a key path",
                      allowed='names joined by dots, list indices from 1 in brackets: '
                      '"layers[2].porosity", "flow.darcy_flux"', fix="correct the key path")
    inp_key = ".".join(n + "".join(f"[{i}]" for i in idx) for n, idx in path)
    top = path[0][0]
    if top in _FIXED or (top == "output" and (len(path) != 2 or path[1][0]
                                              not in VARIABLE_OUTPUT_KEYS)):
        raise r.error(f"{key}.key", raw_key, "this key cannot be varied",
                      allowed="physical inputs (chemical, flow, layers, top, bottom, "
                      "initial, actions) and output.screening_level, output.receptor_depth",
                      fix="vary a physical input")
    if "distribution" not in t:
        r.keys(t, INPUT_KEYS[:4], key)
    base_raw = get_value(r, data, path, f"{key}.key", raw_key)
    dim, unit, per_unit, base = _base_dimension(r, base_raw, f"{key}.key", raw_key, inp_key)
    has_low, has_high = "low" in t, "high" in t
    if has_low != has_high and t.get("distribution") != "triangular":
        missing = "high" if has_low else "low"
        raise r.error(f"{key}.{missing}", problem="missing: low and high come together",
                      fix=f"add {missing} (units as the key)")
    if has_low and has_high:
        low = _si(r, t["low"], dim, f"{key}.low", inp_key)
        high = _si(r, t["high"], dim, f"{key}.high", inp_key)
        if low > high:
            raise r.error(f"{key}.low", t["low"], f"is above high = {t['high']!r} "
                          "(reversed bounds)", fix="swap low and high")
        if low == high:
            raise r.error(f"{key}.high", t["high"], "equals low: the input would not vary",
                          fix="widen the range, or remove the input")
    dist = None
    if "distribution" in t:
        dist = _distribution(r, t, key, inp_key, dim, inp_key)
    if has_low and has_high:
        source = "given"
    elif dist is not None:
        low, high = (float(v) for v in dist.ppf(list(OAT_PERCENTILES)))
        source = "5th-95th percentile"
    else:
        raise r.error(key, problem=f"no range for {inp_key}",
                      fix='give low and high (e.g. low = "0.1 %", high = "1 %"), or a '
                          "distribution")
    if not low <= base <= high:
        per = per_unit or 1.0
        raise r.error(f"{key}.key", raw_key, f"the scenario's value {base_raw!r} "
                      f"({base / per:.4g} {unit}) lies outside the range "
                      f"{low / per:.4g} to {high / per:.4g} {unit} ({source})".rstrip(),
                      fix=("widen low/high to include the scenario's value, or change the "
                           "scenario" if source == "given" else "give low and high "
                           "around the scenario's value, or centre the distribution on "
                           "it"))
    return SensitivityInput(inp_key, path, dim, unit, per_unit, base, low, high, source,
                            dist)


def read_sensitivity(r: Reader, data: dict, design_life, screening_level) -> SensitivitySpec:
    """The validated ``[sensitivity]`` table of a parsed scenario ``data``.

    Parameters
    ----------
    r : Reader
        Reader of the scenario file (messages name it).
    data : dict
        The parsed TOML of the scenario.
    design_life, screening_level : float or None
        Of the base scenario (SI): a window or metric that needs them is refused
        without them.

    Returns
    -------
    SensitivitySpec
    """
    t = data.get("sensitivity", MISSING)
    if t is MISSING:
        raise r.error("sensitivity", problem="missing: the scenario has no [sensitivity] "
                      "table", fix='add [sensitivity] with metric = "peak_concentration" '
                      'and [[sensitivity.inputs]] tables (key, low, high)')
    t = r.table(t, "sensitivity", required=True)
    r.keys(t, SENSITIVITY_KEYS, "sensitivity")
    metric = _metric(r, t)
    if metric.needs_level and screening_level is None:
        raise r.error("sensitivity.metric", t["metric"], "needs a screening level",
                      fix="add output.screening_level to the scenario")
    window = t.get("window", "design-life" if design_life else "whole-run")
    if window not in WINDOWS:
        raise r.error("sensitivity.window", window, "unknown window",
                      allowed=" | ".join(WINDOWS), fix='write window = "design-life"')
    if window == "design-life" and not design_life:
        raise r.error("sensitivity.window", window, "the scenario has no design life",
                      fix='add output.design_life, or write window = "whole-run"')
    samples = _samples(r, t)
    seed = t.get("seed")
    if seed is not None and (isinstance(seed, bool) or not isinstance(seed, int)
                             or not 0 <= seed < 2 ** 63):
        raise r.error("sensitivity.seed", seed, "must be a whole number >= 0",
                      fix="e.g. seed = 20250101, or leave it out")
    resamples = _whole(r, t, "resamples", 1000, 0, 100_000)
    confidence = t.get("confidence", 0.95)
    if isinstance(confidence, bool) or not isinstance(confidence, (int, float)) \
            or not 0.5 <= confidence < 1:
        raise r.error("sensitivity.confidence", confidence, "must be a number",
                      allowed="0.5 to 0.999", fix="e.g. confidence = 0.95")
    raw = t.get("inputs", MISSING)
    if not isinstance(raw, list) or not raw:
        raise r.error("sensitivity.inputs", raw, "at least one [[sensitivity.inputs]] table "
                      "is needed", fix='add [[sensitivity.inputs]] with key, low and high')
    inputs = tuple(_input(r, data, p, j) for j, p in enumerate(raw, start=1))
    seen = set()
    for j, inp in enumerate(inputs, start=1):
        if inp.key in seen:
            raise r.error(f"sensitivity.inputs[{j}].key", inp.key, "listed twice",
                          fix="keep one input per key")
        seen.add(inp.key)
    n_sampled = sum(1 for i in inputs if i.distribution is not None)
    runs = 2 * len(inputs) + 1 + (samples * (n_sampled + 2) if n_sampled else 0)
    if runs > MAX_RUNS:
        raise r.error("sensitivity.samples", samples, f"asks for {runs} model runs",
                      allowed=f"at most {MAX_RUNS}", fix="use fewer samples")
    return SensitivitySpec(metric, window, samples, seed, resamples, float(confidence),
                           inputs)
