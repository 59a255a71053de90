"""Quantities in, SI floats out: the one place where units are parsed.

stratiflux keeps plain SI floats everywhere inside (m, s, kg). Text from scenario
files such as ``"0.05 m/yr"``, ``"5 cm/d"``, ``"1.6e-9 m^2/s"``, ``"120 mg/L"`` or
``"60 L/kg"`` is converted here, once, with a single pint registry (``ureg``).

Conventions
-----------
* ``yr`` / ``year`` / ``a`` is the Julian year, 365.25 d = 31 557 600 s, the year
  used by the IAU for astronomical constants and by pint's default definitions.
  A "calendar" year of 365 d differs by 0.07 %; write ``365 d`` if you mean that.
* ``d`` is the day (86 400 s), ``L`` the litre (1e-3 m3).
* ``ug``, ``mcg`` and ``µg`` are all the microgram.
* UDUNITS-style exponents are accepted in unit text: ``m3``, ``kg m-3``, ``m2/s``.
* ``y`` is read as ``yr`` too, so velocities and Darcy fluxes may be written ``mm/y``,
  ``mm/yr`` or ``mm/a`` (1 mm/yr = 1e-3 m / 31 557 600 s = 3.169e-11 m/s).
* ``%`` (percent, 1e-2) is accepted for dimensionless fractions: ``porosity = "35 %"``.
* ``ppm`` and ``ppb`` are accepted for dissolved concentrations in water only, as
  1 ppm = 1 mg/L and 1 ppb = 1 ug/L: a mass fraction of 1e-6 (1e-9) of a dilute aqueous
  solution whose density is taken as 1 kg/L (within 0.3 % from 0 to 40 C; the solute
  itself adds about 1e-6 per ppm).  Anywhere else they are refused as ambiguous: a soil's
  "ppm" may be by mass or volume, of dry or wet soil; ``ppt`` is parts per thousand or
  per trillion.
* ``mg/kg``, ``ug/kg`` and ``g/kg`` are mass fractions (dimension ``mass_fraction``, SI
  kg/kg): a soil concentration per mass of dry soil.  Their units must be a mass over a
  mass; a bare number or ``%`` is not read as one.
"""
from __future__ import annotations

import math
import numbers
import re
import sys


def _import_pint():
    """Import pint without letting it find Dask.

    On import pint asks ``importlib.util.find_spec("dask")`` and, when Dask is
    installed, imports ``dask.base`` (about 0.2 s, a tenth of a single run's start-up)
    for ``Quantity.compute/persist/visualize`` on Dask arrays. stratiflux never puts a
    Dask array in a quantity (units are converted to SI floats here, once), so while
    pint loads, ``sys.modules["dask"]`` is None, which ``find_spec`` reads as "not
    installed"; the entry is removed again at once, so Dask imports normally
    afterwards. Where Dask is already loaded (a site worker) pint is imported as usual.
    """
    if "pint" in sys.modules or "dask" in sys.modules:
        import pint
        return pint
    sys.modules["dask"] = None
    try:
        import pint
    finally:
        if sys.modules.get("dask", 0) is None:
            del sys.modules["dask"]
    return pint


pint = _import_pint()

__all__ = ["ureg", "UnitError", "DIMENSIONS", "to_si", "si_unit", "YEAR", "DAY", "MG_PER_L",
           "UG_PER_L", "MG_PER_M2", "LITRE_PER_KG", "PARTS_PER_IN_WATER"]



def _registry():
    """pint's default registry, its parsed definitions cached in the user's cache folder
    (pint's own ``cache_folder=":auto:"``: a start-up of about 0.05 s instead of 0.3 s);
    without a writable cache folder, the same registry parsed afresh."""
    try:
        return pint.UnitRegistry(cache_folder=":auto:")
    except Exception:  # noqa: BLE001 - any cache problem: parse the definitions instead
        return pint.UnitRegistry()


#: The project's single unit registry. Never create another one.
ureg = _registry()

