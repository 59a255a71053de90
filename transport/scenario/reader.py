"""Reading scenario TOML values: the error type and the bound reader (file, key paths).

Every problem becomes a :class:`ScenarioError` naming the file, the key path, the value,
what is allowed and how to fix it.

Input files are read by :func:`read_input_file` only: a regular file (not a device, a
FIFO or a folder) of at most a stated size, UTF-8 with or without a byte-order mark.
Messages about a file name the path and what was expected and never echo its content.

Values are checked against the range the model can represent (:data:`DIMENSION_RANGES`,
:data:`KEY_RANGES`): a value outside it is refused up front with that range, instead of
overflowing in an engine.  A value the model represents but that lies outside the usual
field range of its key (:data:`PLAUSIBLE_RANGES`, each with its source) is accepted with a
:class:`PlausibilityWarning` naming the file, key, value, usual range and source, and the
percent reading where the value looks like a percentage (porosity 35: "35 %" = 0.35).
"""
from __future__ import annotations

import difflib
import os
import re
import stat
import tomllib
import warnings
from pathlib import Path

from transport.units import YEAR, UnitError, si_unit, to_si

__all__ = ["ScenarioError", "PlausibilityWarning", "PLAUSIBLE_RANGES", "plausibility",
           "percent_reading", "Reader", "MISSING", "read_text_file", "read_input_file",
           "parse_toml", "range_error",
           "DIMENSION_RANGES", "KEY_RANGES", "MAX_TOML_BYTES", "MAX_TABLE_BYTES",
           "MAX_NESTING"]

#: Marker of a key that is absent (distinct from a value of None, e.g. half_life = "none").
MISSING = object()

#: Largest scenario or site file read (bytes): a scenario is a few kB.
MAX_TOML_BYTES = 4 * 1024 ** 2
#: Largest CSV input read (bytes): 100,000 borings or log rows are a few MB.
MAX_TABLE_BYTES = 64 * 1024 ** 2
#: Deepest nesting of tables and lists in a TOML file (a scenario needs 5).
MAX_NESTING = 12

