"""The CF layout of one column run, without a file library: every variable of the file
(dimensions, values, attributes, encoding) and the global attributes.

:func:`column_layout` is the single description of the file of ``stratiflux run``
(CF-1.11 single-station ``timeSeriesProfile``, see :mod:`transport.io.netcdf`). Two
writers read it: :func:`transport.io.netcdf.column_dataset` turns it into an
``xarray.Dataset`` (for notebooks, comparisons and decay chains), and
:func:`transport.io.netcdf_file.write_layout` writes it with netCDF4-python directly,
so that a single run does not load xarray and pandas (start-up time). Both give the
same file (tests/test_netcdf_file.py).
"""
from __future__ import annotations

import datetime as _dt
import sys
from dataclasses import dataclass
from importlib.metadata import PackageNotFoundError, version

import numpy as np

from transport.caution import CAUTION
from transport.io.cf_time import time_comment, time_units
from transport.io.netcdf_metrics import metric_variables
from transport.units import DAY

__all__ = ["FILL_VALUE", "COMPRESSION", "ColumnLayout", "column_layout", "package_version",
           "utc_now", "depth_bounds", "source_text"]

#: Fill value of the fields (NETCDF.md); all floating fields are float64.
FILL_VALUE = -9999.0
#: zlib level 4 + shuffle: readable by every GDAL and netCDF-C build (NETCDF.md).
COMPRESSION = {"zlib": True, "complevel": 4, "shuffle": True}

_BUDGET_TERMS = (
    # key in solution.budget, variable name, long_name
    ("stored", "stored_mass", "dissolved plus sorbed mass stored in the column per unit area"),
    ("initial_stored", "initial_stored_mass",
     "dissolved plus sorbed mass stored in the column per unit area at time 0"),
    ("entered_top", "mass_entered_top",
     "cumulative mass per unit area that entered through the top of the column"),
    ("left_bottom", "mass_left_bottom",
     "cumulative mass per unit area that left through the bottom of the column"),
    ("decayed", "mass_decayed", "cumulative mass per unit area removed by first-order decay"),
    ("produced", "mass_produced",
     "cumulative mass per unit area added by zero-order sources"),
    ("residual", "mass_balance_residual",
     "mass balance residual per unit area: stored - initial - entered + left + decayed "
     "- produced (zero for an exact solution)"),
)


def package_version() -> str:
    """Installed distribution version of stratiflux, else the package's ``__version__``
    (a source checkout that was never installed)."""
    try:
        return version("stratiflux")
    except PackageNotFoundError:
        # the package is loaded (this module is part of it); reading its attribute
        # instead of importing it keeps the package's lazy namespace out of the graph
        return str(sys.modules["transport"].__version__)


def utc_now() -> str:
    """The current UTC time as ISO 8601 to the second, e.g. ``2026-01-31T09:15:00Z``."""
    return _dt.datetime.now(_dt.timezone.utc).replace(microsecond=0).isoformat().replace(
        "+00:00", "Z")


def depth_bounds(depths: np.ndarray, length: float) -> np.ndarray:
    """Cell bounds around each depth node: midpoints inside, the column faces outside.

    Parameters
    ----------
    depths : numpy.ndarray
        Increasing depths, m.
    length : float
        Depth of the bottom face of the column, m.

    Returns
    -------
    numpy.ndarray
        Shape ``(depths.size, 2)``: upper and lower bound of each cell (CF ``bounds``).
    """
    edges = np.empty(depths.size + 1)
    edges[1:-1] = 0.5 * (depths[1:] + depths[:-1])
    edges[0] = min(0.0, depths[0])
    edges[-1] = max(length, depths[-1])
    return np.column_stack([edges[:-1], edges[1:]])


def _as_array(name: str, value, shape: tuple) -> np.ndarray:
    arr = np.asarray(value, dtype=float)
    if arr.shape != shape:
        raise ValueError(f"solution.{name} has shape {arr.shape}, expected {shape} "
                         "(times, depths)")
    return arr


