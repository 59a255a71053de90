"""auto picks the cheaper engine at equal accuracy: the cost of the modal path and of the
Laplace engine is estimated before solving, and a column of many thin layers, whose
modal path would cost far more, is served by the Laplace engine with its own error
bound, checked against the independent mpmath solution of tests/reference.py (the
layered problem solved exactly in the Laplace domain, inverted with mpmath's Talbot
rule, Abate & Valko 2004)."""

import numpy as np
import pytest

from reference import laplace_reference
from transport.model.column import Boundary, Column, Layer
from transport.scenario.output import MEMORY_BUDGET, handover_bytes, run_memory_bytes
from transport.solvers import engines
from transport.solvers.engines import estimate_costs, solve_column
from transport.solvers.staged import MAX_SAMPLES
from transport.units import YEAR


def thin_column(n, seed=7, flux=0.01):
    """``n`` invented layers of 1 mm with random properties (clay to sand)."""
    rng = np.random.default_rng(seed)
    layers = tuple(Layer(1e-3, rng.uniform(0.2, 0.45), 10 ** rng.uniform(-12, -9),
                         rng.uniform(1, 50)) for _ in range(n))
    return Column(layers=layers, top=Boundary("concentration", 1.0),
                  bottom=Boundary("free-outflow"), darcy_flux=flux / YEAR)


TIMES = np.array([0.5, 1, 2, 5, 10, 20]) * YEAR


def test_estimate_prefers_laplace_for_a_thousand_thin_layers_only():
    many = thin_column(1000)
    cost = estimate_costs(many, TIMES, 1e-8, n_depths=21, reads=0)
    assert cost.laplace_only and cost.ratio > engines.COSTLIER_BY
    assert "Laplace chosen" in cost.describe()
    # a receptor reading (a curve at 240 times over the same span) shares one hyperbola:
    # it costs about as much as the output grid, and Laplace alone stays the choice
    read = estimate_costs(many, TIMES, 1e-8, n_depths=21)
    assert read.laplace_only and read.laplace < 2.5 * cost.laplace
    few = Column(layers=many.layers[:4], top=many.top, bottom=many.bottom,
                 darcy_flux=many.darcy_flux)
    assert not estimate_costs(few, TIMES, 1e-8, n_depths=401, reads=0).laplace_only


def test_thousand_thin_layers_solved_by_laplace_alone():
    col = thin_column(1000)
    depths = np.linspace(0.0, col.length, 21)
    sol = solve_column(col, TIMES, depths, reads=0)
    assert set(sol.engine_by_time) == {"laplace"} and sol.reliable.all()
    assert "Laplace chosen" in sol.diagnostics["engine_choice"]
    assert np.all(sol.error_estimate <= 1e-8 * sol.scale["concentration"])
    # the cost of either path on this column: python benchmarks/bench_engines.py thin


def test_laplace_choice_matches_the_mpmath_reference(monkeypatch):
    """60 thin layers (the mpmath reference takes minutes for 1,000): the Laplace-only
    choice, forced by the cost rule, agrees with mpmath within the bound it reports."""
    monkeypatch.setattr(engines, "COSTLIER_BY", 0.0)
    monkeypatch.setattr(engines, "COST_FLOOR", 0.0)
    col = thin_column(60, seed=3, flux=0.02)
    times = np.array([0.05, 0.5]) * YEAR
    depths = np.array([0.01, 0.03, 0.06])
    sol = solve_column(col, times, depths, reads=0)
    assert "Laplace chosen" in sol.diagnostics["engine_choice"]
    ref = laplace_reference(col, depths, times, dps=30)
    err = np.abs(sol.concentration - ref).max(axis=1)
    assert np.all(err <= sol.error_estimate + 1e-12)
    assert np.all(err <= 1e-8 * sol.scale["concentration"])


def test_staged_handover_counts_in_the_memory_estimate():
    """Each stage change may keep MAX_SAMPLES samples per layer of the state it hands
    over: a 1,000-layer run with four actions needs more than the budget."""
    plain = run_memory_bytes(20, 101, 1000)
    staged = run_memory_bytes(20, 101, 1000, stage_changes=4)
    assert staged - plain == pytest.approx(handover_bytes(1000, 4))
    assert handover_bytes(1000, 4) >= 4 * MAX_SAMPLES * 1000 * 8 * 8  # 8 float64 per sample
    assert plain < MEMORY_BUDGET < staged
    assert handover_bytes(4, 0) == 0.0
