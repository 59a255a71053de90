"""Engine selection: the auto choice against the independent mpmath reference."""
import warnings

import numpy as np
import pytest

from transport.solvers.engines import solve_column
from transport.solvers.modal.series import solve
from transport.model.column import Boundary, Column, InputError, Layer

from reference import crank_slab_series, laplace_reference

YEAR = 365.25 * 86400.0  # Julian year (IAU), s

# column Peclet number about 100 (the case the modal engine reports as inaccurate early on)
PECLET = Column(layers=(Layer(0.8, 0.35, 2e-10, 2.0), Layer(1.2, 0.4, 5e-11, 4.0)),
                top=Boundary("concentration", 0.12), bottom=Boundary("free-outflow"),
                darcy_flux=0.05 / YEAR)


def test_auto_uses_laplace_early_and_matches_mpmath_reference():
    """Early times at column Peclet ~100: auto must choose the Laplace engine there, pass
    no modal warning on, and match the mpmath Laplace reference (tests/reference.py,
    Talbot inversion per Abate & Valko 2004 at 30+ digits) to 1e-7 of the source
    concentration; where modal is fine it is used."""
    t = np.array([0.3, 1.0, 100.0]) * YEAR
    z = np.array([0.1, 0.4, 0.9, 1.5])
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        sol = solve_column(PECLET, t, z, engine="auto")
    assert list(sol.engine_by_time[:2]) == ["laplace", "laplace"]
    # late: the modal value where the Laplace engine confirms every quantity, else Laplace
    assert sol.engine_by_time[2] in ("modal", "laplace") and sol.reliable.all()
    assert np.all(sol.error_estimate <= 1e-8 * 0.12)
    ref = laplace_reference(PECLET, z, t)
    np.testing.assert_allclose(sol.concentration, ref, rtol=0, atol=1e-7 * 0.12)
    mask = ref > 1e-7 * 0.12
    assert np.all(np.abs(sol.concentration - ref)[mask] <= 1e-7 * ref[mask])


def test_auto_uses_laplace_below_the_mode_cap():
    """A time far below what max_modes can resolve (1e-4 of the diffusion time) goes to
    the Laplace engine; the result matches the mpmath reference to 1e-7."""
    col = Column(layers=(Layer(0.5, 0.3, 1e-9, 1.0), Layer(1.5, 0.4, 2e-10, 2.0)),
                 top=Boundary("concentration", 1.0), bottom=Boundary("sealed"))
    t_diff = col.length ** 2 / 1e-9
    t = np.array([1e-4, 0.5]) * t_diff
    z = np.array([0.0, 0.005, 0.02, 1.0])
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        sol = solve_column(col, t, z, max_modes=200)
    assert list(sol.engine_by_time) == ["laplace", "modal"]
    ref = laplace_reference(col, z, t)
    np.testing.assert_allclose(sol.concentration, ref, rtol=1e-7, atol=1e-12)


def test_auto_equals_modal_where_modal_is_fine():
    """Diffusion-only column at ordinary times: auto returns the modal result exactly."""
    col = Column(layers=(Layer(1.0, 0.3, 1e-9, 1.5), Layer(0.5, 0.4, 1e-10, 3.0)),
                 top=Boundary("concentration", 1.0), bottom=Boundary("mass-transfer", 0.0, 1e-8))
    t = np.array([1.0, 10.0, 50.0]) * YEAR
    z = np.linspace(0, col.length, 7)
    auto = solve_column(col, t, z)
    modal = solve(col, t, z)
    assert set(auto.engine_by_time) == {"modal"}
    # the modal values themselves, except rounding-level negatives moved onto the
    # physical bound 0 (within the reported error bound)
    inside = modal.concentration >= 0
    np.testing.assert_array_equal(auto.concentration[inside], modal.concentration[inside])
    assert np.all(auto.concentration >= 0)
    np.testing.assert_allclose(auto.concentration, modal.concentration, rtol=0,
                               atol=auto.error_estimate.max())
    np.testing.assert_array_equal(auto.budget["stored"], modal.budget["stored"])


def test_semi_infinite_and_engine_names():
    """Semi-infinite bottom always goes to the Laplace engine; unknown engines are refused."""
    col = Column(layers=(Layer(1.0, 0.3, 1e-9),), top=Boundary("concentration", 1.0),
                 bottom=Boundary("sealed"))
    sol = solve_column(col, [YEAR], [0.0, 3.0], semi_infinite_bottom=True)
    assert list(sol.engine_by_time) == ["laplace"]
    with pytest.raises(InputError, match="engine"):
        solve_column(col, [YEAR], [0.5], engine="magic")
    with pytest.raises(InputError, match="semi-infinite"):
        solve_column(col, [YEAR], [0.5], engine="modal", semi_infinite_bottom=True)
    fv = solve_column(col, [YEAR], [0.5], engine="finite-volume")
    # finite volumes: vouched to its default tolerance 1e-3 of the source
    assert fv.engine_by_time[0] == "finite-volume" and fv.error_estimate[0] <= 1e-3


def test_every_engine_serves_continuous_time_metrics():
    """concentration_at at times between the outputs: Laplace and auto agree with the
    modal series to 1e-7 of the source; finite volumes (40 cells per layer, second
    order) to 1e-3.
    Cross-engine check (independent methods)."""
    from transport.solvers.engines import solve_column
    from transport.model.column import Boundary, Column, Layer
    year = 365.25 * 86400.0
    col = Column(layers=(Layer(0.6, 0.35, 6e-10, 2.0), Layer(0.9, 0.3, 8e-10, 1.5)),
                 top=Boundary("concentration", 1.0), bottom=Boundary("free-outflow"),
                 darcy_flux=0.02 / year)
    times = np.array([0.0, 1.0, 5.0, 20.0]) * year
    depths = np.linspace(0.0, 1.5, 31)
    probe = np.array([2.5, 7.0, 13.0]) * year
    ref = solve_column(col, times, depths, engine="modal").concentration_at(0.9, probe)
    for engine, tol in (("laplace", 1e-7), ("auto", 1e-7), ("finite-volume", 1e-3)):
        got = solve_column(col, times, depths, engine=engine).concentration_at(0.9, probe)
        np.testing.assert_allclose(got, ref, atol=tol)


def test_receptor_curve_is_modal_when_the_output_times_include_zero():
    """Output times that start at t = 0 (the initial state itself, served as such): the
    continuous curve is still the modal series from the first positive time on, and at
    times between the output times it matches Crank (1975, ch. 4, plane sheet with a
    held surface and a sealed face, ``tests/reference.py: crank_slab_series``) to 1e-8;
    at t = 0 it is the initial state."""
    L, th, D, R = 1.0, 0.3, 1e-9, 2.0
    col = Column(layers=(Layer(L, th, D, R),), top=Boundary("concentration", 1.0),
                 bottom=Boundary("sealed"))
    year = 365.25 * 86400.0
    times = np.array([0.0, 1.0, 5.0, 20.0]) * year
    sol = solve_column(col, times, [0.0, 0.5, 1.0])
    assert sol.series is not None  # the modal series serves the curve
    t = np.array([2.5, 11.0]) * year
    ref = crank_slab_series([0.5], t, L, D / R)[:, 0]
    np.testing.assert_allclose(sol.concentration_at(0.5, t), ref, rtol=0, atol=1e-8)
    assert sol.concentration_at(0.5, np.array([0.0]))[0] == 0.0
