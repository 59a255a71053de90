"""Estimating scenario parameters from measured pore-water profiles (``stratiflux fit``).

The free parameters of the ``[fit]`` table (:mod:`transport.analysis.fit_input`) are
estimated by weighted least squares: minimise sum_i r_i^2 with r_i = (C_model_i -
C_measured_i) / sigma_i (without a sigma column, r_i is the misfit in the data's
concentration unit). Every evaluation writes the trial values into the scenario text,
reads it with :func:`transport.scenario.schema.parse_scenario` and solves it through
:func:`transport.api.solve_scenario` (every number vouched for by the engines; an
:class:`UnreliableResultError` stops the fit as :class:`FitRefused`).

The search runs in unit-box coordinates u in [0, 1] per parameter, linear in the value
or in its logarithm (``scale = "log"``), with scipy's trust-region reflective method
(:func:`scipy.optimize.least_squares`; Branch, Coleman & Li 1999, SIAM J. Sci. Comput.
21:1). At the estimate the Jacobian J = dr/du is taken by central differences and the
linearised (asymptotic) covariance is

    Cov(u) = s^2 (J^T J)^-1,  s^2 = sum r_i^2 / (n - p)     (error_model "scaled")
    Cov(u) = (J^T J)^-1                                       (error_model "absolute")

with intervals u +- t_{(1+c)/2, n-p} sd(u) (normal quantile for "absolute"), mapped
back to the parameter (asymmetric on a log scale): Seber & Wild (1989), *Nonlinear
Regression*, Wiley, ch. 2 and 5; Bard (1974), *Nonlinear Parameter Estimation*,
Academic Press, ch. 7 (chapter numbers from memory). They are exact only for a model
linear in u; the correlation matrix is Cov scaled to unit diagonal.

A parameter is reported as **not identifiable** from the data when the data do not
depend on it (zero Jacobian column), when it lies in a near-null direction of the
column-scaled Jacobian (condition number above :data:`COND_LIMIT`, or a correlation of
magnitude at least :data:`CORRELATION_LIMIT` with another parameter: only a
combination is determined), when its interval spans both bounds, or when the estimate
sits on a bound (the linearised interval does not apply there). These thresholds are
common practice, not a published rule.
"""
from __future__ import annotations

import math
import warnings
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
from scipy import stats
from scipy.optimize import least_squares

from transport.analysis.fit_input import (SOURCE_AGE, FitSpec, MeasuredProfile,
                                          read_fit_spec, read_profile, value_text)
from transport.analysis.fit_text import place_values
from transport.api import solve_scenario
from transport.model.column import InputError
from transport.scenario.reader import ScenarioError
from transport.scenario.schema import parse_scenario
from transport.solvers.checks import UnreliableResultError
from transport.units import to_si

__all__ = ["FitError", "FitRefused", "Estimate", "FitResult", "fit_scenario",
           "to_unit", "from_unit", "COND_LIMIT", "CORRELATION_LIMIT", "STEP"]

#: Condition number of the column-scaled Jacobian above which the directions of its
#: smallest singular vectors are reported as not identifiable (common practice).
COND_LIMIT = 1e4
#: |correlation| from which two parameters are reported as not separately identifiable.
CORRELATION_LIMIT = 0.999
#: |correlation| from which a pair is reported as strongly correlated.
STRONG_CORRELATION = 0.95
#: Finite-difference step in unit-box coordinates (the solver's error, ~tolerance,
#: stays far below the change it makes).
STEP = 1e-3
_AT_BOUND = 1e-6
#: Curve points of the fitted profile in the figure.
CURVE_POINTS = 121


class FitError(ValueError):
    """A fit that could not be completed (no convergence, a trial value the scenario
    rejects, too few samples); the message names the file, the key and the fix."""


class FitRefused(UnreliableResultError):
    """No engine could vouch for a profile during the fit (see the message)."""


@dataclass(frozen=True)
class Estimate:
    """One fitted parameter (SI): estimate, interval (NaN where not defined), bounds,
    start, scale, whether the data identify it, and the reason when they do not."""

    key: str
    unit: str
    per_unit: float
    value: float
    lower: float
    upper: float
    low: float
    high: float
    start: float
    scale: str
    identifiable: bool = True
    note: str = ""


