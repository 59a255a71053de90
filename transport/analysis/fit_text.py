"""Writing values into scenario TOML text in place (``stratiflux fit``).

The fit writes each trial value, and finally the fitted values, into the scenario's
own text, keeping its layout and comments, and reads the text back with the standard
library's :mod:`tomllib` to check that exactly the intended values changed. Keys are
key paths as in the scenario's messages (``layers[2].pore_diffusivity``: arrays of
tables counted from 1).
"""
from __future__ import annotations

import re
import tomllib

__all__ = ["place_values", "file_keys", "get_value"]

_SEGMENT = re.compile(r"^([A-Za-z_][A-Za-z0-9_]*)((?:\[\d+\])*)$")
_HEADER = re.compile(r"^\s*(\[\[?)\s*([A-Za-z0-9_\-.\"' ]+?)\s*\]\]?\s*(?:#.*)?$")
_VALUE = r"(\"(?:[^\"\\]|\\.)*\"|'[^']*'|[^\s#,}\]]+)"


def _depths(lines):
    """Bracket depth at the start of each line (arrays and inline tables that span
    lines; strings and comments skipped)."""
    out, depth, in_multi = [], 0, None
    for line in lines:
        out.append(-1 if in_multi else depth)
        i = 0
        while i < len(line):
            if in_multi:
                end = line.find(in_multi, i)
                if end < 0:
                    break
                i, in_multi = end + 3, None
                continue
            c = line[i]
            if line.startswith('"""', i) or line.startswith("'''", i):
                in_multi, i = line[i:i + 3], i + 3
            elif c in "\"'":
                m = re.match(r"\"(?:[^\"\\]|\\.)*\"|'[^']*'", line[i:])
                i += len(m.group(0)) if m else len(line)
            elif c == "#":
                break
            else:
                depth += (c in "[{") - (c in "]}")
                i += 1
    return out


def _sections(lines):
    """{table path: (first line, end line)} of the tables written as headers (arrays
    of tables indexed from 1, as in key paths); the root table is ''."""
    depths, counts, spans, current = _depths(lines), {}, {}, ("", 0)
    for i, line in enumerate(lines):
        m = _HEADER.match(line) if depths[i] == 0 else None
        if not m:
            continue
        spans[current[0]] = (current[1], i)
        names = [n.strip().strip("\"'") for n in m.group(2).split(".")]
        path = ""
        for n in names[:-1]:
            path = f"{path}.{n}" if path else n
            if path in counts:
                path += f"[{counts[path]}]"
        path = f"{path}.{names[-1]}" if path else names[-1]
        if m.group(1) == "[[":
            counts[path] = counts.get(path, 0) + 1
            path += f"[{counts[path]}]"
        current = (path, i + 1)
    spans[current[0]] = (current[1], len(lines))
    return spans, depths


def _place(lines, spans, depths, key, value, comment) -> bool:
    table, _, leaf = key.rpartition(".")
    note = f"  # {comment}" if comment else ""
    pattern = re.compile(rf"^(\s*)(\"?{leaf}\"?)\s*=\s*{_VALUE}\s*(#.*)?$")
    if table in spans:
        start, end = spans[table]
        for i in range(start, end):
            m = pattern.match(lines[i]) if depths[i] == 0 else None
            if m:
                old = m.group(4)[1:].strip() if m.group(4) else ""
                tail = f"{note}; {old}" if comment and old else note or \
                    (f"  # {old}" if old else "")
                lines[i] = f"{m.group(1)}{leaf} = {value}{tail}"
                return True
        last = max([i for i in range(start, end) if lines[i].strip() and
                    not lines[i].lstrip().startswith("#")] or [start - 1])
        lines.insert(last + 1, f"{leaf} = {value}{note}")
        return True
    parent, _, name = table.rpartition(".")
    if parent not in spans or not name or "[" in name:
        return False
    start, end = spans[parent]
    inline = re.compile(rf"^(\s*\"?{name}\"?\s*=\s*\{{)(.*)(\}}\s*(?:#.*)?)$")
    for i in range(start, end):
        m = inline.match(lines[i]) if depths[i] == 0 else None
        if not m:
            continue
        body, n = re.subn(rf"(^|,)(\s*\"?{leaf}\"?\s*=\s*){_VALUE}",
                          lambda g: f"{g.group(1)}{g.group(2)}{value}", m.group(2), count=1)
        if not n:
            body = f"{body.rstrip()}, {leaf} = {value} " if body.strip() else \
                f" {leaf} = {value} "
        tail = m.group(3)
        if comment:
            tail = tail.replace("#", f"# {comment};", 1) if "#" in tail else tail + note
        lines[i] = m.group(1) + body + tail
        return True
    return False


def place_values(text: str, values: dict, comments: dict | None = None):
    """``text`` with ``values`` ({key path: TOML value text}) written in place.

    A key is replaced on its own line in its table, added to its table if absent, or
    replaced inside a one-line inline table (``concentration = { initial = ..., ... }``).

    Returns
    -------
    (str, list)
        The new text and the keys it could not place: those whose value does not read
        back (TOML written as dotted keys or multi-line inline tables).
    """
    lines = text.split("\n")
    missed = []
    for key, value in values.items():
        spans, depths = _sections(lines)
        if not _place(lines, spans, depths, key, value, (comments or {}).get(key, "")):
            missed.append(key)
    new = "\n".join(lines)
    expected = tomllib.loads(text.lstrip("\ufeff"))
    for key, value in values.items():
        _set(expected, key, tomllib.loads(f"v = {value}")["v"])
    try:
        got = tomllib.loads(new.lstrip("\ufeff"))
    except tomllib.TOMLDecodeError:
        return text, list(values)
    if got != expected:
        missed += [k for k in values if k not in missed and get_value(got, k) != get_value(expected, k)]
        if not missed:  # something else changed: refuse the whole edit
            missed = list(values)
    return new, missed


def _parts(key):
    """``"layers[2].porosity"`` -> [("layers", [2]), ("porosity", [])] (no checks)."""
    out = []
    for part in key.split("."):
        m = _SEGMENT.match(part)
        out.append((m.group(1), [int(i) for i in re.findall(r"\d+", m.group(2))]))
    return out


def _set(data, key, value):
    node, parts = data, _parts(key)
    for name, indices in parts[:-1]:
        node = node.setdefault(name, {})
        for i in indices:
            node = node[i - 1]
    node[parts[-1][0]] = value


def get_value(data, key):
    """The value at ``key`` of parsed TOML ``data`` (None when absent)."""
    node = data
    try:
        for name, indices in _parts(key):
            node = node[name]
            for i in indices:
                node = node[i - 1]
    except (KeyError, IndexError, TypeError):
        return None
    return node


def file_keys(data: dict, prefix: str = "") -> list:
    """Key paths of the relative file names of a parsed scenario (``samples_file``,
    ``table_file``, ``fit.data``), for a copy written in another folder."""
    out = []
    for name, value in data.items():
        path = f"{prefix}.{name}" if prefix else name
        if isinstance(value, dict):
            out += file_keys(value, path)
        elif isinstance(value, list):
            for i, item in enumerate(value, start=1):
                if isinstance(item, dict):
                    out += file_keys(item, f"{path}[{i}]")
        elif isinstance(value, str) and (name in ("samples_file", "table_file")
                                         or path == "fit.data"):
            out.append(path)
    return out
