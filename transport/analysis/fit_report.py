"""What ``stratiflux fit`` prints and writes: the estimates, the correlation matrix, the
residuals, the statements on identifiability, the tables (CSV) and the fitted scenario
text (the original text with the fitted values in place, marked as fitted).

Every output carries the caution of :mod:`transport.caution`: fitted values describe
the measured profile under the model's assumptions only.
"""
from __future__ import annotations

import csv
import io
import json
import math
import os
import textwrap
import tomllib
from pathlib import Path

import numpy as np

from transport.analysis.fit_input import SOURCE_AGE, value_text
from transport.analysis.fit_text import file_keys, get_value, place_values
from transport.caution import CAUTION
from transport.units import YEAR, to_si

__all__ = ["estimate_rows", "summary_lines", "estimates_csv", "residuals_csv",
           "fitted_scenario_text", "DEFER", "METHOD"]

#: What the fitted numbers are, and who decides (printed, written in every file).
DEFER = ("These estimates describe the measured profile under the model's assumptions "
         "only; whether they are fit for a decision is for the regulator and licensed "
         "professionals to judge under local rules.")
#: The estimation method in one sentence, with its sources.
METHOD = ("Weighted least squares (trust-region reflective); intervals are linearised "
          "(asymptotic) confidence intervals from the Jacobian and the residual variance "
          "(Seber & Wild 1989, Nonlinear Regression; Bard 1974, Nonlinear Parameter "
          "Estimation); they are exact only for a model linear in its parameters.")


def _shown(x, per=1.0, digits=4) -> str:
    return "-" if x is None or not math.isfinite(x) else f"{x / per:.{digits}g}"


def estimate_rows(result) -> list:
    """One dict per free parameter, values in the parameter's own unit."""
    rows = []
    for e in result.estimates:
        rows.append({
            "key": e.key, "unit": e.unit, "estimate": _shown(e.value, e.per_unit, 6),
            "lower": _shown(e.lower, e.per_unit, 6), "upper": _shown(e.upper, e.per_unit, 6),
            "confidence": f"{result.confidence:g}", "scale": e.scale,
            "low_bound": _shown(e.low, e.per_unit, 6),
            "high_bound": _shown(e.high, e.per_unit, 6),
            "start": _shown(e.start, e.per_unit, 6),
            "identifiable": "yes" if e.identifiable else "no", "note": e.note})
    return rows


def summary_lines(result, title: str = "", data_name: str = "") -> list:
    """The reading of a fit as plain lines (a table, the correlation matrix, the
    residuals, the statements, the caution)."""
    n, p = len(result.residuals), len(result.estimates)
    pct = f"{100 * result.confidence:g} %"
    lines = [f"Fit of {title or 'the scenario'} to {data_name or result.profile.path}: "
             f"{n} samples, {p} free parameter(s), {result.evaluations} model evaluations",
             ""]
    width = max(len(e.key) for e in result.estimates) + 2
    lines.append(f"  {'key'.ljust(width)}{'estimate':>12}  {pct + ' interval':<27}unit")
    for e in result.estimates:
        interval = (f"{_shown(e.lower, e.per_unit)} to {_shown(e.upper, e.per_unit)}"
                    if math.isfinite(e.lower) else "not defined")
        flag = "" if e.identifiable else "  NOT IDENTIFIABLE"
        lines.append(f"  {e.key.ljust(width)}{_shown(e.value, e.per_unit):>12}  "
                     f"{interval:<27}{e.unit or '-'} ({e.scale}){flag}")
    if p > 1:
        lines += ["", "Correlation matrix (linearised):"]
        for i, e in enumerate(result.estimates):
            cells = " ".join(f"{c:+.3f}" if np.isfinite(c) else "   -  "
                             for c in result.correlation[i])
            lines.append(f"  ({i + 1}) {e.key.ljust(width)}{cells}")
    r = result.residuals
    j = int(np.argmax(np.abs(r)))
    per_c = _per(result.profile.unit("concentration"))
    kind = ("weighted by sigma (1 = one standard deviation)" if
            result.profile.sigma is not None else
            f"in {result.profile.unit('concentration')}, unweighted")
    lines += ["", f"Weighted RMS of the residuals: {result.weighted_rms:.3g} ({kind}); "
              f"largest |residual| {abs(r[j]):.3g} at {result.profile.depths[j]:.4g} m, "
              f"t = {result.row_times[j] / YEAR:.4g} yr (measured "
              f"{result.profile.values[j] / per_c:.4g}, fitted {result.fitted[j] / per_c:.4g} "
              f"{result.profile.unit('concentration')})"]
    bad = [e.key for e in result.estimates if not e.identifiable]
    if bad:
        lines += ["", "Not identifiable from these data: " + ", ".join(bad) + ". Their "
                  "values are not supported by the data: fix them (or all but one of a "
                  "combination) from other evidence, or add data that depend on them "
                  "separately."]
    lines += [""] + [f"- {s}" for s in result.statements]
    lines += ["", METHOD, "", DEFER]
    return lines


def _per(unit):
    return to_si(f"1 {unit}", "concentration") if unit else 1.0


