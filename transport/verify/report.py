"""Verification suite: published solutions, cross-engine agreement and identities.

``run_suite(quick)`` runs every case and returns :class:`CaseResult` records;
``write_report(results, out_dir)`` writes ``verification.md`` and PNG figures (each
file written to a temporary name, then renamed).  The command line is
``stratiflux verify`` (:mod:`transport.cli.verify`).

Error measures: the maximum absolute error of C over the listed depths and times,
divided by the concentration scale of the case (the boundary or inlet value, or the
largest |C|), unless a case says otherwise.  Tolerances are set from the engine's own
accuracy: the modal series is asked for 1e-8 (tail bound), the finite-volume engine is
second order in space (measured errors at 40 cells per layer are 1e-4 to 2e-3 of the
scale), the Laplace engine reports its own inversion bound.
"""
from __future__ import annotations

import os
import platform
import time
from dataclasses import dataclass, field
from importlib.metadata import PackageNotFoundError, version
from pathlib import Path

import numpy as np

from transport import __version__
from transport.caution import CAUTION, CAUTION_SHORT
from transport.io.atomic import OutputSet, write_text
from transport.verify.cases import Case, cases, laplace_engine, scenario_dir

__all__ = ["Case", "CaseResult", "case_names", "run_suite", "write_report"]


@dataclass(frozen=True)
class CaseResult:
    """One verification case: what, against what, how close, how long."""

    name: str
    description: str
    source: str
    engine: str
    tolerance: float
    error: float
    seconds: float
    note: str = ""
    profile: tuple = field(default=(), repr=False, compare=False)  # (depths, |error|)

    @property
    def passed(self) -> bool:
        return bool(np.isfinite(self.error) and self.error <= self.tolerance)


def case_names(quick: bool = False) -> list:
    """Names of the cases the suite runs (quick subset or all)."""
    return [c.name for c in cases() if c.quick or not quick]


def run_suite(quick: bool = False, progress=None) -> list:
    """Run the cases; a case that raises is recorded as failed with the message."""
    out = []
    for case in cases():
        if quick and not case.quick:
            continue
        if progress:
            progress(case.name)
        t0 = time.perf_counter()
        try:
            error, note, prof = case.run(quick)
        except Exception as exc:  # noqa: BLE001 - a crash is a failed case, reported
            error, note, prof = float("nan"), f"raised {type(exc).__name__}: {exc}", ()
        out.append(CaseResult(case.name, case.description, case.source, case.engine,
                              case.tolerance, float(error), time.perf_counter() - t0,
                              note, prof))
    return out


# -------------------------------------------------------------------------------- report
def _versions() -> list:
    rows = [("platform", platform.platform()), ("machine", platform.machine()),
            ("processor", platform.processor() or "unknown"),
            ("cpu count", str(os.cpu_count())), ("python", platform.python_version())]
    rows.append(("stratiflux", __version__))
    for mod in ("numpy", "scipy", "matplotlib", "click", "mpmath"):
        try:
            rows.append((mod, version(mod)))
        except PackageNotFoundError:
            rows.append((mod, "not installed"))
    return rows


def _figure(results, out_dir: Path, out) -> list:
    """Error-versus-depth figures of the cases with a profile, staged in ``out``."""
    # matplotlib is imported lazily: the suite and its report run without figures too
    from matplotlib.figure import Figure

    groups = {"errors-published.png": [r for r in results if r.profile and "/" not in r.engine],
              "errors-cross-engine.png": [r for r in results if r.profile and "/" in r.engine]}
    written = []
    for name, rows in groups.items():
        if not rows:
            continue
        fig = Figure(figsize=(8, 5))
        ax = fig.subplots()
        for r in rows:
            z, err = r.profile
            ax.semilogy(z, np.maximum(err, 1e-17), label=r.name)
        ax.set_xlabel("depth (m)")
        ax.set_ylabel("max |C - reference| over times (kg m-3)")
        ax.set_title("stratiflux verification: error vs depth")
        ax.legend(fontsize=7)
        fig.text(0.01, 0.005, CAUTION_SHORT, fontsize=5.5, wrap=True)
        out.write(out_dir / name, lambda tmp, fig=fig: fig.savefig(tmp, format="png",
                                                                   dpi=110))
        written.append(name)
    return written


def write_report(results, out_dir, quick: bool = False) -> Path:
    """Write ``verification.md`` and figures into ``out_dir`` (created if needed), all
    of them together or none (:class:`transport.io.atomic.OutputSet`)."""
    out_dir = Path(out_dir)
    out_dir.mkdir(parents=True, exist_ok=True)
    with OutputSet() as out:
        return _write_report(results, out_dir, quick, out)


def _write_report(results, out_dir, quick, out):
    figures = _figure(results, out_dir, out)
    n_fail = sum(not r.passed for r in results)
    lines = ["# stratiflux verification report", "",
             f"Suite: {'quick' if quick else 'full'}; {len(results)} cases, "
             f"{len(results) - n_fail} passed, {n_fail} failed; total wall time "
             f"{sum(r.seconds for r in results):.1f} s.", "",
             "Error: maximum |C - reference| over the listed depths and times divided by "
             "the concentration scale of the case, unless the note says otherwise.", "",
             "| case | result | error | tolerance | engine | wall time (s) |",
             "|---|---|---|---|---|---|"]
    for r in results:
        lines.append(f"| {r.name} | {'pass' if r.passed else 'FAIL'} | {r.error:.3g} | "
                     f"{r.tolerance:.0e} | {r.engine} | {r.seconds:.2f} |")
    lines += ["", "## Cases", ""]
    for r in results:
        lines += [f"### {r.name}: {'pass' if r.passed else 'FAIL'}", "",
                  f"- description: {r.description}", f"- source: {r.source}",
                  f"- engine: {r.engine}", f"- tolerance: {r.tolerance:.1e}",
                  f"- achieved error: {r.error:.3e}", f"- wall time: {r.seconds:.2f} s"]
        if r.note:
            lines.append(f"- note: {r.note}")
        lines.append("")
    if laplace_engine() is None:
        lines += ["Laplace engine not installed (transport.solvers.laplace): its cases were skipped.",
                  ""]
    if not any(scenario_dir().glob("*.toml")):
        lines += ["Demo scenarios not found beside the package (scenarios/): their "
                  "cross-engine cases were skipped.", ""]
    if figures:
        lines += ["## Figures", ""] + [f"![{f}]({f})" for f in figures] + [""]
    lines += ["## Machine and versions", "", "| item | value |", "|---|---|"]
    lines += [f"| {k} | {v} |" for k, v in _versions()]
    lines += ["", "## Caution", "", CAUTION, ""]
    path = out_dir / "verification.md"
    write_text(path, "\n".join(lines), stage=out)
    return path