# magnitude limits (SI) of every value of a dimension: (smallest nonzero, largest, why)
DIMENSION_RANGES = {
    "length": (1e-9, 1e5, "lengths from 1 nm to 100 km (common practice: far beyond any "
               "soil column or site)"),
    "time": (0.0, 1e8 * YEAR, "times up to 1e8 yr (common practice: beyond the longest "
             "assessment horizons)"),
    "velocity": (0.0, 1e5 / YEAR, "velocities up to 1e5 m/yr (common practice)"),
    "diffusivity": (1e-20, 1e-7, "molecular diffusivities from 1e-20 to 1e-7 m^2/s: the "
                    "fastest free-water diffusivity, of H+, is about 9.3e-9 m^2/s at 25 C "
                    "(Li & Gregory 1974)"),
    "concentration": (0.0, 1e3, "dissolved concentrations up to 1e6 mg/L (a litre of water "
                      "weighs 1 kg, so no solute reaches more)"),
    "density": (10.0, 1e4, "densities from 0.01 to 10 g/cm^3 (common practice: soils are "
                "1.3-1.9 g/cm^3)"),
    "specific_volume": (0.0, 1e5, "partition coefficients up to 1e8 L/kg (common practice)"),
    "rate": (0.0, 1.0, "rates up to 1 1/s (common practice)"),
    "mass_flux": (0.0, 1.0, "mass fluxes up to 1 kg/(m^2 s) (common practice)"),
    "mass_rate_density": (0.0, 1e-2, "source rates up to 0.01 kg/(m^3 s), about 860 g/L/d "
                          "(common practice)"),
    "dimensionless": (0.0, 1e8, "numbers up to 1e8"),
    "areal_mass": (0.0, 1e5, "masses per area up to 100 t/m^2 (common practice: far beyond "
                   "any source zone)"),
}
# per key (the last part of a key path): (low, high, why); None leaves a side to the
# dimension's range
KEY_RANGES = {
    "half_life": (1.0, None, "half-lives of at least 1 s (a faster decay is over before "
                  "anything the model resolves)"),
    "darcy_flux": (None, 1e3 / YEAR, "Darcy fluxes up to 1000 m/yr in magnitude (common "
                   "practice: recharge is 0.01-0.5 m/yr, a flooded gravel basin a few m/d)"),
    "dispersivity": (None, 1e4, "dispersivities up to 1e4 m (common practice: field values "
                     "are about a tenth of the travel distance)"),
    "retardation_factor": (1e-2, 1e8, "retardation factors from 0.01 (anion exclusion) to "
                           "1e8 (common practice)"),
    "screening_level": (1e-12, None, "screening levels of at least 1e-9 mg/L = 1 pg/L "
                        "(common practice: below any drinking-water limit in use)"),
    "thickness": (1e-6, None, "layers of at least 1 um (common practice: a geomembrane is "
                  "1.5-2 mm)"),
    "porosity": (1e-4, None, "porosities of at least 1e-4"),
    "water_content": (1e-4, None, "water contents of at least 1e-4"),
    "partition_to_next": (1e-6, 1e6, "partition coefficients from 1e-6 to 1e6 (common "
                          "practice: organics into HDPE are 10-75, up to ~160, Nefso & "
                          "Burns 2007)"),
    "transfer_coefficient": (1e-20, None, "mass-transfer coefficients of at least 1e-20 m/s"),
}
#: Usual field ranges per key (the last part of a key path), SI: (low, high, shown unit,
#: SI per shown unit, source).  None leaves a side open.  Outside: a PlausibilityWarning.
PLAUSIBLE_RANGES = {
    "porosity": (0.25, 0.70, "", 1.0, "unconsolidated deposits, gravel 0.25-0.40 to clay "
                 "0.40-0.70 (Freeze & Cherry 1979, Groundwater, table 2.4); 1 is accepted "
                 "silently as the convention for a sheet modelled per its own volume"),
    "bulk_density": (1000.0, 2300.0, "g/cm^3", 1000.0, "mineral soils about 1.1-1.8, "
                     "compacted fill and clay liners up to about 2.2, peat far below 1 (from "
                     "memory)"),
    "organic_carbon_fraction": (None, 0.1, "", 1.0, "mineral soils and aquifer materials "
                                "about 0.0002-0.05; only organic soils and peat exceed 0.1 "
                                "(from memory)"),
    "organic_carbon_partition": (None, 1e4, "L/kg", 1e-3, "log Koc of organic chemicals "
                                 "from about 0 to 7, i.e. up to about 1e7 L/kg "
                                 "(from memory)"),
    "distribution_coefficient": (None, 10.0, "L/kg", 1e-3, "Kd of organics in soils "
                                 "about 0.01-1000 L/kg, of strongly sorbed metals up to "
                                 "about 1e4 L/kg (from memory)"),
    "half_life": (86400.0, None, "d", 86400.0, "biodegradation half-lives in soil and "
                  "groundwater run from days to years (from memory; compilations such as "
                  "Howard et al. 1991, Handbook of Environmental Degradation Rates)"),
    "darcy_flux": (None, 2.0 / YEAR, "m/yr", 1.0 / YEAR, "recharge through soil is "
                   "rarely above about 1 m/yr even in humid climates (precipitation minus "
                   "evapotranspiration); more means ponding or irrigation (from memory)"),
    "dispersivity": (None, 10.0, "m", 1.0, "field dispersivities are about a tenth of the "
                     "travel distance, above 10 m only over kilometres (Gelhar, Welty & "
                     "Rehfeldt 1992, Water Resour. Res. 28(7):1955)"),
}
#: Keys that are dimensionless fractions (a value above 1 may be a percentage).
FRACTION_KEYS = ("porosity", "water_content", "organic_carbon_fraction", "tortuosity")
_LAST_KEY = re.compile(r"([A-Za-z_]+)(?:\[\d+\])*\s*$")


class PlausibilityWarning(UserWarning):
    """A value the model accepts but that lies outside the usual field range of its key.

    Attributes ``file``, ``key``, ``value`` (as written), ``usual`` (the range, as text)
    and ``source`` let callers build their own messages; ``str()`` is one line.
    """

    def __init__(self, file, key, value, usual, source, hint=""):
        self.file, self.key, self.value, self.usual, self.source = (file, key, value, usual,
                                                                     source)
        text = (f"{file}: {key} = {_short(value)} is outside the usual range {usual} "
                f"({source})")
        super().__init__(text + (f"; {hint}" if hint else ""))


def _shown(x: float) -> str:
    return f"{x:.3g}"


