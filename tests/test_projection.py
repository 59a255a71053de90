"""Measured initial profiles with a step: the model, the projection used by the modal
engine, and the scenario reader."""
import warnings

import numpy as np
import pytest

from transport.solvers.modal.series import AccuracyWarning, ModeCapWarning, solve
from transport.model.column import Boundary, Column, InitialState, InputError, Layer
from transport.solvers.modal.projection import initial_profile
from transport.scenario.schema import ScenarioError, parse_scenario

from test_laplace import YEAR, _sealed_step
from test_scenario import scenario_text


def test_step_profile_is_right_continuous():
    """A depth given twice is a step: the first value above it, the second at and below
    it; linear between samples and constant beyond the ends (the stated convention)."""
    col = Column(layers=(Layer(1.0, 0.3, 1e-9),), top=Boundary("sealed"),
                 bottom=Boundary("sealed"))
    init = InitialState.profile([0.2, 0.5, 0.5, 0.9], [1.0, 2.0, 6.0, 4.0])
    z = np.array([0.0, 0.35, 0.5 - 1e-12, 0.5, 0.7, 1.0])
    expected = [1.0, 1.5, 2.0, 6.0, 5.0, 4.0]  # hand values of the convention
    np.testing.assert_allclose(initial_profile(col, init, z), expected, rtol=1e-11)
    np.testing.assert_allclose(init.profile_at([0.5], side="left"), [2.0])


@pytest.mark.parametrize("depths", [[0.0, 0.5, 0.5, 0.5], [0.0, 0.6, 0.5]])
def test_profile_refuses_three_at_one_depth_and_decreasing(depths):
    with pytest.raises(InputError, match="at most two|must not decrease"):
        InitialState.profile(depths, [1.0] * len(depths))


def test_modal_projection_of_a_step_is_exact():
    """The modal engine breaks its Gauss panels at the sample depths, so a step is
    projected exactly: C against the Fourier series of a sealed slab with an initial
    step (Carslaw & Jaeger 1959 sec. 3.3), 1e-9 of the largest value."""
    th, D, R, L, step = 0.35, 1e-9, 2.0, 1.0, 0.3
    col = Column(layers=(Layer(0.5, th, D, R), Layer(0.5, th, D, R)),
                 top=Boundary("sealed"), bottom=Boundary("sealed"))
    init = InitialState.profile([0.0, step, step, L], [0.2, 0.2, 1.0, 1.0])
    t = np.array([0.3, 3.0]) * YEAR
    z = np.array([0.0, 0.1, 0.29, step, 0.31, 0.6, 1.0])
    with warnings.catch_warnings():
        warnings.simplefilter("error", AccuracyWarning)
        warnings.simplefilter("error", ModeCapWarning)
        sol = solve(col, t, z, initial=init, tolerance=1e-10)
    conc, _, _ = _sealed_step(z, t, L, D / R, step, 0.2, 1.0, th, R)
    np.testing.assert_allclose(sol.concentration, conc, rtol=0, atol=1e-9)


SAMPLES = '[initial]\nsamples = [{}]\n'


def test_scenario_samples_may_hold_a_step():
    """Two samples at one depth in a scenario are a step (value above, then below)."""
    text = scenario_text() + SAMPLES.format('["0 m", "80 mg/L"], ["50 cm", "80 mg/L"], '
                                            '["0.5 m", "5 mg/L"], ["2 m", "5 mg/L"]')
    s = parse_scenario(text)
    assert s.initial.depths == pytest.approx((0.0, 0.5, 0.5, 2.0), rel=1e-15)
    np.testing.assert_allclose(s.initial.profile_at([0.49, 0.5]), [0.08, 0.005], rtol=1e-12)


@pytest.mark.parametrize("samples, problem", [
    ('["0 m", "1 mg/L"], ["1 m", "1 mg/L"], ["1 m", "2 mg/L"], ["1 m", "3 mg/L"]',
     "third sample"),
    ('["0 m", "1 mg/L"], ["1 m", "1 mg/L"], ["0.5 m", "2 mg/L"]', "must not decrease")])
def test_scenario_samples_errors_name_key_and_fix(samples, problem):
    with pytest.raises(ScenarioError) as info:
        parse_scenario(scenario_text() + SAMPLES.format(samples))
    err = info.value
    assert err.key.startswith("initial.samples[") and problem in err.problem
    assert "step" in err.fix
