"""Borings and layer-log CSV files of a site (:mod:`transport.site`).

The borings CSV gives id, x [m], y [m] (or lon [deg], lat [deg]) and
ground_elevation [m]; the layer-log CSV gives id, top [m], bottom [m] and material
(depths below ground).  Units are written in brackets in the header.  Every problem in
the borings and logs is collected and raised as ONE :class:`ScenarioError` naming each
offending boring with its file and line.
"""
from __future__ import annotations

import csv
import math
import re
from pathlib import Path

import numpy as np

from .scenario import ScenarioError
from .units import UnitError, to_si

#: Two log depths closer than this are the same face (m); larger mismatches are gaps
#: or overlaps (common practice: logs are recorded to the centimetre at best).
FACE_TOLERANCE = 1e-6


def _read_table(r, key: str, raw, required: dict):
    """Rows of a CSV named at ``key``: (path, text, [(line, {column: (text, unit)})])."""
    if not isinstance(raw, str) or not raw.strip():
        raise r.error(key, raw, "must be a file name", fix=f'e.g. {key} = "borings.csv"')
    path = Path(raw) if Path(raw).is_absolute() else r.base_dir / raw
    try:
        text = path.read_text(encoding="utf-8-sig")
    except (OSError, UnicodeError) as exc:
        raise r.error(key, raw, f"cannot read {path}: {exc}",
                      fix="check the path (relative to the site file)") from None
    numbered = [(i, ln) for i, ln in enumerate(text.splitlines(), start=1)
                if ln.strip() and not ln.lstrip().startswith("#")]
    if not numbered:
        raise r.error(key, raw, f"{path.name} is empty", fix="add a header and rows")
    header = next(csv.reader([numbered[0][1]]))
    columns = {}
    for j, cell in enumerate(header):
        m = re.match(r"^\s*([^\[]+?)\s*(?:\[(.+)\])?\s*$", cell)
        name = m.group(1).strip().lower().replace(" ", "_") if m else cell
        columns[name] = (j, m.group(2).strip() if m and m.group(2) else None)
    rows = []
    for line, text_line in numbered[1:]:
        cells = next(csv.reader([text_line]))
        rows.append((line, {n: (cells[j].strip() if j < len(cells) else "", u)
                            for n, (j, u) in columns.items()}))
    return path, text, columns, rows


def _unit_factor(path, column, unit, dimension):
    if unit is None:
        raise ScenarioError(str(path), f"header column {column!r}", problem="no unit given",
                            fix=f"write the unit in brackets, e.g. '{column} [m]'")
    try:
        return to_si(f"1 {unit}", dimension, f"{path.name} header {column}")
    except UnitError as exc:
        raise ScenarioError(str(path), f"header column {column!r}", unit,
                            f"not a {dimension} unit: {exc.reason}", fix="use e.g. [m]") from None


def _per_boring_error(path, key: str, problems: dict, fix: str) -> ScenarioError:
    """One ScenarioError listing every boring's problems ({id: [messages]}); the ids are
    kept in ``.borings`` for callers and tests."""
    listed = [f"boring {bid}: " + "; ".join(msgs) for bid, msgs in problems.items()]
    err = ScenarioError(str(path), key, problem=f"{len(problems)} boring(s) with problems:"
                        "\n  " + "\n  ".join(listed), fix=fix)
    err.borings = tuple(problems)
    return err


def _id_column(cols):
    return "id" if "id" in cols else "boring_id" if "boring_id" in cols else None


def _number(cell):
    try:
        value = float(cell)
    except ValueError:
        return None
    return value if math.isfinite(value) else None


