"""Scenario files: the initial profile samples and the [output] table (times, depths,
receptor, screening level, design life, tolerance)."""
from __future__ import annotations

import csv
import datetime as dt
import io
import math
import re
from dataclasses import dataclass

import numpy as np

from transport.model.column import Column, InitialState
from transport.scenario.layers import is_soil_concentration, read_concentration
from transport.scenario.reader import Reader
from transport.solvers.staged import MAX_SAMPLES
from transport.units import YEAR

__all__ = ["OutputSpec", "read_output", "read_times", "read_start_date", "read_samples",
           "read_samples_file",
           "sample_layer",
           "depth_grid", "with_cap_depths", "check_run_size", "check_advection",
           "run_memory_bytes", "handover_bytes", "MEMORY_BUDGET", "MAX_CONTOUR_NODES", "MAX_TIMES", "MAX_DEPTHS",
           "DEFAULT_DEPTH_INTERVALS", "DEFAULT_TOLERANCE"]

MAX_TIMES = 10_000  # output times; more is a typo, not a use case
MAX_DEPTHS = 20_001  # output depths
DEFAULT_DEPTH_INTERVALS = 200
DEFAULT_TOLERANCE = 1e-8
OUTPUT_KEYS = ("times", "depths", "depth_spacing", "receptor_depth", "screening_level",
               "design_life", "tolerance", "start_date")
TIME_RANGE_KEYS = ("start", "stop", "count", "spacing")


@dataclass(frozen=True, eq=False)
class OutputSpec:
    """What to compute: times (s), depths (m), receptor and screening settings, and the
    calendar date of time 0 (``start_date``, a UTC-aware datetime, or None)."""

    times: np.ndarray
    depths: np.ndarray
    receptor_depth: float
    screening_level: float | None = None
    design_life: float | None = None
    tolerance: float = DEFAULT_TOLERANCE
    start_date: dt.datetime | None = None


def read_samples_file(r: Reader, raw, length: float, layers=None) -> InitialState:
    """The measured profile of ``initial.samples_file``: a CSV file with a header of two
    columns carrying their units (``depth [m],concentration [mg/L]``), one sample a row.

    Parameters
    ----------
    r : Reader
        Reader of the scenario file (relative names are read from its folder).
    raw : str
        The file name as written.
    length : float
        Column length, m: no sample may lie below it.
    layers : list of dict, optional
        The layers' rows of the derived table, for soil concentrations (mg/kg), see
        :func:`read_samples`.

    Returns
    -------
    InitialState
        Piecewise linear through the samples (see :func:`read_samples`).
    """
    key = "initial.samples_file"
    path, text = r.input_file(raw, key, "a profile CSV (depth [unit],concentration [unit])",
                              example="profile.csv")
    lines = [ln for ln in text.splitlines() if ln.strip() and not ln.lstrip().startswith("#")]
    rows = list(csv.reader(io.StringIO("\n".join(lines))))
    header_units = [re.search(r"\[(.+)\]", h).group(1).strip() if re.search(r"\[(.+)\]", h)
                    else None for h in (rows[0] if rows else [])]
    if len(header_units) != 2 or not rows[1:]:
        raise r.error(key, raw, f"{path.name} must have a header of two columns and at least "
                      "one sample", fix="write e.g. 'depth [m],concentration [mg/L]' then rows")
    pairs = []
    for j, row in enumerate(rows[1:], start=1):
        if len(row) != 2:
            raise r.error(f"{key} row {j}", problem=f"{path.name} row {j} has {len(row)} "
                          "cell(s); each row needs exactly two (depth, concentration)",
                          fix="one sample per row: depth,concentration")
        pairs.append([c.strip() + (f" {u}" if u else "") for c, u in zip(row, header_units)])
    return read_samples(r, pairs, length, f"{key}({path.name}) row", base=1, layers=layers)


