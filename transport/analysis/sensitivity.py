"""What drives the answer: one-at-a-time swings and variance-based indices of a scenario.

A study is a scenario file with a ``[sensitivity]`` table
(:mod:`transport.analysis.sensitivity_spec`). Every model run rebuilds the scenario
from the file's parsed TOML with the inputs of that run written in
(:func:`transport.analysis.sensitivity_spec.with_values`), through
:func:`transport.scenario.schema.parse_scenario` (so every value is checked and every
layer derived exactly as for ``stratiflux run``), solves it through
:func:`transport.api.solve_scenario` at the receptor depth (every number vouched for
within the tolerance, or :class:`UnreliableResultError`), and reads the metric with
:func:`transport.analysis.metrics.receptor_metrics` over the study's window.

* One at a time: a base run (every input at the scenario's value), then each input at
  its low and at its high value with the others at base; the swing is
  |metric(high) - metric(low)|.
* Variance-based: first-order and total-effect indices of the inputs given as
  distributions (:mod:`transport.analysis.sobol`: Saltelli et al. 2010 design and
  estimators, Jansen 1999 total effect, bootstrap intervals).

A first exceedance that does not happen within the window is counted as the window's
end (a censored value, flagged per run): the metric is then min(t, window end).

Examples
--------
>>> study = load_study("scenarios/sensitivity-demo.toml")     # doctest: +SKIP
>>> result = run_study(study)                                  # doctest: +SKIP
>>> result.swing, result.indices.total_effect                  # doctest: +SKIP
"""
from __future__ import annotations

import warnings
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from transport.analysis.metrics import receptor_metrics
from transport.analysis.sensitivity_keys import toml_text, value_text, with_values
from transport.analysis.sensitivity_spec import SensitivitySpec, read_sensitivity
from transport.analysis.sobol import SobolIndices, saltelli_design, sobol_indices
from transport.analysis.summary import run_horizon
from transport.api import solve_scenario
from transport.scenario.reader import (PlausibilityWarning, Reader, ScenarioError,
                                       parse_toml, read_text_file)
from transport.scenario.schema import Scenario, parse_scenario
from transport.solvers.checks import UnreliableResultError
from transport.units import YEAR

__all__ = ["SensitivityStudy", "RunPlan", "SensitivityResult", "DESIGN_CODES",
           "parse_study", "load_study", "plan_runs", "check_runs", "solve_runs",
           "summarize", "run_study", "measure", "run_scenario"]

#: What each run of a plan is (NetCDF ``flag_values`` / ``flag_meanings``).
DESIGN_CODES = {"oat_base": 0, "oat_low": 1, "oat_high": 2, "sobol_a": 3, "sobol_b": 4,
                "sobol_ab": 5}


@dataclass(frozen=True, eq=False)
class SensitivityStudy:
    """A scenario with its validated ``[sensitivity]`` table.

    ``data`` is the parsed TOML without ``[sensitivity]`` and ``[[alternatives]]`` (the
    scenario every run modifies); ``scenario`` the base scenario; ``file`` the name
    used in messages (``"<string>"`` without a file).
    """

    file: str
    path: str | None
    data: dict
    scenario: Scenario
    spec: SensitivitySpec
    source_text: str

    @property
    def title(self) -> str:
        return self.scenario.title


@dataclass(frozen=True)
class RunPlan:
    """Every run of a study: ``values`` (runs, inputs) SI, ``design`` codes
    (:data:`DESIGN_CODES`), ``swapped`` (index of the sampled input taken from B in an
    A_B^(i) row, else -1), the seed and the base sample size (0: one at a time only)."""

    values: np.ndarray
    design: np.ndarray
    swapped: np.ndarray
    seed: int
    samples: int

    @property
    def size(self) -> int:
        return int(self.design.size)


@dataclass(frozen=True, eq=False)
class SensitivityResult:
    """The outcome of a study (SI values; display units in ``study.spec``).

    ``metric``, ``censored``: per run of ``plan``; ``base``: the metric of the base run;
    ``low``, ``high``, ``swing``: per input (``study.spec.inputs`` order); ``order``:
    inputs sorted by swing, largest first; ``indices``: of ``study.spec.sampled`` (None
    without distributions); ``horizon``: the window end of the base run, s;
    ``warnings``: distinct warnings of the runs, with how many runs raised each.
    """

    study: SensitivityStudy
    plan: RunPlan
    metric: np.ndarray
    censored: np.ndarray
    base: float
    low: np.ndarray
    high: np.ndarray
    swing: np.ndarray
    order: np.ndarray
    indices: SobolIndices | None
    horizon: float
    warnings: tuple = ()

    @property
    def inputs(self) -> tuple:
        return self.study.spec.inputs

    @property
    def window_text(self) -> str:
        """``"design life (30 yr)"`` or ``"whole run (60 yr)"``."""
        name = "design life" if self.study.spec.window == "design-life" else "whole run"
        return f"{name} ({self.horizon / YEAR:.4g} yr)"


