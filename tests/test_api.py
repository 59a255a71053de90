"""The public API: ``transport.solve`` returns one ``Solution`` type for every engine and
for staged runs, and its numbers meet the tolerance against an independent reference:
the mpmath Laplace-domain solution of tests/reference.py (Talbot inversion; Talbot 1979,
Abate & Valko 2004, IJNME 60:979)."""
from pathlib import Path
import warnings

import numpy as np
import pytest

import transport
from transport.solvers.modal.series import ModeCapWarning
from transport.units import YEAR

from reference import laplace_reference

SCENARIOS = Path(__file__).resolve().parents[1] / "scenarios"

# invented two-layer column with downward flow (demo values, not check values)
COLUMN = transport.Column(
    layers=(transport.Layer(0.6, 0.35, 3e-10, 2.0, name="silt"),
            transport.Layer(0.9, 0.40, 8e-11, 3.0, decay_rate=1e-9, name="clay")),
    top=transport.Boundary("concentration", 0.1), bottom=transport.Boundary("free-outflow"),
    darcy_flux=0.02 / YEAR)
TIMES = np.array([2.0, 20.0, 80.0]) * YEAR
DEPTHS = np.linspace(0.0, 1.5, 31)


@pytest.fixture(scope="module")
def reference():
    return laplace_reference(COLUMN, DEPTHS, TIMES)


@pytest.mark.parametrize("engine, tolerance", [("auto", 1e-8), ("modal", 1e-8),
                                               ("laplace", 1e-8), ("finite-volume", 1e-3)])
def test_every_engine_returns_one_solution_within_its_tolerance(engine, tolerance, reference):
    sol = transport.solve(COLUMN, TIMES, DEPTHS, engine=engine, tolerance=tolerance)
    assert type(sol) is transport.Solution
    assert sol.concentration.shape == (TIMES.size, DEPTHS.size)
    assert sol.reliable.all() and sol.tolerance == tolerance
    err = np.abs(sol.concentration - reference).max(axis=1)
    # the stated bound holds, and the bound is within the tolerance of the C scale (0.1)
    assert np.all(err <= sol.error["concentration"] * (1 + 1e-6) + 1e-15)
    assert np.all(err <= tolerance * 0.1)
    ds = sol.to_dataset(title="api test")
    np.testing.assert_array_equal(ds["concentration"].values.reshape(sol.concentration.shape),
                                  sol.concentration)


def test_a_staged_scenario_returns_the_same_type():
    sc = transport.load_scenario(SCENARIOS / "alternatives" / "3-clay-cap.toml")
    assert sc.timeline is not None and len(sc.timeline.stages) > 1
    sol = transport.solve(sc)
    assert type(sol) is transport.Solution and sol.timeline is not None
    assert sol.reliable.all()
    # mass budget closure within the tolerance (an identity of the transport equation)
    scale = sol.scale["budget"] if sol.scale and "budget" in sol.scale else 1.0
    assert np.nanmax(np.abs(sol.budget["residual"])) <= sol.tolerance * scale
    assert "concentration" in sol.to_dataset(title="cap").data_vars


def test_a_column_needs_times_and_depths():
    with pytest.raises(TypeError, match="output times"):
        transport.solve(COLUMN)
    with pytest.raises(TypeError, match="load_scenario"):
        transport.solve("scenario.toml", TIMES, DEPTHS)


def test_warnings_can_be_filtered_by_class(monkeypatch):
    """Degraded but valid runs warn with the engines' own classes (common practice:
    invalid input raises, degraded results warn); ``solve`` lets them through and
    ``solve_scenario`` hands them back as instances, not strings."""
    with pytest.warns(ModeCapWarning):
        from transport.solvers.modal.series import solve as modal_solve
        modal_solve(COLUMN, np.array([1e-6]) * YEAR, DEPTHS, max_modes=50)
    import transport.api as api

    def warn_and_solve(*args, **kwargs):
        warnings.warn("mode cap reached", ModeCapWarning, stacklevel=2)
        return "solved"
    monkeypatch.setattr(api, "solve_column", warn_and_solve)
    sc = transport.load_scenario(SCENARIOS / "spill-layered-column.toml")
    with pytest.warns(ModeCapWarning):
        assert transport.solve(sc) == "solved"
    result, caught = api.solve_scenario(sc)
    assert result == "solved" and [type(w) for w in caught] == [ModeCapWarning]
    assert str(caught[0]) == "mode cap reached"
