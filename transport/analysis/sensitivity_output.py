"""The outputs of a sensitivity study: printed table, CSV table, NetCDF of every run.

Every output carries the caution (:mod:`transport.caution`) and the method
(:data:`transport.analysis.sobol.METHOD_REFERENCES`); all files of a study are written
through :class:`transport.io.atomic.OutputSet`, so a failure leaves earlier files as
they were.
"""
from __future__ import annotations

import csv
import io
import os
import re

import numpy as np
import xarray as xr

from transport.analysis.sensitivity import DESIGN_CODES
from transport.analysis.sobol import METHOD_REFERENCES
from transport.caution import CAUTION
from transport.io.atomic import OutputSet, clean_stale_stem, terminate_as_exit, write_text
from transport.io.netcdf import package_version, utc_now, write_dataset_atomic
from transport.site.uncertainty import DISTRIBUTION_PARAMETERS

__all__ = ["table_rows", "table_lines", "reading_lines", "table_csv", "runs_dataset",
           "write_outputs", "metric_text", "distribution_text",
           "UDUNITS", "WIDE_INTERVAL"]

#: UDUNITS text of the SI value of each dimension (NetCDF ``units``).
UDUNITS = {"length": "m", "time": "s", "velocity": "m s-1", "diffusivity": "m2 s-1",
           "concentration": "kg m-3", "density": "kg m-3", "specific_volume": "m3 kg-1",
           "rate": "s-1", "mass_flux": "kg m-2 s-1", "mass_rate_density": "kg m-3 s-1",
           "dimensionless": "1", "mass_fraction": "kg kg-1"}
#: An interval wider than this (in index units) is reported as needing more samples.
WIDE_INTERVAL = 0.2
_FILL = -9999.0


def metric_text(result, value: float, censored: bool = False) -> str:
    """A metric value in its display unit; a censored first exceedance as
    ``"not reached (> 30 yr)"``."""
    m = result.study.spec.metric
    if censored:
        return f"not reached (> {value / m.per_unit:.4g} {m.unit})"
    return f"{value / m.per_unit:.4g} {m.unit}"


def distribution_text(inp) -> str:
    """``"lognormal(median 0.12 m/yr, log_sd 0.4)"``, or ``""`` without one."""
    d = inp.distribution
    if d is None:
        return ""
    parts = [f"{name} {v:.4g}" if name == "log_sd" else f"{name} {inp.shown(v)}"
             for name, v in zip(DISTRIBUTION_PARAMETERS[d.kind], d.values)]
    for name, v in (("lower", d.lower), ("upper", d.upper)):
        if v is not None:
            parts.append(f"{name} {inp.shown(v)}")
    return f"{d.kind}({', '.join(parts)})"


def _censor(result, code):
    return result.censored[result.plan.design == DESIGN_CODES[code]]


def table_rows(result) -> list:
    """One dict per input, largest swing first: the input, its base, low and high
    values (display units), the metric at each (SI), the swing (SI), and the indices
    with their interval ends (NaN for inputs without a distribution)."""
    spec = result.study.spec
    low_c, high_c = _censor(result, "oat_low"), _censor(result, "oat_high")
    sampled = [k for k, inp in enumerate(spec.inputs) if inp.distribution is not None]
    rows = []
    for rank, k in enumerate(result.order, start=1):
        inp = spec.inputs[k]
        row = {"rank": rank, "input": inp.key, "unit": inp.unit,
               "base": inp.base / inp.per_unit, "low": inp.low / inp.per_unit,
               "high": inp.high / inp.per_unit, "range": inp.range_source,
               "distribution": distribution_text(inp),
               "metric_low": result.low[k], "metric_high": result.high[k],
               "low_censored": bool(low_c[k]), "high_censored": bool(high_c[k]),
               "swing": result.swing[k]}
        ix = result.indices
        j = sampled.index(k) if (ix is not None and k in sampled) else None
        for name, value, interval in (("first_order", "first_order", "first_order_interval"),
                                      ("total_effect", "total_effect",
                                       "total_effect_interval")):
            if j is None:
                row[name] = row[f"{name}_lower"] = row[f"{name}_upper"] = np.nan
            else:
                row[name] = float(getattr(ix, value)[j])
                row[f"{name}_lower"], row[f"{name}_upper"] = map(
                    float, getattr(ix, interval)[j])
        rows.append(row)
    return rows