def read_samples(r: Reader, raw, length: float, key="initial.samples", base=1,
                 layers=None) -> InitialState:
    """A measured profile from ``[depth, concentration]`` pairs (top to bottom; a depth
    given twice is a step: the value just above, then just below).

    Parameters
    ----------
    r : Reader
    raw : list
        The pairs as written (``[["0 m", "80 mg/L"], ...]``).
    length : float
        Column length, m.
    key : str
        Key path for messages; ``base`` is the number of the first pair in them.
    layers : list of dict, optional
        The layers' rows of the derived table (name, top, bottom, bulk_density,
        water_content, distribution_coefficient, retardation_factor), needed for soil
        concentrations: a sample in mg/kg (ug/kg, g/kg) of dry soil is converted to pore
        water with the properties of the layer it was taken in
        (:func:`transport.scenario.layers.read_concentration`).  A sample at a layer face
        uses the layer below, as the profile's value at that depth is the deeper one;
        the first of two samples at one face depth (a step) uses the layer above.

    Returns
    -------
    InitialState
        ``InitialState.profile`` of the depths (m) and concentrations (kg m-3).
    """
    if not isinstance(raw, list) or not raw:
        raise r.error(key, raw, "must be a list of [depth, concentration] pairs",
                      fix='e.g. samples = [["0 m", "80 mg/L"], ["1 m", "0 mg/L"]]')
    depths, values = [], []
    for j, pair in enumerate(raw, start=base):
        where = f"{key}[{j}]"
        if not isinstance(pair, list) or len(pair) != 2:
            raise r.error(where, pair, "must be a [depth, concentration] pair",
                          fix='e.g. ["0.5 m", "40 mg/L"]')
        z = r.quantity(pair[0], "length", f"{where}[1]", low=0)
        if z > length * (1 + 1e-12):
            raise r.error(f"{where}[1]", pair[0], f"sample below the column bottom "
                          f"({length:g} m)", fix="drop the sample or add the layer it was taken in")
        z = min(z, length)
        if depths and z < depths[-1]:
            raise r.error(f"{where}[1]", pair[0], "sample depths must not decrease",
                          fix="list samples top to bottom; a depth given twice is a step "
                              "(value just above, then just below)")
        if len(depths) >= 2 and z == depths[-1] == depths[-2]:
            raise r.error(f"{where}[1]", pair[0], "a third sample at one depth",
                          fix="give at most two samples per depth: the value just above "
                              "and the value just below a step")
        depths.append(z)
        values.append(pair[1])
    for j, value in enumerate(values):
        where = f"{key}[{j + base}][2]"
        if not is_soil_concentration(value):
            values[j] = r.quantity(value, "concentration", where, low=0)
            continue
        if not layers:
            raise r.error(where, value, "a soil concentration needs the layers it was "
                          "taken in", fix='give the pore-water concentration, e.g. "40 mg/L"')
        above = j + 1 < len(depths) and depths[j + 1] == depths[j]
        index = sample_layer(layers, depths[j], above)
        values[j] = read_concentration(r, value, where, layers[index], f"layers[{index + 1}]")
    return InitialState.profile(depths, values)


def sample_layer(layers, depth: float, above: bool = False) -> int:
    """Index of the layer a sample at ``depth`` (m) was taken in: the one with
    top <= depth < bottom, so that at a face it is the layer below (the bottom face of
    the column belongs to the last layer); with ``above``, the one with
    top < depth <= bottom (the layer above a face; the top face belongs to the first).

    Parameters
    ----------
    layers : list of dict
        Rows with ``top`` and ``bottom`` (m), top first.
    depth : float
        Sample depth, m.
    above : bool
        Whether the sample is the value just above a step at ``depth``.

    Returns
    -------
    int
        Index into ``layers``.
    """
    for i, row in enumerate(layers):
        if (row["top"] < depth <= row["bottom"]) if above else \
                (row["top"] <= depth < row["bottom"]):
            return i
    return 0 if above else len(layers) - 1


