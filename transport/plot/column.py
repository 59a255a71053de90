"""Report-ready figures of a column run (matplotlib, no screen needed).

Figures are built on :class:`matplotlib.figure.Figure` directly (Agg canvas), never
through ``pyplot``'s global state, so they work in batch jobs, tests and servers.
Every figure carries the caution in a small footer.

Both functions accept either a solution (:class:`transport.solvers.result.Solution`, as
returned by :func:`transport.api.solve_scenario`) or an ``xarray.Dataset`` read with
:func:`transport.io.netcdf.read_column_netcdf`.
Concentrations are shown in mg/L and times in years (days for runs shorter than a year).
"""
from __future__ import annotations

import numpy as np
from matplotlib import colormaps

from transport.analysis.metrics import unresolved_windows
from transport.analysis.summary import format_time
from transport.io.netcdf import elapsed_seconds
from transport.plot.style import (CURVE_COLOURS, DPI, LEVEL_COLOUR, allowed_error,
                                  mark_design_life, mark_level, new_figure, nonpositive_note,
                                  rounding_as_zero, save, wrap)
from transport.units import DAY, MG_PER_L, YEAR

__all__ = ["plot_profiles", "plot_breakthrough", "profile_figure", "breakthrough_figure",
           "DPI"]

#: Profiles drawn when the caller does not choose times: more lines are unreadable.
MAX_PROFILES = 8
#: Breakthrough plots switch to a log concentration axis when the peak exceeds the
#: screening level by this factor (the level would sit on the zero line otherwise).
LOG_RATIO = 50.0
_BAND_COLOURS = ("#f2efe6", "#e3ddcc")


def _is_dataset(source) -> bool:
    return hasattr(source, "data_vars") and hasattr(source, "attrs")


def _layer_bands(layers):
    """Normalise ``layers`` to a list of (name, top, bottom) in metres.

    Accepts a ``Column``, a sequence of ``Layer`` (stacked from z = 0) or a sequence of
    ``(name, top, bottom)`` tuples.
    """
    if layers is None:
        return []
    if hasattr(layers, "layers") and hasattr(layers, "interfaces"):
        layers = layers.layers
    bands, top = [], 0.0
    for i, item in enumerate(layers):
        if hasattr(item, "thickness"):
            bottom = top + float(item.thickness)
            bands.append((item.name or f"layer {i + 1}", top, bottom))
            top = bottom
        else:
            name, upper, lower = item
            bands.append((str(name), float(upper), float(lower)))
    return bands


def _extract(source):
    """Times (s), depths (m), concentration (kg m-3) and metadata of a run."""
    if _is_dataset(source):
        ds = source
        bands = []
        if {"layer_name", "layer_top", "layer_bottom"} <= set(ds.variables):
            bands = list(zip((str(n) for n in ds["layer_name"].values),
                             ds["layer_top"].values.astype(float),
                             ds["layer_bottom"].values.astype(float)))
        scalar = {k: float(ds[k].values) for k in ("screening_level", "receptor_depth")
                  if k in ds.variables and ds[k].ndim == 0}
        if "design_life" in ds.variables and ds["design_life"].ndim == 0:
            scalar["design_life"] = _seconds(ds["design_life"])
        return {
            "times": elapsed_seconds(ds),
            "depths": np.asarray(ds["depth"].values, dtype=float),
            "concentration": np.asarray(ds["concentration"].values, dtype=float),
            "bands": bands,
            "title": ds.attrs.get("title", ""),
            "concentration_at": None,
            **scalar,
        }
    return {
        "times": np.asarray(source.times, dtype=float),
        "depths": np.asarray(source.depths, dtype=float),
        "concentration": np.asarray(source.concentration, dtype=float),
        "bands": _layer_bands(source.column),
        "title": "",
        "concentration_at": getattr(source, "concentration_at", None),
        "windows": _windows(source),
        "bound": allowed_error(source),
    }


