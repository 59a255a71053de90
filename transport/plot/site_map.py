"""Site map of per-boring results (matplotlib, no screen).

Breakthrough time at the receptor per boring (and the probability of exceeding the
screening level within the design life after a Monte Carlo run), the CRS named on the
axes, a grid-north arrow and a scale bar.  Each boring is labelled with its id where
the labels fit between the borings; the markers shrink with the spacing of the borings
so that they do not overlap (a dense site of thousands of borings stays readable, and
is drawn in seconds: labels are most of the drawing time).
"""
from __future__ import annotations

import numpy as np
from pyproj import CRS
from scipy.spatial import cKDTree

from transport.plot.style import new_figure, save, wrap

__all__ = ["plot_site_map", "site_map_figure", "crs_name", "scale_bar_length",
           "boring_spacing", "MARKER_AREA", "LABEL_SIZE"]

MARKER_AREA = 55.0  # largest marker area, points^2 (a 7.4 pt disc)
LABEL_SIZE = 5.5  # boring id labels, points
_CHAR_WIDTH = 0.62  # width of a label character, in font sizes (DejaVu Sans digits)
_MIN_AREA = 0.5  # smallest marker, points^2


def crs_name(wkt: str) -> str:
    """Name (and EPSG code when it has one) of the CRS in ``wkt``; "" when unreadable."""
    try:
        crs = CRS.from_wkt(wkt)
    except Exception:  # pyproj raises its own CRSError or ValueError for bad WKT
        return ""
    code = crs.to_epsg(min_confidence=90)
    return crs.name + (f" (EPSG:{code})" if code else "")


def scale_bar_length(span: float) -> float:
    """A round length (1, 2 or 5 times a power of ten) near a fifth of ``span`` (m)."""
    target = max(span, 1e-9) / 5.0
    power = 10.0 ** np.floor(np.log10(target))
    return float(max(s * power for s in (1.0, 2.0, 5.0) if s * power <= target))


def boring_spacing(x: np.ndarray, y: np.ndarray) -> float:
    """Median distance from a boring to its nearest neighbour (m); the larger map span
    for a single boring or borings at one place."""
    span = max(float(np.ptp(x)), float(np.ptp(y)), 1.0)
    if x.size < 2:
        return span
    dist, _ = cKDTree(np.column_stack([x, y])).query(np.column_stack([x, y]), k=2)
    d = dist[:, 1]
    d = d[d > 0]
    return float(np.median(d)) if d.size else span


def _decorate(ax, x0, x1, y0, y1):
    """North arrow (grid north: up on a projected map) and a scale bar, in the corners."""
    ax.annotate("N", xy=(0.95, 0.97), xytext=(0.95, 0.85), xycoords="axes fraction",
                ha="center", va="center", fontsize=10, fontweight="bold",
                arrowprops={"arrowstyle": "-|>", "color": "k", "lw": 1.5},
                bbox={"boxstyle": "circle,pad=0.15", "fc": "white", "ec": "none"})
    length = scale_bar_length(x1 - x0)
    bx, by = x0 + 0.04 * (x1 - x0), y0 + 0.05 * (y1 - y0)
    ax.plot([bx, bx + length], [by, by], color="k", lw=3, solid_capstyle="butt")
    ax.plot([bx, bx + length / 2], [by, by], color="white", lw=1.5, solid_capstyle="butt")
    ax.annotate(f"{length:g} m", xy=(bx + length / 2, by), xytext=(0, 4),
                textcoords="offset points", ha="center", va="bottom", fontsize=7)


