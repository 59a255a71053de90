"""The look every report figure shares: palette, reserved colours, caution footer,
wrapped titles, screening-level and design-life markers, notes for log axes.

Colours come from the colour-blind-safe palette of Okabe and Ito (2008, "Color
Universal Design", https://jfly.uni-koeln.de/color/). Vermillion is reserved for the
screening level and never given to a curve; grey for the design life. Figures use
constrained layout with the caution in a footer subfigure, so titles, legends, layer
names and the footer stay inside the saved image.
"""
from __future__ import annotations

import os
import textwrap

import numpy as np
from matplotlib.figure import Figure

from transport.caution import CAUTION_SHORT
from transport.io.atomic import stage_or_write

__all__ = ["DPI", "LEVEL_COLOUR", "DESIGN_LIFE_COLOUR", "CURVE_COLOURS", "LINE_STYLES",
           "FOOTER_SIZE", "new_figure", "wrap", "save", "mark_level",
           "mark_design_life", "nonpositive_note", "curve_style", "allowed_error",
           "rounding_as_zero"]

DPI = 150
#: Reserved for the screening level (Okabe-Ito vermillion); no curve gets it.
LEVEL_COLOUR = "#D55E00"
#: Reserved for the design life (mid grey).
DESIGN_LIFE_COLOUR = "#595959"
#: Curve colours: the Okabe-Ito palette without vermillion (reserved) and yellow (too
#: pale on white paper), black last.
CURVE_COLOURS = ("#0072B2", "#E69F00", "#009E73", "#CC79A7", "#56B4E9", "#000000")
#: Line styles cycled with the colours, so curves differ in print without colour too.
LINE_STYLES = ("-", (0, (5, 1.5)), (0, (1, 1.2)), (0, (6, 1.5, 1, 1.5)))
FOOTER_SIZE = 6.5  # points
_CHAR_WIDTH = 0.55  # average glyph width of the default sans font, in font sizes