def _windows(source):
    try:
        return unresolved_windows(source)
    except (AttributeError, TypeError):  # a result without a modal series
        return []


def _time_scale(t_max: float):
    """(divisor, unit label) so that the time axis reads in years, or days if short."""
    if t_max >= YEAR:
        return YEAR, "years"
    return DAY, "days"


def _time_label(t: float) -> str:
    return f"t = {format_time(t)}"


def _seconds(var) -> float:
    """A scalar NetCDF duration in seconds (units d, days, s or yr)."""
    unit = str(var.attrs.get("units", "s")).split(" ")[0]
    scale = {"d": DAY, "day": DAY, "days": DAY, "s": 1.0, "yr": YEAR, "year": YEAR,
             "years": YEAR}.get(unit)
    if scale is None:
        raise ValueError(f"design_life units {unit!r}: expected d, s or yr")
    return float(var.values) * scale


def _heading(body, title: str):
    if title:
        body.suptitle(wrap(title, body.figure.get_size_inches()[0] - 0.4, 10), fontsize=10)


def _legend_below(fig, axes, ncols: int = 3):
    """One legend under the axes (never over a curve), entries from every axes."""
    handles, labels = [], []
    for ax in axes:
        for h, lab in zip(*ax.get_legend_handles_labels()):
            if lab not in labels:
                handles.append(h)
                labels.append(lab)
    return fig.legend(handles, labels, loc="outside lower center", ncols=ncols, fontsize=8,
                      frameon=False)


def plot_profiles(source, path, *, layers=None, screening_level=None, times=None,
                  title=None, log_scale=False, stage=None) -> str:
    """Save :func:`profile_figure` to ``path`` (dpi 150, PNG, atomically; ``stage``: a
    :class:`transport.io.atomic.OutputSet`) and return the path."""
    return save(profile_figure(source, layers=layers, screening_level=screening_level,
                               times=times, title=title, log_scale=log_scale), path, stage)


