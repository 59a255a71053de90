"""Whole sites: many borings sharing one chemical, source and materials.

A site file (TOML) names the coordinate reference system, a borings CSV and a layer-log
CSV, defines each material once and gives the shared settings::

    title = "Invented works yard"
    crs = "EPSG:32631"                 # EPSG code or WKT (pyproj); projected, metres
    borings_file = "borings.csv"       # id, x [m], y [m] (or lon [deg], lat [deg]),
                                       # ground_elevation [m]
    log_file = "layer-log.csv"         # id, top [m], bottom [m], material (depths below ground)
    initial_file = "pore-water.csv"    # optional: id, depth [m], concentration [mg/L];
                                       # measured profiles (borings without rows: clean)
    [chemical]  [flow]  [top]  [bottom]          # exactly as in a scenario file
    [materials.sand]                   # scenario layer keys, without name and thickness
    porosity = 0.33
    ...
    [output]
    times = {...}; depth_spacing = "5 cm"
    receptor_depth = "4 m"  OR  receptor_elevation = "38.5 m"   (default: boring bottom)
    screening_level = "5 ug/L"; design_life = "50 yr"; tolerance = 1e-8
    [uncertainty]                      # optional, see transport.site.uncertainty
    realizations = 200; seed = 1; sampling = "latin-hypercube"
    [[uncertainty.parameters]] ...

Each boring becomes the column a single-column scenario with the same layers would
give: the site's tables are read by the scenario readers (same units, ranges and
messages) and every layer is derived from SI floats by
:func:`transport.model.media.derive_layer`, as a scenario's layers are
(:func:`boring_scenario`), so a station of the site equals the single-column run of that
boring. Every problem in the
borings and logs is collected and raised as ONE :class:`ScenarioError` naming each
offending boring with its file and line.
"""
from __future__ import annotations

import dataclasses
import hashlib
import math
import os
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pyproj

from transport.model.column import Column, InitialState
from transport.scenario.layers import LAYER_KEYS, layer_detail, read_chemical, read_layer
from transport.scenario.output import (DEFAULT_TOLERANCE, MAX_DEPTHS, MEMORY_BUDGET, OutputSpec,
                                       check_advection, depth_grid, read_times,
                                       run_memory_bytes)
from transport.scenario.reader import Reader, ScenarioError, parse_toml, read_text_file
from transport.scenario.schema import FLOW_KEYS, Scenario, read_boundary
from transport.site.batch import solve_site
from transport.site.columns import (boring_column, derive_material, material_layers,
                                    material_properties, properties_in_force)
from transport.site.logs import read_borings, read_initial, read_log
from transport.site.uncertainty import DISTRIBUTION_PARAMETERS, SAMPLING_METHODS, Distribution

__all__ = ["Boring", "Site", "load_site", "parse_site", "boring_scenario", "boring_column",
           "material_layers", "solve_site", "UNCERTAIN_KEYS"]

SITE_KEYS = ("title", "crs", "borings_file", "log_file", "initial_file", "chemical", "flow",
             "materials", "top", "bottom", "output", "uncertainty")
MATERIAL_KEYS = tuple(k for k in LAYER_KEYS if k not in ("name", "thickness",
                                                        "initial_concentration"))
SITE_OUTPUT_KEYS = ("times", "depth_spacing", "receptor_depth", "receptor_elevation",
                    "screening_level", "design_life", "tolerance")
UNCERTAINTY_KEYS = ("realizations", "seed", "sampling", "parameters")
#: Numeric keys that may be given as distributions, with their dimension.
UNCERTAIN_KEYS = {
    "chemical": {"free_water_diffusivity": "diffusivity",
                 "organic_carbon_partition": "specific_volume", "half_life": "time"},
    "flow": {"darcy_flux": "velocity"},
    "materials": {"porosity": "dimensionless", "water_content": "dimensionless",
                  "bulk_density": "density", "organic_carbon_fraction": "dimensionless",
                  "distribution_coefficient": "specific_volume",
                  "retardation_factor": "dimensionless", "tortuosity": "dimensionless",
                  "pore_diffusivity": "diffusivity", "dispersivity": "length",
                  "half_life": "time", "source_rate": "mass_rate_density"},
}
DEFAULT_DEPTH_INTERVALS = 200
MAX_REALIZATIONS = 1_000_000


