"""Receptor metrics of one run as scalar CF variables of its NetCDF file.

The metrics at the receptor (:class:`transport.analysis.metrics.ReceptorViews`) are
written twice, over the design life (names ending ``_design_life``) and over the whole
run (``_whole_run``): first exceedance of the screening level, time above it, peak
concentration and its time, cumulative mass through the receptor depth, the end of the
window, and a flag saying whether the peak lies beyond the window (still rising at its
end; for the design life also a higher peak later in the run). Durations are in days
(UDUNITS ``d``) like the file's time axis, concentrations in kg m-3, masses per area in
kg m-2; a metric that does not exist (a level never reached, a mass the engines could
not vouch for) holds the fill value. Every variable carries the caution.
"""
from __future__ import annotations

import numpy as np

from transport.caution import CAUTION
from transport.units import DAY

__all__ = ["METRIC_FIELDS", "metric_variables"]

#: Fill value of a metric that does not exist (the fields' fill value).
_FILL = -9999.0

#: field of ReceptorMetrics, variable stem, UDUNITS units, long_name stem
METRIC_FIELDS = (
    ("first_exceedance", "first_exceedance_time", "d",
     "elapsed time at which the pore-water concentration at the receptor first reaches "
     "the screening level (fill: not reached; where the level is already reached at "
     "metrics_start, that start: the crossing is then earlier and not resolved, see "
     "exceedance_at_metrics_start)"),
    ("time_above_level", "time_above_level", "d",
     "total time the pore-water concentration at the receptor is at or above the "
     "screening level"),
    ("peak_concentration", "peak_concentration", "kg m-3",
     "highest pore-water concentration at the receptor"),
    ("peak_time", "peak_time", "d",
     "elapsed time of the highest pore-water concentration at the receptor"),
    ("cumulative_mass", "receptor_cumulative_mass", "kg m-2",
     "cumulative contaminant mass per unit area that crossed the receptor depth downward "
     "since time 0 (fill: not vouched for)"),
    ("horizon", "metrics_end", "d", "elapsed time at the end of the window of the "
     "receptor metrics"),
)

_WINDOWS = (("design_life", "design_life", "over the design life"),
            ("whole_run", "whole_run", "over the whole run"))


def _value(field, value):
    if value is None or not np.isfinite(value):
        return _FILL
    return float(value) / DAY if field in ("first_exceedance", "time_above_level",
                                           "peak_time", "horizon") else float(value)


def metric_variables(views) -> dict:
    """Scalar variables of the receptor metrics over the design life and the whole run.

    Parameters
    ----------
    views : ReceptorViews or None
        :func:`transport.analysis.metrics.receptor_views` of the run; None gives no
        variable.

    Returns
    -------
    dict of str to tuple
        ``(dims, value, attrs, encoding)`` as xarray takes a variable (and
        :func:`transport.io.netcdf_file.write_layout` writes one): ``attrs`` with
        ``long_name``, UDUNITS ``units`` (flags: ``flag_values`` and ``flag_meanings``)
        and the caution ``comment``; ``encoding`` float64 with the fill value, the flags
        as bytes.
    """
    if views is None:
        return {}
    out = {}
    for attr, suffix, window in _WINDOWS:
        m = getattr(views, attr)
        for field, stem, units, long_name in METRIC_FIELDS:
            if field in ("first_exceedance", "time_above_level") and \
                    m.screening_level is None:
                continue
            out[f"{stem}_{suffix}"] = (
                (), _value(field, getattr(m, field)),
                {"long_name": f"{long_name}, {window}", "units": units,
                 "coverage_content_type": "modelResult", "comment": CAUTION},
                {"dtype": "float64", "_FillValue": _FILL})
    start = views.whole_run.window_start
    if start is not None:
        out["metrics_start"] = (
            (), _value("horizon", start),
            {"long_name": "elapsed time at the start of the window of the receptor "
                          "metrics: 0 where the curve is read from the release (a checked "
                          "run), else the earliest positive output time (earlier times "
                          "are not read)", "units": "d",
             "coverage_content_type": "modelResult", "comment": CAUTION},
            {"dtype": "float64", "_FillValue": _FILL})
    flags = []
    for attr, suffix, window in _WINDOWS:
        m = getattr(views, attr)
        if m.screening_level is not None and m.window_start is not None:
            flags.append((
                f"exceedance_at_metrics_start_{suffix}", m.exceeded_at_start,
                "whether the screening level is already reached at the receptor at "
                f"metrics_start, {window}: the first crossing then lies earlier, between "
                "time 0 and metrics_start, where it is not resolved, and "
                f"first_exceedance_time_{suffix} is metrics_start, a later time than the "
                "crossing (add earlier output times)"))
    flags += (("peak_after_design_life", views.peak_after_design_life,
              "whether the peak concentration at the receptor lies after the design life "
              "(still rising at its end beyond twice the error bound of the concentration, "
              "or higher later in the run)"),
             ("peak_after_run_end", views.whole_run.peak_beyond_horizon,
              "whether the peak concentration at the receptor lies after the end of the "
              "run (highest at the end and still rising there beyond twice the error "
              "bound of the concentration)"))
    for name, value, long_name in flags:
        out[name] = ((), np.int8(bool(value)), {
            "long_name": long_name, "flag_values": np.array([0, 1], dtype=np.int8),
            "flag_meanings": "no yes", "coverage_content_type": "modelResult",
            "comment": CAUTION}, {"dtype": "int8", "_FillValue": None})
    return out