def profile_figure(source, *, layers=None, screening_level=None, times=None, title=None,
                   log_scale=False):
    """Concentration versus depth at the output times, layers shaded and named.

    When the screening level is more than ``LOG_RATIO`` times below the highest
    concentration drawn (a line at 5 ug/L on a 0-120 mg/L axis cannot be seen), a
    second panel shows the same profiles on a logarithmic concentration axis where the
    level is visible; the linear panel marks where the level lies.

    Parameters
    ----------
    source : Solution or xarray.Dataset
    layers : Column, sequence of Layer, or sequence of (name, top_m, bottom_m), optional
        Layer bands to shade; taken from ``source`` when omitted.
    screening_level : float, optional
        kg m-3; drawn as a vertical dashed line. Taken from a dataset when omitted.
    times : sequence of float, optional
        Elapsed times (s) to draw, each matched to the nearest stored time. When
        omitted, all stored times up to ``MAX_PROFILES``, else that many spread evenly
        over the stored ones (first and last included).
    title : str, optional
    log_scale : bool
        Draw the single panel on a logarithmic concentration axis instead (values
        <= 0 are left out, and the footer says how many).

    Returns
    -------
    matplotlib.figure.Figure
    """
    run = _extract(source)
    bands = _layer_bands(layers) if layers is not None else run["bands"]
    if screening_level is None:
        screening_level = run.get("screening_level")
    level = None if screening_level is None else screening_level / MG_PER_L
    depths, all_times = run["depths"], run["times"]
    if times is None:
        count = min(all_times.size, MAX_PROFILES)
        index = sorted({int(i) for i in np.round(np.linspace(0, all_times.size - 1, count))})
    else:
        index = sorted({int(np.argmin(np.abs(all_times - t))) for t in times})
    rows = run["concentration"][index] / MG_PER_L
    peak = float(np.nanmax(rows)) if np.isfinite(rows).any() else 0.0
    second = bool(level) and not log_scale and peak > LOG_RATIO * level
    notes = [nonpositive_note(rows, "concentration axis")] if second or log_scale else []
    fig, body = new_figure(7.0, 7.6, [n for n in notes if n])
    axes = list(body.subplots(1, 2, sharey=True, width_ratios=(2.0, 1.0))) if second \
        else [body.subplots()]
    log_axes = axes[1:] if second else (axes if log_scale else [])
    colours = colormaps["viridis"](np.linspace(0.0, 0.88, max(len(index), 2)))
    for ax in axes:
        for colour, k, row in zip(colours, index, rows):
            ax.plot(row, depths, lw=1.6, color=colour, label=_time_label(all_times[k]))
        for i, (name, top, bottom) in enumerate(bands):
            ax.axhspan(top, bottom, color=_BAND_COLOURS[i % 2], zorder=0, lw=0)
            ax.axhline(bottom, color="0.55", lw=0.6, zorder=1)
        ax.grid(True, lw=0.4, alpha=0.5)
    for name, top, bottom in bands:
        axes[-1].annotate(wrap(name, 1.1, 8), xy=(1.02, 0.5 * (top + bottom)),
                          xycoords=("axes fraction", "data"), va="center", ha="left",
                          fontsize=8, annotation_clip=False)
    for ax in log_axes:
        ax.set_xscale("log")
        low = level / 100.0 if level else max(peak, 1e-30) * 1e-6
        ax.set_xlim(low, max(peak, level or 0.0) * 2.0)
    if not log_scale:
        axes[0].set_xlim(left=0.0)
    if level is not None:
        for ax in axes:
            mark_level(ax, level, vertical=True)
        if second:
            axes[0].set_title("linear axis: the screening level lies on its left edge",
                              fontsize=8, color=LEVEL_COLOUR, loc="left", pad=30)
            axes[1].set_title("log axis", fontsize=8, loc="left", pad=30)
    bottom = max([depths[-1]] + [b[2] for b in bands])
    axes[0].set_ylim(bottom, min([depths[0]] + [b[1] for b in bands]))  # depth down
    axes[0].set_xlabel("pore-water concentration (mg/L)")
    if second:
        axes[1].set_xlabel("same, log axis (mg/L)")
    elif log_scale:
        axes[0].set_xlabel("pore-water concentration, log axis (mg/L)")
    axes[0].set_ylabel("depth below top of column (m)")
    _heading(body, title if title is not None else run["title"])
    _legend_below(body, axes[:1], ncols=4)
    return fig


def _interpolated_at(run, receptor_depth: float) -> np.ndarray:
    depths = run["depths"]
    if not depths[0] <= receptor_depth <= depths[-1]:
        raise ValueError(f"receptor depth {receptor_depth} m is outside the stored depths "
                         f"{depths[0]:g}..{depths[-1]:g} m")
    return np.array([np.interp(receptor_depth, depths, row) for row in run["concentration"]])


