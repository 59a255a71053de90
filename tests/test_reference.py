"""Checks of the independent references (Laplace, closed forms, two-layer eigenvalues)
and of the finite-volume engine against them.

Every check names its outside source.  Inputs are stated beside each check; the layer
data are invented test values (not check values), the check values come from the
published formulas, evaluated here with numpy/scipy/mpmath.
"""
from __future__ import annotations

import math

import mpmath as mp
import numpy as np
import pytest

from reference import (carslaw_jaeger_two_layer_eigenvalues, crank_slab_series,
                       erfc_semi_infinite, interpolated_state, laplace_reference,
                       laplace_reference_full, ogata_banks)
from transport.solvers.fv.engine import solve_fv
from transport.model.column import Boundary, Column, InitialState, Layer
from transport.model.schedules import Schedule

YEAR = 3.15576e7  # s, Julian year (IAU)

# ---------------------------------------------------------------------------------------
# (a) Laplace reference against closed forms
# ---------------------------------------------------------------------------------------
THETA, D, R = 0.4, 1.0e-9, 2.0  # porosity, m2/s, retardation


def _split_slab(bottom, split=(0.2, 0.3)):
    return Column(tuple(Layer(h, THETA, D, R) for h in split),
                  Boundary("concentration", 1.0), bottom)


def test_laplace_crank_dirichlet_noflux():
    """Homogeneous 0.5 m slab split in two layers, C = 1 on top, sealed bottom, clean.
    Source: Crank (1975) ch. 4, eq. 4.17 (number from memory), kappa = D/R."""
    z = np.array([0.0, 0.05, 0.1, 0.2, 0.35, 0.5])
    t = np.array([1e7, 5e7, 2e8])
    got = laplace_reference(_split_slab(Boundary("sealed")), z, t)
    want = crank_slab_series(z, t, 0.5, D / R, bottom="no-flux")
    assert np.max(np.abs(got - want)) < 1e-12


def test_laplace_crank_dirichlet_dirichlet_uniform_initial():
    """Same slab, C = 1 top, C = 0.3 bottom, initial 0.5 everywhere.
    Source: Crank (1975) ch. 4, eq. 4.16 (number from memory)."""
    z = np.array([0.0, 0.1, 0.2, 0.33, 0.5])
    t = np.array([1e7, 1e8])
    col = _split_slab(Boundary("concentration", 0.3))
    got = laplace_reference(col, z, t, initial=InitialState.uniform([0.5, 0.5]))
    want = crank_slab_series(z, t, 0.5, D / R, bottom="concentration", bottom_value=0.3,
                             initial=0.5)
    assert np.max(np.abs(got - want)) < 1e-12


def test_laplace_erfc_with_decay_deep_column():
    """10 m column (front stays in the top 0.5 m), C = 1 on top, decay mu = 2e-9 1/s
    acting on both phases.  Source: Danckwerts (1951), Trans. Faraday Soc. 47:1014,
    semi-infinite medium with first-order reaction."""
    mu = 2e-9
    col = Column((Layer(0.4, 0.3, D, 1.5, mu), Layer(9.6, 0.3, D, 1.5, mu)),
                 Boundary("concentration", 1.0), Boundary("sealed"))
    z = np.array([0.0, 0.05, 0.1, 0.2, 0.4, 0.5])
    t = np.array([1e7, 5e7, 1e8])
    got = laplace_reference(col, z, t)
    want = erfc_semi_infinite(z, t, D / 1.5, decay_rate=mu)
    assert np.max(np.abs(got - want)) < 1e-12


@pytest.mark.parametrize("mu", [0.0, 2e-9])
def test_laplace_ogata_banks(mu):
    """10 m column, q = 3e-9 m/s (Peclet 10 per metre), C = 1 held at the inlet,
    free outflow far below.  Source: Ogata & Banks (1961), USGS PP 411-A (mu = 0);
    van Genuchten & Alves (1982), USDA Tech. Bull. 1661, first-type inlet with decay
    (their mu = R * ours)."""
    theta, ret, q = 0.3, 1.5, 3e-9
    col = Column(tuple(Layer(h, theta, D, ret, mu) for h in (0.4, 0.6, 9.0)),
                 Boundary("concentration", 1.0), Boundary("free-outflow"), darcy_flux=q)
    z = np.array([0.0, 0.05, 0.1, 0.3, 0.5])
    t = np.array([1e7, 5e7, 1e8])
    got = laplace_reference(col, z, t)
    want = ogata_banks(z, t, q / (theta * ret), D / ret, decay_rate=mu)
    assert np.max(np.abs(got - want)) < 1e-12


