"""Side-by-side comparison of remediation alternatives.

Each alternative is a scenario (its own column, schedules and actions).  All are solved
on one common (time, depth) grid, their receptor metrics computed on the continuous
solution, and the results written as a table (terminal, CSV, Markdown), one CF NetCDF
file with a ``scenario`` dimension (integer index, labels in a string auxiliary
coordinate, as recommended for CF 1.11) and figures.
"""
from __future__ import annotations

import csv
import io
import os
from dataclasses import dataclass, replace

import numpy as np
import xarray as xr

from transport.analysis.metrics import ReceptorMetrics, ReceptorViews, receptor_metrics
from transport.analysis.summary import (design_life_flag, final_budget, peak_beyond_flag,
                                        run_horizon, verdict_line)
from transport.api import solve_scenario
from transport.caution import CAUTION
from transport.io.atomic import OutputSet, clean_stale_stem, terminate_as_exit, write_text
from transport.io.netcdf import column_dataset, write_dataset_atomic
from transport.solvers.checks import UnreliableResultError
from transport.units import MG_PER_L, MG_PER_M2, YEAR

__all__ = ["Alternative", "compare_alternatives", "comparison_table", "comparison_dataset",
           "verdict_lines", "table_text", "table_csv", "write_outputs"]

# Table units per SI unit. The reciprocals of MG_PER_L and MG_PER_M2 are exact (1e3,
# 1e6), so a product rounds once; the CSV keeps every digit of the values.
_MG_L_PER_SI = 1.0 / MG_PER_L
_MG_M2_PER_SI = 1.0 / MG_PER_M2


@dataclass(frozen=True)
class Alternative:
    """One solved alternative: its label, scenario, solution (on the common grid),
    receptor metrics over its horizon (the design life, else the whole run), the
    warnings of its solve and the metrics over the whole run."""

    label: str
    scenario: object
    solution: object
    metrics: ReceptorMetrics
    warnings: tuple = ()
    whole_run: ReceptorMetrics = None

    @property
    def views(self) -> ReceptorViews:
        """The design-life and whole-run views (the same window without a design life
        or when the run ends with it)."""
        return ReceptorViews(self.metrics, self.whole_run or self.metrics)


def compare_alternatives(scenarios, labels=None, engine="auto", progress=None,
                         tolerance=None):
    """Solve every scenario on the union of their output grids; returns Alternatives."""
    labels = list(labels) if labels else [s.title for s in scenarios]
    if len(set(labels)) != len(labels):
        raise ValueError("alternative labels must differ; give each scenario its own title")
    times = np.unique(np.concatenate([np.asarray(s.output.times) for s in scenarios]))
    depths = np.unique(np.concatenate([np.asarray(s.output.depths) for s in scenarios]))
    out = []
    for label, sc in zip(labels, scenarios):
        if progress:
            progress(label)
        # depths outside this alternative's column (another one's cap) come back as NaN
        inside = depths[(depths >= _top(sc)) & (depths <= sc.column.length)]
        try:
            sol, caught = solve_scenario(sc, depths=inside, times=times, engine=engine,
                                         tolerance=tolerance)
        except UnreliableResultError as exc:
            raise UnreliableResultError(f"alternative {label!r}: {exc}", exc.times,
                                        exc.quantities) from None
        sol = _on_grid(sol, depths, inside)
        horizon = sc.output.design_life or float(times.max())
        m = receptor_metrics(sol, sc.output.receptor_depth, sc.output.screening_level,
                             horizon)
        run_end = run_horizon(times, sc.output.design_life)
        whole = m if run_end == horizon else receptor_metrics(
            sol, sc.output.receptor_depth, sc.output.screening_level, run_end)
        out.append(Alternative(label, sc, sol, m, tuple(caught), whole))
    return out


def _top(sc):
    tl = sc.timeline
    return min(st.offset for st in tl.stages) if tl is not None else 0.0


def _on_grid(sol, depths, inside):
    """The solution seen on the common depth grid: NaN where this alternative's column
    is absent (another alternative's cap above it)."""
    if inside.size == depths.size:
        return sol
    idx = np.searchsorted(depths, inside)
    padded = {}
    for name in ("concentration", "total_flux", "cumulative_mass"):
        full = np.full((sol.times.size, depths.size), np.nan)
        full[:, idx] = getattr(sol, name)
        padded[name] = full
    return replace(sol, depths=depths, **padded)


def _yr(t):
    return None if t is None else t / YEAR


