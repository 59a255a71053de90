"""Figures for a comparison of remediation alternatives (matplotlib, no screen).

* breakthrough curves of every alternative at the receptor over the whole run, the
  screening level and the end of the design life marked;
* bars of the deciding metrics (first exceedance, peak, mass to the receptor, all
  within the design life), the screening level on the peak panel;
* concentration profiles of every alternative side by side at a few times.

They are drawn from the solved alternatives (``stratiflux compare``) or from the
comparison NetCDF file (``stratiflux plot``), through one :class:`ComparisonView`.
"""
from __future__ import annotations

import os
from dataclasses import dataclass

import numpy as np
from matplotlib import colormaps

from transport.analysis.metrics import unresolved_windows
from transport.io.atomic import OutputSet
from transport.io.netcdf import elapsed_seconds
from transport.plot.style import (DESIGN_LIFE_COLOUR, allowed_error, curve_style,
                                  mark_design_life, mark_level, new_figure,
                                  nonpositive_note, rounding_as_zero, save, wrap)
from transport.units import MG_PER_L, MG_PER_M2, YEAR

__all__ = ["ComparisonView", "view_of_alternatives", "view_of_dataset", "plot_comparison",
           "write_comparison_figures"]

#: A log concentration axis is used when the highest value exceeds the screening level
#: by this factor (on a linear axis the level would sit on zero).
LOG_RATIO = 50.0


@dataclass(frozen=True)
class ComparisonView:
    """What the comparison figures draw, in SI units.

    ``curves`` holds one (times s, concentration kg m-3) pair per alternative at the
    receptor, or is empty when the receptor depth is unknown; ``depths`` and
    ``concentration`` hold one array per alternative ((time, depth) at the stored
    ``times``); metric arrays hold NaN where a value does not exist (never exceeded).
    """

    labels: tuple
    times: np.ndarray
    depths: tuple
    concentration: tuple
    curves: tuple
    first_exceedance: np.ndarray
    peak: np.ndarray
    mass: np.ndarray
    screening_level: float | None
    receptor_depth: float | None
    design_life: float | None


def view_of_alternatives(alts) -> ComparisonView:
    """The view of solved alternatives (:func:`transport.analysis.compare.compare_alternatives`):
    curves from each continuous solution over the whole run, not drawn just after a
    change where the solution is not resolved."""
    m0 = alts[0].metrics
    t_hi = max(float(a.solution.times[-1]) for a in alts)
    t_lo = min(float(np.min(a.solution.times[a.solution.times > 0])) for a in alts)
    t = np.union1d(np.geomspace(t_lo, t_hi, 300), np.linspace(t_lo, t_hi, 300))
    curves = []
    for a in alts:
        y = rounding_as_zero(a.solution.concentration_at(a.metrics.receptor_depth, t),
                             allowed_error(a.solution))
        for w0, w1 in unresolved_windows(a.solution):
            y[(t > w0) & (t < w1)] = np.nan
        curves.append((t, y))

    def values(field):
        return np.array([np.nan if getattr(a.metrics, field) is None
                         else float(getattr(a.metrics, field)) for a in alts])
    return ComparisonView(
        labels=tuple(a.label for a in alts), times=np.asarray(alts[0].solution.times, float),
        depths=tuple(np.asarray(a.solution.depths, float) for a in alts),
        concentration=tuple(np.asarray(a.solution.concentration, float) for a in alts),
        curves=tuple(curves),
        first_exceedance=values("first_exceedance"), peak=values("peak_concentration"),
        mass=values("cumulative_mass"), screening_level=m0.screening_level,
        receptor_depth=m0.receptor_depth, design_life=m0.horizon)


def view_of_dataset(ds, *, receptor_depth=None, screening_level=None,
                    design_life=None) -> ComparisonView:
    """The view of a comparison NetCDF dataset (``scenario`` dimension).

    The receptor curves are the stored values interpolated linearly in depth at
    ``receptor_depth`` (m; from the file when it holds one); ``screening_level``
    (kg m-3) and ``design_life`` (s) likewise.
    """
    def scalar(name, given):
        if given is not None:
            return float(given)
        if name in ds.variables and ds[name].ndim == 0:
            return float(ds[name].values)
        return None
    receptor_depth = scalar("receptor_depth", receptor_depth)
    screening_level = scalar("screening_level", screening_level)
    design_life = scalar("design_life", design_life)
    times, depths = elapsed_seconds(ds), np.asarray(ds["depth"].values, float)
    conc = np.asarray(ds["concentration"].transpose("scenario", "time", "depth").values, float)
    curves = []
    if receptor_depth is not None:
        if not depths[0] <= receptor_depth <= depths[-1]:
            raise ValueError(f"receptor depth {receptor_depth:g} m is outside the stored "
                             f"depths {depths[0]:g}..{depths[-1]:g} m")
        for block in conc:
            curves.append((times, np.array([np.interp(receptor_depth, depths, row)
                                            for row in block])))

    def var(name):
        return (np.asarray(ds[name].values, float) if name in ds.variables
                else np.full(conc.shape[0], np.nan))
    labels = (tuple(str(v) for v in ds["label"].values) if "label" in ds.variables
              else tuple(f"alternative {i + 1}" for i in range(conc.shape[0])))
    return ComparisonView(labels=labels, times=times, depths=(depths,) * len(conc),
                          concentration=tuple(conc),
                          curves=tuple(curves), first_exceedance=var("first_exceedance_time"),
                          peak=var("peak"), mass=var("mass_to_receptor"),
                          screening_level=screening_level, receptor_depth=receptor_depth,
                          design_life=design_life)