def test_ogata_banks_high_peclet_against_mpmath():
    """Column Peclet number 1e5: exp(v z / D) alone overflows a double (e^1e5); the
    erfcx form must not.  Source: Ogata & Banks (1961) formula evaluated term by term
    in mpmath at 50 digits (no exponent limit)."""
    v, d = 1e-5, 1e-10
    z, t = np.array([0.3, 0.5, 1.0, 1.01]), np.array([1e5])
    got = ogata_banks(z, t, v, d)
    with mp.workdps(50):
        want = [0.5 * (mp.erfc((x - v * t[0]) / (2 * mp.sqrt(d * t[0])))
                       + mp.exp(mp.mpf(v) * x / d)
                       * mp.erfc((x + v * t[0]) / (2 * mp.sqrt(d * t[0])))) for x in z]
    assert np.all(np.isfinite(got))
    assert np.max(np.abs(got[0] - np.array(want, dtype=float))) < 1e-13


def _contrast_column():
    """Fill / clay with decay / sand, C = 1 on top, mass transfer at the base."""
    return Column((Layer(0.5, 0.35, 8e-10, 1.5, name="fill"),
                   Layer(0.3, 0.5, 2e-11, 12.0, 1e-9, name="clay"),
                   Layer(1.2, 0.3, 5e-10, 1.2, name="sand")),
                  Boundary("concentration", 1.0), Boundary("mass-transfer", 0.1, 1e-8))


def test_laplace_talbot_agrees_with_dehoog_and_stehfest():
    """Three-layer contrast column: the fixed-Talbot inversion (Abate & Valko 2004,
    IJNME 60:979) against de Hoog, Knight & Stokes (1982) and Gaver-Stehfest (Stehfest
    1970) at 60 digits, all from mpmath.invertlaplace."""
    col = _contrast_column()
    z, t = np.array([0.3, 0.65, 1.5]), np.array([3 * YEAR])
    talbot = laplace_reference(col, z, t)
    dehoog = laplace_reference(col, z, t, method="dehoog", dps=40)
    stehfest = laplace_reference(col, z[:1], t, method="stehfest", dps=60)
    assert np.max(np.abs(talbot - dehoog)) < 1e-12
    assert abs(talbot[0, 0] - stehfest[0, 0]) < 1e-10


# ---------------------------------------------------------------------------------------
# (b) Two-layer eigenvalues (Carslaw & Jaeger composite slab)
# ---------------------------------------------------------------------------------------
@pytest.mark.parametrize("bottom, shift", [("concentration", 0), ("sealed", 1)])
def test_two_layer_eigenvalues_of_split_slab(bottom, shift):
    """A 0.5 m homogeneous slab split at 0.15 m into two identical layers must keep the
    slab's decay rates: (n pi / L)^2 D/R (Dirichlet/Dirichlet) and
    ((2n - 1) pi / 2L)^2 D/R (Dirichlet/no flux), Crank (1975) ch. 4; first 20 to 25
    digits at dps = 30 with mu = 3e-9 1/s shifting every rate by mu (Danckwerts 1951)."""
    mu = 3e-9
    bc = Boundary("concentration", 0.0) if bottom == "concentration" else Boundary("sealed")
    col = Column((Layer(0.15, THETA, D, R, mu), Layer(0.35, THETA, D, R, mu)),
                 Boundary("concentration", 1.0), bc)
    lams = carslaw_jaeger_two_layer_eigenvalues(col, 20, dps=30)
    with mp.workdps(30):
        length, kappa = mp.mpf(0.15) + mp.mpf(0.35), mp.mpf(D) / mp.mpf(R)
        for n, lam in enumerate(lams, start=1):
            m = n if shift == 0 else (2 * n - 1) / mp.mpf(2)
            exact = (m * mp.pi / length) ** 2 * kappa + mp.mpf(mu)
            assert abs(lam / exact - 1) < mp.mpf(10) ** -22


