"""Seeded random columns through the default engine: every number within its stated
tolerance of an independent solution, or the run refused.

Beside the hand-picked cells of tests/test_regime_matrix.py: 1-4 layers of random
thickness (2 cm to 1 m), porosity, diffusivity (1e-12 to 1e-9 m2/s, contrasts up to
1000) and retardation, column Peclet number 0 to 1000 downward or upward, random
boundary kinds at both ends, decay or none, a clean or uniformly contaminated start,
output times from 1e-3 to 30 characteristic times (invented data).

Check values: the mpmath Laplace-domain solution of tests/reference.py (Talbot 1979
rule, Abate & Valko 2004; itself verified in tests/test_reference.py).  The stated
tolerance is relative to the scale the tool reports for each quantity
(``Solution.scale``: from the physical bounds where they exist); the error bound of
each returned value must also hold: |error| <= its estimate + 1e-12 of the scale.
"""
from __future__ import annotations

import math
import random

import numpy as np
import pytest

from reference import laplace_reference_full
from transport.model.column import Boundary, Column, InitialState, Layer
from transport.solvers.checks import UnreliableResultError, concentration_bounds
from transport.solvers.engines import solve_column

KINDS = ("concentration", "flux", "inlet", "mass-transfer", "sealed", "free-outflow")
TOL = 1e-8


def random_case(seed: int):
    """(column, initial, times, depths) of one seeded random column."""
    rng = random.Random(seed)
    nl = rng.randint(1, 4)
    spec = [(rng.choice([0.02, 0.1, 0.4, 1.0]), rng.uniform(0.25, 0.5),
             10 ** rng.uniform(-12, -9), rng.choice([1.0, 1.5, 4.0, 20.0])) for _ in range(nl)]
    resist = sum(h / (th * d) for h, th, d, r in spec)
    pe = rng.choice([0, 1, 10, 100, 300, 1000])
    up = rng.random() < 0.4
    q = pe / resist * (-1 if up else 1)
    mu = rng.choice([0.0, 1e-9, 1e-8])
    layers = tuple(Layer(h, th, d, r, decay_rate=mu) for h, th, d, r in spec)
    length = sum(s[0] for s in spec)
    th0, d0 = spec[0][1], spec[0][2]
    f_unit = abs(q) if q else th0 * d0 / length

    def end(kind, source):
        if kind == "concentration":
            return Boundary(kind, 1.0 if source else 0.0)
        if kind == "flux":  # entering at the source end
            return Boundary(kind, (f_unit if source else 0.2 * f_unit)
                            * (1 if source != up else -1))
        if kind == "inlet":
            return Boundary(kind, 1.0 if source else 0.0)
        if kind == "mass-transfer":
            return Boundary(kind, 1.0 if source else 0.0, 3 * max(abs(q), th0 * d0 / length))
        return Boundary(kind)
    source, far = end(rng.choice(KINDS[:4]), True), end(rng.choice(KINDS), False)
    top, bottom = (far, source) if up else (source, far)
    init = rng.choice([InitialState.clean(), InitialState.uniform([0.3] * nl)])
    t_adv = sum(th * r * h for h, th, d, r in spec) / abs(q) if q else math.inf
    t_diff = sum(h * math.sqrt(r / d) for h, th, d, r in spec) ** 2
    t_char = 1 / (1 / t_adv + 1 / t_diff)
    times = np.array([1e-3, 0.05, 0.5, 4.0, 30.0]) * t_char
    depths = np.unique(np.concatenate([[0.0, length], np.linspace(0, length, 5)]))
    return Column(layers, top, bottom, darcy_flux=q), init, times, depths


@pytest.mark.parametrize("seed", range(16))
def test_random_column_is_right_or_refused(seed):
    col, init, times, depths = random_case(seed)
    try:
        sol = solve_column(col, times, depths, initial=init, tolerance=TOL)
    except UnreliableResultError:
        return
    ref = laplace_reference_full(col, depths, times, init, dps=20)
    for q in ("concentration", "total_flux", "cumulative_mass"):
        err = np.abs(getattr(sol, q) - getattr(ref, q)).max(axis=1)
        scale = sol.scale[q]
        assert np.all(err <= TOL * scale), (q, float(err.max() / scale))
        assert np.all(err <= sol.error[q] + 1e-12 * scale), q
    bounds = concentration_bounds(col, init, float(times.max()))
    if bounds.lo is not None:
        assert sol.concentration.min() >= bounds.lo