@dataclass(frozen=True, eq=False)
class FitResult:
    """Everything a fit reports; SI units (concentrations kg m-3, times s, depths m).

    ``residuals`` are the weighted residuals r_i (dimensionless with sigma, else in the
    data's concentration unit); ``fitted`` the model at the measured rows;
    ``row_times`` the model time of each row; ``curve`` the fitted profile at
    ``curve_times`` x ``curve_depths``; ``statements`` the sentences on
    identifiability and on the error scale; ``warnings`` those of the last evaluation.
    """

    estimates: tuple
    correlation: np.ndarray
    confidence: float
    error_model: str
    profile: MeasuredProfile
    fitted: np.ndarray
    residuals: np.ndarray
    row_times: np.ndarray
    weighted_rms: float
    residual_scale: float
    dof: int
    condition_number: float
    evaluations: int
    converged_message: str
    statements: tuple
    curve_times: np.ndarray
    curve_depths: np.ndarray
    curve: np.ndarray
    scenario: object
    fitted_values: dict
    warnings: tuple = ()
    interfaces: tuple = field(default=())
    free: tuple = field(default=())

    @property
    def identifiable(self) -> bool:
        return all(e.identifiable for e in self.estimates)


def to_unit(p, value: float) -> float:
    """``value`` (SI) in unit-box coordinates of parameter ``p`` (0 at low, 1 at high)."""
    if p.scale == "log":
        return (math.log(value) - math.log(p.low)) / (math.log(p.high) - math.log(p.low))
    return (value - p.low) / (p.high - p.low)


def from_unit(p, u: float) -> float:
    """Inverse of :func:`to_unit` (u outside [0, 1] maps beyond the bounds)."""
    if p.scale == "log":
        return math.exp(math.log(p.low) + u * (math.log(p.high) - math.log(p.low)))
    return p.low + u * (p.high - p.low)


class _Budget(Exception):
    pass


class _Problem:
    """The model of one fit: trial values -> weighted residuals at the measured rows."""

    def __init__(self, text, path, spec: FitSpec, profile, base, engine, tolerance,
                 progress):
        self.text, self.path, self.spec, self.profile = text, path, spec, profile
        self.engine, self.tolerance, self.progress = engine, tolerance, progress
        self.free = spec.free
        self.count = 0
        self.length = base.column.length
        self.last_warnings = ()
        self.z = np.asarray(profile.depths, float)
        self.obs = np.asarray(profile.values, float)
        if profile.sigma is None:  # residuals in the data's concentration unit
            per = to_si(f"1 {profile.unit('concentration')}", "concentration")
            self.weights = np.full(self.obs.shape, 1.0 / per)
        else:
            self.weights = 1.0 / np.asarray(profile.sigma, float)
        t = profile.times
        self.offsets = None if t is None else np.asarray(t, float) - float(np.min(t))
        self.fixed_times = None
        if not any(p.key == SOURCE_AGE for p in self.free):
            if t is not None:
                self.fixed_times = np.asarray(t, float)
            else:
                default = spec.time if spec.time is not None else float(base.times.max())
                self.fixed_times = np.full(self.z.shape, default)

    def values(self, u) -> dict:
        return {p.key: from_unit(p, float(x)) for p, x in zip(self.free, u)}

    def times(self, values) -> np.ndarray:
        if self.fixed_times is not None:
            return self.fixed_times
        age = values[SOURCE_AGE]
        return age + (self.offsets if self.offsets is not None else np.zeros_like(self.z))

    def scenario_text(self, values, digits=17, comments=None):
        placed = {p.key: value_text(p, values[p.key], digits) for p in self.free
                  if p.key != SOURCE_AGE}
        return place_values(self.text, placed, comments)

    def describe(self, values) -> str:
        return ", ".join(f"{p.key} = {values[p.key] / p.per_unit:.4g}"
                         f"{' ' + p.unit if p.unit else ''}" for p in self.free)

    def model(self, values, depths=None, times=None):
        """(scenario, solution) at ``values`` on the given grid (default the rows')."""
        text, missed = self.scenario_text(values)
        if missed:
            raise FitError(f"{self.path}: cannot write {', '.join(missed)} into the "
                           "scenario text. Fix: write each freed key on its own line "
                           "(key = value) in its [table] or a one-line inline table")
        try:
            with warnings.catch_warnings(record=True) as caught:
                warnings.simplefilter("always")
                sc = parse_scenario(text, self.path)
            rows = self.times(values)
            ut = np.unique(rows if times is None else times)
            uz = np.unique(self.z if depths is None else depths)
            sol, solver_warnings = solve_scenario(sc, depths=uz, times=ut,
                                                  engine=self.engine,
                                                  tolerance=self.tolerance)
        except UnreliableResultError as exc:
            raise FitRefused(f"{self.path}: the fit stopped at {self.describe(values)}: "
                             f"{exc}. Fix: narrow the bounds in [[fit.free]], loosen the "
                             "tolerance (--tolerance 1e-6) or try --engine laplace",
                             exc.times, exc.quantities) from None
        except (ScenarioError, InputError) as exc:
            raise FitError(f"{self.path}: at the trial values {self.describe(values)} the "
                           f"scenario is invalid: {exc}. Fix: narrow the bounds of the "
                           "[[fit.free]] tables so that every value between them is "
                           "valid") from None
        self.last_warnings = tuple(dict.fromkeys(
            [str(w.message) for w in caught] + [str(w) for w in solver_warnings]))
        return sc, sol, ut, uz

    def residuals(self, u):
        """Weighted residuals at ``u``, within the evaluation budget."""
        if self.count >= self.spec.max_evaluations:
            raise _Budget()
        return self.evaluate(u)

    def evaluate(self, u):
        """Weighted residuals at ``u`` (counted, outside the budget)."""
        self.count += 1
        values = self.values(u)
        _, sol, ut, uz = self.model(values)
        rows = self.times(values)
        c = sol.concentration[np.searchsorted(ut, rows), np.searchsorted(uz, self.z)]
        if self.progress is not None:
            self.progress(self.count)
        return (c - self.obs) * self.weights