def test_two_layer_eigenvalue_matches_laplace_late_decay():
    """Contrast pair (theta D ratio 1:40, partition K = 3): the smallest eigenvalue is
    the late-time decay rate of C from the independent Laplace reference,
    -d ln C / dt (Carslaw & Jaeger 1959 composite slab; Crank 1975 ch. 4 long-time
    limit).  Initial 1, both ends held at 0."""
    col = Column((Layer(0.2, 0.4, 1e-9, 1.0, partition_to_next=3.0),
                  Layer(0.3, 0.5, 5e-11, 4.0)),
                 Boundary("concentration", 0.0), Boundary("concentration", 0.0))
    lam = carslaw_jaeger_two_layer_eigenvalues(col, 3, dps=30)
    l1, l2 = float(lam[0]), float(lam[1])
    t1 = 12.0 / l2  # second mode down by e^-12 relative to its start
    t2 = t1 + 1.0 / l1
    c = laplace_reference(col, [0.25], [t1, t2], initial=InitialState.uniform([1.0, 3.0]))
    rate = np.log(c[0, 0] / c[1, 0]) / (t2 - t1)
    assert abs(rate / l1 - 1) < 1e-4
    assert l1 < l2 < float(lam[2])


# ---------------------------------------------------------------------------------------
# (c) Finite volumes converge to the Laplace reference
# ---------------------------------------------------------------------------------------
def _fv_errors(col, z, t, ns, initial=None, relative=False, **kw):
    ref = laplace_reference(col, z, t, initial=initial)
    errs = np.array([np.max(np.abs(solve_fv(col, t, z, initial=initial, cells_per_layer=n,
                                             tolerance=1e-10, **kw).concentration - ref))
                     for n in ns])
    if relative:
        errs /= np.max(np.abs(ref))
    return errs, np.log2(errs[:-1] / errs[1:])


def test_fv_converges_three_layer_contrast():
    """theta D contrast 1:40:1 with R = 1.5/12/1.2, decay in the clay, mass transfer
    at the base.  Reference: Laplace solution (this module's mpmath oracle).  Measured:
    max error 5.2e-3 / 1.3e-3 / 3.2e-4 at 20 / 40 / 80 cells per layer, order 2.0."""
    z = np.array([0.0, 0.25, 0.5, 0.65, 0.8, 1.2, 2.0])
    t = np.array([1, 5, 20]) * YEAR
    errs, order = _fv_errors(_contrast_column(), z, t, (20, 40, 80))
    assert np.all(order > 1.8) and np.all(order < 2.3)
    assert errs[-1] < 5e-4


def test_fv_converges_partition_jump():
    """Polymer-like partition K = 80 at the first interface (q = 0), low-D middle layer,
    sealed base.  Reference: Laplace solution.  Measured: max error (C up to 80)
    2.5e-2 / 6.2e-3 / 1.5e-3 at 20 / 40 / 80 cells per layer, order 2.0."""
    col = Column((Layer(0.3, 0.4, 5e-10, 2.0, partition_to_next=80.0),
                  Layer(0.2, 0.4, 1e-11, 1.0), Layer(0.5, 0.3, 6e-10, 1.0)),
                 Boundary("concentration", 1.0), Boundary("sealed"))
    z = np.array([0.1, 0.3, 0.4, 0.5, 0.8])
    t = np.array([0.5, 2, 10]) * YEAR
    errs, order = _fv_errors(col, z, t, (20, 40, 80))
    assert np.all(order > 1.8) and np.all(order < 2.3)
    assert errs[-1] < 2.5e-3


def _advective_column():
    """Column Peclet number q L / (theta D) = 10 over the first layer's properties."""
    d = 5e-10
    q = 10 * 0.3 * d / 1.0
    return Column((Layer(0.4, 0.3, d, 1.5), Layer(0.6, 0.4, 2 * d, 3.0, 5e-10)),
                  Boundary("inlet", 1.0), Boundary("free-outflow"), darcy_flux=q)


def test_fv_converges_advective_exponential_fitting():
    """Flux inlet, free outflow, column Peclet ~10, decay in the lower layer.
    Reference: Laplace solution.  Exponential fitting (Scharfetter & Gummel 1969):
    measured 1.1e-3 / 2.8e-4 / 7.0e-5 at 20 / 40 / 80 cells per layer, order 2.0."""
    z = np.array([0.0, 0.2, 0.4, 0.7, 1.0])
    t = np.array([2, 10, 30]) * YEAR
    errs, order = _fv_errors(_advective_column(), z, t, (20, 40, 80))
    assert np.all(order > 1.8) and np.all(order < 2.3)
    assert errs[-1] < 1e-4


