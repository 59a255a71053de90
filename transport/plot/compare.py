"""Figures for a comparison of remediation alternatives (matplotlib, no screen).

* breakthrough curves of every alternative at the receptor, screening level drawn;
* bars of the deciding metrics (first exceedance, peak, mass to the receptor);
* concentration profiles of every alternative side by side at a few times.
"""
from __future__ import annotations

import os
import textwrap

import numpy as np
from matplotlib import colormaps
from matplotlib.figure import Figure

from transport.analysis.metrics import unresolved_windows
from transport.caution import CAUTION_SHORT
from transport.io.atomic import OutputSet, stage_or_write
from transport.units import MG_PER_L, MG_PER_M2, YEAR

__all__ = ["plot_comparison"]

DPI = 150


def _footer(fig):
    fig.text(0.02, 0.012, textwrap.fill(CAUTION_SHORT, 150), fontsize=6.5, color="0.3",
             ha="left", va="bottom")


def _save(fig, out_dir, name, stage=None):
    """PNG through a temporary name (with ``stage``, renamed with the run's other
    outputs: :mod:`transport.io.atomic`)."""
    return stage_or_write(stage, os.path.join(out_dir, name),
                          lambda tmp: fig.savefig(tmp, dpi=DPI, format="png"))


def _colours(n):
    cmap = colormaps["tab10"]
    return [cmap(i % 10) for i in range(n)]


def plot_comparison(alts, out_dir, stem="comparison", title=None, *, stage=None):
    """Write the three comparison figures; returns their paths.

    Without ``stage`` the three are staged in one :class:`transport.io.atomic.OutputSet`
    and appear together; with one they are renamed when the caller commits it."""
    if stage is None:
        with OutputSet() as own:
            return plot_comparison(alts, out_dir, stem, title, stage=own)
    cols = _colours(len(alts))
    paths = []
    # 1. breakthrough curves
    fig = Figure(figsize=(7.5, 5.2), dpi=DPI)
    ax = fig.add_axes((0.11, 0.2, 0.62, 0.7))
    level = alts[0].metrics.screening_level
    t_hi = max(a.metrics.horizon for a in alts)
    t_lo = min(float(np.min(a.solution.times[a.solution.times > 0])) for a in alts)
    t = np.geomspace(t_lo, t_hi, 400) if t_lo > 0 else np.linspace(0, t_hi, 400)
    peak = 0.0
    for a, c in zip(alts, cols):
        y = np.asarray(a.solution.concentration_at(a.metrics.receptor_depth, t)) / MG_PER_L
        for w0, w1 in unresolved_windows(a.solution):  # not resolved just after a change
            y[(t > w0) & (t < w1)] = np.nan
        peak = max(peak, float(np.nanmax(y)))
        ax.plot(t / YEAR, y, color=c, lw=1.8, label=a.label)
    if level is not None:
        ax.axhline(level / MG_PER_L, color="crimson", ls="--", lw=1.2,
                   label=f"screening level {level / MG_PER_L:.3g} mg/L")
        if peak > 50 * level / MG_PER_L:
            ax.set_yscale("log")
            ax.set_ylim(level / MG_PER_L * 1e-2, peak * 2)
    ax.set_xlabel("elapsed time (years)")
    ax.set_ylabel(f"pore-water concentration at {alts[0].metrics.receptor_depth:g} m (mg/L)")
    ax.grid(alpha=0.3)
    ax.legend(fontsize=7, loc="upper left", bbox_to_anchor=(1.01, 1.0))
    ax.set_title(title or "Breakthrough at the receptor", fontsize=10)
    _footer(fig)
    paths.append(_save(fig, out_dir, f"{stem}_breakthrough.png", stage))

    # 2. metric bars
    fig = Figure(figsize=(9.0, 4.2), dpi=DPI)
    names = [a.label for a in alts]
    panels = (
        ("first exceedance (yr)", [np.nan if a.metrics.first_exceedance is None
                                   else a.metrics.first_exceedance / YEAR for a in alts]),
        ("peak at receptor (mg/L)", [a.metrics.peak_concentration / MG_PER_L for a in alts]),
        ("mass to receptor (mg/m2)", [np.nan if a.metrics.cumulative_mass is None
                                      else a.metrics.cumulative_mass / MG_PER_M2 for a in alts]),
    )
    for k, (label, vals) in enumerate(panels):
        ax = fig.add_axes((0.07 + 0.32 * k, 0.33, 0.24, 0.55))
        ax.bar(range(len(vals)), np.nan_to_num(vals), color=cols)
        for i, v in enumerate(vals):
            if not np.isfinite(v):
                ax.text(i, 0, "never", ha="center", va="bottom", fontsize=7, rotation=90)
        ax.set_xticks(range(len(vals)))
        ax.set_xticklabels([textwrap.shorten(n, 22) for n in names], rotation=35,
                           ha="right", fontsize=7)
        ax.set_title(label, fontsize=9)
        ax.grid(axis="y", alpha=0.3)
    _footer(fig)
    paths.append(_save(fig, out_dir, f"{stem}_metrics.png", stage))

    # 3. profiles side by side at a few common times
    times = np.asarray(alts[0].solution.times)
    pick = times[np.unique(np.linspace(0, times.size - 1, 4).round().astype(int))]
    pick = pick[pick > 0] if np.any(pick > 0) else pick
    fig = Figure(figsize=(3.0 * len(alts) + 1, 5.5), dpi=DPI)
    tcols = colormaps["viridis"](np.linspace(0.1, 0.9, pick.size))
    for k, a in enumerate(alts):
        ax = fig.add_axes((0.06 + k * 0.92 / len(alts), 0.17, 0.92 / len(alts) - 0.05, 0.72))
        sol = a.solution
        for tt, c in zip(pick, tcols):
            i = int(np.argmin(np.abs(sol.times - tt)))
            ax.plot(sol.concentration[i] / MG_PER_L, sol.depths, color=c,
                    label=f"{tt / YEAR:.3g} yr")
        ax.invert_yaxis() if not ax.yaxis_inverted() else None
        ax.set_title(textwrap.shorten(a.label, 30), fontsize=8)
        ax.set_xlabel("C (mg/L)", fontsize=8)
        if k == 0:
            ax.set_ylabel("depth below original top (m)")
            ax.legend(fontsize=6)
        ax.axhline(a.metrics.receptor_depth, color="0.4", ls=":", lw=1)
        ax.grid(alpha=0.3)
    _footer(fig)
    paths.append(_save(fig, out_dir, f"{stem}_profiles.png", stage))
    return paths