def fit_scenario(text: str, path="<string>", profile: MeasuredProfile | None = None, *,
                 spec: FitSpec | None = None, data=None, time=None, engine: str = "auto",
                 tolerance: float | None = None, progress=None) -> FitResult:
    """Fit the free parameters of a scenario's ``[fit]`` table to a measured profile.

    Parameters
    ----------
    text : str
        Scenario TOML with a ``[fit]`` table; ``path`` its file name (messages, relative
        files).
    profile : MeasuredProfile, optional
        The measurements (default: read ``fit.data``, relative to the scenario).
    spec : FitSpec, optional
        The ``[fit]`` table already read; else read from ``text`` with ``data`` and
        ``time`` (text such as ``"46 yr"``) overriding its keys.
    engine : {"auto", "laplace"}
    tolerance : float, optional
        Solver tolerance (default the scenario's).
    progress : callable, optional
        Called with the number of evaluations after each one.

    Returns
    -------
    FitResult

    Raises
    ------
    ScenarioError
        Invalid [fit] table or data file (file, key, fix).
    FitError
        Too few samples, a trial value the scenario rejects, no convergence.
    FitRefused
        No engine could vouch for a profile (an UnreliableResultError).
    """
    if engine not in ("auto", "laplace"):
        raise ValueError(f"engine {engine!r}: a fit uses 'auto' or 'laplace'")
    spec = spec or read_fit_spec(text, path, data, time)
    base = parse_scenario(text, path)
    if profile is None:
        if spec.data is None:
            raise ScenarioError(str(path), "fit.data", problem="no measured profile given",
                                fix='add data = "profile.csv" to [fit] or pass --data')
        source = Path(spec.data)
        profile = read_profile(source if source.is_absolute() else
                               Path(str(path)).parent / source)
    _check_data(profile, spec, base)
    problem = _Problem(text, path, spec, profile, base, engine, tolerance, progress)
    u0 = np.array([0.5 if p.start is None else to_unit(p, p.start) for p in spec.free])
    problem.model(problem.values(u0))  # the start must be a valid, solvable scenario
    try:
        res = least_squares(problem.residuals, u0, bounds=(0.0, 1.0), method="trf",
                            diff_step=STEP, x_scale=1.0, max_nfev=spec.max_evaluations)
    except _Budget:
        res = None
    if res is None or res.status <= 0:
        raise FitError(f"{path}: the fit did not converge within {spec.max_evaluations} "
                       "model evaluations. Fix: raise fit.max_evaluations, give start "
                       "values nearer the data, or narrow the bounds")
    u = np.clip(res.x, 0.0, 1.0)
    r = problem.evaluate(u)
    jac = _jacobian(problem, u, r)
    return _result(problem, spec, profile, u, r, jac, res.message)


