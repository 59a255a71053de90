"""Figures of a sensitivity study: the tornado of one-at-a-time swings and the
variance-based indices with their bootstrap intervals.

Drawn with the shared look of :mod:`transport.plot.style` (Okabe-Ito colours, the
caution footer, constrained layout) and saved through :mod:`transport.io.atomic`.
"""
from __future__ import annotations

import numpy as np

from transport.analysis.sensitivity import DESIGN_CODES
from transport.analysis.sobol import METHOD_REFERENCES
from transport.plot.style import CURVE_COLOURS, new_figure, save, wrap

__all__ = ["plot_tornado", "plot_indices", "LOG_SPAN"]

#: A metric whose one-at-a-time values span more than this factor is drawn on a log axis.
LOG_SPAN = 100.0
_WIDTH = 8.0


def _title(result, what: str) -> str:
    return wrap(f"{result.study.title}: {what}", _WIDTH - 0.8, 10)


def plot_tornado(result, path, stage=None) -> str:
    """Horizontal bars from the base run to the metric with each input at its low and at
    its high value, largest swing on top; returns the path written."""
    spec, m = result.study.spec, result.study.spec.metric
    order = list(result.order)
    d = len(order)
    design = result.plan.design
    low_c = result.censored[design == DESIGN_CODES["oat_low"]]
    high_c = result.censored[design == DESIGN_CODES["oat_high"]]
    base = result.base / m.per_unit
    low, high = result.low / m.per_unit, result.high / m.per_unit
    values = np.concatenate([[base], low, high])
    positive = values[values > 0]
    # a log axis only when every value is positive (none is left out)
    log = (positive.size == values.size
           and positive.max() / positive.min() > LOG_SPAN)
    notes = ["One at a time: each input at its low and at its high value (the range under "
             "its name), the others at the scenario's values; sorted by the swing "
             "|metric(high) - metric(low)|."]
    if np.any(low_c) or np.any(high_c):
        notes.append(f"'not reached': the screening level is not reached within the window "
                     f"(drawn at its end, {result.horizon / m.per_unit:.4g} {m.unit}).")
    fig, body = new_figure(_WIDTH, 1.9 + 0.55 * d, notes=notes)
    ax = body.subplots()
    ys = np.arange(d)[::-1]
    labels = []
    for y, k in zip(ys, order):
        inp = spec.inputs[k]
        labels.append(f"{inp.key}\n{inp.shown(inp.low)} to {inp.shown(inp.high)}")
        for value, colour, hatch, name, cens in (
                (low[k], CURVE_COLOURS[0], None, "input at its low value", low_c[k]),
                (high[k], CURVE_COLOURS[1], "//", "input at its high value", high_c[k])):
            ax.barh(y, value - base, left=base, height=0.6, color=colour, hatch=hatch,
                    edgecolor="white" if hatch is None else "0.2", lw=0.5,
                    label=name if y == ys[0] else None)
            text = "not reached" if cens else f"{value:.3g}"
            ax.annotate(text, xy=(value, y), xytext=(3 if value >= base else -3, 0),
                        textcoords="offset points", va="center",
                        ha="left" if value >= base else "right", fontsize=7)
    ax.axvline(base, color="black", lw=1.2, zorder=3,
               label=f"base run {base:.3g} {m.unit}")
    if log:
        ax.set_xscale("log")
    ax.margins(x=0.15)
    ax.set_yticks(ys, labels, fontsize=7.5)
    ax.set_ylim(-0.7, d - 0.3)
    ax.set_xlabel(f"{m.label} at the receptor ({m.unit}), {result.window_text}")
    body.suptitle(_title(result, f"what drives the {m.label}"), fontsize=10)
    ax.grid(axis="x", color="0.85", lw=0.6)
    ax.set_axisbelow(True)
    body.legend(loc="outside lower center", ncols=3, fontsize=7.5, frameon=False)
    return save(fig, path, stage)


def plot_indices(result, path, stage=None) -> str:
    """First-order and total-effect indices of the inputs with a distribution, with
    their bootstrap intervals, largest total effect on top; returns the path."""
    ix = result.indices
    spec = result.study.spec
    sampled = spec.sampled
    order = list(np.argsort(-np.nan_to_num(ix.total_effect, nan=-1.0), kind="stable"))
    d = len(order)
    notes = [f"N = {ix.samples} base samples, {result.plan.size} runs; bars: "
             f"{100 * ix.confidence:g} % percentile-bootstrap intervals "
             f"({ix.resamples} resamples). {METHOD_REFERENCES}"]
    fig, body = new_figure(_WIDTH, 1.9 + 0.5 * d, notes=notes)
    ax = body.subplots()
    ys = np.arange(d)[::-1].astype(float)
    for shift, values, interval, colour, hatch, name in (
            (0.18, ix.first_order, ix.first_order_interval, CURVE_COLOURS[2], None,
             "first order S_i (alone)"),
            (-0.18, ix.total_effect, ix.total_effect_interval, CURVE_COLOURS[0], "//",
             "total effect S_Ti (alone and with others)")):
        v = np.array([values[k] for k in order])
        lo = np.array([interval[k, 0] for k in order])
        hi = np.array([interval[k, 1] for k in order])
        err = np.vstack([np.clip(v - lo, 0, None), np.clip(hi - v, 0, None)])
        err = np.where(np.isfinite(err), err, 0.0)
        ax.barh(ys + shift, np.nan_to_num(v), height=0.34, color=colour, hatch=hatch,
                edgecolor="white" if hatch is None else "0.2", lw=0.5, label=name,
                xerr=err, error_kw={"ecolor": "0.2", "lw": 0.9, "capsize": 2.5})
    ax.axvline(0.0, color="black", lw=0.8)
    ends = np.concatenate([ix.first_order_interval.ravel(), ix.total_effect_interval.ravel(),
                           ix.first_order, ix.total_effect])
    ends = ends[np.isfinite(ends)]
    left = min(-0.05, float(ends.min()) - 0.05) if ends.size else -0.05
    right = max(1.05, float(ends.max()) + 0.05) if ends.size else 1.05
    ax.set_xlim(max(left, -1.0), min(right, 2.0))
    ax.set_yticks(ys, [sampled[k].key for k in order], fontsize=7.5)
    ax.set_ylim(-0.7, d - 0.3)
    ax.set_xlabel(f"share of the variance of the {spec.metric.label} "
                  f"({result.window_text})")
    body.suptitle(_title(result, f"variance-based indices of the {spec.metric.label}"),
                  fontsize=10)
    ax.grid(axis="x", color="0.85", lw=0.6)
    ax.set_axisbelow(True)
    body.legend(loc="outside lower center", ncols=2, fontsize=7.5, frameon=False)
    return save(fig, path, stage)