def percent_reading(key: str, si: float):
    """The percent reading of a fraction that looks like a percentage, as text
    (``"did you mean 35 % = 0.35? write "35 %" or 0.35"``), or None."""
    name = _last_key(key)
    if name not in FRACTION_KEYS or not 0 < si <= 100:
        return None
    frac = si / 100.0
    low, high = PLAUSIBLE_RANGES.get(name, (None, 1.0))[:2]
    if si <= 1 and not ((low is None or frac >= low) and (high is None or frac <= high)):
        return None
    return f'did you mean {_shown(si)} % = {_shown(frac)}? write "{_shown(si)} %" or {_shown(frac)}'


def plausibility(key: str, si: float):
    """(usual range as text, source, hint) when ``si`` (SI) at ``key`` lies outside the
    usual field range of :data:`PLAUSIBLE_RANGES`, else None."""
    name = _last_key(key)
    spec = PLAUSIBLE_RANGES.get(name)
    if spec is None or si == 0 or (name == "porosity" and si == 1.0):
        return None
    low, high, unit, per, source = spec
    a = abs(si) if name == "darcy_flux" else si
    if (low is None or a >= low) and (high is None or a <= high):
        return None
    u = f" {unit}" if unit else ""
    usual = (f"{_shown(low / per)}-{_shown(high / per)}{u}" if low is not None and
             high is not None else f">= {_shown(low / per)}{u}" if low is not None else
             f"<= {_shown(high / per)}{u}")
    if name == "darcy_flux":
        usual = "|q| " + usual
    return usual, source, percent_reading(key, si) or "check the value and its units"


def _last_key(key: str):
    m = _LAST_KEY.search(str(key).rsplit(".", 1)[-1])
    return m.group(1) if m else None


class ScenarioError(ValueError):
    """A scenario problem: file, key path, value given, what is allowed, the fix."""

    def __init__(self, file, key, value=MISSING, problem="", allowed="", fix=""):
        self.file, self.key, self.problem, self.allowed, self.fix = file, key, problem, allowed, fix
        self.value = None if value is MISSING else value
        shown = "" if value is MISSING else f" = {_short(value)}"
        msg = f"{file}: {key}{shown}: {str(problem).rstrip('.')}"
        if allowed:
            msg += f". Allowed: {allowed}"
        if fix:
            msg += f". Fix: {fix}"
        super().__init__(msg)


def _short(value) -> str:
    try:
        text = repr(value)
    except RecursionError:  # pragma: no cover - nesting is refused before
        text = f"<a deeply nested {type(value).__name__}>"
    return text if len(text) <= 80 else text[:77] + "..."


def _key_range(key: str):
    m = _LAST_KEY.search(str(key).rsplit(".", 1)[-1])
    return KEY_RANGES.get(m.group(1)) if m else None


def range_error(key: str, dimension: str, si: float):
    """The reason ``si`` (SI) at ``key`` is outside what the model represents, or None."""
    tiny, huge, why = DIMENSION_RANGES.get(dimension, (0.0, None, ""))
    low_k = high_k = None
    special = _key_range(key)
    a = abs(si)
    slack = 1 + 1e-9  # a limit written in other units converts with rounding
    if special is not None:
        low_k, high_k, why_k = special
        if low_k is not None and 0 < a * slack < low_k:
            return why_k, low_k, high_k
        if high_k is not None and a > high_k * slack:
            return why_k, low_k, high_k
    if si != 0 and a * slack < tiny:
        return why, tiny, huge
    if huge is not None and a > huge * slack:
        return why, tiny, huge
    return None


