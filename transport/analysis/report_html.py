"""HTML of the report to hand in (:mod:`transport.analysis.report`): one file, no network.

Everything is in the file: an inline style sheet, figures as ``data:`` URIs, no script.
Every text from the scenario is escaped (:func:`html.escape`). Numbers a test or a
reader may want at full precision carry them in a ``data-si`` attribute (SI units)
beside the rounded text.
"""
from __future__ import annotations

import html
import math
import platform
from importlib.metadata import PackageNotFoundError, version

import numpy as np

from transport.analysis.metrics import ReceptorViews
from transport.analysis.summary import (design_life_flag, format_concentration, format_time,
                                        peak_beyond_flag)
from transport.caution import ASSUMPTIONS, CAUTION
from transport.units import LITRE_PER_KG, MG_PER_M2, YEAR

__all__ = ["render_html", "STYLE", "DERIVED_COLUMNS", "LIMITATIONS"]

#: The inline style sheet (no web fonts: the browser's own sans-serif).
STYLE = """
body{font-family:system-ui,-apple-system,"Segoe UI",Roboto,Arial,sans-serif;margin:0 auto;
max-width:1100px;padding:0 24px 40px;color:#1b1b1b;line-height:1.45}
h1{font-size:1.6em;margin:.6em 0 .2em}h2{font-size:1.25em;margin-top:1.6em;
border-bottom:1px solid #bbb;padding-bottom:.15em}h3{font-size:1.05em}
.caution{background:#fff4e0;border:1px solid #d08a00;border-left:6px solid #d08a00;
padding:10px 14px;margin:14px 0;font-size:.95em}
.flag{background:#fde8e8;border-left:6px solid #b3261e;padding:8px 12px;margin:10px 0}
table{border-collapse:collapse;margin:8px 0 14px;font-size:.88em}
th,td{border:1px solid #ccc;padding:3px 7px;vertical-align:top}
th{background:#f1f3f5;text-align:left}
td.n{text-align:right;font-variant-numeric:tabular-nums;white-space:nowrap}
tr.fail td{background:#fde8e8}.pass{color:#1a7f37;font-weight:600}
.failed{color:#b3261e;font-weight:600}
pre{background:#f6f8fa;border:1px solid #ddd;padding:10px;overflow-x:auto;font-size:.85em}
figure{margin:12px 0}figure img{max-width:100%;border:1px solid #ddd}
figcaption{font-size:.9em;color:#444}.meta{color:#555;font-size:.9em}
nav ol{columns:2;font-size:.92em}code{font-size:.92em}code.sha256{word-break:break-all}
@media print{nav{display:none}h2{break-after:avoid}figure,tr{break-inside:avoid}}
"""

#: Columns of the derived table: (row key, heading, factor from SI, format), the
#: columns of ``stratiflux check`` plus porosity, bulk density and Kd.
DERIVED_COLUMNS = (
    ("top", "top (m)", 1.0, "{:.3g}"),
    ("bottom", "bottom (m)", 1.0, "{:.3g}"),
    ("porosity", "porosity n", 1.0, "{:.3g}"),
    ("water_content", "water content θ", 1.0, "{:.3g}"),
    ("bulk_density", "bulk density (kg/m³)", 1.0, "{:.4g}"),
    ("distribution_coefficient", "Kd (L/kg)", 1.0 / LITRE_PER_KG, "{:.4g}"),
    ("retardation_factor", "R", 1.0, "{:.4g}"),
    ("diffusivity", "D (m²/s)", 1.0, "{:.3e}"),
    ("half_life", "half-life (yr)", 1.0 / YEAR, "{:.4g}"),
    ("pore_velocity", "v (m/yr)", YEAR, "{:.4g}"),
    ("peclet_number", "Péclet", 1.0, "{:.3g}"),
    ("diffusion_time", "t_diff (yr)", 1.0 / YEAR, "{:.4g}"),
    ("advection_time", "t_adv (yr)", 1.0 / YEAR, "{:.4g}"),
)

#: What the report does not claim (shown with the assumptions).
LIMITATIONS = (
    "The results hold for the stated assumptions and inputs only; they are estimates, "
    "not measurements.",
    "A screening level is the user's choice for this run; check the level that applies "
    "in your jurisdiction.",
    "The error bounds are those of the numerical solution of the model equations; they "
    "say nothing of the uncertainty of the inputs or of the model itself.",
)

