"""The report to hand in: one self-contained HTML file of a run (``stratiflux report``).

The file holds, in the order a reviewer reads it: the caution; the job in one
paragraph; the inputs as typed (the scenario text) and as derived (per-layer properties
with their sources, as ``stratiflux check`` shows them); the assumptions and the
warnings of the run; the receptor metrics over the design life and over the whole run
(with a flag where the peak lies beyond the period shown); the mass budget; the engine
and the error bounds per output time; the figures; the verification status of the
installed version; the tool version and a SHA-256 hash of every input file; the caution
again. Figures are PNG images embedded as ``data:`` URIs and the style sheet is inline,
so the file opens in a browser with no network. It is written through
:mod:`transport.io.atomic`.

Examples
--------
>>> report = build_report(scenario, solution, verification=run_suite(quick=True),
...                       verification_seconds=7.4)                # doctest: +SKIP
>>> write_report_html(report, "report.html")                        # doctest: +SKIP
"""
from __future__ import annotations

import base64
import hashlib
import io
import tomllib
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from transport import __version__
from transport.analysis.metrics import receptor_views
from transport.analysis.report_html import render_html
from transport.analysis.zone import describe_zone
from transport.analysis.summary import (budget_line, final_budget,
                                        format_concentration, format_time, run_horizon,
                                        summary_lines)
from transport.io.atomic import write_text
from transport.units import YEAR

__all__ = ["MetricView", "Report", "input_files", "input_hashes", "metric_views",
           "job_paragraph", "figure_uris", "build_report", "write_report_html"]

#: Resolution of the embedded figures (dots per inch): sharp on a screen, small file.
FIGURE_DPI = 110


@dataclass(frozen=True)
class MetricView:
    """Receptor metrics over one window of the run.

    ``label`` names the window ("design life", "whole run"); ``peak_at_end`` says that
    the highest value of the window is its end value (within
    :data:`transport.analysis.summary.PLATEAU_RTOL`): still rising or at steady state,
    so the peak lies beyond the period shown.
    """

    label: str
    metrics: object  # transport.analysis.metrics.ReceptorMetrics
    end_concentration: float  # kg m-3 at the end of the window
    peak_at_end: bool


@dataclass(frozen=True)
class Report:
    """Everything the HTML report shows (SI floats; formatted when rendered)."""

    title: str
    job: str
    scenario_name: str
    scenario_text: str
    derived_rows: list
    reading: list
    warnings: list
    views: list
    budget: dict
    budget_sentence: str
    times: np.ndarray
    engines: list
    error: dict
    scale: dict
    reliable: np.ndarray
    tolerance: float
    figures: list  # (caption, data URI)
    verification: list  # transport.verify.report.CaseResult
    verification_seconds: float | None
    hashes: list  # (file name, sha256 hex)
    version: str = __version__


def input_files(scenario) -> list:
    """The files a scenario run reads: the scenario file and a measured initial profile
    (``initial.samples_file``) when it names one.

    Parameters
    ----------
    scenario : transport.scenario.schema.Scenario

    Returns
    -------
    list of pathlib.Path
    """
    if not scenario.path:
        return []
    path = Path(scenario.path)
    files = [path]
    data = tomllib.loads(scenario.source_text)
    initial = data.get("initial")
    samples = initial.get("samples_file") if isinstance(initial, dict) else None
    if isinstance(samples, str):
        files.append(path.parent / samples)
    return files


def input_hashes(scenario) -> list:
    """SHA-256 of every input file (FIPS 180-4, :mod:`hashlib`), as (name, hex digest)."""
    return [(str(p), hashlib.sha256(p.read_bytes()).hexdigest())
            for p in input_files(scenario)]


def _view(label, m) -> MetricView:
    return MetricView(label, m, m.end_concentration, m.peak_at_end)


def metric_views(solution, receptor_depth: float, screening_level=None,
                 design_life=None) -> list:
    """Receptor metrics over the design life and over the whole run.

    Parameters
    ----------
    solution : Solution
    receptor_depth : float
        m.
    screening_level : float, optional
        kg m-3.
    design_life : float, optional
        s. Without it, or when it is not shorter than the run, one view: the whole run
        (the last output time, or the design life if later:
        :func:`transport.analysis.summary.run_horizon`).

    Returns
    -------
    list of MetricView
        Computed with :func:`transport.analysis.metrics.receptor_metrics` on the
        continuous solution.
    """
    t_end = run_horizon(solution.times, design_life)
    both = receptor_views(solution, receptor_depth, screening_level,
                          design_life=design_life if design_life and float(design_life)
                          < t_end else None, run_end=t_end)
    views = []
    if both.design_life is not both.whole_run:
        views.append(_view(f"design life (0 to {format_time(design_life)})",
                           both.design_life))
    label = "whole run" if views else "whole run (= design life)" if design_life else \
        "whole run"
    views.append(_view(f"{label} (0 to {format_time(t_end)})", both.whole_run))
    return views