def test_fv_upwind_is_first_order():
    """Same column with upwind advection (Patankar 1980 sec. 5.2): first order.
    Measured 1.45e-2 / 7.5e-3 / 3.8e-3 at 20 / 40 / 80 cells, order 0.95-0.97."""
    z = np.array([0.0, 0.2, 0.4, 0.7, 1.0])
    t = np.array([2, 10, 30]) * YEAR
    errs, order = _fv_errors(_advective_column(), z, t, (20, 40, 80), scheme="upwind")
    assert np.all(order > 0.85) and np.all(order < 1.2)


def test_fv_profile_initial_and_source():
    """Measured-profile initial state (kink inside a layer), zero-order source in the
    top layer, decay, flux top boundary and sealed base.  Reference: Laplace solution
    (profile split into linear segments).  80 cells per layer: error < 1e-3 of the
    peak value."""
    col = Column((Layer(0.6, 0.4, 6e-10, 1.5, 1e-9, source_rate=2e-10),
                  Layer(0.4, 0.45, 1e-10, 5.0)),
                 Boundary("flux", 3e-10), Boundary("sealed"))
    init = InitialState.profile([0.0, 0.3, 0.8], [2.0, 0.5, 0.0])
    z = np.array([0.0, 0.2, 0.45, 0.6, 0.9])
    t = np.array([0.0, 0.5, 3.0]) * YEAR
    ref = np.vstack([np.interp(z, [0.0, 0.3, 0.8], [2.0, 0.5, 0.0]),
                     laplace_reference(col, z, t[1:], initial=init)])
    got = solve_fv(col, t, z, initial=init, cells_per_layer=80, tolerance=1e-10).concentration
    assert np.max(np.abs(got - ref)) < 1e-3 * np.max(np.abs(ref))


_KINDS = {"concentration": Boundary("concentration", 1.0), "flux": Boundary("flux", 2e-10),
          "inlet": Boundary("inlet", 1.0), "free-outflow": Boundary("free-outflow"),
          "mass-transfer": Boundary("mass-transfer", 0.5, 2e-9), "sealed": Boundary("sealed")}


@pytest.mark.parametrize("top, bottom, q", [
    ("concentration", "sealed", 1e-9), ("flux", "mass-transfer", 1e-9),
    ("inlet", "free-outflow", 1e-9), ("free-outflow", "concentration", 1e-9),
    ("mass-transfer", "flux", 1e-9), ("sealed", "inlet", -1e-9)])
def test_fv_boundary_kinds_converge(top, bottom, q):
    """Every boundary kind at each end (|q| = 1e-9 m/s, upward flow for the bottom
    inlet; uniform initial 0.2 / 0.4, decay in the lower layer).  Reference: Laplace
    solution.  Measured (30 top/bottom pairs, q > 0): error relative to max |C|
    0.5e-4 to 1.5e-3 at 80 cells per layer, observed order 1.97-2.00."""
    col = Column((Layer(0.3, 0.35, 6e-10, 1.5), Layer(0.4, 0.45, 5e-11, 4.0, 2e-9)),
                 _KINDS[top], _KINDS[bottom], darcy_flux=q)
    z = np.array([0.0, 0.15, 0.3, 0.5, 0.7])
    t = np.array([1, 6]) * YEAR
    errs, order = _fv_errors(col, z, t, (40, 80), initial=InitialState.uniform([0.2, 0.4]),
                             relative=True)
    assert 1.8 < order[0] < 2.3
    assert errs[-1] < 2e-3