def comparison_table(alts):
    """Rows (list of dicts) of the metrics that decide between alternatives.

    The metrics over the design life (``horizon_yr``; the whole run without a design
    life) come first, with ``peak_after_design_life`` saying whether the peak lies
    beyond it (:func:`transport.analysis.summary.design_life_flag`); then the same
    metrics over the whole run (``run_*``, up to ``run_end_yr``) with
    ``peak_after_run_end``; then the time to steady state and the mass budget.
    """
    rows = []
    for a in alts:
        m = a.metrics
        w = a.whole_run or m
        b = final_budget(a.solution)
        rows.append({
            "alternative": a.label,
            "receptor_depth_m": m.receptor_depth,
            "screening_level_mg_L": None if m.screening_level is None
            else m.screening_level * _MG_L_PER_SI,
            "horizon_yr": m.horizon / YEAR,
            "stays_below_level": None if m.stays_below_level is None
            else ("yes" if m.stays_below_level else "no"),
            "first_exceedance_yr": None if m.first_exceedance is None
            else m.first_exceedance / YEAR,
            # already reached at the earliest output time: the crossing lies earlier
            "first_exceedance_at_start": _at_start(m),
            "time_above_level_yr": None if m.time_above_level is None
            else m.time_above_level / YEAR,
            "peak_mg_L": m.peak_concentration * _MG_L_PER_SI,
            "peak_time_yr": m.peak_time / YEAR,
            "peak_after_design_life": design_life_flag(a.views),
            "mass_to_receptor_mg_m2": None if m.cumulative_mass is None
            else m.cumulative_mass * _MG_M2_PER_SI,
            "run_end_yr": w.horizon / YEAR,
            "run_stays_below_level": None if w.stays_below_level is None
            else ("yes" if w.stays_below_level else "no"),
            "run_first_exceedance_yr": _yr(w.first_exceedance),
            "run_first_exceedance_at_start": _at_start(w),
            "run_time_above_level_yr": _yr(w.time_above_level),
            "run_peak_mg_L": w.peak_concentration * _MG_L_PER_SI,
            "run_peak_time_yr": w.peak_time / YEAR,
            "peak_after_run_end": peak_beyond_flag(w),
            "run_mass_to_receptor_mg_m2": None if w.cumulative_mass is None
            else w.cumulative_mass * _MG_M2_PER_SI,
            "time_to_95pct_steady_yr": None if m.time_to_95_percent_steady is None
            else m.time_to_95_percent_steady / YEAR,
            "stored_end_mg_m2": b.get("stored", np.nan) * _MG_M2_PER_SI,
            "decayed_end_mg_m2": b.get("decayed", np.nan) * _MG_M2_PER_SI,
            "removed_end_mg_m2": b.get("removed", 0.0) * _MG_M2_PER_SI,
            "budget_residual_mg_m2": b.get("residual", np.nan) * _MG_M2_PER_SI,
        })
    return rows


def _at_start(m):
    """"yes" where the level is already reached at the start of the metrics window (the
    earliest positive output time: the first crossing lies earlier, not resolved), "no"
    where it is first reached later or never, None without a screening level."""
    if m.screening_level is None:
        return None
    return "yes" if m.exceeded_at_start else "no"


def _fmt(v):
    if v is None:
        return "-"
    if isinstance(v, str):
        return v
    return f"{v:.4g}"


def table_text(rows, markdown=False):
    keys = list(rows[0])
    cells = [[_fmt(r[k]) for k in keys] for r in rows]
    if markdown:
        head = "| " + " | ".join(keys) + " |"
        sep = "|" + "|".join("---" for _ in keys) + "|"
        return "\n".join([head, sep] + ["| " + " | ".join(c) + " |" for c in cells])
    # transposed for the terminal: one line per metric, one column per alternative
    width = max(len(k) for k in keys)
    colw = max(12, max(len(v) for c in cells for v in c))
    lines = []
    for j, k in enumerate(keys):
        vals = [c[j] for c in cells]
        lines.append(k.ljust(width) + "  " + "  ".join(v.rjust(colw) for v in vals))
    return "\n".join(lines)


def table_csv(rows):
    buf = io.StringIO()
    w = csv.DictWriter(buf, fieldnames=list(rows[0]))
    w.writeheader()
    for r in rows:
        w.writerow({k: ("" if v is None else v) for k, v in r.items()})
    return buf.getvalue()


def verdict_lines(alts):
    """Plain statements: which alternatives keep the receptor below the level
    (:func:`transport.analysis.summary.verdict_line` each), then the caveat."""
    lines = [verdict_line(a.label, a.metrics, a.views) for a in alts]
    lines.append("This comparison is a screening tool; the choice of a remedy rests with "
                 "the regulator and licensed professionals under local rules.")
    return lines