def read_times(r: Reader, raw) -> np.ndarray:
    """The output times of ``output.times`` (s), sorted and unique.

    Parameters
    ----------
    r : Reader
    raw : list or dict
        A list of times (``["1 yr", "10 yr"]``) or a range table
        ``{start, stop, count, spacing = "linear" | "log"}``.

    Returns
    -------
    numpy.ndarray
        Finite times, s.
    """
    key = "output.times"
    if raw is None:
        raise r.error(key, problem="missing", fix='add times = ["1 yr", "10 yr"] or '
                      'times = {start = "1 yr", stop = "100 yr", count = 20}')
    if isinstance(raw, dict):
        r.keys(raw, TIME_RANGE_KEYS, key)
        for name in ("start", "stop", "count"):
            if name not in raw:
                raise r.error(f"{key}.{name}", problem="missing", fix="give start, stop and count")
        start = r.quantity(raw["start"], "time", f"{key}.start", low=0)
        stop = r.quantity(raw["stop"], "time", f"{key}.stop", low=start)
        count = raw["count"]
        if isinstance(count, bool) or not isinstance(count, int) or not 1 <= count <= MAX_TIMES:
            raise r.error(f"{key}.count", count, "must be a whole number",
                          allowed=f"1 to {MAX_TIMES}", fix="e.g. count = 20")
        spacing = raw.get("spacing", "linear")
        if spacing not in ("linear", "log"):
            raise r.error(f"{key}.spacing", spacing, "unknown spacing", allowed="linear | log")
        if spacing == "log" and start <= 0:
            raise r.error(f"{key}.start", raw["start"], "log spacing needs start > 0",
                          fix='e.g. start = "1 d"')
        times = (np.geomspace(start, stop, count) if spacing == "log"
                 else np.linspace(start, stop, count))
    elif isinstance(raw, list) and raw:
        if len(raw) > MAX_TIMES:
            raise r.error(key, problem=f"{len(raw)} times", allowed=f"at most {MAX_TIMES}")
        times = np.array([r.quantity(v, "time", f"{key}[{j}]", low=0)
                          for j, v in enumerate(raw, start=1)])
    else:
        raise r.error(key, raw, "must be a list of times or a {start, stop, count} table",
                      fix='e.g. times = ["1 yr", "10 yr", "50 yr"]')
    times = np.unique(times)
    if not np.all(np.isfinite(times)):
        raise r.error(key, raw, "times must be finite")
    return times


def depth_grid(column: Column, receptor: float, spacing: float | None = None) -> np.ndarray:
    """Output depths every ``spacing`` m from the top (default: the column length in
    :data:`DEFAULT_DEPTH_INTERVALS` intervals), plus the layer interfaces, the bottom
    and the receptor depth; sorted, within the column.

    Parameters
    ----------
    column : Column
    receptor : float
        Receptor depth, m.
    spacing : float, optional
        Depth step, m.

    Returns
    -------
    numpy.ndarray
    """
    length = column.length
    step = length / DEFAULT_DEPTH_INTERVALS if spacing is None else spacing
    count = length / step
    grid = list(np.arange(int(math.ceil(count * (1 - 1e-12)))) * step)
    grid = np.unique(np.concatenate([grid, column.interfaces, [receptor]]))
    return grid[(grid >= 0) & (grid <= length)]


def _depths(r: Reader, out, column: Column, receptor: float):
    length = column.length
    if "depths" in out and "depth_spacing" in out:
        raise r.error("output.depth_spacing", out["depth_spacing"], "given together with "
                      "output.depths", fix="keep one of them")
    if "depths" in out:
        raw = out["depths"]
        if not isinstance(raw, list) or not raw or len(raw) > MAX_DEPTHS:
            raise r.error("output.depths", raw, "must be a non-empty list of depths",
                          allowed=f"at most {MAX_DEPTHS}", fix='e.g. depths = ["0 m", "1 m"]')
        grid = [min(r.quantity(v, "length", f"output.depths[{j}]", low=0,
                               high=length * (1 + 1e-12)), length)
                for j, v in enumerate(raw, start=1)]
    else:
        step = r.optional(out, "depth_spacing", "length", "output",
                          default=length / DEFAULT_DEPTH_INTERVALS, low=0, low_open=True)
        count = length / step
        if not math.isfinite(count) or count > MAX_DEPTHS - 1:
            raise r.error("output.depth_spacing", out.get("depth_spacing"), f"gives "
                          f"{count:.3g} depths", allowed=f"at most {MAX_DEPTHS}",
                          fix="use a coarser spacing")
        return depth_grid(column, receptor, step)
    grid = np.unique(np.concatenate([grid, column.interfaces, [receptor]]))
    return grid[(grid >= 0) & (grid <= length)]


def read_start_date(r: Reader, raw) -> dt.datetime | None:
    """The calendar date of time 0 (``output.start_date``), in UTC.

    Parameters
    ----------
    r : Reader
    raw : str, datetime.date, datetime.datetime or None
        An ISO 8601 date, optionally with a time and ``Z`` or an offset
        (``"2027-03-01"``, ``"2027-03-01T06:00:00+01:00"``); a bare TOML date or
        date-time is taken as well. A date or time without an offset is UTC.

    Returns
    -------
    datetime.datetime or None
        Timezone-aware, UTC; None when ``raw`` is None.

    Examples
    --------
    >>> read_start_date(reader, "2027-03-01T06:00:00+01:00")  # doctest: +SKIP
    datetime.datetime(2027, 3, 1, 5, 0, tzinfo=datetime.timezone.utc)
    """
    if raw is None:
        return None
    key = "output.start_date"
    value = raw
    if isinstance(raw, str):
        text = raw.strip()
        try:
            if not re.match(r"^\d{4}-\d{2}-\d{2}([T ]|$)", text):
                raise ValueError(text)
            value = dt.datetime.fromisoformat(text)
        except ValueError:
            raise r.error(key, raw, "not an ISO 8601 date",
                          fix='e.g. start_date = "2027-03-01" or '
                              '"2027-03-01T00:00:00Z"') from None
    if isinstance(value, dt.date) and not isinstance(value, dt.datetime):
        value = dt.datetime(value.year, value.month, value.day)
    if not isinstance(value, dt.datetime):
        raise r.error(key, raw, "must be an ISO 8601 date",
                      fix='e.g. start_date = "2027-03-01"')
    if value.tzinfo is None:
        return value.replace(tzinfo=dt.timezone.utc)
    return value.astimezone(dt.timezone.utc)


