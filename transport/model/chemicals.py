"""Chemical property table shipped with stratiflux (``transport/data/chemicals.csv``).

Every value in the table carries its source in the column next to it: a named
publication, "common practice" or "from memory" (to be re-checked before a decision
rests on it). Half-lives are site-specific ranges, given for sensitivity runs; a
scenario applies decay only when it states a half-life itself.

Columns: name, aliases (";"-separated), free_water_diffusivity_m2_s,
diffusivity_source, koc_L_kg ("n/a" where organic carbon does not control sorption,
e.g. metals), koc_source, half_life_low_d, half_life_high_d ("inf": no decay),
half_life_source, formula (molecular formula; the molar mass follows from the IUPAC
atomic weights, :data:`ATOMIC_WEIGHTS`).
"""
from __future__ import annotations

import csv
import difflib
import functools
import io
import math
import re
from dataclasses import dataclass
from importlib import resources

from transport.units import DAY, LITRE_PER_KG

__all__ = ["Chemical", "ChemicalError", "load_table", "lookup", "names", "normalise_name",
           "molar_mass", "ATOMIC_WEIGHTS"]

COLUMNS = ("name", "aliases", "free_water_diffusivity_m2_s", "diffusivity_source",
           "koc_L_kg", "koc_source", "half_life_low_d", "half_life_high_d",
           "half_life_source", "formula")

#: Conventional atomic weights (g/mol) of the elements in the table: IUPAC Commission on
#: Isotopic Abundances and Atomic Weights, standard atomic weights 2021 (abridged /
#: conventional values; from memory).
ATOMIC_WEIGHTS = {"H": 1.008, "C": 12.011, "N": 14.007, "O": 15.999, "Cl": 35.45,
                  "Cd": 112.41, "Pb": 207.2}


def molar_mass(formula: str) -> float:
    """Molar mass (kg/mol) of a molecular formula such as ``"C2HCl3"``."""
    parts = re.findall(r"([A-Z][a-z]?)(\d*)", formula)
    if not parts or "".join(e + n for e, n in parts) != formula:
        raise ChemicalError(f"formula {formula!r} is not a plain molecular formula")
    total = 0.0
    for element, count in parts:
        if element not in ATOMIC_WEIGHTS:
            raise ChemicalError(f"formula {formula!r}: no atomic weight for {element}")
        total += ATOMIC_WEIGHTS[element] * (int(count) if count else 1)
    return total / 1000.0


class ChemicalError(ValueError):
    """Unknown chemical name, or a malformed property table."""


@dataclass(frozen=True)
class Chemical:
    """One row of the property table, in SI units.

    free_water_diffusivity : m2 s-1 (25 C)
    organic_carbon_partition : Koc, m3 kg-1; None where not applicable (metals)
    half_life_low, half_life_high : s; inf means no decay
    *_source : provenance text of each value
    """

    name: str
    aliases: tuple
    free_water_diffusivity: float
    diffusivity_source: str
    organic_carbon_partition: float | None
    koc_source: str
    half_life_low: float
    half_life_high: float
    half_life_source: str
    formula: str = ""

    @property
    def molar_mass(self) -> float:
        """kg/mol, from :attr:`formula`."""
        return molar_mass(self.formula)


def normalise_name(name: str) -> str:
    """Case-, space- and hyphen-insensitive key for chemical names."""
    return re.sub(r"[\s\-_]+", "", str(name).casefold())


def _number(text: str, row: int, column: str, allow_na: bool = False):
    text = text.strip()
    if allow_na and text.lower() == "n/a":
        return None
    try:
        value = float(text)
    except ValueError:
        raise ChemicalError(f"chemicals.csv row {row}, column {column}: {text!r} is not a "
                            "number") from None
    if math.isnan(value) or value < 0:
        raise ChemicalError(f"chemicals.csv row {row}, column {column}: {text!r} must be >= 0")
    return value


def parse_table(text: str) -> tuple:
    """Parse the CSV text of a property table into :class:`Chemical` rows."""
    reader = csv.DictReader(io.StringIO(text))
    if tuple(reader.fieldnames or ()) != COLUMNS:
        raise ChemicalError(f"chemicals.csv header must be {','.join(COLUMNS)}")
    rows = []
    for i, rec in enumerate(reader, start=2):
        for col in COLUMNS:
            if col != "aliases" and not (rec.get(col) or "").strip():
                raise ChemicalError(f"chemicals.csv row {i}: column {col} is empty")
        koc = _number(rec["koc_L_kg"], i, "koc_L_kg", allow_na=True)
        rows.append(Chemical(
            name=rec["name"].strip(),
            aliases=tuple(a.strip() for a in rec["aliases"].split(";") if a.strip()),
            free_water_diffusivity=_number(rec["free_water_diffusivity_m2_s"], i,
                                           "free_water_diffusivity_m2_s"),
            diffusivity_source=rec["diffusivity_source"].strip(),
            organic_carbon_partition=None if koc is None else koc * LITRE_PER_KG,
            koc_source=rec["koc_source"].strip(),
            half_life_low=_number(rec["half_life_low_d"], i, "half_life_low_d") * DAY,
            half_life_high=_number(rec["half_life_high_d"], i, "half_life_high_d") * DAY,
            half_life_source=rec["half_life_source"].strip(),
            formula=rec["formula"].strip(),
        ))
    return tuple(rows)


@functools.lru_cache(maxsize=1)
def load_table() -> tuple:
    """The shipped property table, read once with importlib.resources."""
    text = resources.files("transport").joinpath("data/chemicals.csv").read_text(encoding="utf-8")
    return parse_table(text)


@functools.lru_cache(maxsize=1)
def _index() -> dict:
    index = {}
    for chem in load_table():
        for key in (chem.name, *chem.aliases):
            index[normalise_name(key)] = chem
    return index


def names() -> list:
    """Canonical names in the table, in table order."""
    return [chem.name for chem in load_table()]


def lookup(name: str) -> Chemical:
    """Find a chemical by name or alias, ignoring case, spaces and hyphens.

    Raises
    ------
    ChemicalError
        Unknown name; the message suggests the closest names (difflib) and lists
        how to give the properties directly instead.
    """
    key = normalise_name(name)
    index = _index()
    if key in index:
        return index[key]
    spelled = {normalise_name(k): k for chem in load_table() for k in (chem.name, *chem.aliases)}
    close = difflib.get_close_matches(key, list(spelled), n=3, cutoff=0.6)
    hint = (" Did you mean " + " or ".join(repr(spelled[c]) for c in close) + "?") if close else ""
    raise ChemicalError(
        f"chemical {name!r} is not in the property table.{hint} Known: {', '.join(names())}. "
        "Or leave out the name and give free_water_diffusivity (and Koc, half-life) directly.")