@dataclass(frozen=True)
class Boring:
    """One boring: map position (site CRS, and lon/lat in its base geographic CRS),
    ground elevation (m), its log as (top, bottom, material) tuples, m below ground, and
    its measured initial pore-water profile as (depth m, C kg m-3) pairs (empty: clean)."""

    id: str
    x: float
    y: float
    lon: float
    lat: float
    ground_elevation: float
    intervals: tuple
    receptor_depth: float
    initial: tuple = ()

    @property
    def depth(self) -> float:
        return float(self.intervals[-1][1])

    @property
    def initial_state(self) -> InitialState:
        """Piecewise-linear through the samples (constant beyond the first and last),
        or clean."""
        if not self.initial:
            return InitialState.clean()
        return InitialState.profile([z for z, _ in self.initial], [c for _, c in self.initial])


@dataclass(frozen=True, eq=False)
class Site:
    """A loaded, validated site (SI floats inside; raw material tables kept so that each
    boring is built by the scenario readers)."""

    title: str
    path: str
    crs_text: str
    epsg: int | None
    borings: tuple
    data: dict = field(repr=False)
    times: np.ndarray = field(repr=False)
    depths: np.ndarray = field(repr=False)
    screening_level: float = 0.0
    design_life: float = 0.0
    tolerance: float = DEFAULT_TOLERANCE
    distributions: tuple = ()
    realizations: int = 0
    seed: int | None = None
    sampling: str = "random"
    fingerprint: str = ""
    source_text: str = field(default="", repr=False)
    materials: dict = field(default_factory=dict, repr=False)  # name -> SI properties
    chemical: object = None  # scenario.ChemicalSpec
    darcy_flux: float = 0.0  # m s-1
    top: object = None  # model.Boundary
    bottom: object = None

    @property
    def crs(self):
        return pyproj.CRS.from_user_input(self.crs_text)

    @property
    def ids(self) -> list:
        return [b.id for b in self.borings]


# --------------------------------------------------------------------------- site parsing
def _distribution(r, raw, j, data):
    key = f"uncertainty.parameters[{j}]"
    t = r.table(raw, key, required=True)
    target = t.get("parameter")
    parts = target.split(".") if isinstance(target, str) else []
    group = parts[0] if parts else None
    name = parts[-1] if parts else None
    ok = (group in ("chemical", "flow") and len(parts) == 2 and name in UNCERTAIN_KEYS[group]) \
        or (group == "materials" and len(parts) == 3 and name in UNCERTAIN_KEYS["materials"])
    if not ok:
        raise r.error(f"{key}.parameter", target, "not a parameter that can be uncertain",
                      allowed="chemical.<key>, flow.darcy_flux, materials.<name>.<key> with "
                      "keys " + ", ".join(sorted({k for g in UNCERTAIN_KEYS.values() for k in g})))
    if group == "materials":
        mats = data.get("materials") or {}
        if parts[1] not in mats:
            raise r.error(f"{key}.parameter", target, f"no material {parts[1]!r}",
                          allowed=", ".join(mats))
        if name not in mats[parts[1]]:
            raise r.error(f"{key}.parameter", target, f"material {parts[1]!r} does not give "
                          f"{name}", fix=f"give a deterministic {name} in [materials."
                          f"{parts[1]}] (the value used without Monte Carlo)")
    dim = UNCERTAIN_KEYS["materials" if group == "materials" else group][name]
    kind = t.get("distribution")
    if kind not in DISTRIBUTION_PARAMETERS:
        raise r.error(f"{key}.distribution", kind, "unknown distribution",
                      allowed=" | ".join(DISTRIBUTION_PARAMETERS))
    names = DISTRIBUTION_PARAMETERS[kind]
    r.keys(t, ("parameter", "distribution", "lower", "upper") + names, key)
    values = []
    for pn in names:
        if pn not in t:
            raise r.error(f"{key}.{pn}", problem=f"missing for a {kind} distribution",
                          fix="give " + ", ".join(names))
        values.append(r.quantity(t[pn], "dimensionless" if pn == "log_sd" else dim,
                                 f"{key}.{pn}"))
    lower = r.optional(t, "lower", dim, key)
    upper = r.optional(t, "upper", dim, key)
    try:
        dist = Distribution(target, kind, tuple(values), lower, upper)
    except ValueError as exc:
        raise r.error(key, problem=str(exc), fix="correct the distribution") from None
    if dist.support_min() < 0 and dim != "velocity":
        raise r.error(f"{key}.lower", problem=f"the {kind} distribution can draw negative "
                      f"values of {name}", fix='add a lower bound, e.g. lower = "0 ..."')
    return dist