# The Julian year, 365.25 d (IAU). pint's default definition is already this; the
# check protects against a future change of that default.
if not math.isclose(ureg.Quantity(1, "year").to("second").magnitude, 365.25 * 86400.0,
                    rel_tol=0, abs_tol=0):  # pragma: no cover - depends on pint's defaults
    raise ImportError("pint's year is not the Julian year (365.25 d); stratiflux relies on it")



def _unit_free(text: str, si: str) -> float:
    """The SI magnitude of one ``text``, derived once from the registry and rounded to 15
    significant digits (pint's conversions carry rounding noise such as 1 mg/L =
    0.0009999999999999998 kg/m3; the definitions themselves are exact decimals)."""
    return float(f"{ureg.Quantity(text).m_as(si):.15g}")


# Unit-free constants for output conversions, derived once (as MetPy's constants.nounit).
# Divide an SI value by one of them to express it in that unit: c / MG_PER_L is in mg/L.
#: The Julian year in seconds (31 557 600 s).
YEAR = _unit_free("1 year", "s")
#: The day in seconds.
DAY = _unit_free("1 day", "s")
#: One mg/L in kg m-3 (SI concentration).
MG_PER_L = _unit_free("1 mg/L", "kg/m^3")
#: One ug/L in kg m-3.
UG_PER_L = _unit_free("1 ug/L", "kg/m^3")
#: One mg/m2 in kg m-2 (mass per unit area).
MG_PER_M2 = _unit_free("1 mg/m^2", "kg/m^2")
#: One L/kg in m3 kg-1 (distribution coefficients).
LITRE_PER_KG = _unit_free("1 L/kg", "m^3/kg")

class UnitError(ValueError):
    """A value that is not a number with units of the expected dimension.

    Attributes ``where``, ``value``, ``dimension``, ``reason`` and ``example`` let
    callers build their own messages.
    """

    def __init__(self, message, where="", value=None, dimension="", reason="", example=""):
        super().__init__(message)
        self.where, self.value, self.dimension = where, value, dimension
        self.reason, self.example = reason, example


# name -> (pint dimensionality, SI unit text, example of a valid value)
DIMENSIONS = {
    "length": ("[length]", "m", '"0.8 m"'),
    "time": ("[time]", "s", '"5 yr"'),
    "velocity": ("[length] / [time]", "m/s", '"0.05 m/yr"'),
    "diffusivity": ("[length] ** 2 / [time]", "m^2/s", '"1.6e-9 m^2/s"'),
    "concentration": ("[mass] / [length] ** 3", "kg/m^3", '"120 mg/L"'),
    "density": ("[mass] / [length] ** 3", "kg/m^3", '"1.7 g/cm^3"'),
    "specific_volume": ("[length] ** 3 / [mass]", "m^3/kg", '"60 L/kg"'),
    "rate": ("1 / [time]", "1/s", '"0.1 1/d"'),
    "mass_flux": ("[mass] / [length] ** 2 / [time]", "kg/(m^2 s)", '"2 g/m^2/d"'),
    "mass_rate_density": ("[mass] / [length] ** 3 / [time]", "kg/(m^3 s)", '"0.5 mg/L/d"'),
    "dimensionless": ("", "1", "0.35"),
    "mass_fraction": ("", "kg/kg", '"2.5 mg/kg"'),
    "areal_mass": ("[mass] / [length] ** 2", "kg/m^2", '"40 g/m^2"'),
}

_DIMENSIONALITY = {name: ureg.get_dimensionality(spec[0]) for name, spec in DIMENSIONS.items()}

# A leading number, then the unit text.
_NUMBER = re.compile(r"^\s*([+-]?(?:\d+(?:\.\d*)?|\.\d+)(?:[eE][+-]?\d+)?|[+-]?(?:nan|inf|infinity))"
                     r"(?=$|[\s*/(a-zA-Zµμ%])\s*(.*?)\s*$", re.IGNORECASE)
