"""Parameters given as probability distributions, and reproducible sample matrices.

A site file may give any numeric material, chemical or flow property as a
distribution (``[[uncertainty.parameters]]``)::

    [[uncertainty.parameters]]
    parameter = "materials.clay.distribution_coefficient"
    distribution = "lognormal"          # normal | lognormal | uniform | triangular
    median = "2 L/kg"
    log_sd = 0.5                        # standard deviation of ln(value)
    lower = "0.2 L/kg"                  # optional truncation bounds
    upper = "20 L/kg"

Parameters per distribution (values with units, like the deterministic key):
normal ``mean, sd``; lognormal ``median, log_sd`` (dimensionless); uniform ``low,
high``; triangular ``low, mode, high``. A zero spread (``sd = 0``, ``log_sd = 0``,
``low = high``) is a degenerate distribution: every draw is the central value.

Samples are drawn by inverse transform: uniform numbers u in (0, 1), from
:class:`numpy.random.Generator` ("random") or from a scrambled Latin hypercube
(:class:`scipy.stats.qmc.LatinHypercube`; McKay, Beckman and Conover 1979,
Technometrics 21:239), are mapped into [F(lower), F(upper)] and through the inverse
CDF of the scipy.stats distribution, so truncation and stratification carry over
exactly. Draws are independent between parameters; one draw of every parameter is
shared by all borings of a realization (site-wide properties).
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import stats
from scipy.stats import qmc

__all__ = ["DISTRIBUTION_PARAMETERS", "SAMPLING_METHODS", "Distribution", "sample_matrix"]

#: distribution -> its parameter names, central value first.
DISTRIBUTION_PARAMETERS = {
    "normal": ("mean", "sd"),
    "lognormal": ("median", "log_sd"),
    "uniform": ("low", "high"),
    "triangular": ("low", "mode", "high"),
}
SAMPLING_METHODS = ("random", "latin-hypercube")
#: keeps u away from 0 and 1, where unbounded inverse CDFs are infinite
_U_EDGE = 1e-12


@dataclass(frozen=True)
class Distribution:
    """One uncertain parameter, SI floats.

    Parameters
    ----------
    parameter : dotted key path, e.g. ``"chemical.half_life"``
    kind : one of :data:`DISTRIBUTION_PARAMETERS`
    values : the distribution's parameters in the order of DISTRIBUTION_PARAMETERS (SI;
        ``log_sd`` dimensionless)
    lower, upper : optional truncation bounds (SI)
    """

    parameter: str
    kind: str
    values: tuple
    lower: float | None = None
    upper: float | None = None

    def __post_init__(self):
        if self.kind not in DISTRIBUTION_PARAMETERS:
            raise ValueError(f"{self.parameter}: unknown distribution {self.kind!r}; use one "
                             "of " + ", ".join(DISTRIBUTION_PARAMETERS))
        names = DISTRIBUTION_PARAMETERS[self.kind]
        if len(self.values) != len(names):
            raise ValueError(f"{self.parameter}: {self.kind} needs {', '.join(names)}")
        v = dict(zip(names, self.values))
        problem = None
        if self.kind == "normal" and v["sd"] < 0:
            problem = "sd must be >= 0"
        elif self.kind == "lognormal" and (v["median"] <= 0 or v["log_sd"] < 0):
            problem = "median must be > 0 and log_sd >= 0"
        elif self.kind == "uniform" and v["high"] < v["low"]:
            problem = "high must be >= low"
        elif self.kind == "triangular" and not v["low"] <= v["mode"] <= v["high"]:
            problem = "low <= mode <= high is required"
        elif (self.lower is not None and self.upper is not None and self.upper <= self.lower):
            problem = "upper must be > lower"
        if problem:
            raise ValueError(f"{self.parameter}: {problem}")
        if self.degenerate:
            c = self.central
            if (self.lower is not None and c < self.lower) or (
                    self.upper is not None and c > self.upper):
                raise ValueError(f"{self.parameter}: the (degenerate) value {c:g} lies "
                                 "outside the bounds")
        elif self.lower is not None or self.upper is not None:
            lo, hi = self._cdf_window()
            if not hi > lo:
                raise ValueError(f"{self.parameter}: the bounds leave no probability mass")

    @property
    def central(self) -> float:
        """Mean, median or mode (uniform: midpoint): the value of a degenerate draw."""
        if self.kind == "uniform":
            return 0.5 * (self.values[0] + self.values[1])
        return float(self.values[1] if self.kind == "triangular" else self.values[0])

    @property
    def degenerate(self) -> bool:
        """True when the spread is zero: every draw equals :attr:`central`."""
        if self.kind in ("normal", "lognormal"):
            return self.values[1] == 0
        return self.values[0] == self.values[-1]

    def frozen(self):
        """The scipy.stats frozen distribution (None when degenerate)."""
        if self.degenerate:
            return None
        v = self.values
        if self.kind == "normal":
            return stats.norm(loc=v[0], scale=v[1])
        if self.kind == "lognormal":
            return stats.lognorm(s=v[1], scale=v[0])
        if self.kind == "uniform":
            return stats.uniform(loc=v[0], scale=v[1] - v[0])
        low, mode, high = v
        return stats.triang(c=(mode - low) / (high - low), loc=low, scale=high - low)

    def _cdf_window(self):
        dist = self.frozen()
        lo = 0.0 if self.lower is None else float(dist.cdf(self.lower))
        hi = 1.0 if self.upper is None else float(dist.cdf(self.upper))
        return lo, hi

    def support_min(self) -> float:
        """Smallest value a draw can take (-inf for an unbounded normal)."""
        if self.degenerate:
            return self.central
        base = {"normal": -math.inf, "lognormal": 0.0}.get(self.kind, self.values[0])
        return base if self.lower is None else max(base, self.lower)

    def ppf(self, u) -> np.ndarray:
        """Values for uniform numbers ``u`` in (0, 1) (inverse transform, truncated)."""
        u = np.clip(np.asarray(u, dtype=float), _U_EDGE, 1 - _U_EDGE)
        if self.degenerate:
            return np.full(u.shape, self.central)
        lo, hi = self._cdf_window()
        x = self.frozen().ppf(lo + u * (hi - lo))
        if self.lower is not None or self.upper is not None:
            x = np.clip(x, -np.inf if self.lower is None else self.lower,
                        np.inf if self.upper is None else self.upper)
        return x


def sample_matrix(distributions, n: int, seed: int, method: str = "random") -> np.ndarray:
    """Draws, shape (n, len(distributions)), reproducible from ``seed``.

    ``method`` is "random" (independent uniforms from ``numpy.random.default_rng(seed)``)
    or "latin-hypercube" (scipy.stats.qmc.LatinHypercube, scrambled, same seed): each of
    the n equal-probability strata of every parameter holds exactly one draw.
    """
    if method not in SAMPLING_METHODS:
        raise ValueError(f"sampling {method!r} is unknown; use one of "
                         + ", ".join(SAMPLING_METHODS))
    if n < 1:
        raise ValueError(f"the number of realizations must be >= 1, got {n}")
    d = len(distributions)
    if d == 0:
        return np.zeros((n, 0))
    rng = np.random.default_rng(seed)
    if method == "random":
        u = rng.random((n, d))
    else:
        u = qmc.LatinHypercube(d=d, rng=rng).random(n)
    return np.column_stack([dist.ppf(u[:, j]) for j, dist in enumerate(distributions)])