def _uncertainty(r, data):
    t = r.table(data.get("uncertainty"), "uncertainty")
    r.keys(t, UNCERTAINTY_KEYS, "uncertainty")
    n = t.get("realizations", 0)
    if isinstance(n, bool) or not isinstance(n, int) or not 0 <= n <= MAX_REALIZATIONS:
        raise r.error("uncertainty.realizations", n, "must be a whole number",
                      allowed=f"0 to {MAX_REALIZATIONS}")
    seed = t.get("seed")
    if seed is not None and (isinstance(seed, bool) or not isinstance(seed, int) or seed < 0):
        raise r.error("uncertainty.seed", seed, "must be a whole number >= 0")
    sampling = t.get("sampling", "random")
    if sampling not in SAMPLING_METHODS:
        raise r.error("uncertainty.sampling", sampling, "unknown sampling",
                      allowed=" | ".join(SAMPLING_METHODS))
    raw = t.get("parameters", [])
    if not isinstance(raw, list):
        raise r.error("uncertainty.parameters", raw, "must be [[uncertainty.parameters]] tables")
    dists = tuple(_distribution(r, p, j, data) for j, p in enumerate(raw, start=1))
    if len({d.parameter for d in dists}) != len(dists):
        raise r.error("uncertainty.parameters", problem="a parameter is listed twice")
    return dists, n, seed, sampling


def _common_grid(r, out, max_depth):
    step = r.optional(out, "depth_spacing", "length", "output",
                      default=max_depth / DEFAULT_DEPTH_INTERVALS, low=0, low_open=True)
    count = max_depth / step
    if count > MAX_DEPTHS - 1:
        raise r.error("output.depth_spacing", out.get("depth_spacing"),
                      f"gives {count:.3g} depths", allowed=f"at most {MAX_DEPTHS}",
                      fix="use a coarser spacing")
    grid = np.arange(int(math.floor(count * (1 + 1e-12))) + 1) * step
    grid = np.unique(np.concatenate([grid[grid < max_depth * (1 - 1e-12)], [max_depth]]))
    grid.setflags(write=False)
    return grid


def _read_both_tables(r, data, crs, materials):
    """The borings and layer-log CSVs; when either has problems, ONE ScenarioError with
    the problems of both (the log is still checked on its own when the borings file
    cannot be read).  Returns (borings path, text, rows, log text, logs)."""
    errors, bpath, braw = [], None, None
    try:
        bpath, btext, braw = read_borings(r, data, crs)
    except ScenarioError as exc:
        errors.append(exc)
        raw = data.get("borings_file")
        bpath = Path(raw if isinstance(raw, str) and raw.strip() else "borings.csv")
    ids = (None if braw is None else
           {b: f"{bpath.name} line {v[0]}" for b, v in braw.items()})
    try:
        _, ltext, logs = read_log(r, data, materials, ids, bpath)
    except ScenarioError as exc:
        errors.append(exc)
    if len(errors) == 1:
        raise errors[0]
    if errors:
        both = ScenarioError(
            r.file, "borings_file",
            problem="problems in both CSV files, borings_file and log_file (each with "
                    "its fix):\n" + "\n".join(
                f"({i}) " + str(e).replace("\n", "\n  ") for i, e in enumerate(errors, 1)),
            fix="correct both files")
        both.borings = tuple(dict.fromkeys(b for e in errors
                                           for b in getattr(e, "borings", ())))
        raise both
    return bpath, btext, braw, ltext, logs