def parse_study(text: str, path: str | Path = "<string>") -> SensitivityStudy:
    """Read a scenario text with a ``[sensitivity]`` table (``path`` for messages and
    relative files). Raises :class:`ScenarioError` naming the file, key and fix."""
    file = str(path)
    scenario = parse_scenario(text, path)
    r = Reader(file, Path(file).parent if file != "<string>" else Path.cwd())
    data = parse_toml(r, text)
    out = scenario.output
    spec = read_sensitivity(r, data, out.design_life, out.screening_level)
    data = {k: v for k, v in data.items() if k not in ("sensitivity", "alternatives")}
    return SensitivityStudy(file, None if file == "<string>" else file, data, scenario,
                            spec, text)


def load_study(path) -> SensitivityStudy:
    """:func:`parse_study` of a scenario file (UTF-8 TOML)."""
    return parse_study(read_text_file(path), path)


def plan_runs(study: SensitivityStudy, samples: int = None, seed: int = None,
              one_at_a_time_only: bool = False) -> RunPlan:
    """The runs of a study: the one-at-a-time runs, then (with distributions) the rows
    of A, B and every A_B^(i) of the Saltelli (2010) design.

    ``samples`` and ``seed`` override the file's; without a seed one is drawn
    (:class:`numpy.random.SeedSequence`) and kept in the plan.
    """
    spec = study.spec
    n = spec.samples if samples is None else int(samples)
    if seed is None:
        seed = spec.seed
    if seed is None:
        seed = int(np.random.SeedSequence().entropy % (2 ** 63))
    base = np.array([i.base for i in spec.inputs])
    rows, design, swapped = [base], [DESIGN_CODES["oat_base"]], [-1]
    for k, inp in enumerate(spec.inputs):
        for code, value in (("oat_low", inp.low), ("oat_high", inp.high)):
            row = base.copy()
            row[k] = value
            rows.append(row)
            design.append(DESIGN_CODES[code])
            swapped.append(-1)
    sampled = [k for k, inp in enumerate(spec.inputs) if inp.distribution is not None]
    if sampled and not one_at_a_time_only:
        a, b = saltelli_design([spec.inputs[k].distribution.ppf for k in sampled], n, seed)
        full_a = np.tile(base, (n, 1))
        full_a[:, sampled] = a
        full_b = np.tile(base, (n, 1))
        full_b[:, sampled] = b
        rows += list(full_a) + list(full_b)
        design += [DESIGN_CODES["sobol_a"]] * n + [DESIGN_CODES["sobol_b"]] * n
        swapped += [-1] * (2 * n)
        for j, k in enumerate(sampled):
            ab = full_a.copy()
            ab[:, k] = full_b[:, k]
            rows += list(ab)
            design += [DESIGN_CODES["sobol_ab"]] * n
            swapped += [j] * n
    else:
        n = 0
    return RunPlan(np.array(rows, dtype=float), np.array(design, dtype=np.int8),
                   np.array(swapped, dtype=np.int32), int(seed), n)


def _assignments(study, row) -> str:
    return ", ".join(f"{inp.key} = {inp.shown(v)}" for inp, v in zip(study.spec.inputs, row))


def run_scenario(study: SensitivityStudy, row, k: int = 0) -> Scenario:
    """The scenario of one run (``row``: SI value per input), through
    :func:`parse_scenario`; its plausibility warnings are left to the caller.

    A value the scenario refuses raises :class:`ScenarioError` naming the run, every
    input value of it, the scenario's own message and the fix.
    """
    changes = [(inp.path, value_text(v, inp.dimension))
               for inp, v in zip(study.spec.inputs, row)]
    text = toml_text(with_values(study.data, changes))
    try:
        return parse_scenario(text, study.file)
    except ScenarioError as exc:
        raise ScenarioError(
            study.file, "sensitivity.inputs", problem=f"run {k} ({_assignments(study, row)}) "
            f"gives a scenario that cannot be run: {exc.key}: {exc.problem}",
            fix="narrow the low/high range, or bound the distribution with lower/upper, "
                "so that every value is valid") from None


