"""Time-varying boundary values and sources: exact modal (Duhamel) responses."""
import mpmath
import numpy as np
import pytest

from transport.solvers.modal.series import solve
from transport.model.column import Boundary, Column, InitialState, InputError, Layer
from transport.model.schedules import Schedule, phi

from reference import assert_relative, laplace_reference

YEAR = 365.25 * 86400.0


def _layers():
    return (Layer(0.6, 0.35, 6e-10, 2.0, decay_rate=1e-9), Layer(0.3, 0.45, 5e-11, 6.0),
            Layer(1.1, 0.3, 8e-10, 1.5))


def test_phi_functions_match_mpmath_quadrature():
    """phi_k(lam, tau) = int_0^tau (tau-s)^(k-1)/(k-1)! e^(-lam s) ds (exponential
    integrator functions, Hochbruck & Ostermann 2010, Acta Numerica 19:209), checked by
    mpmath quadrature at 30 digits over small and large lam tau."""
    mpmath.mp.dps = 30
    for k in (1, 2, 3):
        for lam, tau in ((0.0, 2.0), (1e-9, 3.0), (0.3, 1.0), (4.0, 2.5), (1e3, 1.0)):
            ref = mpmath.quad(lambda s: (tau - s) ** (k - 1) / mpmath.factorial(k - 1)
                              * mpmath.exp(-lam * s), [0, tau])
            assert abs(float(phi(k, lam, tau)) / float(ref) - 1) < 1e-14


@pytest.mark.parametrize("bottom", ["concentration", "mass-transfer"])
def test_step_on_step_off_matches_laplace_reference(bottom):
    """Source removed after 8 years: the independent mpmath Laplace solution with the
    transform of a switched signal (1 - e^{-s t1})/s, Talbot inversion (Abate & Valko 2004);
    1e-6 relative where C > 1e-6 of the source."""
    sched = Schedule.steps([0.0, 8 * YEAR], [1.0, 0.0])
    col = Column(layers=_layers(), top=Boundary("concentration", schedule=sched),
                 bottom=Boundary(bottom, 0.0, 1e-8 if bottom == "mass-transfer" else 0.0))
    z = np.array([0.0, 0.3, 0.75, 1.5])
    t = np.array([3.0, 12.0, 40.0]) * YEAR
    sol = solve(col, t, z, tolerance=1e-10)
    ref = laplace_reference(col, z, t)
    assert_relative(sol.concentration, ref, 1.0, 1e-6)


def test_exponential_depletion_matches_laplace_reference():
    """Depleting source C0 exp(-k t) with k = ln 2 / 5 yr; transform C0/(s + k)."""
    k = np.log(2) / (5 * YEAR)
    col = Column(layers=_layers(), top=Boundary("concentration",
                                                schedule=Schedule.depletion(2.0, k)),
                 bottom=Boundary("free-outflow"), darcy_flux=0.02 / YEAR)
    z = np.array([0.1, 0.7, 1.9])
    t = np.array([2.0, 10.0, 30.0]) * YEAR
    sol = solve(col, t, z, tolerance=1e-10)
    ref = laplace_reference(col, z, t)
    assert_relative(sol.concentration / 2.0, ref / 2.0, 1.0, 1e-6)


def test_flux_inlet_with_ramp_table_matches_laplace_reference():
    """A piecewise-linear leachate record (table) on a flux-type inlet; the transform of
    the table is its sum of ramps."""
    table = Schedule.table(np.array([0.0, 2.0, 5.0, 9.0]) * YEAR, [0.0, 1.0, 1.0, 0.2])
    col = Column(layers=_layers(), top=Boundary("inlet", schedule=table),
                 bottom=Boundary("free-outflow"), darcy_flux=0.02 / YEAR)
    z = np.array([0.0, 0.5, 1.2])
    t = np.array([3.0, 7.0, 20.0]) * YEAR
    sol = solve(col, t, z, tolerance=1e-10)
    ref = laplace_reference(col, z, t)
    assert_relative(sol.concentration, ref, 1.0, 1e-6)


