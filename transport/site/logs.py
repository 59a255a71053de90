"""Borings and layer-log CSV files of a site (:mod:`transport.site.config`).

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

import numpy as np
import pyproj

from transport.scenario.reader import ScenarioError, range_error
from transport.scenario.schema import MAX_LAYERS
from transport.units import MG_PER_L, UnitError, to_si

__all__ = ["read_borings", "read_log", "read_initial", "FACE_TOLERANCE", "MAX_LISTED",
           "AREA_MARGIN"]

#: Two log depths closer than this are the same face (m); larger mismatches are gaps
#: or overlaps (common practice: logs are recorded to the centimetre at best).
FACE_TOLERANCE = 1e-6
#: Borings (or rows) listed by name in one message; the rest are counted.
MAX_LISTED = 20
#: Margin (degrees) around a CRS's area of use within which borings are accepted (a site
#: at the edge of a UTM zone is often mapped in the neighbouring zone: common practice).
AREA_MARGIN = 1.0
_SAFE_NAME = re.compile(r"^[A-Za-z0-9_ ]{1,32}$")


def _listed(items, what="more"):
    """The first MAX_LISTED items, one per line, and a count of the rest."""
    items = list(items)
    shown = items[:MAX_LISTED]
    more = len(items) - len(shown)
    return "\n  " + "\n  ".join(shown) + (f"\n  ... and {more} {what}" if more else "")


def _header_error(path, needed: str, cols, example: str):
    """The header is not the one expected: name the file and the columns needed; list
    the columns found only when they look like column names (never a line of some
    unrelated file)."""
    names = [c for c in cols]
    found = (f"; found the columns {', '.join(names)}"
             if 0 < len(names) <= 12 and all(_SAFE_NAME.match(c) for c in names) else
             f"; its first line is not such a header ({len(names)} comma-separated cell(s))")
    return ScenarioError(str(path), "header", problem=f"needs the columns {needed}{found}",
                         fix=f"write '{example}' as the first line (after # comments)")


def _read_table(r, key: str, raw, required: dict):
    """Rows of a CSV named at ``key``: (path, text, [(line, {column: (text, unit)})])."""
    path, text = r.input_file(raw, key, "a CSV table with a header", example=f"{key[:-5]}.csv")
    numbered = [(i, ln) for i, ln in enumerate(text.splitlines(), start=1)
                if ln.strip() and not ln.lstrip().startswith("#")]
    if not numbered:
        raise r.error(key, raw, f"{path.name} is empty", fix="add a header and rows")
    header = next(csv.reader([numbered[0][1]]))
    for sep, name, why in ((";", "semicolons", " (as a spreadsheet set to a decimal comma "
                            "saves CSV)"), ("\t", "tabs", "")):
        if len(header) == 1 and sep in numbered[0][1]:
            raise ScenarioError(str(path), "header", problem=f"the columns of {path.name} "
                                f"are separated by {name}{why}; stratiflux reads "
                                "comma-separated values with a decimal point",
                                fix="save it as comma-separated values with decimal points "
                                "(in a spreadsheet: 'CSV UTF-8 (comma delimited)' with the "
                                "decimal separator set to '.'), or replace each "
                                f"{'semicolon' if sep == ';' else 'tab'} by a comma and each "
                                "decimal comma by a point")
    columns = {}
    for j, cell in enumerate(header):
        m = re.match(r"^\s*([^\[]+?)\s*(?:\[(.+)\])?\s*$", cell)
        name = m.group(1).strip().lower().replace(" ", "_") if m else cell
        if name in columns and name:
            shown = name if _SAFE_NAME.match(name) else "a column"
            raise ScenarioError(str(path), "header", problem=f"the column {shown!r} appears "
                                f"twice (cells {columns[name][0] + 1} and {j + 1})",
                                fix="keep one column of each name")
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
    listed = [f"boring {_short_id(bid)}: " + "; ".join(msgs[:3])
              + (f"; and {len(msgs) - 3} more" if len(msgs) > 3 else "")
              for bid, msgs in problems.items()]
    err = ScenarioError(str(path), key, problem=f"{len(problems)} boring(s) with problems:"
                        + _listed(listed, "more boring(s)"), fix=fix)
    err.borings = tuple(problems)
    return err


def _short_id(bid) -> str:
    bid = str(bid)
    return bid if len(bid) <= 40 else bid[:37] + "..."


def _id_column(cols):
    return "id" if "id" in cols else "boring_id" if "boring_id" in cols else None


def _number(cell):
    try:
        value = float(cell)
    except ValueError:
        return None
    return value if math.isfinite(value) else None


def read_borings(r, data, crs):
    """The borings CSV named by ``borings_file``: one row per boring with its map
    position (x, y in the site CRS, or lon, lat) and ground elevation.

    Parameters
    ----------
    r : transport.scenario.reader.Reader
        Reader of the site file (the CSV is read relative to its folder).
    data : dict
        The parsed site file.
    crs : pyproj.CRS
        The site's projected CRS (metres).

    Returns
    -------
    tuple
        (path, text, {id: (line, x m, y m, lon deg, lat deg, ground elevation m)}).

    Raises
    ------
    ScenarioError
        Every problem of every row in one message.
    """
    path, text, cols, rows = _read_table(r, "borings_file", data.get("borings_file"), {})
    id_col = _id_column(cols)
    has_xy = "x" in cols and "y" in cols
    has_ll = ("lon" in cols or "longitude" in cols) and ("lat" in cols or "latitude" in cols)
    if id_col is None or not (has_xy or has_ll) or "ground_elevation" not in cols:
        raise _header_error(path, "id, x and y (or lon and lat) and ground_elevation", cols,
                            "id,x [m],y [m],ground_elevation [m]")
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
        if range_error("ground_elevation", "length", vals[2] * f_elev) is not None:
            problems.append(f"boring {bid} ({where}): ground_elevation outside +-100 km")
            continue
        borings[bid] = (line, vals[0], vals[1], vals[2] * f_elev)
    if problems:
        raise ScenarioError(str(path), "borings", problem=f"{len(problems)} problem(s):"
                            + _listed(problems), fix="correct the listed rows")
    if not borings:
        raise ScenarioError(str(path), "borings", problem="no borings listed",
                            fix="add one row per boring below the header")
    ids = list(borings)
    a = np.array([borings[i][1] for i in ids])
    b = np.array([borings[i][2] for i in ids])
    geo = crs.geodetic_crs
    if has_xy:
        x, y = a, b
    else:  # typed lon/lat are WGS 84 (GPS, web maps), whatever the site CRS's datum
        x, y = pyproj.Transformer.from_crs("EPSG:4326", crs, always_xy=True).transform(a, b)
    # kept in the base geographic CRS of the site CRS (the CF grid mapping's datum)
    lon, lat = pyproj.Transformer.from_crs(crs, geo, always_xy=True).transform(x, y)
    _check_area(path, crs, ids, a, b, np.asarray(lon, float), np.asarray(lat, float), has_xy,
                {i: borings[i][0] for i in ids})
    return path, text, {i: (borings[i][0], float(x[k]), float(y[k]), float(lon[k]),
                            float(lat[k]), borings[i][3]) for k, i in enumerate(ids)}


def _check_area(path, crs, ids, a, b, lon, lat, has_xy, lines):
    """Every boring must lie in the CRS's area of use (with :data:`AREA_MARGIN`)."""
    if has_xy and np.all(np.abs(a) <= 180) and np.all(np.abs(b) <= 90):
        raise ScenarioError(str(path), "borings", problem="every x and y lies within "
                            "+-180 and +-90: these look like longitude and latitude in "
                            f"degrees, not metres of {crs.name}",
                            fix="name the columns 'lon [deg]' and 'lat [deg]' (or give the "
                            "projected x and y in metres)")
    area = crs.area_of_use
    bad = ~(np.isfinite(lon) & np.isfinite(lat))
    if area is not None:
        w, s_, e, n = area.bounds
        lon_ok = ((lon >= w - AREA_MARGIN) & (lon <= e + AREA_MARGIN)) if w <= e else (
            (lon >= w - AREA_MARGIN) | (lon <= e + AREA_MARGIN))
        bad |= ~(lon_ok & (lat >= s_ - AREA_MARGIN) & (lat <= n + AREA_MARGIN))
    if bad.any():
        cols = "x, y" if has_xy else "lon, lat"
        listed = [f"boring {_short_id(ids[k])} ({path.name} line {lines[ids[k]]}): {cols} = "
                  f"{a[k]:.2f}, {b[k]:.2f} "
                  + (f"is at lon {lon[k]:.4g}, lat {lat[k]:.4g}"
                     if np.isfinite(lon[k]) and np.isfinite(lat[k]) else
                     "does not map to any longitude and latitude")
                  for k in np.flatnonzero(bad)]
        where = (f"the area of use of {crs.name} (lon {area.bounds[0]:g} to "
                 f"{area.bounds[2]:g}, lat {area.bounds[1]:g} to {area.bounds[3]:g})"
                 if area is not None else f"{crs.name}")
        raise ScenarioError(str(path), "borings", problem=f"{int(bad.sum())} boring(s) lie "
                            f"outside {where}:" + _listed(listed, "more boring(s)"),
                            fix="check the coordinates (a mistyped digit, lon/lat in the x/y "
                            "columns) or the site's crs")


