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

import os
import textwrap

import numpy as np
from matplotlib import colormaps
from matplotlib.figure import Figure

from transport.analysis.metrics import unresolved_windows
from transport.analysis.summary import format_time
from transport.caution import CAUTION_SHORT
from transport.io.atomic import stage_or_write
from transport.io.netcdf import elapsed_seconds
from transport.units import DAY, MG_PER_L, YEAR

__all__ = ["plot_profiles", "plot_breakthrough", "profile_figure", "breakthrough_figure"]

DPI = 150
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
                  if k in ds.variables}
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


def _new_figure(title: str):
    fig = Figure(figsize=(6.5, 7.0), dpi=DPI)
    ax = fig.add_axes((0.13, 0.15, 0.62, 0.76))
    if title:
        ax.set_title(title, fontsize=10)
    fig.text(0.02, 0.015, textwrap.fill(CAUTION_SHORT, 125), fontsize=6.5, color="0.3",
             ha="left", va="bottom")
    return fig, ax


def _save(fig, path, stage=None) -> str:
    """Save a figure (PNG unless the name says otherwise) through a temporary name and a rename (with ``stage``, renamed with the
    run's other outputs: :mod:`transport.io.atomic`)."""
    path = os.fspath(path)
    fmt = os.path.splitext(path)[1][1:].lower() or "png"  # the format of the name asked for
    return stage_or_write(stage, path, lambda tmp: fig.savefig(tmp, dpi=DPI, format=fmt))


def plot_profiles(source, path, *, layers=None, screening_level=None, times=None,
                  title=None, stage=None) -> str:
    """Save :func:`profile_figure` to ``path`` (dpi 150, PNG, atomically; ``stage``: a
    :class:`transport.io.atomic.OutputSet`) and return the path."""
    return _save(profile_figure(source, layers=layers, screening_level=screening_level,
                                times=times, title=title), path, stage)


def profile_figure(source, *, layers=None, screening_level=None, times=None, title=None):
    """Concentration versus depth at the output times, layers shaded and named.

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

    Returns
    -------
    matplotlib.figure.Figure
    """
    run = _extract(source)
    bands = _layer_bands(layers) if layers is not None else run["bands"]
    if screening_level is None:
        screening_level = run.get("screening_level")
    fig, ax = _new_figure(title if title is not None else run["title"])
    depths, all_times = run["depths"], run["times"]
    if times is None:
        count = min(all_times.size, MAX_PROFILES)
        index = sorted({int(i) for i in np.round(np.linspace(0, all_times.size - 1, count))})
    else:
        index = sorted({int(np.argmin(np.abs(all_times - t))) for t in times})
    colours = colormaps["plasma"](np.linspace(0.0, 0.85, max(len(index), 2)))
    for colour, k in zip(colours, index):
        ax.plot(run["concentration"][k] / MG_PER_L, depths, lw=1.6, color=colour,
                label=_time_label(all_times[k]))
    for i, (name, top, bottom) in enumerate(bands):
        ax.axhspan(top, bottom, color=_BAND_COLOURS[i % 2], zorder=0, lw=0)
        ax.axhline(bottom, color="0.55", lw=0.6, zorder=1)
        ax.annotate(name, xy=(1.01, 0.5 * (top + bottom)),
                    xycoords=("axes fraction", "data"), va="center", ha="left", fontsize=8)
    if screening_level is not None:
        ax.axvline(screening_level / MG_PER_L, color="crimson", ls="--", lw=1.2,
                   label=f"screening level {screening_level / MG_PER_L:.3g} mg/L")
    bottom = max([depths[-1]] + [b[2] for b in bands])
    ax.set_ylim(bottom, min([depths[0]] + [b[1] for b in bands]))  # depth grows downward
    ax.set_xlim(left=0.0)
    ax.set_xlabel("pore-water concentration (mg/L)")
    ax.set_ylabel("depth below top of column (m)")
    ax.grid(True, lw=0.4, alpha=0.5)
    ax.legend(fontsize=8, loc="lower right", framealpha=0.9)
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
    for a, b in run.get("windows", ()):  # just after a change: not resolved, not drawn
        conc[(dense > a) & (dense < b)] = np.nan
    early = times < t0
    return (np.concatenate([times[early], dense]), np.concatenate([stored[early], conc]),
            True)


def plot_breakthrough(source, path, *, receptor_depth=None, screening_level=None,
                      title=None, n_samples: int = 400, log_scale=None, stage=None) -> str:
    """Save :func:`breakthrough_figure` to ``path`` (dpi 150, PNG, atomically; ``stage``:
    a :class:`transport.io.atomic.OutputSet`) and return the path."""
    return _save(breakthrough_figure(source, receptor_depth=receptor_depth,
                                     screening_level=screening_level, title=title,
                                     n_samples=n_samples, log_scale=log_scale), path, stage)


def breakthrough_figure(source, *, receptor_depth=None, screening_level=None, title=None,
                        n_samples: int = 400, log_scale=None):
    """Concentration versus time at the receptor, with the screening level.

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
        level onto zero.

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
    times, conc, continuous = _breakthrough_curve(run, float(receptor_depth), n_samples)
    scale, unit = _time_scale(times[-1])
    heading = title if title is not None else run["title"]
    fig, ax = _new_figure(heading)
    ax.set_position((0.13, 0.15, 0.82, 0.76))
    ax.plot(times / scale, conc / MG_PER_L, lw=1.6, marker=None if continuous else "o",
            ms=3, label=f"receptor at {receptor_depth:g} m")
    if screening_level is not None:
        ax.axhline(screening_level / MG_PER_L, color="crimson", ls="--", lw=1.2,
                   label=f"screening level {screening_level / MG_PER_L:.3g} mg/L")
    ax.set_xlim(min(0.0, times[0] / scale), times[-1] / scale)
    peak_value = float(np.nanmax(conc)) if conc.size else 0.0
    if log_scale is None:
        log_scale = bool(screening_level) and peak_value > LOG_RATIO * screening_level
    if log_scale and screening_level:
        # the level would be a line on the axis: show decades around it instead
        ax.set_yscale("log")
        ax.set_ylim(screening_level / MG_PER_L / 100.0,
                    max(peak_value, screening_level) / MG_PER_L * 2.0)
    else:
        ax.set_ylim(bottom=0.0)
    ax.set_xlabel(f"elapsed time ({unit})")
    ax.set_ylabel("pore-water concentration (mg/L)")
    ax.grid(True, lw=0.4, alpha=0.5)
    ax.legend(fontsize=8, loc="best", framealpha=0.9)
    return fig
