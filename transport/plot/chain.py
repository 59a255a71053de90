"""The receptor curves of every species of a decay chain on one figure.

Left: concentration at the receptor (log axis: the species differ by decades). Right:
each species against its own screening level, C / level, with the line at 1 where it is
reached (only species with a level). Curves are the continuous solutions sampled in time
(a run) or the stored output times (a file), as :mod:`transport.plot.column`.
"""
from __future__ import annotations

import numpy as np

from transport.io.netcdf import elapsed_seconds
from transport.plot.style import (LEVEL_COLOUR, curve_style, mark_design_life, new_figure,
                                  nonpositive_note, save)
from transport.units import MG_PER_L, YEAR

__all__ = ["chain_breakthrough_figure", "plot_chain_breakthrough", "curves_of_dataset"]


def curves_of_dataset(ds, receptor_depth: float):
    """(times s, [C (kg m-3) at the receptor per species]) from a chain file, linear in
    depth between the stored depths."""
    t = elapsed_seconds(ds)
    z = ds["depth"].values
    out = []
    for j in range(ds.sizes["species"]):
        c = ds["concentration"].isel(species=j).values
        out.append(np.array([np.interp(receptor_depth, z, row) for row in c]))
    return t, out


def chain_breakthrough_figure(times, curves, names, *, receptor_depth: float, levels=None,
                              design_life=None, title: str = ""):
    """Figure of ``curves`` (kg m-3, one per species, on ``times`` s)."""
    levels = list(levels or [None] * len(curves))
    years = np.asarray(times, float) / YEAR
    y_all = np.concatenate([np.asarray(c, float) for c in curves]) / MG_PER_L
    note = nonpositive_note(y_all, "concentration axis")
    notes = [note] if note else []
    notes.append(f"Receptor at {receptor_depth:g} m below the top; decay chain "
                 + " -> ".join(names) + ".")
    fig, body = new_figure(9.0, 5.2, notes)
    if title:
        body.suptitle(title, fontsize=10)
    ax1, ax2 = body.subplots(1, 2)
    ratio_drawn = False
    for j, (name, c, level) in enumerate(zip(names, curves, levels)):
        style = curve_style(j)
        y = np.asarray(c, float) / MG_PER_L
        ax1.plot(years, np.where(y > 0, y, np.nan), label=name, lw=1.8, **style)
        if level:
            ax2.plot(years, np.asarray(c, float) / level, label=name, lw=1.8, **style)
            ratio_drawn = True
    ax1.set_yscale("log")
    ax1.set_xlabel("elapsed time (years)")
    ax1.set_ylabel("pore-water concentration at the receptor (mg/L)")
    positive = y_all[np.isfinite(y_all) & (y_all > 0)]
    if positive.size:
        ax1.set_ylim(max(positive.min(), positive.max() * 1e-8), positive.max() * 2.0)
    if ratio_drawn:
        ax2.set_yscale("log")
        ax2.axhline(1.0, color=LEVEL_COLOUR, ls=(0, (4, 2)), lw=1.6,
                    label="screening level reached (ratio 1)")
        ax2.set_ylabel("concentration / screening level of the species")
        lims = ax2.get_ylim()
        ax2.set_ylim(max(lims[0], 1e-6), max(lims[1], 2.0))
    else:
        ax2.text(0.5, 0.5, "no screening level given:\nadd screening_level to [output]\n"
                 "and to each [[chain]] table", ha="center", va="center",
                 transform=ax2.transAxes, fontsize=8)
        ax2.set_axis_off()
    ax2.set_xlabel("elapsed time (years)")
    for ax in (ax1, ax2):
        ax.grid(True, which="major", color="0.85", lw=0.6)
        ax.set_xlim(0.0, max(years[-1], (design_life or 0.0) / YEAR))
        if design_life and ax.axison:
            mark_design_life(ax, design_life / YEAR, "yr")
    handles, labels = ax1.get_legend_handles_labels()
    if ratio_drawn:
        h2, l2 = ax2.get_legend_handles_labels()
        for h, lab in zip(h2, l2):
            if lab not in labels:
                handles.append(h)
                labels.append(lab)
    body.legend(handles, labels, loc="outside lower center", ncols=3, fontsize=8,
                frameon=False)
    return fig


def plot_chain_breakthrough(times, curves, names, path, *, stage=None, **kwargs) -> str:
    """Save :func:`chain_breakthrough_figure` to ``path`` (atomically) and return it."""
    return save(chain_breakthrough_figure(times, curves, names, **kwargs), path, stage)