def _boring_rows(r, key: str, data, columns: dict, example: str):
    """A per-boring CSV named at ``key``, header checked: (path, text, id column,
    {column: SI factor}, rows).  ``columns`` maps each required column to its dimension
    (None: text, no unit)."""
    path, text, cols, rows = _read_table(r, key, data.get(key), {})
    id_col = _id_column(cols)
    if id_col is None or not set(columns) <= set(cols):
        raise _header_error(path, "id, " + ", ".join(columns), cols, example)
    factors = {c: _unit_factor(path, c, cols[c][1], dim) for c, dim in columns.items() if dim}
    return path, text, id_col, factors, rows


def read_log(r, data, materials, boring_ids, borings_path):
    """The layer-log CSV named by ``log_file``: per boring its intervals (top, bottom m
    below ground, material), from 0 m down without gaps or overlaps.

    Parameters
    ----------
    r : transport.scenario.reader.Reader
    data : dict
        The parsed site file.
    materials : dict
        The site's materials (a log may name only these).
    boring_ids : dict or None
        {boring id: where it is listed ("borings.csv line 3")}; None when the borings
        file could not be read (the log's own problems are still all found).
    borings_path : pathlib.Path
        The borings CSV, for messages.

    Returns
    -------
    tuple
        (path, text, {boring id: [(top, bottom, material, line), ...] sorted by depth}).

    Raises
    ------
    ScenarioError
        Every problem, for every boring, in one message.
    """
    path, text, id_col, f, rows = _boring_rows(
        r, "log_file", data, {"top": "length", "bottom": "length", "material": None},
        "id,top [m],bottom [m],material")
    f_top, f_bot = f["top"], f["bottom"]
    problems, logs = {}, {}
    for line, row in rows:
        bid = row[id_col][0]
        where = f"{path.name} line {line}"
        top, bot, mat = _number(row["top"][0]), _number(row["bottom"][0]), row["material"][0]
        if boring_ids is not None and bid not in boring_ids:
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
        bad = range_error("thickness", "length", bot - top) or range_error("depth", "length",
                                                                            bot)
        if bad is not None:
            problems.setdefault(bid, []).append(f"{where}: {top:g} m to {bot:g} m is outside "
                                                f"what the model represents ({bad[0]})")
            continue
        logs.setdefault(bid, []).append((top, bot, mat, line))
    for bid in (boring_ids if boring_ids is not None else dict.fromkeys(logs)):
        if bid not in logs:
            if bid not in problems:
                problems.setdefault(bid, []).append(f"{boring_ids[bid]}: no rows in "
                                                    f"{path.name}")
            continue
        ivs = sorted(logs[bid])
        if len(ivs) > MAX_LAYERS:
            problems.setdefault(bid, []).append(
                f"{len(ivs)} intervals in {path.name}, more than the {MAX_LAYERS} a column "
                "may have (merge neighbouring intervals of the same material)")
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