def parse_site(text: str, path: str | Path = "<string>") -> Site:
    """Parse and validate site TOML text (relative file names from ``path``'s folder)."""
    file = str(path)
    r = Reader(file, Path(file).parent if file != "<string>" else Path.cwd())
    data = parse_toml(r, text)
    r.keys(data, SITE_KEYS, "")
    title = r.text(data, "title", "", default=Path(file).stem)
    crs_raw = data.get("crs")
    try:
        crs = pyproj.CRS.from_user_input(crs_raw)
    except (pyproj.exceptions.CRSError, TypeError):
        raise r.error("crs", crs_raw, "not a coordinate reference system pyproj knows",
                      fix='give an EPSG code such as "EPSG:32631" or a WKT string') from None
    if not crs.is_projected or crs.axis_info[0].unit_name not in ("metre", "meter"):
        raise r.error("crs", crs_raw, "must be a projected CRS in metres",
                      fix="use the site's UTM zone, e.g. EPSG:326xx (north) / 327xx (south)")
    materials = r.table(data.get("materials"), "materials", required=True)
    for name, mat in materials.items():
        r.keys(r.table(mat, f"materials.{name}", required=True), MATERIAL_KEYS,
               f"materials.{name}")
    chem = read_chemical(r, data)  # validates [chemical] once, with its key paths
    flow = r.table(data.get("flow"), "flow")
    r.keys(flow, FLOW_KEYS, "flow")
    q = r.optional(flow, "darcy_flux", "velocity", "flow", default=0.0)
    props, unit_layers = {}, []
    for name, mat in materials.items():  # each material as a 1 m layer, to validate keys
        unit_layers.append(read_layer(r, {**mat, "thickness": "1 m", "name": name}, name,
                                      chem, q, 0.0, True, key=f"materials.{name}")[0])
        props[name] = material_properties(r, name, mat)
    top_bc = read_boundary(r, data, "top", q)
    bottom_bc = read_boundary(r, data, "bottom", q)
    for end, bc in (("top", top_bc), ("bottom", bottom_bc)):
        if bc.kind == "source-zone":  # refused here, not after the run has started
            raise r.error(f"{end}.kind", bc.kind, "a source zone is not solved in site "
                          "runs (its condition depends on each mode's decay rate; a site "
                          "solves every boring by modal superposition)",
                          fix="run the borings that need one as scenarios (stratiflux run), "
                          "or give the site a concentration with a schedule")
    out = r.table(data.get("output"), "output", required=True)
    r.keys(out, SITE_OUTPUT_KEYS, "output")
    times = read_times(r, out.get("times"))
    level = r.optional(out, "screening_level", "concentration", "output", low=0, low_open=True)
    life = r.optional(out, "design_life", "time", "output", low=0, low_open=True)
    for k, v in (("screening_level", level), ("design_life", life)):
        if v is None:
            raise r.error(f"output.{k}", problem="missing (a site run reports against it)",
                          fix='e.g. screening_level = "5 ug/L", design_life = "50 yr"')
    positive = times[times > 0]
    if positive.size == 0 or life <= positive.min():
        raise r.error("output.design_life", out["design_life"], "must exceed the earliest "
                      "positive output time", fix="add an earlier output time")
    check_advection(r, unit_layers, q, float(max(times.max(), life)), "flow.darcy_flux")
    tol = r.optional(out, "tolerance", "dimensionless", "output",
                     default=DEFAULT_TOLERANCE, low=1e-14, high=1e-2)
    if "receptor_depth" in out and "receptor_elevation" in out:
        raise r.error("output.receptor_elevation", out["receptor_elevation"],
                      "given together with receptor_depth", fix="keep one")
    rec_depth = r.optional(out, "receptor_depth", "length", "output", low=0, low_open=True)
    rec_elev = r.optional(out, "receptor_elevation", "length", "output")
    dists, n_real, seed, sampling = _uncertainty(r, data)

    bpath, btext, braw, ltext, logs = _read_both_tables(r, data, crs, materials)
    itext, initial = "", {}
    if data.get("initial_file") is not None:
        _, itext, initial = read_initial(
            r, data, {b: f"{bpath.name} line {v[0]}" for b, v in braw.items()},
            {b: logs[b][-1][1] for b in braw}, bpath)
    borings, bad = [], []
    for bid, (line, x, y, lon, lat, elev) in braw.items():
        ivs = tuple((a, b, m) for a, b, m, _ in logs[bid])
        bottom = ivs[-1][1]
        depth = bottom if rec_depth is None and rec_elev is None else (
            rec_depth if rec_depth is not None else elev - rec_elev)
        if not 0 < depth <= bottom * (1 + 1e-12):
            bad.append(f"boring {bid} ({bpath.name} line {line}): receptor at {depth:g} m "
                       f"below ground, the log ends at {bottom:g} m")
        borings.append(Boring(bid, x, y, lon, lat, elev, ivs, min(depth, bottom),
                              initial.get(bid, ())))
    if bad:
        key = "output.receptor_elevation" if rec_elev is not None else "output.receptor_depth"
        raise r.error(key, problem=f"outside {len(bad)} boring(s):\n  " + "\n  ".join(bad),
                      fix="deepen those logs or move the receptor")
    grid = _common_grid(r, out, max(b.depth for b in borings))
    nseg = max(len(b.intervals) + len(b.initial) for b in borings)
    need = run_memory_bytes(times.size, grid.size, nseg)
    if need > MEMORY_BUDGET:
        raise r.error("output", problem=f"each boring's run would need about "
                      f"{need / 1e9:.3g} GB of memory ({times.size} output times x "
                      f"{grid.size} depths, up to {nseg} layers and profile pieces), more "
                      f"than the {MEMORY_BUDGET / 1024 ** 3:.0f} GiB budget",
                      fix="ask for fewer output times or a coarser output.depth_spacing, or "
                      "merge thin intervals of the logs")
    digest = hashlib.sha256()
    for part in (text, btext, ltext, itext):
        digest.update(part.encode("utf-8") + b"\0")
    times.setflags(write=False)
    return Site(title=title, path=file, crs_text=crs.to_wkt(), epsg=crs.to_epsg(),
                borings=tuple(borings), data=data, times=times, depths=grid,
                screening_level=level, design_life=life, tolerance=tol, distributions=dists,
                realizations=n_real, seed=seed, sampling=sampling,
                fingerprint=digest.hexdigest(), source_text=text, materials=props,
                chemical=chem, darcy_flux=q, top=top_bc, bottom=bottom_bc)