# Unit text may only hold names, small exponents, * / ^ ( ) and spaces. This keeps the
# expression evaluator away from arbitrary input (e.g. huge powers).
_UNIT_TOKEN = re.compile(r"\s*(?:[A-Za-zµμ_%][A-Za-z_µμ]*(?:-?\d{1,2}(?![\d.]))?"
                         r"|(?:\*\*|\^)\s*[+-]?\d{1,2}(?:\.\d{1,3})?(?![\d.])"
                         r"|[*/()]|1(?![\d.]))")
_CHAINED_POWER = re.compile(r"(?:\*\*|\^)\s*[+-]?[\d.]+\s*(?:\*\*|\^)")
_UDUNITS_EXPONENT = re.compile(r"(?<=[A-Za-zµμ_])(-?\d{1,2})(?![\d.])")
# "y" alone (as in mm/y) is the year
_Y_YEAR = re.compile(r"(?<![A-Za-zµμ_])y(?![A-Za-zµμ_])")
# parts-per names: "ppm" in pint is a bare 1e-6 and "ppt" a volume (the pottle)
_PARTS_PER = re.compile(r"(?<![A-Za-zµμ_])(pp[mbtq]v?)(?![A-Za-zµμ_])", re.IGNORECASE)
#: What ppm and ppb mean for a dissolved concentration in water (dilute solution,
#: density 1 kg/L): the unit text they stand for.
PARTS_PER_IN_WATER = {"ppm": "mg/L", "ppb": "ug/L"}


def si_unit(dimension: str) -> str:
    """SI unit text used inside stratiflux for ``dimension`` (e.g. ``"m/s"``)."""
    return DIMENSIONS[dimension][1]


def _fail(value, dimension: str, where: str, reason: str) -> UnitError:
    example = DIMENSIONS[dimension][2] if dimension in DIMENSIONS else '"1 m"'
    what = "dimensionless number" if dimension == "dimensionless" else dimension.replace("_", " ")
    hint = "give a number" if dimension == "dimensionless" else "give a number with units"
    return UnitError(f"{where}: {value!r} is not a valid {what} ({reason}); "
                     f"{hint}, for example {example}", where, value, dimension, reason, example)


def _check_unit_text(unit_text: str) -> bool:
    pos = 0
    while pos < len(unit_text):
        match = _UNIT_TOKEN.match(unit_text, pos)
        if match is None or match.end() == pos:
            return False
        pos = match.end()
    return True


def _parse(text: str, dimension: str, where: str):
    match = _NUMBER.match(text)
    if match is None:
        raise _fail(text, dimension, where, "it does not start with a number")
    magnitude = float(match.group(1))
    unit_text = match.group(2)
    if (len(unit_text) > 80 or not _check_unit_text(unit_text)
            or _CHAINED_POWER.search(unit_text)):
        raise _fail(text, dimension, where, f"cannot read the units {unit_text!r}")
    unit_text = _parts_per(text, unit_text, dimension, where)
    unit_text = _Y_YEAR.sub("yr", unit_text)
    unit_text = _UDUNITS_EXPONENT.sub(r"**\1", unit_text)
    if unit_text.startswith("/"):
        unit_text = "1" + unit_text
    try:
        units = ureg.parse_units(unit_text) if unit_text else ureg.dimensionless
    except Exception as exc:  # pint raises many kinds (undefined unit, syntax ...)
        raise _fail(text, dimension, where, f"cannot read the units {unit_text!r}: {exc}") from None
    return ureg.Quantity(magnitude, units)