def _read_borings(r, data, crs):
    import pyproj

    path, text, cols, rows = _read_table(r, "borings_file", data.get("borings_file"), {})
    id_col = _id_column(cols)
    has_xy = "x" in cols and "y" in cols
    has_ll = ("lon" in cols or "longitude" in cols) and ("lat" in cols or "latitude" in cols)
    if id_col is None or not (has_xy or has_ll) or "ground_elevation" not in cols:
        raise ScenarioError(str(path), "header", ",".join(cols), "needs the columns id, x and "
                            "y (or lon and lat) and ground_elevation",
                            fix="write e.g. 'id,x [m],y [m],ground_elevation [m]'")
    f_elev = _unit_factor(path, "ground_elevation", cols["ground_elevation"][1], "length")
    if has_xy:
        for c in ("x", "y"):
            if cols[c][1] not in (None, "m", "metre", "meter"):
                raise ScenarioError(str(path), f"header column {c!r}", cols[c][1],
                                    "x and y are in the site CRS's metres",
                                    fix=f"write '{c} [m]'")
    lon_c = "lon" if "lon" in cols else "longitude"
    lat_c = "lat" if "lat" in cols else "latitude"
    problems, borings = [], {}
    for line, row in rows:
        bid = row[id_col][0]
        where = f"{path.name} line {line}"
        if not bid:
            problems.append(f"{where}: empty id")
            continue
        if bid in borings:
            problems.append(f"boring {bid} ({where}): listed twice (first on line "
                            f"{borings[bid][0]})")
            continue
        names = ("x", "y") if has_xy else (lon_c, lat_c)
        vals = [_number(row[n][0]) for n in names + ("ground_elevation",)]
        if any(v is None for v in vals):
            bad = [n for n, v in zip(names + ("ground_elevation",), vals) if v is None]
            problems.append(f"boring {bid} ({where}): {', '.join(bad)} not a finite number")
            continue
        if not has_xy and not (-180 <= vals[0] <= 180 and -90 <= vals[1] <= 90):
            problems.append(f"boring {bid} ({where}): lon/lat out of range")
            continue
        borings[bid] = (line, vals[0], vals[1], vals[2] * f_elev)
    if problems:
        raise ScenarioError(str(path), "borings", problem=f"{len(problems)} problem(s):\n  "
                            + "\n  ".join(problems), fix="correct the listed rows")
    ids = list(borings)
    a = np.array([borings[i][1] for i in ids])
    b = np.array([borings[i][2] for i in ids])
    geo = crs.geodetic_crs
    if has_xy:
        lon, lat = pyproj.Transformer.from_crs(crs, geo, always_xy=True).transform(a, b)
        x, y = a, b
    else:
        lon, lat = a, b
        x, y = pyproj.Transformer.from_crs(geo, crs, always_xy=True).transform(a, b)
    return path, text, {i: (borings[i][0], float(x[k]), float(y[k]), float(lon[k]),
                            float(lat[k]), borings[i][3]) for k, i in enumerate(ids)}


def _boring_rows(r, key: str, data, columns: dict, example: str):
    """A per-boring CSV named at ``key``, header checked: (path, text, id column,
    {column: SI factor}, rows).  ``columns`` maps each required column to its dimension
    (None: text, no unit)."""
    path, text, cols, rows = _read_table(r, key, data.get(key), {})
    id_col = _id_column(cols)
    if id_col is None or not set(columns) <= set(cols):
        raise ScenarioError(str(path), "header", ",".join(cols), "needs the columns id, "
                            + ", ".join(columns), fix=f"write '{example}'")
    factors = {c: _unit_factor(path, c, cols[c][1], dim) for c, dim in columns.items() if dim}
    return path, text, id_col, factors, rows