def comparison_dataset(alts, title="stratiflux comparison", history=None):
    """One CF dataset (scenario, time, depth) with the alternatives side by side."""
    parts = []
    for a in alts:
        ds = column_dataset(a.solution, title=a.label, history=history)
        keep = [v for v in ds.data_vars if ds[v].dims and ds[v].dims[0] == "time"]
        parts.append(ds[keep + ["depth_bnds"]].drop_vars("station_id", errors="ignore"))
    ds = xr.concat([p.drop_vars("depth_bnds") for p in parts], dim="scenario",
                   coords="minimal", compat="override", join="override")
    ds["depth_bnds"] = parts[0]["depth_bnds"]
    ds = ds.assign_coords(
        scenario=("scenario", np.arange(len(alts), dtype=np.int32),
                  {"long_name": "alternative index"}),
        label=("scenario", np.array([a.label for a in alts], dtype=object),
               {"long_name": "name of the remediation alternative"}))
    for name, field, units, long in (
            ("first_exceedance_time", "first_exceedance", "s", "first time the receptor "
             "reaches the screening level, per alternative (fill: never; the earliest "
             "positive output time where the level is already reached there: the "
             "crossing is then earlier and not resolved)"),
            ("peak", "peak_concentration", "kg m-3", "peak concentration at the receptor "
             "per alternative"),
            ("mass_to_receptor", "cumulative_mass", "kg m-2", "mass per area through the "
             "receptor depth over the horizon per alternative"),
            ("peak_time", "peak_time", "s", "elapsed time of the peak concentration at "
             "the receptor per alternative"),
            ("time_above_level", "time_above_level", "s", "time the receptor spends at or "
             "above the screening level per alternative")):
        # the design-life view (the whole run without a design life), then the whole run
        for view, prefix, text in (
                ("metrics", "", f"{long} (design life: see horizon)"),
                ("whole_run", "run_", f"{long.replace('over the horizon ', '')} over the "
                                      "whole run (see run_end)")):
            values = [getattr(getattr(a, view) or a.metrics, field) for a in alts]
            vals = np.array([np.nan if v is None else float(v) for v in values])
            ds[prefix + name] = (("scenario",), vals, {"long_name": text, "units": units,
                                                       "comment": CAUTION})
    ds["peak_after_design_life"] = (("scenario",), np.array(
        [a.views.peak_after_design_life for a in alts], dtype=np.int8), {
        "long_name": "whether the peak at the receptor lies after the design life (still "
                     "rising at its end, or higher later in the run), per alternative",
        "flag_values": np.array([0, 1], dtype=np.int8), "flag_meanings": "no yes",
        "comment": CAUTION})
    ds["horizon"] = (("scenario",), np.array([a.metrics.horizon for a in alts]), {
        "long_name": "design life: end of the window of the design-life metrics",
        "units": "s"})
    ds["run_end"] = (("scenario",), np.array([(a.whole_run or a.metrics).horizon
                                              for a in alts]), {
        "long_name": "end of the window of the whole-run metrics", "units": "s"})
    for name in ds.data_vars:
        var = ds[name]
        if name in ("depth_bnds", "engine", "reliable", "peak_after_design_life"):
            var.encoding = {"_FillValue": None}
        elif var.dims[-2:] == ("time", "depth"):
            # double precision: single precision (1e-7) would break the stated tolerance
            var.encoding = {"zlib": True, "complevel": 4, "shuffle": True, "dtype": "float64",
                            "_FillValue": -9999.0}
        else:
            var.encoding = {"dtype": "float64", "_FillValue": -9999.0}
    for name in ds.coords:
        ds[name].encoding = {"_FillValue": None}
    ds["time"].encoding["dtype"] = "float64"
    attrs = dict(parts[0].attrs)
    attrs.pop("featureType", None)
    attrs.pop("scenario_text", None)
    attrs.update(title=title, summary="Remediation alternatives of one column side by side: "
                 "pore-water concentration, total flux, cumulative mass and mass budget "
                 "versus alternative, time and depth.")
    ds.attrs = attrs
    return ds


def write_outputs(alts, out_dir, stem="comparison", history=None, title=None):
    """CSV, Markdown, NetCDF and figures into ``out_dir``; returns the paths.

    All files are produced under temporary names and renamed into place together
    (:class:`transport.io.atomic.OutputSet`): a failure in any of them leaves every
    previous file of ``out_dir`` as it was.
    """
    # matplotlib is imported lazily: comparisons read without figures start faster
    from transport.plot.compare import plot_comparison

    os.makedirs(out_dir, exist_ok=True)
    # temporaries of a killed earlier comparison, also of files this one will not write
    clean_stale_stem(out_dir, stem)
    rows = comparison_table(alts)
    texts = (("csv", table_csv(rows)),
             ("md", f"# {title or 'Comparison of alternatives'}\n\n"
                    + table_text(rows, markdown=True) + "\n\n"
                    + "\n".join(f"- {ln}" for ln in verdict_lines(alts))
                    + f"\n\n{CAUTION}\n"))
    paths = []
    # SIGTERM while writing ends the program like Ctrl-C: the temporaries are removed
    with terminate_as_exit(), OutputSet() as stage:
        for ext, text in texts:
            paths.append(write_text(os.path.join(out_dir, f"{stem}.{ext}"), text,
                                    stage=stage))
        nc = os.path.join(out_dir, f"{stem}.nc")
        paths.append(write_dataset_atomic(
            comparison_dataset(alts, title or "stratiflux comparison", history), nc,
            stage=stage))
        paths += plot_comparison(alts, out_dir, stem, title=title, stage=stage)
    return paths