def _parts_per(text: str, unit_text: str, dimension: str, where: str) -> str:
    """``unit_text`` with ppm/ppb read as mg/L and ug/L for a dissolved concentration in
    water (:data:`PARTS_PER_IN_WATER`); a parts-per name anywhere else is refused."""
    found = _PARTS_PER.findall(unit_text)
    if not found:
        return unit_text
    name = found[0].lower()
    if dimension == "concentration" and unit_text.strip().lower() in PARTS_PER_IN_WATER:
        return PARTS_PER_IN_WATER[unit_text.strip().lower()]
    if dimension == "concentration":
        why = (f"{found[0]!r} is ambiguous (parts per thousand or per trillion)" if
               name.startswith("ppt") else f"{found[0]!r} can only stand alone here")
        reason = f"{why}; in water 1 ppm = 1 mg/L and 1 ppb = 1 ug/L"
    else:
        reason = (f"{found[0]!r} is only read as a dissolved concentration in water "
                  "(1 ppm = 1 mg/L, 1 ppb = 1 ug/L); here it is ambiguous (by mass or by "
                  "volume, of dry or wet soil): write the units, e.g. mg/kg, or a number")
    raise _fail(text, dimension, where, reason)


def to_si(value, dimension: str, where: str = "value") -> float:
    """Convert a quantity given as text (or a pint Quantity) to an SI float.

    Parameters
    ----------
    value : str, number or pint.Quantity
        Text such as ``"0.05 m/yr"`` or ``"120 mg/L"``. A bare number is only
        accepted for ``dimension="dimensionless"``.
    dimension : str
        One of the keys of :data:`DIMENSIONS`: length, time, velocity, diffusivity,
        concentration, density, specific_volume, rate, mass_flux,
        mass_rate_density, dimensionless, mass_fraction (a mass over a mass, e.g.
        ``"2.5 mg/kg"``).
    where : str
        Key path used in error messages, e.g. ``"layers[2].thickness"``.

    Returns
    -------
    float
        The magnitude in the SI unit of that dimension (see :func:`si_unit`).
        NaN and infinities are rejected.

    Raises
    ------
    UnitError
        Unparsable text, wrong dimension, missing units or a non-finite value. The
        message names ``where``, the value and an example of a valid value.
    """
    if dimension not in DIMENSIONS:
        raise ValueError(f"unknown dimension {dimension!r}; use one of {', '.join(DIMENSIONS)}")
    if isinstance(value, bool) or value is None:
        raise _fail(value, dimension, where, "not a number")
    if isinstance(value, pint.Quantity):
        quantity = value
    elif isinstance(value, numbers.Real):
        if dimension != "dimensionless":
            raise _fail(value, dimension, where, "units are missing")
        quantity = ureg.Quantity(float(value), ureg.dimensionless)
    elif isinstance(value, str):
        if len(value) > 200:
            raise _fail(value[:40] + "...", dimension, where, "text too long")
        quantity = _parse(value, dimension, where)
    else:
        raise _fail(value, dimension, where, f"a {type(value).__name__} is not a quantity")

    if quantity.dimensionality != _DIMENSIONALITY[dimension]:
        got = str(quantity.dimensionality) if quantity.dimensionality else "no units"
        raise _fail(value, dimension, where, f"its units have dimension {got}")
    try:
        if dimension == "dimensionless":
            magnitude = float(quantity.to(ureg.dimensionless).magnitude)
        else:
            magnitude = float(quantity.to_base_units().magnitude)
    except Exception as exc:  # pragma: no cover - dimension already checked
        raise _fail(value, dimension, where, str(exc)) from None
    if not math.isfinite(magnitude):
        raise _fail(value, dimension, where, "it is not a finite number")
    if dimension == "mass_fraction" and not _mass_over_mass(quantity):
        raise _fail(value, dimension, where, "its units are not a mass over a mass")
    return magnitude


def _mass_over_mass(quantity) -> bool:
    """Whether the units of ``quantity`` hold a mass both above and below the line
    (``mg/kg`` does; ``%`` or no units do not)."""
    mass = ureg.get_dimensionality("[mass]")
    powers = [power for name, power in quantity.unit_items()
              if ureg.get_dimensionality(name) == mass]
    return any(p > 0 for p in powers) and any(p < 0 for p in powers)