def _read_log(r, data, materials, boring_ids, borings_path):
    path, text, id_col, f, rows = _boring_rows(
        r, "log_file", data, {"top": "length", "bottom": "length", "material": None},
        "id,top [m],bottom [m],material")
    f_top, f_bot = f["top"], f["bottom"]
    problems, logs = {}, {}
    for line, row in rows:
        bid = row[id_col][0]
        where = f"{path.name} line {line}"
        top, bot, mat = _number(row["top"][0]), _number(row["bottom"][0]), row["material"][0]
        if bid not in boring_ids:
            problems.setdefault(bid or "(empty id)", []).append(
                f"{where}: no such boring in {borings_path.name}")
            continue
        if top is None or bot is None:
            problems.setdefault(bid, []).append(f"{where}: top/bottom not a number")
            continue
        top, bot = top * f_top, bot * f_bot
        if mat not in materials:
            problems.setdefault(bid, []).append(
                f"{where}: unknown material {mat!r} (defined: {', '.join(materials)})")
        if not bot > top or top < 0:
            problems.setdefault(bid, []).append(f"{where}: needs 0 <= top < bottom, got "
                                                f"{top:g} m to {bot:g} m")
            continue
        logs.setdefault(bid, []).append((top, bot, mat, line))
    for bid in boring_ids:
        if bid not in logs:
            if bid not in problems:
                problems.setdefault(bid, []).append(f"{boring_ids[bid]}: no rows in "
                                                    f"{path.name}")
            continue
        ivs = sorted(logs[bid])
        if ivs[0][0] > FACE_TOLERANCE:
            problems.setdefault(bid, []).append(f"{path.name} line {ivs[0][3]}: the log "
                                                f"starts at {ivs[0][0]:g} m, not at 0 m")
        for a, b in zip(ivs, ivs[1:]):
            if b[0] > a[1] + FACE_TOLERANCE:
                problems.setdefault(bid, []).append(
                    f"{path.name} lines {a[3]}-{b[3]}: gap from {a[1]:g} m to {b[0]:g} m")
            elif b[0] < a[1] - FACE_TOLERANCE:
                problems.setdefault(bid, []).append(
                    f"{path.name} lines {a[3]}-{b[3]}: overlap from {b[0]:g} m to {a[1]:g} m")
        logs[bid] = ivs
    if problems:
        raise _per_boring_error(path, "log", problems, "correct every listed boring (each log "
                                "from 0 m down, no gaps or overlaps, materials defined under "
                                "[materials])")
    return path, text, logs


def _read_initial(r, data, boring_ids, bottoms, borings_path):
    """Measured pore-water profiles: {boring id: ((depth m, C kg m-3), ...)}, sorted by
    depth; borings without rows start clean.  Every problem, for every boring, is
    collected into one :class:`ScenarioError`."""
    path, text, id_col, f, rows = _boring_rows(
        r, "initial_file", data, {"depth": "length", "concentration": "concentration"},
        "id,depth [m],concentration [mg/L]")
    f_z, f_c = f["depth"], f["concentration"]
    problems, samples = {}, {}
    for line, row in rows:
        bid = row[id_col][0]
        where = f"{path.name} line {line}"
        if bid not in boring_ids:
            problems.setdefault(bid or "(empty id)", []).append(
                f"{where}: no such boring in {borings_path.name}")
            continue
        z, c = _number(row["depth"][0]), _number(row["concentration"][0])
        if z is None or c is None:
            problems.setdefault(bid, []).append(f"{where}: depth/concentration not a number")
            continue
        z, c = z * f_z, c * f_c
        if not 0 <= z <= bottoms[bid] * (1 + 1e-12):
            problems.setdefault(bid, []).append(
                f"{where}: depth {z:g} m outside the log (0 to {bottoms[bid]:g} m)")
        elif c < 0:
            problems.setdefault(bid, []).append(f"{where}: negative concentration")
        else:
            samples.setdefault(bid, []).append((z, c, line))
    for bid, rows_b in samples.items():
        rows_b.sort()
        for a, b in zip(rows_b, rows_b[1:]):
            if b[0] - a[0] <= FACE_TOLERANCE:
                problems.setdefault(bid, []).append(
                    f"{path.name} lines {a[2]} and {b[2]}: two samples at {a[0]:g} m")
    if problems:
        raise _per_boring_error(path, "initial", problems, "correct every listed boring "
                                "(depths below ground inside its log, one sample per depth, "
                                "concentrations >= 0)")
    return path, text, {bid: tuple((z, c) for z, c, _ in rows_b)
                        for bid, rows_b in samples.items()}