def read_output(r: Reader, data, column: Column) -> OutputSpec:
    """The ``[output]`` table of a scenario for ``column``: times, depths, receptor,
    screening level, design life and tolerance (SI), validated together, and the
    optional calendar start date (:func:`read_start_date`).

    Parameters
    ----------
    r : Reader
    data : dict
        The parsed file (its ``output`` table is read).
    column : Column
        The column the depths and the receptor must lie in.

    Returns
    -------
    OutputSpec
    """
    out = r.table(data.get("output"), "output", required=True)
    r.keys(out, OUTPUT_KEYS, "output")
    times = read_times(r, out.get("times"))
    receptor = min(r.optional(out, "receptor_depth", "length", "output",
                              default=column.length, low=0,
                              high=column.length * (1 + 1e-12)), column.length)
    depths = _depths(r, out, column, receptor)
    level = r.optional(out, "screening_level", "concentration", "output", low=0, low_open=True)
    life = r.optional(out, "design_life", "time", "output", low=0, low_open=True)
    positive = times[times > 0]
    if positive.size == 0:
        raise r.error("output.times", out.get("times"), "no output time after 0 (the "
                      "initial state is all a run at t = 0 can show)",
                      fix='add a later time, e.g. times = ["1 yr", "10 yr"]')
    if life is not None and life <= positive.min():
        raise r.error("output.design_life", out["design_life"], "must exceed the earliest "
                      f"positive output time ({positive.min() / YEAR:.4g} yr): the "
                      "receptor metrics are read over the design life",
                      fix="add an earlier output time or correct the design life")
    tol = r.optional(out, "tolerance", "dimensionless", "output", default=DEFAULT_TOLERANCE,
                     low=1e-14, high=1e-2)
    start_date = read_start_date(r, out.get("start_date"))
    times.setflags(write=False)
    depths.setflags(write=False)
    return OutputSpec(times, depths, receptor, level, life, tol, start_date)


def with_cap_depths(output: OutputSpec, timeline) -> OutputSpec:
    """Add output depths above the original top where a cap is placed (negative depths).

    Parameters
    ----------
    output : OutputSpec
    timeline : transport.solvers.timeline.Timeline
        Its stages' offsets say where the top of the column moves.

    Returns
    -------
    OutputSpec
        ``output`` itself when no stage lies above the original top.
    """
    top = min(st.offset for st in timeline.stages)
    if top >= 0:
        return output
    d = np.asarray(output.depths)
    step = -top / 20
    if d.size > 1:
        diffs = np.diff(d)
        step = float(np.min(diffs))
        # a layer face or the receptor close to a grid depth makes the smallest gap much
        # finer than the grid spacing; the cap is sampled at the spacing itself
        step = max(step, float(np.median(diffs)) if step < 0.5 * np.median(diffs) else step)
    faces = [f + st.offset for st in timeline.stages for f in st.column.interfaces]
    extra = np.concatenate([np.arange(top, 0.0, step), faces])
    depths = np.unique(np.concatenate([d, extra[extra < d.max()]]))
    depths.setflags(write=False)
    return OutputSpec(output.times, depths, output.receptor_depth, output.screening_level,
                      output.design_life, output.tolerance, output.start_date)


#: Memory a run may take (bytes) before it is refused up front (4 GiB: a laptop's share).
MEMORY_BUDGET = 4 * 1024 ** 3


#: Bytes a staged run's hand-over keeps per sample and layer (depth, C, dC/dz, length
#: and four cubic coefficients, float64) ...
HANDOVER_BYTES_PER_SAMPLE = 64
#: ... and works with per sample while sampling (one Laplace inversion per sample
#: depth: ~100 contour nodes x 3 quantities, complex128).
HANDOVER_WORK_PER_SAMPLE = 4800