def job_paragraph(scenario) -> str:
    """What was modelled, in one paragraph built from the scenario."""
    col, out = scenario.column, scenario.output
    names = ", ".join(f"{layer.name or f'layer {i + 1}'} {layer.thickness:.3g} m"
                      for i, layer in enumerate(col.layers))
    chem = scenario.chemical.name or "a dissolved contaminant"
    flux = col.darcy_flux
    flow = (f"water flows downward at a Darcy flux of {flux * YEAR:.3g} m/yr"
            if flux > 0 else f"water flows upward at a Darcy flux of {-flux * YEAR:.3g} m/yr"
            if flux < 0 else "no water flows (diffusion only)")
    top = _boundary_text(col.top)
    bottom = _boundary_text(col.bottom)
    text = (f"{scenario.title}. Transport of {chem} through a {col.length:.4g} m column of "
            f"{len(col.layers)} layer(s) (top first: {names}); {flow}. Top boundary: "
            f"{top}; bottom boundary: {bottom}. Initial state: {scenario.initial.kind}.")
    if out.receptor_depth is not None:
        text += f" The receptor (point of compliance) is at {out.receptor_depth:g} m"
        if out.screening_level is not None:
            text += (f", read against a screening level of "
                     f"{format_concentration(out.screening_level)}")
        text += "."
    if out.design_life:
        text += f" Design life: {format_time(out.design_life)}."
    times = np.asarray(scenario.times, float)
    text += (f" {times.size} output time(s) from {format_time(times.min())} to "
             f"{format_time(times.max())}.")
    if scenario.timeline is not None:
        changes = "; ".join(f"at {format_time(st.start)}: {st.label or 'change'}"
                            for st in scenario.timeline.stages[1:])
        text += (f" Remediation actions ({changes}); the derived properties below are "
                 "those of the column before the first action.")
    data = tomllib.loads(scenario.source_text)
    if data.get("alternatives"):
        text += (f" The file also lists {len(data['alternatives'])} alternative(s); this "
                 "report covers the scenario itself (compare the alternatives with "
                 "stratiflux compare).")
    return text


def _boundary_text(boundary) -> str:
    if boundary.kind == "source-zone":
        return describe_zone(boundary)
    if boundary.kind in ("concentration", "inlet"):
        value = f" {format_concentration(boundary.value)}"
    else:
        value = ""
    scheduled = " (scheduled in time)" if boundary.schedule is not None else ""
    return f"{boundary.kind}{value}{scheduled}"


def figure_uris(solution, scenario) -> list:
    """The run's figures (:mod:`transport.plot.column`: profiles, and the receptor
    breakthrough curve when there is a receptor) as PNG ``data:`` URIs (RFC 2397).

    Returns
    -------
    list of (str, str)
        (caption, ``data:image/png;base64,...``).
    """
    # matplotlib is imported lazily: the report's other parts need no plotting library
    from transport.plot.column import breakthrough_figure, profile_figure

    out = scenario.output
    figures = [("Pore-water concentration against depth at the output times",
                profile_figure(solution, screening_level=out.screening_level,
                               title=scenario.title))]
    if out.receptor_depth is not None:
        figures.append((f"Concentration at the receptor ({out.receptor_depth:g} m) "
                        "against time", breakthrough_figure(
                            solution, receptor_depth=out.receptor_depth,
                            screening_level=out.screening_level, title=scenario.title,
                            design_life=out.design_life)))
    uris = []
    for caption, fig in figures:
        buffer = io.BytesIO()
        fig.savefig(buffer, format="png", dpi=FIGURE_DPI)
        uris.append((caption, "data:image/png;base64,"
                     + base64.b64encode(buffer.getvalue()).decode("ascii")))
    return uris


def build_report(scenario, solution, *, verification=None, verification_seconds=None,
                 warnings=(), figures=True) -> Report:
    """Gather what the report shows from a solved scenario.

    Parameters
    ----------
    scenario : transport.scenario.schema.Scenario
    solution : Solution
        The run of ``scenario`` (:func:`transport.api.solve_scenario`).
    verification : list of transport.verify.report.CaseResult, optional
        Results of the verification suite on this installation (None: not run, said so).
    verification_seconds : float, optional
        Wall time of the suite, s.
    warnings : sequence
        Warnings of the solve (instances or texts), shown with the cautions.
    figures : bool
        Draw and embed the figures.

    Returns
    -------
    Report
    """
    out = scenario.output
    views = []
    if out.receptor_depth is not None and (solution.reliable is None
                                           or np.all(solution.reliable)):
        views = metric_views(solution, out.receptor_depth, out.screening_level,
                             out.design_life)
    reading = summary_lines(solution, views[-1].metrics if views else None,
                            title=scenario.title, receptor_depth=out.receptor_depth,
                            screening_level=out.screening_level,
                            design_life=out.design_life)
    times = np.asarray(solution.times, float)
    by_time = solution.engine_by_time
    engines = [str(e) for e in (by_time if by_time is not None
                                else [solution.engine] * times.size)]
    return Report(
        title=scenario.title, job=job_paragraph(scenario),
        scenario_name=Path(scenario.path).name if scenario.path else "(scenario)",
        scenario_text=scenario.source_text, derived_rows=scenario.derived_table(),
        reading=reading[1:], warnings=[str(w) for w in warnings], views=views,
        budget=final_budget(solution), budget_sentence=" ".join(budget_line(solution)),
        times=times, engines=engines, error=solution.error or {},
        scale=solution.scale or {},
        reliable=(np.ones(times.size, bool) if solution.reliable is None
                  else np.asarray(solution.reliable, bool)),
        tolerance=float(solution.tolerance),
        figures=figure_uris(solution, scenario) if figures else [],
        verification=list(verification) if verification is not None else None,
        verification_seconds=verification_seconds, hashes=input_hashes(scenario))


def write_report_html(report: Report, path, *, stage=None) -> str:
    """Render ``report`` (:func:`transport.analysis.report_html.render_html`) and write
    it to ``path`` through :mod:`transport.io.atomic` (``stage``: an
    :class:`~transport.io.atomic.OutputSet`). Returns ``path`` as given."""
    return write_text(path, render_html(report), stage=stage)