def read_initial(r, data, boring_ids, bottoms, borings_path):
    """Measured pore-water profiles of the CSV named by ``initial_file``; borings
    without rows start clean.

    Parameters
    ----------
    r : transport.scenario.reader.Reader
    data : dict
        The parsed site file.
    boring_ids : dict
        {boring id: where it is listed}.
    bottoms : dict
        {boring id: depth of the log's bottom, m}: no sample may lie below it.
    borings_path : pathlib.Path
        The borings CSV, for messages.

    Returns
    -------
    tuple
        (path, text, {boring id: ((depth m, C kg m-3), ...) sorted by depth}).

    Raises
    ------
    ScenarioError
        Every problem, for every boring, in one message.
    """
    path, text, id_col, f, rows = _boring_rows(
        r, "initial_file", data, {"depth": "length", "concentration": "concentration"},
        "id,depth [m],concentration [mg/L]")
    f_z, f_c = f["depth"], f["concentration"]
    problems, samples = {}, {}
    for line, row in rows:
        bid = row[id_col][0]
        where = f"{path.name} line {line}"
        if boring_ids is not None and bid not in boring_ids:
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
        elif range_error("concentration", "concentration", c) is not None:
            problems.setdefault(bid, []).append(
                f"{where}: concentration {c / MG_PER_L:.3g} mg/L is outside what the model "
                "represents (" + range_error("concentration", "concentration", c)[0] + ")")
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