def load_site(path: str | Path) -> Site:
    """Read and validate a site file and the CSV files it names."""
    if not isinstance(path, (str, os.PathLike)):
        raise TypeError(f"load_site takes the path of a site file, not a "
                        f"{type(path).__name__}" + (" (this one is loaded already)"
                                                    if isinstance(path, Site) else ""))
    text = read_text_file(path)
    return parse_site(text, path)


# ------------------------------------------------------------------------ one boring
def boring_scenario(site: Site, boring: Boring | str, overrides: dict | None = None) -> Scenario:
    """The single-column :class:`~transport.scenario.schema.Scenario` of one boring.

    The log's intervals are its layers (name = material), each derived from the site's
    SI values by :func:`transport.model.media.derive_layer` (as a scenario file's layers
    are), with the boring's receptor depth and measured initial profile: the scenario a
    user would write for that boring.

    Parameters
    ----------
    site : Site
    boring : Boring or str
        The boring or its id.
    overrides : dict, optional
        Parameter paths (``"materials.clay.distribution_coefficient"``) to SI values
        (one Monte Carlo draw).

    Returns
    -------
    Scenario
        Its ``output.depths`` are the scenario's own grid (the column in 200 intervals);
        a site run uses the common grid ``site.depths`` cut at the boring's bottom.
    """
    if isinstance(boring, str):
        boring = next(b for b in site.borings if b.id == boring)
    mats, chem, q = properties_in_force(site, overrides)
    chemical = site.chemical
    drawn = [k.split(".")[1] for k in overrides or () if k.startswith("chemical.")]
    if drawn:  # values in force, given like a scenario file's
        chemical = dataclasses.replace(chemical, **chem, sources={
            **chemical.sources, **{k: "scenario file" for k in drawn}})
    layers, details, top = [], [], 0.0
    for a, b, m in boring.intervals:
        derived = derive_material(site, m, mats[m], chem, q, thickness=b - a)
        layers.append(derived.layer)
        details.append(layer_detail(derived, top, chemical))
        top += derived.layer.thickness
    column = Column(tuple(layers), site.top, site.bottom, q)
    receptor = min(boring.receptor_depth, column.length)
    depths = depth_grid(column, receptor)
    depths.setflags(write=False)
    output = OutputSpec(site.times, depths, receptor, site.screening_level, site.design_life,
                        site.tolerance)
    return Scenario(title=f"{site.title}, boring {boring.id}", path=site.path, column=column,
                    initial=boring.initial_state, chemical=chemical, output=output,
                    source_text="", layer_details=tuple(details))