class Reader:
    """Reads values out of parsed TOML of one file, converting to SI and validating.

    Every method raises (or :meth:`error` builds) a :class:`ScenarioError` naming the
    file, the key path, the value, what is allowed and the fix.

    Parameters
    ----------
    file : str
        The file name shown in messages (``"<string>"`` for text without a file).
    base_dir : pathlib.Path
        Folder that relative file names (``samples_file``, ``borings_file``) are read from.

    Examples
    --------
    >>> r = Reader("column.toml", Path("."))
    >>> r.quantity("2 cm", "length", "layers[1].thickness")
    0.02
    """

    def __init__(self, file: str, base_dir: Path):
        self.file, self.base_dir = file, base_dir
        self.warned = set()  # (key name, value) pairs already warned about

    def error(self, key, value=MISSING, problem="", allowed="", fix=""):
        """A :class:`ScenarioError` for this file (returned, for the caller to raise)."""
        return ScenarioError(self.file, key, value, problem, allowed, fix)

    def table(self, value, key, required=False):
        """``value`` checked to be a table (dict); an absent optional table is ``{}``."""
        if value is None and not required:
            return {}
        if not isinstance(value, dict):
            raise self.error(key, MISSING if value is None else value,
                             "missing" if value is None else "must be a table",
                             fix=f"add a [{key}] table")
        return value

    def keys(self, table, allowed, key):
        """Refuse a key of ``table`` not in ``allowed``, with a did-you-mean suggestion."""
        for name in table:
            if name not in allowed:
                close = difflib.get_close_matches(str(name), allowed, n=1, cutoff=0.6)
                hint = f"did you mean {close[0]!r}?" if close else "remove it"
                raise self.error(f"{key}.{name}" if key else str(name), problem="unknown key",
                                 allowed=", ".join(allowed), fix=hint)

    def quantity(self, value, dimension, key, low=None, high=None, low_open=False,
                 high_open=False):
        """A value with units (or a plain number) as an SI float, checked.

        Parameters
        ----------
        value : str or number
            As written in the file (``"0.2 m/yr"``).
        dimension : str
            A dimension of :data:`transport.units.DIMENSIONS` (``"length"``, ...).
        key : str
            Key path, for messages and for the per-key range of :data:`KEY_RANGES`.
        low, high : float, optional
            Limits in SI; ``low_open``/``high_open`` exclude the limit itself.

        Returns
        -------
        float
            The SI value, within the limits and the range the model represents
            (:func:`range_error`).  Outside the usual field range of its key
            (:func:`plausibility`) it is returned with a :class:`PlausibilityWarning`,
            once per value of a key in a file.
        """
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
                             fix=percent_reading(key, si) or "check the value and its units")
        bad = range_error(key, dimension, si)
        if bad is not None:
            why, lo, hi = bad
            raise self.error(key, value, f"{si:.3g}{unit} is outside what the model "
                             f"represents", allowed=why,
                             fix="check the value and its units")
        odd = plausibility(key, si)
        seen = (_last_key(key), repr(value))
        if odd is not None and seen not in self.warned:
            # once per value of a key: layers re-derived by an action read it again
            self.warned.add(seen)
            warnings.warn(PlausibilityWarning(self.file, key, value, *odd), stacklevel=2)
        return si

    def optional(self, table, name, dimension, key, default=None, **limits):
        """:meth:`quantity` of ``table[name]`` at ``key.name``, or ``default`` if absent."""
        if name not in table:
            return default
        return self.quantity(table[name], dimension, f"{key}.{name}", **limits)

    def text(self, table, name, key, default=None):
        """A text value (or ``default``); anything else is refused."""
        value = table.get(name, default)
        if value is not None and not isinstance(value, str):
            raise self.error(f"{key}.{name}" if key else name, value, "must be text",
                             fix="put it in quotes")
        return value

    def half_life(self, table, key):
        """A half-life in s; None for "none" (no decay); :data:`MISSING` if absent."""
        if "half_life" not in table:
            return MISSING
        value = table["half_life"]
        if isinstance(value, str) and value.strip().lower() in ("none", "inf", "infinite"):
            return None
        return self.quantity(value, "time", f"{key}.half_life", low=0, low_open=True)

    def input_file(self, raw, key, what, example="data.csv", limit=MAX_TABLE_BYTES):
        """(path, text) of a file named at ``key`` (relative to the scenario's folder):
        ``what`` says what it should hold, for messages."""
        if not isinstance(raw, str) or not raw.strip():
            raise self.error(key, raw, "must be a file name",
                             fix=f'e.g. {key.rsplit(".", 1)[-1]} = "{example}"')
        path = Path(raw) if Path(raw).is_absolute() else self.base_dir / raw
        problem = _file_problem(path, limit)
        fix = "check the path (relative to the file that names it)"
        if problem is None:
            try:
                text = _read_limited(path, limit)
            except (OSError, UnicodeError) as exc:
                problem, fix = _reason(exc), _fix_for(exc, fix)
            else:
                return path, text
        raise self.error(key, raw, f"cannot read {path} as {what}: {problem}", fix=fix)


