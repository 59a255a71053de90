"""Checks of the independent references (Laplace, closed forms, two-layer eigenvalues)
and of the finite-volume engine against them.

Every check names its outside source.  Inputs are stated beside each check; the layer
data are invented test values (not check values), the check values come from the
published formulas, evaluated here with numpy/scipy/mpmath.
"""
from __future__ import annotations

import mpmath as mp
import numpy as np
import pytest

from reference import (carslaw_jaeger_two_layer_eigenvalues, crank_slab_series,
                       erfc_semi_infinite, laplace_reference, ogata_banks)
from transport.finite_volume import solve_fv
from transport.model import Boundary, Column, InitialState, Layer

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
                                             rtol=1e-10, **kw) - ref)) for n in ns])
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
    got = solve_fv(col, t, z, initial=init, cells_per_layer=80, rtol=1e-10)
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