def site_map_figure(table):
    """Map figure of a station table (:func:`transport.io.gis.station_table`).

    Returns
    -------
    matplotlib.figure.Figure
    """
    mc = "exceedance_probability" in table and table.attrs.get("realizations", 0) > 0
    fig, body = new_figure(13.0 if mc else 7.5, 7.2)
    axes = body.subplots(1, 2 if mc else 1, squeeze=False)[0]
    x, y = table["x_m"].to_numpy(float), table["y_m"].to_numpy(float)
    names = [str(s) for s in table["station_id"]]
    bt = table["breakthrough_yr"].to_numpy(float)
    never = np.isnan(bt)
    pad = 0.08 * max(np.ptp(x), np.ptp(y), 1.0)
    # room below for the scale bar, above for the north arrow
    x0, x1, y0, y1 = x.min() - pad, x.max() + pad, y.min() - 2 * pad, y.max() + 3 * pad
    # points per metre of an axes, on the low side (an axes takes about 0.6 of the
    # figure width each, the rest is colour bars and margins, and 0.75 of the height;
    # measured 0.46 where this gives 0.49 for 2,500 borings): the map is to equal scale
    fig_w, fig_h = body.figure.get_size_inches()
    per_m = 0.9 * 72.0 * min(0.6 * fig_w / len(axes) / (x1 - x0), 0.75 * fig_h / (y1 - y0))
    gap = boring_spacing(x, y) * per_m  # points between neighbouring borings
    area = float(np.clip((0.75 * gap) ** 2, _MIN_AREA, MARKER_AREA))
    edge = 0.4 if area >= 12.0 else 0.0
    label_w = max((len(n) for n in names), default=0) * _CHAR_WIDTH * LABEL_SIZE
    labelled = gap >= max(label_w + 2.0, 2.2 * LABEL_SIZE + np.sqrt(area))
    at = table.attrs
    ax = axes[0]
    if (~never).any():
        sc = ax.scatter(x[~never], y[~never], c=bt[~never], cmap="viridis_r", s=area,
                        edgecolors="k", linewidths=edge, zorder=3)
        body.colorbar(sc, ax=ax, label="breakthrough time at the receptor (years)",
                      shrink=0.8)
    if never.any():
        ax.scatter(x[never], y[never], facecolors="white", edgecolors="k", s=area,
                   linewidths=max(edge, 0.3), zorder=3,
                   label=f"not reached within the design life "
                         f"({at['design_life_yr']:.4g} yr)")
    ax.set_title("Breakthrough at the receptor", fontsize=10)
    if mc:
        p = table["exceedance_probability"].to_numpy(float)
        sc2 = axes[1].scatter(x, y, c=p, cmap="magma_r", vmin=0, vmax=1, s=area,
                              edgecolors="k", linewidths=edge, zorder=3)
        body.colorbar(sc2, ax=axes[1], label="probability of exceeding within the design "
                      "life (0 to 1)", shrink=0.8)
        axes[1].set_title(f"Exceedance probability ({at['realizations']} realizations)",
                          fontsize=10)
    crs = crs_name(at.get("crs_wkt", ""))
    for a in axes:
        for xi, yi, name in zip(x, y, names) if labelled else ():
            a.annotate(name, xy=(xi, yi), xytext=(0, -0.5 * np.sqrt(area) - 1.5),
                       textcoords="offset points", ha="center", va="top",
                       fontsize=LABEL_SIZE, color="0.15", zorder=4)
        a.set_xlim(x0, x1)
        a.set_ylim(y0, y1)
        a.set_aspect("equal", adjustable="box")
        a.set_xlabel("easting (m)")
        a.set_ylabel("northing (m)")
        a.ticklabel_format(useOffset=False, style="plain")
        a.tick_params(labelsize=7)
        a.tick_params(axis="x", labelrotation=30)
        a.grid(alpha=0.25)
        _decorate(a, x0, x1, y0, y1)
    width = body.figure.get_size_inches()[0] - 0.4
    body.suptitle(wrap(f"{at['title']}. Screening level {at['screening_level_mg_L']:.4g} "
                       f"mg/L, design life {at['design_life_yr']:.4g} yr. Coordinates: "
                       f"{crs or 'site CRS (see the NetCDF crs variable)'}; north arrow "
                       "points to grid north."
                       + ("" if labelled else f" {x.size} borings: too close together "
                          "at this scale to label; their ids and values are in the CSV "
                          "and GeoPackage files."), width, 10), fontsize=10)
    if never.any():
        body.legend(*axes[0].get_legend_handles_labels(), loc="outside lower center",
                    fontsize=8, frameon=False, markerscale=np.sqrt(MARKER_AREA / area))
    return fig


def plot_site_map(table, path, *, stage=None):
    """Save :func:`site_map_figure` as a PNG at ``path`` (atomically; ``stage``: a
    :class:`transport.io.atomic.OutputSet`). Returns the path."""
    return save(site_map_figure(table), path, stage)
