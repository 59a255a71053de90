"""The figure of ``stratiflux fit``: measured profiles with their error bars against the
fitted profiles, and the residuals beside them (matplotlib, no screen needed).

Drawn on :class:`matplotlib.figure.Figure` directly (Agg), with the look of
:mod:`transport.plot.style`: one colour and marker per sampling time, depth positive
down, layer faces as thin lines, the estimates and the method in notes, and the caution
in the footer.
"""
from __future__ import annotations

import math

import numpy as np

from transport.plot.style import curve_style, new_figure, save, wrap
from transport.units import YEAR, to_si

__all__ = ["fit_figure", "plot_fit"]

_MARKERS = ("o", "s", "^", "D", "v", "P")


def plot_fit(result, path, *, title="", stage=None) -> str:
    """Save :func:`fit_figure` to ``path`` (PNG, atomically or in ``stage``, a
    :class:`transport.io.atomic.OutputSet`); returns the path."""
    return save(fit_figure(result, title=title), path, stage)


def _note(result) -> list:
    pct = f"{100 * result.confidence:g} %"
    parts = []
    for e in result.estimates:
        if e.identifiable and math.isfinite(e.lower):
            parts.append(f"{e.key} = {e.value / e.per_unit:.4g} ({e.lower / e.per_unit:.4g}"
                         f" to {e.upper / e.per_unit:.4g}) {e.unit}".rstrip())
        else:
            parts.append(f"{e.key} = {e.value / e.per_unit:.4g} {e.unit} NOT IDENTIFIABLE "
                         "from these data".replace("  ", " "))
    return [f"Fitted, {pct} linearised intervals (Seber & Wild 1989): " + "; ".join(parts)
            + f". Weighted RMS of the residuals {result.weighted_rms:.3g}.",
            "Estimates describe this profile under the model's assumptions only."]


def _time_label(result, t) -> str:
    """``t = 30.8 yr`` (model time), with the data's own time where it differs."""
    text = f"t = {t / YEAR:.4g} yr"
    times = result.profile.times
    rows = np.isclose(result.row_times, t, rtol=1e-12, atol=0.0)
    if times is not None and rows.any():
        given = float(times[rows][0])
        if not math.isclose(given, t, rel_tol=1e-9):
            text += f" (data time {given / YEAR:.6g} yr)"
    return text


def fit_figure(result, *, title=""):
    """Measured (error bars: one sigma) and fitted pore-water profiles per sampling
    time, and the residuals against depth.

    Parameters
    ----------
    result : transport.analysis.fit.FitResult
    title : str

    Returns
    -------
    matplotlib.figure.Figure
    """
    prof = result.profile
    unit = prof.unit("concentration") or "mg/L"
    per = to_si(f"1 {unit}", "concentration")
    weighted = prof.sigma is not None
    fig, body = new_figure(7.4, 6.6, _note(result))
    ax, axr = body.subplots(1, 2, sharey=True, width_ratios=(2.2, 1.0))
    times = result.curve_times
    for k, t in enumerate(times):
        style = curve_style(k)
        label = _time_label(result, t)
        ax.plot(result.curve[k] / per, result.curve_depths, lw=1.6, color=style["color"],
                ls=style["ls"], label=f"fitted, {label}", zorder=3)
        rows = np.isclose(result.row_times, t, rtol=1e-12, atol=0.0)
        xerr = prof.sigma[rows] / per if weighted else None
        ax.errorbar(prof.values[rows] / per, prof.depths[rows], xerr=xerr,
                    fmt=_MARKERS[k % len(_MARKERS)], ms=4.5, color=style["color"],
                    mfc="white", ecolor=style["color"], elinewidth=0.9, capsize=2,
                    label=f"measured, {label}" + (" (bars: 1 sigma)" if weighted else ""),
                    zorder=4)
        axr.plot(result.residuals[rows], prof.depths[rows], _MARKERS[k % len(_MARKERS)],
                 ms=4.5, color=style["color"], mfc="white", zorder=4)
    axr.axvline(0.0, color="0.3", lw=0.9)
    if weighted:
        axr.axvspan(-2.0, 2.0, color="0.5", alpha=0.12, lw=0, label="within 2 sigma")
        axr.set_xlabel("residual / sigma\n(fitted minus measured)")
    else:
        axr.set_xlabel(f"residual ({unit})\n(fitted minus measured)")
    span = max(float(np.nanmax(np.abs(result.residuals))) * 1.15, 2.5 if weighted else 0.0)
    axr.set_xlim(-span, span)
    depth_max = float(result.curve_depths.max())
    faces = [z for z in result.interfaces[1:-1] if z < depth_max]
    for j, z in enumerate(faces):
        for a in (ax, axr):
            a.axhline(z, color="0.55", lw=0.6, ls=(0, (3, 2)), zorder=1,
                      label="layer face" if a is axr and j == 0 else None)
    for a in (ax, axr):
        a.grid(True, lw=0.4, alpha=0.5)
    ax.set_ylim(depth_max, 0.0)
    ax.set_xlim(left=min(0.0, float(np.nanmin(prof.values)) / per * 1.05))
    ax.set_xlabel(f"pore-water concentration ({unit})")
    ax.set_ylabel("depth below top of column (m)")
    if title:
        body.suptitle(wrap(f"Fit: {title}", 7.0, 10), fontsize=10)
    handles, labels = ax.get_legend_handles_labels()
    h2, l2 = axr.get_legend_handles_labels()
    body.legend(handles + h2, labels + l2, loc="outside lower center", ncols=2, fontsize=7.5,
                frameon=False)
    return fig