def _csv(header_lines, rows) -> str:
    buf = io.StringIO()
    for line in header_lines:
        for part in textwrap.wrap(line, 86):
            buf.write(f"# {part}\n")
    w = csv.writer(buf, lineterminator="\n")
    for row in rows:
        w.writerow(row)
    return buf.getvalue()


def estimates_csv(result, title="") -> str:
    """The estimates (one row each, with the correlation columns) as CSV text; ``#``
    lines carry the method and the caution."""
    rows = estimate_rows(result)
    keys = list(rows[0])
    corr = [f"correlation with {e.key}" for e in result.estimates]
    table = [keys + corr]
    for i, row in enumerate(rows):
        table.append([row[k] for k in keys] + [f"{c:.4f}" if np.isfinite(c) else ""
                                               for c in result.correlation[i]])
    head = [f"stratiflux fit: estimates for {title}" if title else "stratiflux fit",
            METHOD, DEFER, CAUTION]
    return _csv(head, table)


def residuals_csv(result) -> str:
    """Measured and fitted values per sample and their residuals, as CSV text."""
    prof = result.profile
    unit = prof.unit("concentration")
    per = _per(unit)
    head = ["depth [m]", "time [yr]", f"measured [{unit}]", f"fitted [{unit}]"]
    if prof.sigma is not None:
        head.append(f"sigma [{unit}]")
    head += [f"residual [{unit}]", "weighted residual"]
    table = [head]
    for j in range(len(prof.values)):
        row = [f"{prof.depths[j]:.6g}", f"{result.row_times[j] / YEAR:.6g}",
               f"{prof.values[j] / per:.6g}", f"{result.fitted[j] / per:.6g}"]
        if prof.sigma is not None:
            row.append(f"{prof.sigma[j] / per:.6g}")
        row += [f"{(result.fitted[j] - prof.values[j]) / per:.6g}",
                f"{result.residuals[j]:.6g}"]
        table.append(row)
    return _csv(["stratiflux fit: residuals (fitted minus measured)", DEFER, CAUTION], table)


def fitted_scenario_text(result, text: str, scenario_path=None, out_path=None,
                         data_name: str = "", digits: int = 6):
    """The scenario text with the fitted values in place and a header saying so.

    Relative file names (``samples_file``, ``table_file``, ``fit.data``) are rewritten
    for the folder of ``out_path`` when it differs from the scenario's.

    Returns
    -------
    (str, list)
        The text and the keys that could not be written in place (their values are
        then only in the header comment).
    """
    original = tomllib.loads(text.lstrip("\ufeff"))
    values, comments = {}, {}
    est = {e.key: e for e in result.estimates}
    pct = f"{100 * result.confidence:g} %"
    for p in result.free:
        if p.key == SOURCE_AGE:
            continue
        e = est[p.key]
        values[p.key] = value_text(p, e.value, digits)
        old = get_value(original, p.key)
        span = (f"{pct} interval {_shown(e.lower, e.per_unit)} to "
                f"{_shown(e.upper, e.per_unit)}" if e.identifiable and
                math.isfinite(e.lower) else "NOT IDENTIFIABLE from the data")
        comments[p.key] = (f"fitted by stratiflux fit, {span}; was "
                           f"{json.dumps(old) if old is not None else 'not given'}")
    if scenario_path is not None and out_path is not None:
        src = Path(scenario_path).resolve().parent
        dst = Path(out_path).resolve().parent
        if src != dst:
            for key in file_keys(original):
                name = get_value(original, key)
                if not os.path.isabs(name):
                    target = (src / name).resolve()
                    shared = os.path.commonpath([target, dst]) != os.path.sep
                    values[key] = json.dumps(os.path.relpath(target, dst) if shared
                                             else str(target))
    new, missed = place_values(text, values, comments)
    head = _header(result, data_name, [k for k in missed if k in comments])
    return head + new.lstrip("\ufeff"), missed


def _header(result, data_name, missed) -> str:
    pct = f"{100 * result.confidence:g} %"
    parts = [f"FITTED SCENARIO written by stratiflux fit from {data_name or 'measured data'} "
             f"({len(result.residuals)} samples). Values marked 'fitted' are estimates; "
             f"their {pct} intervals are linearised and hold only under this model's "
             f"assumptions. Weighted RMS of the residuals {result.weighted_rms:.3g}."]
    for e in result.estimates:
        if e.key == SOURCE_AGE or e.key in missed:
            parts.append(f"Fitted {e.key} = {_shown(e.value, e.per_unit, 6)} {e.unit} "
                         f"({pct} interval {_shown(e.lower, e.per_unit)} to "
                         f"{_shown(e.upper, e.per_unit)}); not written in the file below.")
    bad = [e.key for e in result.estimates if not e.identifiable]
    if bad:
        parts.append("NOT IDENTIFIABLE from these data (values not supported by the data): "
                     + ", ".join(bad) + ".")
    parts += [DEFER, CAUTION]
    lines = []
    for part in parts:
        lines += [f"# {ln}" for ln in textwrap.wrap(part, 86)]
    return "\n".join(lines) + "\n\n"