def _index(value, lower, upper) -> str:
    if not np.isfinite(value):
        return "-"
    if not np.isfinite(lower):
        return f"{value:.2f}"
    return f"{value:.2f} [{lower:.2f}, {upper:.2f}]"


def table_lines(result) -> list:
    """The printed table: input, base, low, high, metric at low and high, swing, and
    the first-order and total-effect indices with their intervals."""
    m = result.study.spec.metric
    rows = table_rows(result)
    pct = f"{100 * result.study.spec.confidence:g} %"
    head = ("input", "base", "low", "high", "at low", "at high", "swing",
            f"S_i [{pct}]", f"S_Ti [{pct}]")
    body = []
    for row in rows:
        inp = result.study.spec.inputs[[i.key for i in result.study.spec.inputs]
                                       .index(row["input"])]
        body.append((row["input"], inp.shown(inp.base), inp.shown(inp.low),
                     inp.shown(inp.high),
                     metric_text(result, row["metric_low"], row["low_censored"]),
                     metric_text(result, row["metric_high"], row["high_censored"]),
                     f"{row['swing'] / m.per_unit:.4g} {m.unit}",
                     _index(row["first_order"], row["first_order_lower"],
                            row["first_order_upper"]),
                     _index(row["total_effect"], row["total_effect_lower"],
                            row["total_effect_upper"])))
    widths = [max(len(str(r[c])) for r in [head] + body) for c in range(len(head))]
    line = lambda r: "  ".join(str(v).ljust(w) for v, w in zip(r, widths)).rstrip()  # noqa: E731
    return [line(head), line(["-" * w for w in widths])] + [line(r) for r in body]


def reading_lines(result) -> list:
    """Plain sentences: what was varied, the base value, the largest swings, the
    indices, censoring and interval notes, and the method."""
    spec = result.study.spec
    m = spec.metric
    base_c = bool(_censor(result, "oat_base")[0])
    lines = [f"Metric: {m.label} at the receptor "
             f"({result.study.scenario.output.receptor_depth:g} m) over the "
             f"{result.window_text}; base run (every input at the scenario's value): "
             f"{metric_text(result, result.base, base_c)}."]
    top = result.order[0]
    inp = spec.inputs[top]
    lines.append(f"Largest one-at-a-time swing: {inp.key} from {inp.shown(inp.low)} to "
                 f"{inp.shown(inp.high)} moves it from "
                 f"{metric_text(result, result.low[top], _censor(result, 'oat_low')[top])} "
                 f"to {metric_text(result, result.high[top], _censor(result, 'oat_high')[top])}.")
    ix = result.indices
    if ix is not None:
        sampled = spec.sampled
        runs = result.plan.size
        if not np.all(np.isfinite(ix.total_effect)):
            lines.append("The metric does not vary over the sampled inputs: the "
                         "variance-based indices are undefined.")
        else:
            k = int(np.argmax(ix.total_effect))
            lines.append(f"Variance-based indices of the {len(sampled)} input(s) with a "
                         f"distribution (N = {ix.samples}, {runs} runs in all): "
                         f"{sampled[k].key} has the largest total effect, "
                         f"{ix.total_effect[k]:.2f}; the first-order indices sum to "
                         f"{np.sum(ix.first_order):.2f} (1 for an additive model, less "
                         "where inputs interact).")
            widths = np.concatenate([np.diff(ix.first_order_interval, axis=1).ravel(),
                                     np.diff(ix.total_effect_interval, axis=1).ravel()])
            if np.any(widths > WIDE_INTERVAL):
                lines.append(f"Some {100 * spec.confidence:g} % intervals are wider than "
                             f"{WIDE_INTERVAL}: increase samples (now {ix.samples}) for "
                             "firmer indices.")
        lines.append(METHOD_REFERENCES)
    n_cens = int(np.count_nonzero(result.censored))
    if n_cens:
        lines.append(f"The screening level is not reached within the window in {n_cens} of "
                     f"{result.censored.size} runs; those count as the window's end "
                     f"({result.horizon / m.per_unit:.4g} {m.unit}), so the figures "
                     "describe min(first exceedance, window end).")
    lines.append("One at a time: each input at its low and at its high value, the others "
                 "at the scenario's values; the swing is |metric(high) - metric(low)|. "
                 "Inputs without a distribution stay at the scenario's value in the "
                 "variance-based runs.")
    return lines