def plot_comparison(alts, out_dir, stem="comparison", title=None, *, stage=None):
    """Write the three comparison figures of solved alternatives; returns their paths.

    Without ``stage`` the three are staged in one :class:`transport.io.atomic.OutputSet`
    and appear together; with one they are renamed when the caller commits it."""
    return write_comparison_figures(view_of_alternatives(alts), out_dir, stem, title,
                                    stage=stage)


def write_comparison_figures(view: ComparisonView, out_dir, stem="comparison", title=None,
                             *, stage=None):
    """Write ``<stem>_breakthrough.png`` (when the view has receptor curves),
    ``<stem>_metrics.png`` and ``<stem>_profiles.png``; returns their paths."""
    if stage is None:
        with OutputSet() as own:
            return write_comparison_figures(view, out_dir, stem, title, stage=own)
    heading = title or "Comparison of alternatives"
    paths = []
    if view.curves:
        paths.append(save(breakthrough_comparison(view, heading),
                          os.path.join(out_dir, f"{stem}_breakthrough.png"), stage))
    paths.append(save(metrics_comparison(view, heading),
                      os.path.join(out_dir, f"{stem}_metrics.png"), stage))
    paths.append(save(profiles_comparison(view, heading),
                      os.path.join(out_dir, f"{stem}_profiles.png"), stage))
    return paths


def _title(body, text):
    body.suptitle(wrap(text, body.figure.get_size_inches()[0] - 0.4, 10), fontsize=10)


def _legend(body, ax, ncols):
    return body.legend(*ax.get_legend_handles_labels(), loc="outside lower center",
                       ncols=ncols, fontsize=7.5, frameon=False)


def _log_limits(values, level):
    """(low, high) of a log concentration axis showing ``level`` and the peak, mg/L."""
    finite = values[np.isfinite(values) & (values > 0)]
    high = max(float(finite.max()) if finite.size else level, level) * 2.0
    return level / 100.0, high


def breakthrough_comparison(view: ComparisonView, title: str):
    """Receptor curves of every alternative over the whole run (figure)."""
    level = None if view.screening_level is None else view.screening_level / MG_PER_L
    ys = [y / MG_PER_L for _, y in view.curves]
    allv = np.concatenate(ys)
    peak = float(np.nanmax(allv)) if np.isfinite(allv).any() else 0.0
    log = bool(level) and peak > LOG_RATIO * level
    note = nonpositive_note(allv, "concentration axis") if log else ""
    fig, body = new_figure(7.5, 6.0, [note] if note else [])
    ax = body.subplots()
    t_end = max(float(t[-1]) for t, _ in view.curves)
    if view.design_life:
        t_end = max(t_end, view.design_life)
    for i, ((t, _), y) in enumerate(zip(view.curves, ys)):
        ax.plot(t / YEAR, y, lw=1.9, label=view.labels[i], **curve_style(i))
    ax.set_xlim(0.0, t_end / YEAR)
    if log:
        ax.set_yscale("log")
        ax.set_ylim(*_log_limits(allv, level))
    else:
        ax.set_ylim(0.0, max(peak, level or 0.0) * 1.08 or 1.0)
    if level is not None:
        mark_level(ax, level, vertical=False)
    if view.design_life:
        mark_design_life(ax, view.design_life / YEAR, "yr")
    ax.set_xlabel("elapsed time (years)")
    ax.set_ylabel(f"pore-water concentration at {view.receptor_depth:g} m (mg/L)"
                  + (", log axis" if log else ""))
    ax.grid(alpha=0.3)
    _title(body, f"{title}: breakthrough at the receptor")
    _legend(body, ax, ncols=2)
    return fig