_E = html.escape


def _cell(value, text=None, si=None) -> str:
    attr = f' data-si="{si!r}"' if si is not None else ""
    return f'<td class="n"{attr}>{_E(text if text is not None else str(value))}</td>'


def _table(head, rows, cls="") -> str:
    h = "".join(f"<th>{_E(c)}</th>" for c in head)
    return (f'<table{f" class={cls!r}" if cls else ""}><thead><tr>{h}</tr></thead>'
            f"<tbody>{''.join(rows)}</tbody></table>")


def _derived(rows) -> str:
    sources, body = [], []
    for i, row in enumerate(rows, start=1):
        cells = [f"<td>{_E(str(row.get('name') or f'layer {i}'))}</td>"]
        for key, _, factor, fmt in DERIVED_COLUMNS:
            value = row.get(key)
            if value is None or (isinstance(value, float) and not math.isfinite(value)):
                cells.append('<td class="n">–</td>')
            else:
                cells.append(_cell(None, fmt.format(float(value) * factor), float(value)))
        refs = []
        for key in ("sorption_source", "diffusion_source"):
            text = row.get(key)
            if text:
                if text not in sources:
                    sources.append(text)
                refs.append(f"[{sources.index(text) + 1}]")
        cells.append(f"<td>{' '.join(refs) or '–'}</td>")
        body.append(f"<tr>{''.join(cells)}</tr>")
    table = _table(["layer"] + [h for _, h, _, _ in DERIVED_COLUMNS] + ["sources"], body)
    notes = "".join(f"<li>[{k}] {_E(s)}</li>" for k, s in enumerate(sources, start=1))
    return (table + (f'<ol class="meta" style="list-style:none;padding-left:0">{notes}'
                     "</ol>" if notes else "")
            + '<p class="meta">t_diff = R h²/D and t_adv = R h/v are the usual layer time '
            "scales (common practice); – marks a value that does not apply.</p>")


def _time_cell(t):
    return _cell(None, "not reached" if t is None else format_time(t), t)


def _first_cell(m):
    """The first exceedance; where the level is already reached at the earliest output
    time, said so (the crossing lies earlier and is not resolved)."""
    if m.exceeded_at_start:
        return _cell(None, f"already reached at the earliest output time, "
                           f"{format_time(m.first_exceedance)} (the crossing is earlier)",
                     m.first_exceedance)
    return _time_cell(m.first_exceedance)


def _conc_cell(c):
    return _cell(None, "–" if c is None else format_concentration(c), c)




def _metrics(views) -> str:
    if not views:
        return ("<p>No receptor metrics: the scenario names no receptor depth, or an "
                "output time could not be vouched for.</p>")
    head = ["quantity"] + [v.label for v in views]
    m = [v.metrics for v in views]
    both = ReceptorViews(m[0], m[-1])
    rows = [
        ("receptor depth", [_cell(None, f"{x.receptor_depth:g} m", x.receptor_depth)
                            for x in m]),
        ("screening level", [_conc_cell(x.screening_level) for x in m]),
        ("first reaches the screening level", [_first_cell(x) for x in m]),
        ("time above the screening level", [_time_cell(x.time_above_level) for x in m]),
        ("highest concentration", [_conc_cell(x.peak_concentration) for x in m]),
        ("time of the highest concentration", [_time_cell(x.peak_time) for x in m]),
        ("concentration at the end of the window", [_conc_cell(v.end_concentration)
                                                     for v in views]),
        ("peak after the end of the window?", [f"<td>{_E(flag)}</td>" for flag in (
            [design_life_flag(both)] if len(views) > 1 else []) + [peak_beyond_flag(m[-1])]]),
        ("mass passed the receptor (mg/m²)",
         [_cell(None, "–" if x.cumulative_mass is None
                else f"{x.cumulative_mass / MG_PER_M2:.4g}", x.cumulative_mass) for x in m]),
        ("steady concentration (long-term limit)", [_conc_cell(x.steady_concentration)
                                                     for x in m]),
        ("time to 95 % of the steady value", [_time_cell(x.time_to_95_percent_steady)
                                              if x.steady_concentration is not None
                                              else _conc_cell(None) for x in m]),
    ]
    body = [f'<tr><th scope="row">{_E(name)}</th>{"".join(cells)}</tr>'
            for name, cells in rows]
    out = _table(head, body, "metrics")
    flags = []
    if len(views) > 1:
        d, w = views[0].metrics, views[-1].metrics
        if both.peak_after_design_life:
            flags.append(
                f"The peak lies beyond the design life: within it the highest value is "
                f"{format_concentration(d.peak_concentration)}; over the whole run it is "
                f"{format_concentration(w.peak_concentration)} at "
                f"{format_time(w.peak_time)}.")
    if views[-1].metrics.peak_beyond_horizon:
        flags.append("Still rising at the end of the run: the peak lies beyond the last "
                     "output time; extend the output times to see it.")
    return out + "".join(f'<p class="flag">{_E(f)}</p>' for f in flags)