_ERROR_VARS = (("concentration", "concentration_error_bound", "kg m-3"),
               ("total_flux", "total_flux_error_bound", "kg m-2 s-1"),
               ("cumulative_mass", "cumulative_mass_error_bound", "kg m-2"),
               ("budget", "budget_error_bound", "kg m-2"))


#: What each engine is, in the ``source`` attribute.
_ENGINE_METHODS = {
    "modal": "eigenfunction expansion on the exact layered spectrum",
    "laplace": "exact layered Laplace-domain solution, numerically inverted on "
               "hyperbolic, Talbot or parabolic contours",
    "finite-volume": "finite-volume method of lines",
}


def source_text(solution) -> str:
    """The ``source`` attribute: the tool, its version and the engine(s) that produced
    the values of the file.

    Built from ``solution.engine`` (one engine name, or several joined by ``+``) and,
    for a checked run, ``solution.engine_by_time`` (the engine that served each output
    time): with several engines each is followed by the number of output times it
    served; in a checked run the modal and finite-volume values were confirmed by the
    Laplace engine (an unchecked modal or finite-volume solution says nothing of the
    kind); the mode count is given where the run kept a modal series.

    Parameters
    ----------
    solution : Solution
        ``engine``, and where present ``engine_by_time``, ``n_modes``, ``tolerance``.

    Returns
    -------
    str

    Examples
    --------
    >>> source_text(solution)                                      # doctest: +SKIP
    'stratiflux 0.1.0; engine finite-volume: finite-volume method of lines, confirmed ...'
    """
    engine = str(solution.engine)
    names = engine.split("+")
    by_time = solution.engine_by_time
    served = None
    if by_time is not None:
        served = [str(e) for e in np.asarray(by_time, dtype=object).ravel()
                  if e and str(e) != "initial"]
    n_modes = int(solution.n_modes or 0)
    parts = []
    for name in names:
        text = _ENGINE_METHODS.get(name, name)
        if name == "modal" and n_modes > 0:
            text += f" ({n_modes} modes)"
        if served is not None and name in ("modal", "finite-volume"):
            text += ", confirmed by numerical Laplace inversion"
        if served is not None and len(names) > 1:
            text += f" (at {served.count(name)} of {len(served)} output times)"
        parts.append(text)
    tol = solution.tolerance
    text = f"stratiflux {package_version()}; engine {engine}: " + "; ".join(parts)
    if tol is not None:
        text += f"; every value within {tol:g} of the scale of its quantity " \
                "(see the *_error_bound variables) unless flagged in reliable"
    return text


def _check_variables(solution, nt: int, caution: str) -> dict:
    """Per output time: the engine that served it, whether it was vouched for, and the
    error bound of every quantity (largest over depths / budget terms)."""
    out = {}
    by_time = solution.engine_by_time
    if by_time is not None:
        names = np.array([str(e) if e else "none" for e in by_time], dtype=object)
        out["engine"] = (("time",), names, {
            "long_name": "solution method that served this output time",
            "comment": "modal: eigenfunction expansion confirmed by the Laplace engine; "
                       "laplace: numerical Laplace inversion; finite-volume: method of "
                       "lines; initial: the initial state; none: refused"})
    reliable = solution.reliable
    if reliable is not None:
        out["reliable"] = (("time",), np.asarray(reliable, dtype=np.int8), {
            "long_name": "whether every value at this output time is within the stated "
                         "tolerance", "flag_values": np.array([0, 1], dtype=np.int8),
            "flag_meanings": "refused_values_missing vouched_within_tolerance"})
    error = solution.error
    for key, name, units in _ERROR_VARS:
        if error is None or error.get(key) is None:
            continue
        vals = np.asarray(error[key], dtype=float).reshape(nt)
        out[name] = (("time",), np.where(np.isfinite(vals), vals, np.nan), {
            "long_name": f"bound of the absolute error of {key.replace('_', ' ')} at this "
                         "output time (largest over depths or budget terms)",
            "units": units, "coverage_content_type": "qualityInformation",
            "comment": caution})
    return out