def table_csv(result, history: str = "") -> str:
    """The table as CSV (display units for inputs, the metric in its unit), with ``#``
    header lines: title, metric, window, method, caution."""
    m = result.study.spec.metric
    rows = table_rows(result)
    buf = io.StringIO()
    for text in (f"title: {result.study.title}",
                 f"metric: {m.label} at the receptor over the {result.window_text}; "
                 f"metric columns and swing in {m.unit}; input values in the unit column",
                 f"base run: {result.base / m.per_unit:.10g} {m.unit}",
                 f"seed: {result.plan.seed}", METHOD_REFERENCES, CAUTION,
                 f"history: {history}" if history else ""):
        if text:
            buf.write(f"# {text}\n")
    fields = list(rows[0])
    writer = csv.DictWriter(buf, fieldnames=fields, lineterminator="\n")
    writer.writeheader()
    for row in rows:
        out = {}
        for k, v in row.items():
            if k in ("metric_low", "metric_high", "swing"):
                v = v / m.per_unit
            if isinstance(v, bool):
                v = int(v)
            if isinstance(v, float):
                v = "" if not np.isfinite(v) else f"{v:.10g}"
            out[k] = v
        writer.writerow(out)
    return buf.getvalue()


def _var_name(key: str) -> str:
    return "input_" + re.sub(r"[^A-Za-z0-9_]+", "_", key).strip("_")