# ---------------------------------------------------------------------------------------
# (d) Flux, cumulative mass and budget of the Laplace reference against closed forms
# ---------------------------------------------------------------------------------------
def _crank_time_lag(t, length, kappa, cap, k, c0, n_terms=400):
    """Plane sheet, C = c0 at z = 0, C = 0 at z = l, clean: flux and cumulative mass at
    both faces.  Crank (1975) sec. 4.3.3 (time lag), eq. 4.24a (number from memory):
    Q_out/(l c0) = kappa t/l^2 - 1/6 - 2/pi^2 sum (-1)^n/n^2 e^{-kappa n^2 pi^2 t/l^2},
    in mass units per area (times theta R = cap); the inflow face by the same series
    with (-1)^n -> 1 and the sign of the sum changed, whose constant part is
    2/pi^2 sum 1/n^2 = 1/3 (its derivative is the face flux of Crank eq. 4.16 with C2 = 0,
    from memory).  Returns F(0), F(l), M(0), M(l)."""
    n = np.arange(1, n_terms + 1)[:, None]
    t = np.atleast_1d(t)[None, :]
    e = np.exp(-kappa * n ** 2 * math.pi ** 2 * t / length ** 2)
    f_unit = k * c0 / length
    f_top = f_unit * (1 + 2 * e.sum(axis=0))
    f_bot = f_unit * (1 + 2 * ((-1.0) ** n * e).sum(axis=0))
    # sum (1 - e_n)/n^2 = pi^2/6 - sum e_n/n^2 (no truncation of the constant part)
    m_top = cap * length * c0 * (kappa * t[0] / length ** 2 + 1 / 3
                                 - 2 / math.pi ** 2 * (e / n ** 2).sum(axis=0))
    m_bot = cap * length * c0 * (kappa * t[0] / length ** 2 - 1 / 6
                                 - 2 / math.pi ** 2 * ((-1.0) ** n / n ** 2 * e).sum(axis=0))
    return f_top, f_bot, m_top, m_bot


def test_reference_flux_and_cumulative_mass_crank_time_lag():
    """Homogeneous 0.5 m slab split in two identical layers, C = 1 on top, C = 0 at the
    base, clean.  Fluxes and cumulative masses at both faces against Crank (1975)
    sec. 4.3.3 (see _crank_time_lag); and at the latest time (15 diffusion times) the
    time-lag asymptote M(l, t) = (theta D c0 / l)(t - l^2 R / (6 D)) (Crank 1975 eq.
    4.24b, number from memory), to 1e-12 relative."""
    col = _split_slab(Boundary("concentration", 0.0))
    L = col.length
    t = np.array([2e6, 1e7, 5e7, 2e8, 1.5e9])
    ref = laplace_reference_full(col, [0.0, 0.2, L], t)
    f_top, f_bot, m_top, m_bot = _crank_time_lag(t, L, D / R, THETA * R, THETA * D, 1.0)
    fscale = np.abs(f_top).max()
    assert np.max(np.abs(ref.total_flux[:, 0] - f_top)) < 1e-12 * fscale
    assert np.max(np.abs(ref.total_flux[:, 2] - f_bot)) < 1e-12 * fscale
    mscale = np.abs(m_top).max()
    assert np.max(np.abs(ref.cumulative_mass[:, 0] - m_top)) < 1e-12 * mscale
    assert np.max(np.abs(ref.cumulative_mass[:, 2] - m_bot)) < 1e-12 * mscale
    assert np.allclose(ref.budget["entered_top"], ref.cumulative_mass[:, 0], rtol=0, atol=0)
    lag = THETA * D / L * (t[-1] - L ** 2 * R / (6 * D))
    assert abs(ref.cumulative_mass[-1, 2] - lag) < 1e-12 * lag
    # stored mass at steady state: theta R l c0 / 2 (linear profile)
    assert abs(ref.budget["stored"][-1] - THETA * R * L / 2) < 1e-12 * THETA * R * L


def _ogata_banks_flux(z, t, v, d, cap, c0=1.0):
    """Total flux of the Ogata & Banks (1961, USGS PP 411-A) solution, F = q C -
    theta D dC/dz, differentiated here in closed form (the e^{vz/d} erfc terms cancel):
    F = theta R c0 [v/2 erfc((z - v t)/(2 sqrt(d t))) + sqrt(d/(pi t)) e^{-(z - v t)^2/(4 d t)}]
    with d = D/R, v = q/(theta R).  mpmath, any Peclet number."""
    z, t, v, d = (mp.mpf(float(x)) for x in (z, t, v, d))
    return cap * c0 * (v / 2 * mp.erfc((z - v * t) / (2 * mp.sqrt(d * t)))
                       + mp.sqrt(d / (mp.pi * t)) * mp.exp(-(z - v * t) ** 2 / (4 * d * t)))