@dataclass(frozen=True)
class ColumnLayout:
    """Every variable of a column file, in file order: the data variables, then the
    coordinates, then the receptor metrics; each ``(dims, values, attrs, encoding)``
    as xarray takes it (``encoding``: ``_FillValue``, ``dtype``, compression). ``attrs``
    are the global attributes."""

    data_vars: dict
    coords: dict
    metrics: dict
    attrs: dict


def column_layout(solution, *, title: str, scenario_text: str | None = None,
                  screening_level: float | None = None,
                  receptor_depth: float | None = None,
                  history: str | None = None, station_id: str = "column",
                  porosity=None, metrics=None, start_date=None) -> ColumnLayout:
    """The CF layout of one column run (no file is written).

    Parameters
    ----------
    solution : Solution
        What an engine returns (:class:`transport.solvers.result.Solution`), or any
        object with the same attributes
        (``column, times, depths, concentration, total_flux, cumulative_mass, budget,
        n_modes, engine``), SI units.
    title : str
        Short title of the run (the scenario title).
    scenario_text : str, optional
        Full text of the scenario file, stored verbatim in the ``scenario_text``
        global attribute so the file documents its own inputs.
    screening_level : float, optional
        Screening level, kg m-3; stored as a scalar variable.
    receptor_depth : float, optional
        Depth of the receptor (point of compliance), m; stored as a scalar variable.
    history : str, optional
        Command line or call that produced the file; prefixed with the UTC time.
    station_id : str
        Name of the single station (CF ``timeseries_id``).
    porosity : sequence of float, optional
        Total porosity n of each layer, written as ``porosity`` beside the water-filled
        ``water_content`` theta that the engines use (they differ above the water table).
    metrics : ReceptorViews, optional
        Receptor metrics, written as scalar variables (:mod:`transport.io.netcdf_metrics`).
    start_date : datetime.datetime, optional
        Calendar date of time 0 (timezone-aware): the time units count days from it
        (:func:`time_units`); without it from the nominal :data:`NOMINAL_START`.

    Returns
    -------
    ColumnLayout
        Encodings (compression, fill values, dtypes) are set on each variable.
    """
    times = np.asarray(solution.times, dtype=float)
    depths = np.asarray(solution.depths, dtype=float)
    if times.ndim != 1 or depths.ndim != 1 or times.size == 0 or depths.size == 0:
        raise ValueError("solution.times and solution.depths must be non-empty 1-D arrays")
    if np.any(np.diff(depths) <= 0):
        raise ValueError("solution.depths must increase strictly (m, positive down)")
    if np.any(np.diff(times) <= 0):
        raise ValueError("solution.times must increase strictly (s)")
    shape = (times.size, depths.size)
    column = solution.column
    layers = column.layers
    interfaces = np.asarray(column.interfaces, dtype=float)
    created = utc_now()
    caution = CAUTION

    def field(values, units, long_name, extra=""):
        return (("time", "depth"), values, {
            "long_name": long_name, "units": units,
            "coverage_content_type": "modelResult",
            "comment": (extra + " " if extra else "") + caution})

    data_vars = {
        "concentration": field(
            _as_array("concentration", solution.concentration, shape), "kg m-3",
            "pore-water concentration of the dissolved contaminant",
            "At a face with a partition jump the value just below the face is given."),
        "total_flux": field(
            _as_array("total_flux", solution.total_flux, shape), "kg m-2 s-1",
            "total (advective plus dispersive) contaminant mass flux, positive downward",
            "F = q C - theta D dC/dz per unit area of the column."),
        "cumulative_mass": field(
            _as_array("cumulative_mass", solution.cumulative_mass, shape), "kg m-2",
            "cumulative contaminant mass per unit area that crossed the depth downward "
            "since time 0"),
    }
    budget = solution.budget or {}
    for key, name, long_name in _BUDGET_TERMS:
        if key in budget:
            values = np.asarray(budget[key], dtype=float)
            if values.shape != (times.size,):
                raise ValueError(f"solution.budget[{key!r}] has shape {values.shape}, "
                                 f"expected ({times.size},)")
            data_vars[name] = (("time",), values, {
                "long_name": long_name, "units": "kg m-2",
                "coverage_content_type": "modelResult", "comment": caution})

    layer_attrs = {"coverage_content_type": "modelResult"}
    data_vars.update({
        "layer_name": (("layer",), np.array([lay.name or f"layer {i + 1}"
                                             for i, lay in enumerate(layers)], dtype=object),
                       {"long_name": "name of the layer", **layer_attrs}),
        "layer_top": (("layer",), interfaces[:-1],
                      {"long_name": "depth of the top face of the layer", "units": "m",
                       **layer_attrs}),
        "layer_bottom": (("layer",), interfaces[1:],
                         {"long_name": "depth of the bottom face of the layer", "units": "m",
                          **layer_attrs}),
        "water_content": (("layer",), [lay.water_content for lay in layers],
                          {"long_name": "volumetric water content (water-filled porosity) of "
                                        "the layer", "units": "1", **layer_attrs}),
        "diffusivity": (("layer",), [lay.diffusivity for lay in layers],
                        {"long_name": "pore-water diffusion plus mechanical dispersion "
                                      "coefficient of the layer", "units": "m2 s-1",
                         **layer_attrs}),
        "retardation_factor": (("layer",), [lay.retardation for lay in layers],
                               {"long_name": "retardation factor of the layer", "units": "1",
                                **layer_attrs}),
        "decay_rate": (("layer",), [lay.decay_rate for lay in layers],
                       {"long_name": "first-order decay rate of the layer", "units": "s-1",
                        **layer_attrs}),
        "source_rate": (("layer",), [lay.source_rate for lay in layers],
                        {"long_name": "zero-order production rate per bulk volume of the "
                                      "layer", "units": "kg m-3 s-1", **layer_attrs}),
        "partition_to_next": (("layer",), [lay.partition_to_next for lay in layers],
                              {"long_name": "partition coefficient at the lower face of the "
                                            "layer (C below = K C above)", "units": "1",
                               **layer_attrs}),
        # a data variable, not a coordinate: xarray would list a bounds coordinate in a
        # non-standard global "coordinates" attribute
        "depth_bnds": (("depth", "nv"), depth_bounds(depths, float(column.length)),
                       {"units": "m"}),
        "darcy_flux": ((), float(column.darcy_flux),
                       {"long_name": "steady Darcy flux, positive downward",
                        "units": "m s-1", **layer_attrs}),
    })
    if porosity is not None:
        values = np.asarray(porosity, dtype=float)
        if values.shape != (len(layers),):
            raise ValueError(f"porosity has shape {values.shape}, expected ({len(layers)},)")
        data_vars["porosity"] = (("layer",), values, {
            "long_name": "total porosity of the layer", "units": "1", **layer_attrs})
    data_vars.update(_check_variables(solution, times.size, caution))
    if screening_level is not None:
        data_vars["screening_level"] = ((), float(screening_level), {
            "long_name": "screening level of pore-water concentration used in the summary",
            "units": "kg m-3", "comment": caution})
    if receptor_depth is not None:
        data_vars["receptor_depth"] = ((), float(receptor_depth), {
            "long_name": "depth of the receptor (point of compliance) below the column top",
            "units": "m"})

    coords = {
        "time": (("time",), times / DAY, {
            "standard_name": "time", "long_name": "elapsed time since the start of the run",
            "units": time_units(start_date), "calendar": "proleptic_gregorian",
            "units_metadata": "leap_seconds: none", "axis": "T",
            "comment": time_comment(start_date)}),
        "depth": (("depth",), depths, {
            "standard_name": "depth", "long_name": "depth below the top of the column",
            "units": "m", "positive": "down", "axis": "Z", "bounds": "depth_bnds"}),
        "layer": (("layer",), np.arange(1, len(layers) + 1, dtype=np.int32),
                  {"long_name": "layer index, 1 at the top"}),
        "station_id": ((), station_id, {"long_name": "station identifier",
                                        "cf_role": "timeseries_id"}),
    }

    n_layers = len(layers)
    attrs = {
        "Conventions": "CF-1.11",
        "featureType": "timeSeriesProfile",
        "title": str(title),
        "summary": (
            f"Dissolved-contaminant pore-water concentration, total mass flux and "
            f"cumulative mass versus depth and elapsed time in a layered soil column "
            f"({n_layers} layer{'s' if n_layers != 1 else ''}, {column.length:g} m), "
            f"with the column mass budget."),
        "source": source_text(solution),
        "history": f"{created} {history or 'transport.io.netcdf.write_column_netcdf'}",
        "references": (
            "CF Conventions 1.11 (https://cfconventions.org); "
            "Pruess and Fulton 1993, ACM TOMS 19:360; "
            "Hickson, Barry and Mercer 2009, Int. J. Heat Mass Transfer 52:5776; "
            "Carr and Turner 2016, Appl. Math. Model. 40:7034"),
        "comment": caution,
        "date_created": created,
    }
    if scenario_text is not None:
        attrs["scenario_text"] = str(scenario_text)
    for end in ("top", "bottom"):
        bc = getattr(column, end)
        if bc.kind == "source-zone":  # transport.model.column.Boundary
            attrs[f"source_zone_{end}"] = (
                f"well-mixed source zone of finite inventory: initial pore-water "
                f"concentration {bc.value:.9g} kg m-3, capacity {bc.capacity:.9g} m, decay rate "
                f"{bc.decay_rate:.9g} s-1, initial inventory {bc.zone_inventory():.9g} kg m-2")
    timeline = solution.timeline
    if timeline is not None and len(timeline.stages) > 1:
        attrs["stages"] = "; ".join(
            f"from {st.start / DAY:.6g} days: {st.label or 'initial column'} "
            f"(top of the column at depth {st.offset:g} m)" for st in timeline.stages)
        attrs["summary"] += (" The column changes with time (see the stages attribute); "
                             "depths are below its original top and values are missing "
                             "where the column does not exist at that time; the layer "
                             "variables describe the initial column.")

    return ColumnLayout(data_vars=_encoded(data_vars, coords=False),
                        coords=_encoded(coords, coords=True),
                        metrics=metric_variables(metrics), attrs=attrs)


def _encoded(variables: dict, coords: bool) -> dict:
    """``(dims, values, attrs)`` -> ``(dims, values, attrs, encoding)``: coordinates,
    strings and the layer and scalar variables without fill value or compression;
    the (time, depth) fields and the per-time series (budget, error bounds) as
    compressed float64 with :data:`FILL_VALUE` (NETCDF.md)."""
    out = {}
    for name, (dims, values, attrs) in variables.items():
        dims = tuple(dims)
        if coords or name in ("layer_name", "depth_bnds", "engine", "reliable"):
            encoding = {"_FillValue": None}
        elif dims in (("time", "depth"), ("time",)):
            # double precision: single precision (1e-7) would break the stated tolerance
            encoding = {**COMPRESSION, "dtype": "float64", "_FillValue": FILL_VALUE}
        else:
            encoding = {"_FillValue": None}
        if coords and name == "time":
            encoding["dtype"] = "float64"
        out[name] = (dims, values, attrs, encoding)
    return out