def _breakthrough_curve(run, receptor_depth: float, n_samples: int):
    """Receptor curve: the continuous series from the earliest positive output time on
    (the solver sizes its mode count for that time; earlier it is not resolved), the
    stored values before it (t = 0)."""
    times = run["times"]
    stored = _interpolated_at(run, receptor_depth)
    positive = times[times > 0]
    if run["concentration_at"] is None or positive.size == 0:
        return times, stored, False
    t0 = float(positive.min())
    dense = np.union1d(np.linspace(t0, times[-1], n_samples),
                       np.geomspace(t0, times[-1], n_samples // 2))
    dense = np.union1d(dense, positive)
    conc = np.asarray(run["concentration_at"](receptor_depth, dense), float)
    conc = rounding_as_zero(conc, run.get("bound", 0.0))
    for a, b in run.get("windows", ()):  # just after a change: not resolved, not drawn
        conc[(dense > a) & (dense < b)] = np.nan
    early = times < t0
    return (np.concatenate([times[early], dense]), np.concatenate([stored[early], conc]),
            True)


def plot_breakthrough(source, path, *, receptor_depth=None, screening_level=None,
                      title=None, n_samples: int = 400, log_scale=None, design_life=None,
                      stage=None) -> str:
    """Save :func:`breakthrough_figure` to ``path`` (dpi 150, PNG, atomically; ``stage``:
    a :class:`transport.io.atomic.OutputSet`) and return the path."""
    return save(breakthrough_figure(source, receptor_depth=receptor_depth,
                                    screening_level=screening_level, title=title,
                                    n_samples=n_samples, log_scale=log_scale,
                                    design_life=design_life), path, stage)


def breakthrough_figure(source, *, receptor_depth=None, screening_level=None, title=None,
                        n_samples: int = 400, log_scale=None, design_life=None):
    """Concentration versus time at the receptor, with the screening level and the end
    of the design life.

    With a solution the curve is the continuous solution
    (``concentration_at``) sampled at ``n_samples`` times from the earliest positive
    output time on; with a dataset it is interpolated linearly in depth at the stored
    times (markers show the stored times).

    Parameters
    ----------
    source : Solution or xarray.Dataset
    receptor_depth : float
        Depth of the receptor, m (taken from a dataset when omitted).
    screening_level : float, optional
        kg m-3; drawn as a horizontal dashed line.
    title : str, optional
    n_samples : int
        Samples of the continuous curve.
    log_scale : bool, optional
        Logarithmic concentration axis. By default it is used when the peak exceeds
        ``LOG_RATIO`` times the screening level, where a linear axis would flatten the
        level onto zero. Values <= 0 cannot be drawn on it: the footer says how many.
    design_life : float, optional
        s; a vertical line marks its end and the time after it is shaded (taken from a
        dataset's ``design_life`` variable when omitted).

    Returns
    -------
    matplotlib.figure.Figure
    """
    run = _extract(source)
    if receptor_depth is None:
        receptor_depth = run.get("receptor_depth")
    if receptor_depth is None:
        raise ValueError("plot_breakthrough needs receptor_depth (m)")
    if screening_level is None:
        screening_level = run.get("screening_level")
    if design_life is None:
        design_life = run.get("design_life")
    times, conc, continuous = _breakthrough_curve(run, float(receptor_depth), n_samples)
    t_end = max(times[-1], design_life or 0.0)
    scale, unit = _time_scale(t_end)
    y = conc / MG_PER_L
    peak_value = float(np.nanmax(conc)) if np.isfinite(conc).any() else 0.0
    if log_scale is None:
        log_scale = bool(screening_level) and peak_value > LOG_RATIO * screening_level
    note = nonpositive_note(y, "concentration axis") if log_scale else ""
    fig, body = new_figure(6.5, 5.6, [note] if note else [])
    ax = body.subplots()
    ax.plot(times / scale, y, lw=1.8, color=CURVE_COLOURS[0],
            marker=None if continuous else "o", ms=3,
            label=f"receptor at {receptor_depth:g} m below the top")
    ax.set_xlim(min(0.0, times[0] / scale), t_end / scale)
    if log_scale:
        # the level would be a line on the axis: show decades around it instead
        ax.set_yscale("log")
        ref = screening_level if screening_level else max(peak_value, 1e-30) * 1e-4
        ax.set_ylim(ref / MG_PER_L / 100.0, max(peak_value, ref) / MG_PER_L * 2.0)
    else:
        top = max(peak_value, screening_level or 0.0) / MG_PER_L * 1.08
        ax.set_ylim(0.0, top if top > 0 else 1.0)
    if screening_level is not None:
        mark_level(ax, screening_level / MG_PER_L, vertical=False)
    if design_life:
        mark_design_life(ax, design_life / scale, unit)
    ax.set_xlabel(f"elapsed time ({unit})")
    ax.set_ylabel("pore-water concentration (mg/L)"
                  + ("\n(log axis)" if log_scale else ""))
    ax.grid(True, lw=0.4, alpha=0.5)
    _heading(body, title if title is not None else run["title"])
    _legend_below(body, [ax], ncols=2)
    return fig