def curve_style(index: int) -> dict:
    """Colour and line style of the ``index``-th curve of a comparison."""
    return {"color": CURVE_COLOURS[index % len(CURVE_COLOURS)],
            "ls": LINE_STYLES[(index // len(CURVE_COLOURS) + index) % len(LINE_STYLES)]}


def wrap(text: str, width_in: float, fontsize: float) -> str:
    """``text`` wrapped to lines that fit ``width_in`` inches at ``fontsize`` points."""
    chars = max(12, int(0.92 * width_in * 72.0 / (_CHAR_WIDTH * fontsize)))
    return "\n".join(textwrap.wrap(str(text), chars, break_on_hyphens=False)) if text else ""


def new_figure(width: float, height: float, notes=()):
    """A figure (inches) in constrained layout, drawn without pyplot's global state:
    a body (a subfigure, where the caller draws) above a footer band holding ``notes``
    (one paragraph each) and the caution, wrapped to the width.

    Returns
    -------
    (matplotlib.figure.Figure, matplotlib.figure.SubFigure)
        The figure to save and its body. Legends placed with ``loc="outside ..."`` on
        the body stay clear of the axes and of the footer.
    """
    fig = Figure(figsize=(width, height), dpi=DPI, layout="constrained")
    text = "\n".join(wrap(t, width - 0.3, FOOTER_SIZE) for t in (*notes, CAUTION_SHORT)
                     if t)
    band = min(0.4, ((text.count("\n") + 1) * FOOTER_SIZE * 1.25 + 10) / 72.0 / height)
    body, foot = fig.subfigures(2, 1, height_ratios=(1.0 - band, band))
    foot.text(0.02, 0.5, text, fontsize=FOOTER_SIZE, color="0.25", ha="left", va="center")
    return fig, body


def save(fig, path, stage=None) -> str:
    """Save ``fig`` (format from the file name, PNG by default) through a temporary name
    and a rename (with ``stage``, renamed with the run's other outputs:
    :mod:`transport.io.atomic`); returns the path."""
    path = os.fspath(path)
    fmt = os.path.splitext(path)[1][1:].lower() or "png"
    return stage_or_write(stage, path, lambda tmp: fig.savefig(tmp, dpi=DPI, format=fmt))


def mark_level(ax, level_mg_l: float, *, vertical: bool):
    """Screening level as a dashed line in the reserved colour, named outside the plot
    area (above it for a vertical line, right of it for a horizontal one) so the name
    never covers a curve. Returns the line (its label starts with "screening level")."""
    text = f"screening level {level_mg_l:.3g} mg/L"
    kw = dict(color=LEVEL_COLOUR, ls=(0, (4, 2)), lw=1.6, zorder=4, label=text)
    if vertical:
        line = ax.axvline(level_mg_l, **kw)
        ax.plot([level_mg_l], [1.0], marker="v", ms=7, color=LEVEL_COLOUR, clip_on=False,
                transform=ax.get_xaxis_transform(), zorder=5)
        ax.annotate(f"screening level\n{level_mg_l:.3g} mg/L", xy=(level_mg_l, 1.0),
                    xycoords=("data", "axes fraction"), xytext=(-4, 7),
                    textcoords="offset points", va="bottom", ha="left", fontsize=7,
                    color=LEVEL_COLOUR)
    else:
        line = ax.axhline(level_mg_l, **kw)
        ax.annotate(f"screening\nlevel\n{level_mg_l:.3g}\nmg/L", xy=(1.0, level_mg_l),
                    xycoords=("axes fraction", "data"), xytext=(4, 0),
                    textcoords="offset points", va="center", ha="left", fontsize=7,
                    color=LEVEL_COLOUR)
    return line


def mark_design_life(ax, t_end: float, unit: str):
    """Vertical line at the end of the design life (time axis in ``unit``, limits set
    first), the period after it shaded, named above the plot area. Returns the line
    (its label starts with "design life")."""
    text = f"design life {t_end:.4g} {unit}"
    line = ax.axvline(t_end, color=DESIGN_LIFE_COLOUR, ls="-.", lw=1.3, zorder=3, label=text)
    right = ax.get_xlim()[1]
    if right > t_end:
        ax.axvspan(t_end, right, color="0.5", alpha=0.1, lw=0, zorder=0,
                   label="after the design life")
    ax.annotate(f"end of {text}", xy=(t_end, 1.0), xycoords=("data", "axes fraction"),
                xytext=(0, 4), textcoords="offset points", va="bottom", ha="center",
                fontsize=7, color=DESIGN_LIFE_COLOUR)
    return line


def allowed_error(source) -> float:
    """The error a checked run allows its concentrations (tolerance x the scale of C,
    kg m-3), or 0 for a result without them."""
    tol, scale = getattr(source, "tolerance", None), getattr(source, "scale", None)
    try:
        return float(tol) * float(scale["concentration"])
    except (TypeError, KeyError, ValueError):
        return 0.0


def rounding_as_zero(values, bound: float):
    """``values`` with the negatives no larger than ``bound`` (the run's allowed error)
    set to 0, as the printed values are (:func:`transport.solvers.checks.clip_to_bounds`;
    C >= 0 for a non-negative source and initial state); larger negatives are kept, for
    :func:`nonpositive_note` to name."""
    values = np.asarray(values, dtype=float)
    return np.where((values < 0) & (values >= -bound), 0.0, values)


def nonpositive_note(values, axis_name: str) -> str:
    """A sentence saying how many finite values <= 0 a log ``axis_name`` cannot show,
    or "" when there are none."""
    values = np.asarray(values, dtype=float)
    finite = values[np.isfinite(values)]
    bad = int(np.count_nonzero(finite <= 0.0))
    if not bad:
        return ""
    lowest = f" (lowest {finite.min():.3g} mg/L)" if finite.min() < 0 else ""
    return (f"Log {axis_name}: {bad} of {finite.size} plotted values are zero or negative"
            f"{lowest} and cannot be shown on it; they are left out.")