def _check_data(profile, spec, base):
    n, p = len(profile.values), len(spec.free)
    if n <= p:
        raise FitError(f"{profile.path}: {n} sample(s) for {p} free parameter(s): a fit "
                       "needs more samples than free parameters. Fix: add samples or free "
                       "fewer [[fit.free]] keys")
    if spec.error_model == "absolute" and profile.sigma is None:
        raise ScenarioError(profile.path, "column 'sigma'", problem="missing: "
                            "fit.error_model = \"absolute\" takes sigma as the true error "
                            "of each sample", fix="add a sigma column (e.g. 'sigma [mg/L]') "
                            "or use error_model = \"scaled\"")
    length = base.column.length
    deep = np.nonzero(profile.depths > length * (1 + 1e-12))[0]
    if deep.size:
        raise ScenarioError(profile.path, f"row {deep[0] + 1}, column 'depth'",
                            profile.depths[deep[0]], f"below the column bottom "
                            f"({length:g} m)", fix="drop the sample or extend the column")
    free_age = any(q.key == SOURCE_AGE for q in spec.free)
    if profile.times is not None and not free_age and np.any(profile.times <= 0):
        j = int(np.argmax(profile.times <= 0)) + 1
        raise ScenarioError(profile.path, f"row {j}, column 'time'", profile.times[j - 1],
                            "a profile time must be after t = 0 (the initial state)",
                            fix="give times since the start of the scenario")


def _jacobian(problem, u, r0):
    """Central differences dr/du at ``u`` (one-sided where a bound is closer than
    :data:`STEP`)."""
    jac = np.empty((r0.size, u.size))
    for k in range(u.size):
        lo, hi = max(0.0, u[k] - STEP), min(1.0, u[k] + STEP)
        a, b = u.copy(), u.copy()
        a[k], b[k] = lo, hi
        ra = r0 if lo == u[k] else problem.evaluate(a)
        rb = r0 if hi == u[k] else problem.evaluate(b)
        jac[:, k] = (rb - ra) / (hi - lo)
    return jac