def runs_dataset(result, history: str = "") -> xr.Dataset:
    """Every run (inputs and metric) and the per-input table as one CF-1.11 dataset:
    dimensions ``run`` and ``input``; inputs in SI with UDUNITS units."""
    spec, plan = result.study.spec, result.plan
    m = spec.metric
    rows = {row["input"]: row for row in table_rows(result)}
    sampled = [k for k, inp in enumerate(spec.inputs) if inp.distribution is not None]
    what = f"{m.label} at the receptor over the {result.window_text}"
    data = {}
    for k, inp in enumerate(spec.inputs):
        data[_var_name(inp.key)] = (("run",), plan.values[:, k], {
            "long_name": f"{inp.key} in each run", "units": UDUNITS[inp.dimension],
            "key_path": inp.key})
    data["metric"] = (("run",), result.metric, {
        "long_name": what, "units": m.udunits, "coverage_content_type": "modelResult",
        "comment": CAUTION})
    data["censored"] = (("run",), result.censored.astype(np.int8), {
        "long_name": "whether the metric is the end of the window because the screening "
                     "level is not reached within it", "flag_values": np.array([0, 1], np.int8),
        "flag_meanings": "no yes"})
    data["design"] = (("run",), plan.design, {
        "long_name": "role of the run: one-at-a-time base, low, high; rows of the "
                     "Saltelli matrices A, B, A_B", "flag_values": np.array(
                         sorted(DESIGN_CODES.values()), np.int8),
        "flag_meanings": " ".join(sorted(DESIGN_CODES, key=DESIGN_CODES.get))})
    swapped = np.array([sampled[j] + 1 if j >= 0 else 0 for j in plan.swapped], np.int32)
    data["swapped_input"] = (("run",), swapped, {
        "long_name": "input index whose value comes from matrix B in an A_B row (0: none)"})
    order = [inp.key for inp in spec.inputs]
    per_input = lambda name: np.array([rows[key][name] for key in order], float)  # noqa: E731
    for name, units, long in (
            ("metric_low", m.udunits, f"{what} with the input at its low value"),
            ("metric_high", m.udunits, f"{what} with the input at its high value"),
            ("swing", m.udunits, f"absolute change of the {m.label} from the input's low "
                                 "to its high value, the others at the scenario's values")):
        data[name] = (("input",), per_input(name), {"long_name": long, "units": units,
                                                    "comment": CAUTION})
    for name, long in (("first_order", "first-order variance-based index"),
                       ("total_effect", "total-effect variance-based index")):
        data[name] = (("input",), per_input(name), {
            "long_name": f"{long} of the {m.label}", "units": "1", "comment": CAUTION})
        for end in ("lower", "upper"):
            data[f"{name}_{end}"] = (("input",), per_input(f"{name}_{end}"), {
                "long_name": f"{end} end of the {100 * spec.confidence:g} % bootstrap "
                             f"interval of the {long}", "units": "1"})
    data["metric_base"] = ((), result.base, {"long_name": f"{what}, base run",
                                             "units": m.udunits, "comment": CAUTION})
    data["window_end"] = ((), result.horizon, {"long_name": "end of the metric's window "
                                                            "(base run)", "units": "s"})
    coords = {"run": (("run",), np.arange(plan.size, dtype=np.int32),
                      {"long_name": "model run index"}),
              "input": (("input",), np.arange(1, len(order) + 1, dtype=np.int32),
                        {"long_name": "input index"}),
              "input_key": (("input",), np.array(order, dtype=object),
                            {"long_name": "key path of the input in the scenario file"})}
    attrs = {"Conventions": "CF-1.11",
             "title": f"{result.study.title}: sensitivity of the {m.label}",
             "summary": f"One-at-a-time and variance-based sensitivity of the {what} to "
                        f"{len(order)} input(s): every model run and the per-input table.",
             "source": f"stratiflux {package_version()} (stratiflux sensitivity)",
             "history": f"{utc_now()} {history or 'stratiflux sensitivity'}",
             "references": METHOD_REFERENCES + " Sobol' 1993 (Math. Model. Comput. Exp. "
                           "1:407-414); CF Conventions 1.11 (https://cfconventions.org).",
             "comment": CAUTION, "date_created": utc_now(),
             "metric": m.name, "window": spec.window, "seed": str(plan.seed),
             "samples": int(plan.samples), "bootstrap_resamples": int(spec.resamples),
             "confidence": float(spec.confidence),
             "scenario_text": result.study.source_text}
    ds = xr.Dataset(data, coords=coords, attrs=attrs)
    for name, var in ds.variables.items():
        var.encoding = ({"_FillValue": _FILL, "dtype": "float64"}
                        if var.dtype.kind == "f" and name not in ds.coords
                        else {"_FillValue": None})
    return ds


def write_outputs(result, out_dir, stem: str, history: str = "", figures: bool = True):
    """Table (CSV), every run (NetCDF) and the figures into ``out_dir``, renamed into
    place together; returns the paths. ``out_dir`` is created if needed."""
    # matplotlib is imported lazily: a study read without figures starts faster
    from transport.plot.sensitivity import plot_indices, plot_tornado

    os.makedirs(out_dir, exist_ok=True)
    clean_stale_stem(out_dir, stem)
    paths = []
    with terminate_as_exit(), OutputSet() as stage:
        paths.append(write_text(os.path.join(out_dir, f"{stem}_sensitivity.csv"),
                                table_csv(result, history), stage=stage))
        paths.append(write_dataset_atomic(runs_dataset(result, history),
                                          os.path.join(out_dir, f"{stem}_runs.nc"),
                                          stage=stage))
        if figures:
            paths.append(plot_tornado(result, os.path.join(out_dir, f"{stem}_tornado.png"),
                                      stage=stage))
            if result.indices is not None:
                paths.append(plot_indices(result, os.path.join(
                    out_dir, f"{stem}_indices.png"), stage=stage))
    return paths