def _reason(exc) -> str:
    if isinstance(exc, UnicodeDecodeError) and isinstance(exc.object, (bytes, bytearray)):
        data = bytes(exc.object)
        line = data.count(b"\n", 0, exc.start) + 1
        latin = data.decode("latin-1")
        accents = [c for c in latin if ord(c) > 127][:6]
        guess = (" (read as Latin-1 it would hold " + " ".join(repr(c) for c in accents)
                 + ": a file saved as Latin-1 / Windows-1252, as some spreadsheets do)"
                 if accents and all(c.isprintable() for c in accents) else "")
        return (f"it is not UTF-8 text: byte 0x{data[exc.start]:02X} on line {line} "
                f"cannot be read{guess}")
    if isinstance(exc, UnicodeError):
        return "it is not UTF-8 text"
    return exc.strerror or type(exc).__name__


#: The fix for a file that is not UTF-8.
ENCODING_FIX = ("save it as UTF-8 (a spreadsheet's 'CSV UTF-8' format, or a text editor's "
                "UTF-8 encoding), or convert it, e.g. iconv -f latin1 -t utf-8 old > new")


def _fix_for(exc, default: str) -> str:
    """The fix for a file that could not be read: re-encoding for text that is not
    UTF-8, else ``default``."""
    return ENCODING_FIX if isinstance(exc, UnicodeError) else default


def _file_problem(path: Path, limit: int):
    """Why ``path`` cannot be an input file (without opening it), or None."""
    try:
        info = os.stat(path)
    except OSError as exc:
        return _reason(exc)
    if stat.S_ISDIR(info.st_mode):
        return "it is a folder, not a file"
    if not stat.S_ISREG(info.st_mode):
        kind = ("a named pipe (FIFO)" if stat.S_ISFIFO(info.st_mode) else
                "a device" if stat.S_ISCHR(info.st_mode) or stat.S_ISBLK(info.st_mode)
                else "a socket" if stat.S_ISSOCK(info.st_mode) else "not a regular file")
        return f"it is {kind}, not a regular file"
    if info.st_size > limit:
        return (f"it holds {info.st_size / 1024 ** 2:.1f} MB, more than the "
                f"{limit / 1024 ** 2:.0f} MB an input file of this kind may have")
    return None


def _read_limited(path: Path, limit: int) -> str:
    with open(path, "rb") as fh:
        data = fh.read(limit + 1)
    if len(data) > limit:
        raise OSError(0, f"it holds more than {limit / 1024 ** 2:.0f} MB")
    return data.decode("utf-8-sig")


def read_input_file(path, limit: int = MAX_TOML_BYTES, what: str = "a scenario file (TOML)"):
    """The UTF-8 text (a byte-order mark is dropped) of an input file, or a ScenarioError
    naming the path and what was expected.  Devices, FIFOs and folders are refused
    before they are opened, files larger than ``limit`` bytes before they are read."""
    problem, fix = _file_problem(Path(path), limit), "check the path"
    if problem is None:
        try:
            return _read_limited(Path(path), limit)
        except (OSError, UnicodeError) as exc:
            problem, fix = _reason(exc), _fix_for(exc, fix)
    raise ScenarioError(str(path), "(file)", problem=f"cannot read it as {what}: {problem}",
                        fix=fix)


def read_text_file(path) -> str:
    """The UTF-8 text of a scenario or site file, or a ScenarioError naming it."""
    return read_input_file(path)


def _depth(data) -> int:
    """Deepest nesting of tables and lists in parsed TOML (iterative: no recursion)."""
    deepest, stack = 0, [(data, 1)]
    while stack:
        node, d = stack.pop()
        deepest = max(deepest, d)
        if deepest > MAX_NESTING:
            break
        if isinstance(node, dict):
            stack.extend((v, d + 1) for v in node.values() if isinstance(v, (dict, list)))
        elif isinstance(node, list):
            stack.extend((v, d + 1) for v in node if isinstance(v, (dict, list)))
    return deepest


def parse_toml(r: Reader, text: str) -> dict:
    """TOML text as a dict, or a ScenarioError (syntax, nesting deeper than
    :data:`MAX_NESTING`)."""
    if not isinstance(text, str):
        raise r.error("(file)", problem="scenario text must be a string")
    if text.startswith("\ufeff"):  # a byte-order mark, as CSV files may carry
        text = text[1:]
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise r.error("(TOML syntax)", problem=str(exc), fix="correct the TOML syntax "
                      "(strings with units need quotes)") from None
    except RecursionError:
        data = None
    if data is None or _depth(data) > MAX_NESTING:
        raise r.error("(TOML syntax)", problem="tables or lists nested more than "
                      f"{MAX_NESTING} levels deep", allowed="a scenario needs at most 5 "
                      "levels", fix="remove the extra brackets")
    return data