def test_table_is_a_superposition_of_ramps():
    """Identity: the table's value equals the linear interpolation of its points."""
    times = np.array([0.0, 1.0, 3.0, 4.0])
    vals = [2.0, 5.0, 1.0, 1.5]
    sched = Schedule.table(times, vals)
    t = np.linspace(0, 6, 61)
    np.testing.assert_allclose(sched.value(t), np.interp(t, times, vals), atol=1e-14)


def test_short_ramp_converges_to_step():
    """A ramp from 0 to 1 over delta tends to the unit step as delta -> 0 (error O(delta))."""
    col_step = Column(layers=_layers(), top=Boundary("concentration", 1.0),
                      bottom=Boundary("sealed"))
    z, t = np.array([0.2, 0.8]), np.array([5.0, 20.0]) * YEAR
    c_step = solve(col_step, t, z).concentration
    errs = []
    for delta in (0.4 * YEAR, 0.1 * YEAR, 0.025 * YEAR):
        sched = Schedule.table([0.0, delta], [0.0, 1.0])
        col = Column(layers=_layers(), top=Boundary("concentration", schedule=sched),
                     bottom=Boundary("sealed"))
        errs.append(np.abs(solve(col, t, z).concentration - c_step).max())
    assert errs[0] > errs[1] > errs[2]
    assert errs[1] / errs[2] == pytest.approx(4.0, rel=0.05)


def _switched_column():
    """Step-off top, depleting mass-transfer bottom, a layer source switched off at 3 yr
    (invented test data)."""
    lays = list(_layers())
    lays[1] = Layer(0.3, 0.45, 5e-11, 6.0, source_rate=1e-11,
                    source_schedule=Schedule.steps([0.0, 3 * YEAR], [1.0, 0.0]))
    return Column(layers=tuple(lays),
                  top=Boundary("concentration", schedule=Schedule.steps([0, 5 * YEAR], [1, 0])),
                  bottom=Boundary("mass-transfer", transfer_coefficient=1e-8,
                                  schedule=Schedule.depletion(0.5, 1e-8)))


def test_budget_closes_with_schedules_and_source_schedule():
    """Identity: budget closes with a step-off top, a depleting bottom and a switched
    layer source."""
    col = _switched_column()
    t = np.array([1.0, 4.0, 6.0, 20.0, 80.0]) * YEAR
    sol = solve(col, t, np.linspace(0, 2, 5), initial=InitialState.uniform([0.1, 0.2, 0.0]))
    b = sol.budget
    scale = max(np.abs(b[k]).max() for k in ("stored", "entered_top", "left_bottom",
                                              "decayed", "produced"))
    assert np.abs(b["residual"]).max() <= 1e-9 * scale


@pytest.mark.parametrize("times, values", [([0.0, 2.0, 1.0], [1, 2, 3]),
                                           ([-1.0, 2.0], [1, 2]),
                                           ([0.0, 1.0], [1.0, float("nan")])])
def test_bad_schedule_is_a_clear_error(times, values):
    with pytest.raises(InputError, match="schedule"):
        Schedule.table(times, values)


def test_laplace_engine_agrees_on_scheduled_signals():
    """Cross-engine: the Laplace engine (transform of each switched signal group) and the
    modal Duhamel solution agree to 1e-7 where C > 1e-7 of the source, for a step-off top,
    a depleting bottom and a switched layer source."""
    from transport.solvers.laplace import solve_laplace
    col = _switched_column()
    z = np.array([0.0, 0.4, 0.75, 1.4, 2.0])
    t = np.array([2.0, 4.0, 6.0, 20.0]) * YEAR
    modal = solve(col, t, z, tolerance=1e-10).concentration
    lap = solve_laplace(col, t, z).concentration
    assert_relative(modal, lap, 1.0, 1e-7)