def _result(problem, spec, profile, u, r, jac, message) -> FitResult:
    free = spec.free
    n, p = r.size, u.size
    dof = n - p
    ssr = float(r @ r)
    s2 = ssr / dof
    absolute = spec.error_model == "absolute" and profile.sigma is not None
    norms = np.linalg.norm(jac, axis=0)
    zero = norms <= 1e-9 * max(float(norms.max()), 1e-300)
    live = np.nonzero(~zero)[0]
    notes = {k: [] for k in range(p)}
    unident = set(np.nonzero(zero)[0])
    statements = [f"{free[k].key}: the data do not depend on it (zero sensitivity); not "
                  "identifiable" for k in np.nonzero(zero)[0]]
    cov = np.full((p, p), np.nan)
    cond = math.inf
    if live.size:
        jn = jac[:, live] / norms[live]
        _, sv, vt = np.linalg.svd(jn, full_matrices=False)
        cond = float(sv[0] / sv[-1]) if sv[-1] > 0 else math.inf
        for i in np.nonzero(sv < sv[0] / COND_LIMIT)[0]:
            names = [live[j] for j in np.nonzero(np.abs(vt[i]) >= 0.3)[0]]
            unident.update(names)
            statements.append(
                "not identifiable: the data determine only a combination of "
                + " and ".join(free[j].key for j in names)
                + f" (near-singular Jacobian, condition number {cond:.3g})")
        inv = np.linalg.pinv(jac[:, live].T @ jac[:, live])
        cov[np.ix_(live, live)] = (1.0 if absolute else s2) * inv
    sd = np.sqrt(np.clip(np.diag(cov), 0.0, None))
    with np.errstate(invalid="ignore", divide="ignore"):
        corr = cov / np.outer(sd, sd)
    quant = stats.norm.ppf(0.5 + spec.confidence / 2) if absolute else \
        stats.t.ppf(0.5 + spec.confidence / 2, dof)
    for i in range(p):
        for j in range(i + 1, p):
            c = corr[i, j]
            if not np.isfinite(c) or abs(c) < STRONG_CORRELATION:
                continue
            pair = f"{free[i].key} and {free[j].key}"
            if abs(c) >= CORRELATION_LIMIT and not {i, j} <= unident:
                unident.update((i, j))
                statements.append(f"not identifiable: {pair} are correlated {c:+.4f}; the "
                                  "data determine only a combination of them")
            elif abs(c) < CORRELATION_LIMIT:
                statements.append(f"{pair} are strongly correlated ({c:+.3f}): their "
                                  "intervals are wide and not independent")
    estimates = []
    for k, q in enumerate(free):
        lo_u, hi_u = u[k] - quant * sd[k], u[k] + quant * sd[k]
        ok = k not in unident and np.isfinite(sd[k])
        if u[k] < _AT_BOUND or u[k] > 1 - _AT_BOUND:
            side = "lower" if u[k] < 0.5 else "upper"
            notes[k].append(f"at its {side} bound: the best fit may lie beyond it and the "
                            "linearised interval does not apply")
            ok = False
        elif ok and lo_u <= 0 and hi_u >= 1:
            notes[k].append("its interval spans both bounds: the data do not confine it")
            ok = False
        elif ok and (lo_u < 0 or hi_u > 1):
            notes[k].append(f"its interval reaches beyond the {'lower' if lo_u < 0 else 'upper'}"
                            " bound")
        if k in unident and not notes[k]:
            notes[k].append("not identifiable from these data (see the statements)")
        if not ok and k not in unident and notes[k]:
            statements.append(f"not identifiable: {q.key}: {notes[k][0]}")
        bad = k in unident or not np.isfinite(sd[k])
        estimates.append(Estimate(
            q.key, q.unit, q.per_unit, float(from_unit(q, u[k])),
            math.nan if bad else float(from_unit(q, lo_u)),
            math.nan if bad else float(from_unit(q, hi_u)),
            q.low, q.high, from_unit(q, 0.5) if q.start is None else q.start, q.scale,
            bool(ok), "; ".join(notes[k])))
    if profile.sigma is not None:
        statements.append(_scale_statement(spec.error_model, ssr, dof, absolute))
    values = problem.values(u)
    sc, curve_times, depths, curve = _curve(problem, values, profile)
    fitted = r / problem.weights + problem.obs
    return FitResult(tuple(estimates), corr, spec.confidence, spec.error_model, profile,
                     fitted, r, problem.times(values), math.sqrt(ssr / n), math.sqrt(s2),
                     dof, cond, problem.count, str(message), tuple(statements),
                     curve_times, depths, curve, sc, values, problem.last_warnings,
                     tuple(float(x) for x in sc.column.interfaces), tuple(free))


def _scale_statement(model, ssr, dof, absolute) -> str:
    ratio = math.sqrt(ssr / dof)
    lo, hi = stats.chi2.ppf([0.005, 0.995], dof) / dof
    fits = lo <= ssr / dof <= hi
    text = (f"The scatter of the residuals is {ratio:.3g} times the stated sigma "
            f"(reduced chi-square {ssr / dof:.3g}, {dof} degrees of freedom; 99 % range "
            f"{lo:.3g} to {hi:.3g})")
    if absolute and not fits:
        return text + ("; it does not match the stated errors, so intervals taken from "
                       "sigma alone are wrong: use error_model = \"scaled\" or check sigma")
    if absolute:
        return text + "; intervals use sigma as the true error (error_model absolute)"
    return text + "; intervals use sigma scaled by the residual scatter (error_model scaled)"


def _curve(problem, values, profile):
    """The fitted profile at each sampling time on a fine depth grid."""
    z = profile.depths
    bottom = min(1.15 * float(z.max()) or 1.0, problem.length)
    depths = np.unique(np.concatenate([np.linspace(0.0, bottom, CURVE_POINTS), z]))
    sc, sol, ut, uz = problem.model(values, depths=depths, times=problem.times(values))
    return sc, ut, uz, np.asarray(sol.concentration, float)
