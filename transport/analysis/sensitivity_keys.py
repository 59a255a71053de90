"""Key paths and TOML text of a scenario: the plumbing of ``stratiflux sensitivity``.

A key path names one value of a scenario file the way its error messages do:
``layers[2].organic_carbon_fraction``, ``flow.darcy_flux``, ``top.concentration``
(names joined by dots, list indices counted from 1). :func:`with_values` writes values
into a copy of the parsed TOML, and :func:`toml_text` turns it back into TOML text for
:func:`transport.scenario.schema.parse_scenario` (so every run of a study is read,
checked and derived exactly as a scenario file is).
"""
from __future__ import annotations

import copy
import datetime as dt
import difflib
import json
import math
import re

from transport.scenario.layers import CHEMICAL_KEYS, LAYER_KEYS
from transport.scenario.reader import Reader
from transport.scenario.schema import BOUNDARY_VALUE_KEYS, FLOW_KEYS
from transport.units import si_unit

__all__ = ["parse_key_path", "get_value", "with_values", "toml_text", "value_text",
           "VARIABLE_OUTPUT_KEYS"]

#: The ``[output]`` keys a study may vary (the others set the grid).
VARIABLE_OUTPUT_KEYS = ("screening_level", "receptor_depth")
_SEGMENT = re.compile(r"^([A-Za-z_][A-Za-z0-9_-]*)((?:\[\d+\])*)$")


# --------------------------------------------------------------------- TOML writing
def _toml_key(name: str) -> str:
    return name if re.fullmatch(r"[A-Za-z0-9_-]+", name) else json.dumps(name)


def _toml_value(value) -> str:
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, int):
        return str(value)
    if isinstance(value, float):
        if math.isnan(value):
            return "nan"
        if math.isinf(value):
            return "inf" if value > 0 else "-inf"
        return repr(value)
    if isinstance(value, str):
        return json.dumps(value, ensure_ascii=False).replace("\x7f", "\\u007f")
    if isinstance(value, (dt.datetime, dt.date, dt.time)):
        return value.isoformat()
    if isinstance(value, dict):
        return "{" + ", ".join(f"{_toml_key(k)} = {_toml_value(v)}"
                               for k, v in value.items()) + "}"
    if isinstance(value, list):
        return "[" + ", ".join(_toml_value(v) for v in value) + "]"
    raise TypeError(f"cannot write a {type(value).__name__} as TOML")


def toml_text(data: dict) -> str:
    """TOML text of parsed TOML ``data`` (as :func:`tomllib.loads` returns it), one
    top-level key a line with inline tables: ``tomllib.loads(toml_text(d)) == d``."""
    return "".join(f"{_toml_key(k)} = {_toml_value(v)}\n" for k, v in data.items())


# ------------------------------------------------------------------------ key paths
def parse_key_path(text) -> tuple:
    """``"layers[2].porosity"`` -> ``(("layers", (2,)), ("porosity", ()))``, or None
    when ``text`` is not a key path (indices count from 1)."""
    if not isinstance(text, str) or not text.strip():
        return None
    out = []
    for part in text.strip().split("."):
        m = _SEGMENT.match(part)
        if m is None:
            return None
        indices = tuple(int(i) for i in re.findall(r"\[(\d+)\]", m.group(2)))
        if any(i < 1 for i in indices):
            return None
        out.append((m.group(1), indices))
    return tuple(out)


def _known_keys(table_path: str) -> tuple:
    """Keys the schema knows in the table at ``table_path`` (for did-you-mean)."""
    if table_path.startswith("layers"):
        return LAYER_KEYS
    if table_path == "chemical":
        return CHEMICAL_KEYS
    if table_path == "flow":
        return FLOW_KEYS
    if table_path in ("top", "bottom"):
        return tuple({k for ks in BOUNDARY_VALUE_KEYS.values() for k in ks})
    if table_path == "output":
        return VARIABLE_OUTPUT_KEYS
    return ()


def _joined(path) -> str:
    return ".".join(n + "".join(f"[{i}]" for i in idx) for n, idx in path)


def get_value(r: Reader, data: dict, path: tuple, where: str, shown: str):
    """The value at ``path`` in ``data``, or a ScenarioError at ``where`` (the
    ``sensitivity.inputs[j].key``) naming the missing part and the fix."""
    node, walked, full = data, "", _joined(path)
    for k, (name, indices) in enumerate(path):
        here = f"{walked}.{name}" if walked else name
        if isinstance(node, list):
            raise r.error(where, shown, f"{walked} is a list (of {len(node)})",
                          fix=f"give the index, counted from 1, e.g. {walked}[1].{name}")
        if not isinstance(node, dict):
            raise r.error(where, shown, f"{walked} is not a table",
                          fix=f"name a key inside a table, not inside {walked}")
        if name not in node:
            known = sorted(set(node) | set(_known_keys(walked)))
            close = difflib.get_close_matches(name, known, n=1, cutoff=0.6)
            if name in _known_keys(walked) or (not walked and name in ("chemical", "flow")):
                raise r.error(where, shown, f"the scenario does not give {here}",
                              fix=f"give {full} in the scenario (its value is the base "
                                  "value of the one-at-a-time runs)")
            fixed = _joined(path[:k] + ((close[0], indices),) + path[k + 1:]) if close \
                else None
            raise r.error(where, shown, f"unknown key {here!r}",
                          fix=(f"did you mean {fixed!r}?" if fixed
                               else "use a key path of the scenario, e.g. "
                                    "layers[2].organic_carbon_fraction or flow.darcy_flux"))
        node, walked = node[name], here
        for i in indices:
            if not isinstance(node, list):
                raise r.error(where, shown, f"{walked} is not a list",
                              fix=f"remove the index [{i}]")
            if i > len(node):
                n = len(node)
                raise r.error(where, shown, f"{walked} has {n} entr{'y' if n == 1 else 'ies'}",
                              allowed=f"indices 1 to {n} (counted from 1)",
                              fix=f"use an index from 1 to {n}")
            node, walked = node[i - 1], f"{walked}[{i}]"
    return node


def with_values(data: dict, changes) -> dict:
    """A copy of ``data`` with each ``(path, value)`` of ``changes`` set (only the
    tables and lists along the paths are copied)."""
    out = dict(data)
    for path, value in changes:
        node, parent, last = out, None, None
        steps = [(name, i) for name, idx in path for i in (None, *idx)]
        for k, (name, i) in enumerate(steps):
            key = name if i is None else i - 1
            child = copy.copy(node[key])
            node[key] = child
            parent, last = node, key
            node = child
        parent[last] = value
    return out


def value_text(si: float, dimension: str):
    """An SI value as the scenario would give it: a number for dimensionless keys, else
    text with the SI unit (mass fractions in mg/kg, which the reader takes as soil)."""
    if dimension == "dimensionless":
        return float(si)
    if dimension == "mass_fraction":
        return f"{si * 1e6!r} mg/kg"
    return f"{float(si)!r} {si_unit(dimension)}"