def _budget(report) -> str:
    if not report.budget:
        return "<p>No mass budget: the engines of this run do not report one.</p>"
    names = {"stored": "stored in the column", "initial_stored": "initially stored",
             "entered_top": "entered at the top", "left_bottom": "left at the bottom",
             "decayed": "decayed", "produced": "produced by sources",
             "residual": "residual (should be near zero)"}
    rows = [f"<tr><th scope='row'>{_E(names.get(k, k))}</th>"
            + _cell(None, f"{v:.6g}", v) + "</tr>" for k, v in report.budget.items()]
    return (_table(["term", "kg/m²"], rows)
            + f'<p class="meta">{_E(report.budget_sentence)}</p>')


def _engines(report) -> str:
    quantities = [q for q in ("concentration", "total_flux", "cumulative_mass", "budget")
                  if q in report.error and report.scale.get(q)]
    head = (["time", "engine", "error bound of C"]
            + [f"{q.replace('_', ' ')} bound / scale" for q in quantities] + ["vouched"])
    rows = []
    for k, t in enumerate(report.times):
        cells = [_cell(None, format_time(t) if t > 0 else "0 (initial)", float(t)),
                 f"<td>{_E(report.engines[k] or '-')}</td>"]
        err_c = report.error.get("concentration")
        cells.append(_conc_cell(None if err_c is None else float(np.asarray(err_c)[k])))
        for q in quantities:
            e = float(np.asarray(report.error[q], float)[k]) / report.scale[q]
            cells.append(_cell(None, f"{e:.1g}", e))
        ok = bool(report.reliable[k])
        cells.append(f'<td class="{"pass" if ok else "failed"}">{"yes" if ok else "NO"}</td>')
        rows.append(f"<tr>{''.join(cells)}</tr>")
    return (f"<p>Tolerance {report.tolerance:g} (relative to the scale of each quantity). "
            "Each output time is served by the engine named (modal series, Laplace "
            "inversion or finite volumes, checked against a second engine where the run "
            "says so); its error bound is the engine's own estimate.</p>"
            + _table(head, rows))


def _verification(report) -> str:
    if report.verification is None:
        return ("<p class='flag'>The verification suite was not run for this report "
                "(<code>--skip-verification</code>); run <code>stratiflux verify</code> "
                "to check this installation.</p>")
    n_fail = sum(not r.passed for r in report.verification)
    n = len(report.verification)
    took = (f" in {report.verification_seconds:.1f} s" if report.verification_seconds
            is not None else "")
    status = (f'<span class="pass">all {n} passed</span>' if n_fail == 0 else
              f'<span class="failed">{n_fail} of {n} FAILED</span>')
    rows = []
    for r in report.verification:
        cls = "" if r.passed else ' class="fail"'
        rows.append(f"<tr{cls}><td>{_E(r.name)}</td><td class="
                    f"{'pass' if r.passed else 'failed'}>{'pass' if r.passed else 'FAIL'}"
                    f"</td>{_cell(None, f'{r.error:.2e}', r.error)}"
                    f"{_cell(None, f'{r.tolerance:g}', r.tolerance)}<td>{_E(r.engine)}</td>"
                    f"<td>{_E(r.source)}</td></tr>")
    return (f"<p>Quick verification suite (<code>stratiflux verify --quick</code>: "
            f"published solutions, cross-engine agreement, identities) run on this "
            f"installation{took}: {status}. Error: the maximum |C − reference| over the "
            "case's depths and times divided by its concentration scale, unless the "
            "source says otherwise.</p>"
            + _table(["case", "result", "error", "tolerance", "engine", "source"], rows))