@pytest.mark.parametrize("peclet", [20.0, 1000.0])
def test_reference_flux_and_cumulative_mass_ogata_banks(peclet):
    """Advection-dispersion, C = 1 held at the inlet, clean column long enough that the
    outlet is not felt: flux at several depths against the Ogata & Banks (1961) flux
    (_ogata_banks_flux) and the cumulative mass against its time integral (mpmath quad),
    to 1e-11 of the scale; concentration against Ogata & Banks itself."""
    theta, ret, q = 0.35, 1.6, 2e-8
    L = 1.0
    d_eff = q * L / (theta * peclet)
    col = Column((Layer(0.3, theta, d_eff, ret), Layer(0.7, theta, d_eff, ret)),
                 Boundary("concentration", 1.0), Boundary("free-outflow"), darcy_flux=q)
    v, d = q / (theta * ret), d_eff / ret
    travel = L / v
    z = np.array([0.0, 0.15, 0.3, 0.4])
    t = np.array([0.12, 0.3]) * travel
    ref = laplace_reference_full(col, z, t, dps=15)
    cap = theta * ret
    with mp.workdps(30):
        flux = np.array([[float(_ogata_banks_flux(zz, tt, v, d, cap)) for zz in z] for tt in t])
        # the flux is singular like t^-1/2 at z = 0: integrate on a graded split of (0, t)
        cum = np.array([[float(mp.quad(lambda s, zz=zz: _ogata_banks_flux(zz, s, v, d, cap),
                                       [0, tt * 1e-6, tt * 1e-3, tt * 0.1, tt]))
                         for zz in z] for tt in t])
    conc = ogata_banks(z, t, v, d)
    assert np.max(np.abs(ref.concentration - conc)) < 1e-11
    assert np.max(np.abs(ref.total_flux - flux)) < 1e-11 * np.abs(flux).max()
    assert np.max(np.abs(ref.cumulative_mass - cum)) < 1e-11 * np.abs(cum).max()


def test_reference_budget_well_mixed_source_and_decay():
    """A sealed column with uniform properties stays uniform: theta R dC/dt = sigma(t) -
    theta R mu C, the linear first-order ODE solved by an integrating factor (e.g. Boyce &
    DiPrima, Elementary Differential Equations, ch. 2).  Source sigma0 e^{-r t} on both
    layers (scheduled), initial c_i: C = c_i e^{-mu t} + sigma0/(theta R) (e^{-r t} -
    e^{-mu t})/(mu - r).  Checks C, zero flux, stored, produced = sigma0 l (1 - e^{-rt})/r,
    decayed = initial + produced - stored, to 1e-12 relative."""
    theta, ret, mu, r, s0, ci = 0.3, 2.5, 4e-9, 1e-8, 3e-10, 0.2
    sched = Schedule.depletion(1.0, r)
    col = Column((Layer(0.4, theta, 1e-9, ret, mu, s0, source_schedule=sched),
                  Layer(0.6, theta, 1e-9, ret, mu, s0, source_schedule=sched)),
                 Boundary("sealed"), Boundary("sealed"))
    t = np.array([3e7, 2e8, 1e9])
    ref = laplace_reference_full(col, [0.0, 0.4, 1.0], t, InitialState.uniform([ci, ci]))
    cap, L = theta * ret, 1.0
    want = ci * np.exp(-mu * t) + s0 / cap * (np.exp(-r * t) - np.exp(-mu * t)) / (mu - r)
    assert np.max(np.abs(ref.concentration - want[:, None])) < 1e-12 * want.max()
    stored = cap * L * want
    produced = s0 * L * (1 - np.exp(-r * t)) / r
    decayed = cap * L * ci + produced - stored
    b = ref.budget
    big = produced.max()
    assert np.max(np.abs(ref.total_flux)) < 1e-13 * s0 * L
    assert np.max(np.abs(b["stored"] - stored)) < 1e-12 * big
    assert np.max(np.abs(b["produced"] - produced)) < 1e-12 * big
    assert np.max(np.abs(b["decayed"] - decayed)) < 1e-12 * big
    assert np.max(np.abs(b["initial_stored"] - cap * L * ci)) < 1e-14 * big