def measure(scenario: Scenario, spec: SensitivitySpec, tolerance: float = None):
    """The study's metric for one scenario: (SI value, censored, warnings).

    Solved through :func:`transport.api.solve_scenario` at the receptor depth only (the
    metrics read the continuous solution there; the engines vouch for every number at
    that depth); read by :func:`transport.analysis.metrics.receptor_metrics` over the
    design life or the whole run (:func:`transport.analysis.summary.run_horizon`).
    """
    out = scenario.output
    depth = out.receptor_depth
    horizon = (out.design_life if spec.window == "design-life"
               else run_horizon(out.times, out.design_life))
    solution, caught = solve_scenario(scenario, depths=np.array([depth]),
                                      tolerance=tolerance)
    m = receptor_metrics(solution, depth, out.screening_level, horizon)
    value = getattr(m, spec.metric.field)
    if spec.metric.name == "first_exceedance" and m.exceeded_at_start:
        caught = list(caught) + [UserWarning(
            f"the screening level is already reached at the earliest output time "
            f"({m.window_start / YEAR:.4g} yr): the first exceedance taken is that time, "
            "later than the crossing, which is not resolved; add earlier output times")]
    if value is None and spec.metric.name == "first_exceedance":
        return float(horizon), True, caught
    if value is None:
        raise UnreliableResultError(f"the {spec.metric.label} cannot be vouched for in "
                                    "this run; choose another metric")
    return float(value), False, caught


def check_runs(study: SensitivityStudy, plan: RunPlan, progress=None):
    """Build the scenario of every run once before any solve, so that an invalid value
    is refused at once (:func:`run_scenario`); ``progress(n)`` after each run."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", PlausibilityWarning)  # reported by solve_runs
        for k, row in enumerate(plan.values):
            run_scenario(study, row, k)
            if progress is not None:
                progress(1)


def solve_runs(study: SensitivityStudy, plan: RunPlan, progress=None,
               tolerance: float = None):
    """(metric, censored, warnings) of every run of ``plan``.

    ``warnings`` lists each distinct warning once with the number of runs that raised
    it (a plausibility warning counts per key). A run no engine can vouch for raises
    :class:`UnreliableResultError` naming the run and its input values.
    """
    metric = np.empty(plan.size)
    censored = np.zeros(plan.size, dtype=bool)
    seen = {}
    done = {}
    for k, row in enumerate(plan.values):
        key = row.tobytes()
        if key in done:  # the same inputs (a range end at the base value): same answer
            metric[k], censored[k] = metric[done[key]], censored[done[key]]
        else:
            with warnings.catch_warnings(record=True) as caught:
                warnings.simplefilter("always")
                scenario = run_scenario(study, row, k)
            try:
                metric[k], censored[k], solver = measure(scenario, study.spec, tolerance)
            except UnreliableResultError as exc:
                raise UnreliableResultError(
                    f"{study.file}: sensitivity run {k} ({_assignments(study, row)}) was "
                    f"refused: {exc}", exc.times, exc.quantities) from None
            for w in [c.message for c in caught] + list(solver):
                tag = (type(w).__name__, getattr(w, "key", None) or str(w))
                first, count = seen.get(tag, (str(w), 0))
                seen[tag] = (first, count + 1)
            done[key] = k
        if progress is not None:
            progress(1)
    notes = tuple(f"{text} ({count} run{'s' if count != 1 else ''})"
                  for text, count in seen.values())
    return metric, censored, notes


def summarize(study: SensitivityStudy, plan: RunPlan, metric, censored,
              notes=()) -> SensitivityResult:
    """One-at-a-time swings and variance-based indices from the metric of every run."""
    metric = np.asarray(metric, dtype=float)
    design = plan.design
    base = float(metric[design == DESIGN_CODES["oat_base"]][0])
    low = metric[design == DESIGN_CODES["oat_low"]]
    high = metric[design == DESIGN_CODES["oat_high"]]
    swing = np.abs(high - low)
    order = np.argsort(-swing, kind="stable")
    indices = None
    if plan.samples:
        n = plan.samples
        y_a = metric[design == DESIGN_CODES["sobol_a"]]
        y_b = metric[design == DESIGN_CODES["sobol_b"]]
        ab = metric[design == DESIGN_CODES["sobol_ab"]].reshape(-1, n)
        spec = study.spec
        indices = sobol_indices(y_a, y_b, ab, resamples=spec.resamples,
                                confidence=spec.confidence, seed=plan.seed + 1)
    out = study.scenario.output
    horizon = (out.design_life if study.spec.window == "design-life"
               else run_horizon(out.times, out.design_life))
    return SensitivityResult(study, plan, metric, np.asarray(censored, dtype=bool), base,
                             low, high, swing, order, indices, float(horizon), tuple(notes))


def run_study(study: SensitivityStudy, *, samples: int = None, seed: int = None,
              one_at_a_time_only: bool = False, tolerance: float = None,
              progress=None) -> SensitivityResult:
    """Plan, check, solve and summarise a study (the steps of ``stratiflux
    sensitivity``); ``progress(n)`` is called after each run is solved."""
    plan = plan_runs(study, samples, seed, one_at_a_time_only)
    check_runs(study, plan)
    metric, censored, notes = solve_runs(study, plan, progress, tolerance)
    return summarize(study, plan, metric, censored, notes)
