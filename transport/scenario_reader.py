"""Reading scenario TOML values: the error type and the bound reader (file, key paths).

Every problem becomes a :class:`ScenarioError` naming the file, the key path, the value,
what is allowed and how to fix it.
"""
from __future__ import annotations

import difflib
from pathlib import Path

from .units import UnitError, si_unit, to_si

__all__ = ["ScenarioError", "read_text_file"]

_MISSING = object()


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


def read_text_file(path) -> str:
    """The UTF-8 text of an input file, or a ScenarioError naming it."""
    try:
        return Path(path).read_text(encoding="utf-8")
    except (OSError, UnicodeError) as exc:
        raise ScenarioError(str(path), "(file)", problem=f"cannot read the file: {exc}",
                            fix="check the path") from None