def metrics_comparison(view: ComparisonView, title: str):
    """Bars of first exceedance, peak and mass to the receptor (figure)."""
    within = (f"within the design life ({view.design_life / YEAR:.4g} yr)"
              if view.design_life else "within the design life (not stored in the file)")
    level = None if view.screening_level is None else view.screening_level / MG_PER_L
    peaks = view.peak / MG_PER_L
    log_peak = bool(level) and np.nanmax(peaks, initial=0.0) > LOG_RATIO * level
    notes = [f"Every bar is {within}; the breakthrough figure shows the whole run, where "
             "a peak can come later and be higher."]
    if log_peak:
        notes.append(nonpositive_note(peaks, "peak axis"))
    fig, body = new_figure(9.0, 4.8, [n for n in notes if n])
    axes = body.subplots(1, 3)
    panels = (("first exceedance (years)", view.first_exceedance / YEAR, "none"),
              ("peak at the receptor (mg/L)", peaks, "n/a"),
              ("mass to the receptor (mg/m2)", view.mass / MG_PER_M2, "n/a"))
    n = len(view.labels)
    colours = [curve_style(i)["color"] for i in range(n)]
    for k, (ax, (label, vals, missing)) in enumerate(zip(axes, panels)):
        shown = np.where(np.isfinite(vals), vals, 0.0)
        if k == 1 and log_peak:
            ax.set_yscale("log")
            ax.set_ylim(*_log_limits(vals, level))
            shown = np.where(shown > 0, shown, np.nan)
        ax.bar(range(n), shown, color=colours, edgecolor="0.2", lw=0.5)
        for i, v in enumerate(vals):
            text = f"{v:.3g}" if np.isfinite(v) else missing
            y = shown[i] if np.isfinite(shown[i]) else ax.get_ylim()[0]
            ax.annotate(text, xy=(i, y), xytext=(0, 2), textcoords="offset points",
                        ha="center", va="bottom", fontsize=7)
        if k == 1 and level is not None:
            mark_level(ax, level, vertical=False)
        ax.margins(y=0.12)
        ax.set_xticks(range(n))
        ax.set_xticklabels([wrap(s, 1.6, 7) for s in view.labels], fontsize=7,
                           rotation=30, ha="right", rotation_mode="anchor")
        ax.set_title(wrap(label, 2.4, 9), fontsize=9)
        ax.grid(axis="y", alpha=0.3)
    _title(body, f"{title}: metrics at the receptor, {within}")
    return fig


def profiles_comparison(view: ComparisonView, title: str):
    """Profiles of every alternative side by side at up to four stored times (figure)."""
    times = view.times
    pick = np.unique(np.linspace(0, times.size - 1, 4).round().astype(int))
    pick = pick[times[pick] > 0] if np.any(times[pick] > 0) else pick
    level = None if view.screening_level is None else view.screening_level / MG_PER_L
    rows = [c[pick] / MG_PER_L for c in view.concentration]
    allv = np.concatenate([r.ravel() for r in rows])
    log = bool(level) and np.nanmax(allv, initial=0.0) > LOG_RATIO * level
    note = nonpositive_note(allv, "concentration axes") if log else ""
    n = len(view.labels)
    fig, body = new_figure(max(7.0, 2.3 * n + 1.0), 6.4, [note] if note else [])
    axes = body.subplots(1, n, sharey=True, squeeze=False)[0]
    tcols = colormaps["viridis"](np.linspace(0.0, 0.85, max(pick.size, 2)))
    for k, ax in enumerate(axes):
        for j, c in zip(range(pick.size), tcols):
            ax.plot(rows[k][j], view.depths[k], color=c, lw=1.5,
                    label=f"t = {times[pick[j]] / YEAR:.3g} yr")
        if log:
            ax.set_xscale("log")
            ax.set_xlim(*_log_limits(allv, level))
        if level is not None:
            mark_level(ax, level, vertical=True)
        if view.receptor_depth is not None:
            ax.axhline(view.receptor_depth, color=DESIGN_LIFE_COLOUR, ls=":", lw=1.2,
                       label=f"receptor at {view.receptor_depth:g} m")
        ax.set_title(wrap(view.labels[k], 2.0, 8), fontsize=8, pad=28)
        ax.set_xlabel("C (mg/L" + (", log)" if log else ")"), fontsize=8)
        ax.tick_params(labelsize=7)
        ax.grid(alpha=0.3)
    deepest = max(float(np.max(d)) for d in view.depths)
    axes[0].set_ylim(deepest, min(float(np.min(d)) for d in view.depths))  # depth down
    axes[0].set_ylabel("depth below the original top (m)")
    _title(body, f"{title}: concentration profiles")
    _legend(body, axes[0], ncols=min(6, pick.size + 2))
    return fig