def _versions() -> str:
    rows = [("python", platform.python_version())]
    out = []
    for name, value in rows + [(m, None) for m in ("numpy", "scipy", "matplotlib")]:
        if value is None:
            try:
                value = version(name)
            except PackageNotFoundError:
                value = "not installed"
        out.append(f"{_E(name)} {_E(value)}")
    return ", ".join(out)


def render_html(report) -> str:
    """The report as one HTML5 document (str).

    Parameters
    ----------
    report : transport.analysis.report.Report

    Returns
    -------
    str
        Self-contained: inline style, figures as ``data:`` URIs, no script, no remote
        reference.
    """
    sections = [
        ("job", "The job", f"<p>{_E(report.job)}</p>"
         + "".join(f"<p>{_E(line)}</p>" for line in report.reading)),
        ("typed", "Inputs as typed",
         f"<p>The scenario file <code>{_E(report.scenario_name)}</code>, unchanged "
         f"(SHA-256 below).</p><pre>{_E(report.scenario_text)}</pre>"),
        ("derived", "Inputs as derived",
         "<p>Per-layer properties the engines use, derived from the inputs, with the "
         "source of each (as <code>stratiflux check</code> shows them).</p>"
         + _derived(report.derived_rows)),
        ("assumptions", "Assumptions and cautions",
         "<ul>" + "".join(f"<li>{_E(a)}</li>" for a in ASSUMPTIONS) + "</ul>"
         + "<ul>" + "".join(f"<li>{_E(a)}</li>" for a in LIMITATIONS) + "</ul>"
         + ("<h3>Warnings of this run</h3><ul>"
            + "".join(f"<li>{_E(w)}</li>" for w in report.warnings) + "</ul>"
            if report.warnings else "<p>The run raised no warning.</p>")
         + f'<p class="caution">{_E(CAUTION)}</p>'),
        ("metrics", "Receptor metrics", _metrics(report.views)),
        ("budget", "Mass budget at the end of the run", _budget(report)),
        ("figures", "Figures", "".join(
            f'<figure><img src="{uri}" alt="{_E(caption)}"><figcaption>Figure {k}. '
            f"{_E(caption)}.</figcaption></figure>"
            for k, (caption, uri) in enumerate(report.figures, start=1))
         or "<p>No figures.</p>"),
        ("engines", "Engine and error bound per output time", _engines(report)),
        ("verification", "Verification of this installation", _verification(report)),
        ("provenance", "Version and input files",
         f"<p>Written by stratiflux {_E(report.version)} ({_versions()}).</p>"
         + _table(["input file", "SHA-256"],
                  [f"<tr><td>{_E(name)}</td><td><code class='sha256'>{digest}</code></td>"
                   "</tr>" for name, digest in report.hashes])),
    ]
    nav = "".join(f'<li><a href="#{key}">{_E(title)}</a></li>' for key, title, _ in sections)
    body = "".join(f'<section id="{key}"><h2>{_E(title)}</h2>{content}</section>'
                   for key, title, content in sections)
    return (
        "<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">"
        f"<title>{_E(report.title)} – stratiflux report</title>"
        '<meta name="viewport" content="width=device-width, initial-scale=1">'
        f'<meta name="description" content="{_E(CAUTION)}">'
        f'<meta name="generator" content="stratiflux {_E(report.version)}">'
        f"<style>{STYLE}</style></head><body>"
        f'<header><h1>{_E(report.title)}</h1><p class="meta">stratiflux '
        f"{_E(report.version)} report of <code>{_E(report.scenario_name)}</code></p>"
        f'<p class="caution" id="caution-head">{_E(CAUTION)}</p></header>'
        f"<nav><ol>{nav}</ol></nav><main>{body}</main>"
        f'<footer><p class="caution" id="caution-foot">{_E(CAUTION)}</p></footer>'
        "</body></html>\n")