def test_reference_budget_closes_with_everything_on():
    """Mass conservation (an identity of the transport equation): stored - initial =
    entered - left - decayed + produced, to 1e-12 of the budget scale, with advection,
    decay, a scheduled layer source, a mass-transfer top following a table, a thin
    layer and a measured profile; budget in/out equal the cumulative masses at the ends."""
    col = Column((Layer(0.3, 0.35, 1e-9, 1.5, 2e-9, 1e-11,
                        source_schedule=Schedule.steps([0.0, 4e7], [1.0, 0.0])),
                  Layer(0.05, 0.5, 3e-11, 8.0, 1e-8),
                  Layer(0.6, 0.3, 6e-10, 1.2)),
                 Boundary("mass-transfer", 0.0, 2e-8,
                          Schedule.table([0.0, 2e7, 6e7], [0.0, 1.0, 0.3])),
                 Boundary("concentration", 0.05), darcy_flux=3e-9)
    init = InitialState.profile([0.0, 0.3, 0.95], [0.1, 0.4, 0.0])
    t = np.array([1e7, 5e7, 3e8])
    ref = laplace_reference_full(col, [0.0, 0.32, col.length], t, init)
    b = ref.budget
    scale = max(np.abs(b[k]).max() for k in ("stored", "entered_top", "left_bottom",
                                               "decayed", "produced"))
    assert np.abs(b["residual"]).max() < 1e-12 * scale
    assert np.array_equal(b["entered_top"], ref.cumulative_mass[:, 0])
    assert np.array_equal(b["left_bottom"], ref.cumulative_mass[:, 2])


def test_reference_step_off_is_a_superposition_of_crank_solutions():
    """Source removed at t1 (a step schedule): by linearity C(t) = C1(t) - C1(t - t1)
    with C1 the Crank (1975) eq. 4.17 solution (from memory; crank_slab_series);
    both the shift-theorem split inversion and the delayed single inversion, 1e-11."""
    col = Column((Layer(0.2, THETA, D, R), Layer(0.3, THETA, D, R)),
                 Boundary("concentration", schedule=Schedule.steps([0.0, 3e7], [1.0, 0.0])),
                 Boundary("sealed"))
    z = np.array([0.0, 0.1, 0.3, 0.5])
    t = np.array([2e7, 3.3e7, 8e7])
    want = crank_slab_series(z, t, 0.5, D / R)
    late = t > 3e7
    want[late] -= crank_slab_series(z, t[late] - 3e7, 0.5, D / R)
    split = laplace_reference_full(col, z, t).concentration
    delay = laplace_reference_full(col, z, t, dps=30, shift="delay").concentration
    assert np.max(np.abs(split - want)) < 1e-11
    assert np.max(np.abs(delay - want)) < 1e-9


def test_reference_talbot_weights_match_mpmath():
    """The once-per-time Talbot weights reproduce mpmath.invertlaplace (fixed Talbot,
    Abate & Valko 2004) on f^(s) = 1/(s + 1) + 1/s^2 (A&S 29.3: e^{-t} + t)."""
    from reference import _invert_all
    f = lambda s: [1 / (s + 1) + 1 / s ** 2]  # noqa: E731
    with mp.workdps(25):
        got = _invert_all(f, 2.5, "talbot")[0]
        lib = mp.invertlaplace(lambda s: f(s)[0], 2.5, method="talbot")
        assert abs(got - lib) < mp.mpf(10) ** -22
        assert abs(got - (mp.exp(-2.5) + 2.5)) < mp.mpf(10) ** -20


def test_reference_polynomial_initial_state_cosine_mode():
    """Sealed slab (two identical layers), initial C = cos(pi z / l) carried as Chebyshev
    pieces (interpolated_state): a single Fourier mode, C = cos(pi z/l)
    e^{-kappa pi^2 t / l^2} (Crank 1975 ch. 4, general initial distribution), 1e-12."""
    col = _split_slab(Boundary("sealed"))
    col = Column(col.layers, Boundary("sealed"), Boundary("sealed"))
    L = col.length
    state = interpolated_state(col, lambda z: np.cos(np.pi * z / L), pieces_per_layer=2)
    z = np.array([0.0, 0.1, 0.2, 0.37, 0.5])
    t = np.array([1e6, 3e7])
    got = laplace_reference_full(col, z, t, state).concentration
    want = np.cos(np.pi * z / L)[None, :] * np.exp(-D / R * np.pi ** 2 * t / L ** 2)[:, None]
    assert np.max(np.abs(got - want)) < 1e-12