def handover_bytes(n_layers: int, stage_changes: int) -> float:
    """Most memory the staged Laplace engine's cubic Hermite hand-over can take (bytes):
    up to ``MAX_SAMPLES`` samples per layer (transport.solvers.staged) kept for every
    stage change, plus the working arrays of one sampling pass."""
    if stage_changes <= 0:
        return 0.0
    return MAX_SAMPLES * (float(stage_changes) * n_layers * HANDOVER_BYTES_PER_SAMPLE
                          + HANDOVER_WORK_PER_SAMPLE)


def run_memory_bytes(n_times: int, n_depths: int, n_segments: int,
                     stage_changes: int = 0) -> float:
    """Estimated peak memory of a run (bytes): about 6 kB per output point plus 50 B per
    point and segment of the column (layers and profile pieces) for the engines' working
    arrays, and a fixed 150 MB.  Measured with the two-layer starter column (5.5-5.8 kB
    per point at 4e3 to 4e5 points) and with 300 and 1000 equal layers (17 and 54 kB
    per point).  A staged run solves its stages one after another: the largest stage
    counts, plus the state handed over at each of its ``stage_changes``
    (:func:`handover_bytes`, with ``n_segments`` layers)."""
    points = float(n_times) * float(n_depths)
    return (150e6 + points * (6e3 + 50.0 * n_segments)
            + handover_bytes(n_segments, stage_changes))


#: Most nodes per output time of the Laplace engine's parabolic contour (its count is
#: 12 sqrt(s0 t) + 24, s0 = q^2 / (4 theta D theta R): transport.solvers.laplace.parabola_count).
MAX_CONTOUR_NODES = 20_000


def check_advection(r: Reader, layers, q: float, t_max: float, key: str):
    """Refuse a column whose advection so dominates dispersion that the Laplace engine's
    contour would need more than :data:`MAX_CONTOUR_NODES` nodes per output time (this
    is where a memory cliff or an endless run would come from)."""
    if q == 0 or not layers:
        return
    worst = max(layers, key=lambda lay: q * q / (4 * lay.water_content * lay.diffusivity
                                                  * lay.water_content * lay.retardation))
    s0 = q * q / (4 * worst.water_content * worst.diffusivity * worst.water_content * worst.retardation)
    nodes = 12 * math.sqrt(s0 * t_max) + 24
    if nodes > MAX_CONTOUR_NODES:
        peclet = abs(q) * worst.thickness / (worst.water_content * worst.diffusivity)
        raise r.error(key, problem=f"advection dominates dispersion too strongly in layer "
                      f"{worst.name!r} (layer Peclet number {peclet:.3g}): the engines would "
                      f"need about {nodes:.3g} contour nodes per output time, more than "
                      f"{MAX_CONTOUR_NODES}",
                      fix="give the layer a dispersivity (common practice: about a tenth of "
                      "the travel distance) or check darcy_flux and pore_diffusivity")


def check_run_size(r: Reader, output: OutputSpec, column: Column, initial, timeline=None):
    """Refuse up front a run whose working memory would exceed :data:`MEMORY_BUDGET`, or
    whose advection the engines cannot invert (:func:`check_advection`)."""
    t_max = float(max(output.times.max(), output.design_life or 0.0))
    columns = [column] if timeline is None else [st.column for st in timeline.stages]
    for col in columns:
        check_advection(r, col.layers, col.darcy_flux, t_max, "flow.darcy_flux")
    nseg = len(column.layers) + (len(initial.depths) if initial.kind == "profile" else 0)
    stages = 1
    if timeline is not None:
        stages = len(timeline.stages)
        nseg = max([nseg] + [len(st.column.layers) for st in timeline.stages])
    need = run_memory_bytes(output.times.size, output.depths.size, nseg, stages - 1)
    if need > MEMORY_BUDGET:
        raise r.error("output", problem=f"the run would need about {need / 1e9:.3g} GB of "
                      f"memory ({output.times.size} output times x {output.depths.size} "
                      f"depths, {len(column.layers)} layer(s)"
                      + (f", {stages} stages" if stages > 1 else "") + "), more than the "
                      f"{MEMORY_BUDGET / 1024 ** 3:.0f} GiB budget",
                      fix="ask for fewer output times (output.times) or depths (a coarser "
                      "output.depth_spacing), or merge thin layers")
