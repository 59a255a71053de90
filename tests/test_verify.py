"""Closed forms of ``transport.verify.closed_forms`` against independent evaluations, and the
``stratiflux verify`` command.

Independent evaluations: the numpy versions in tests/reference.py (written separately),
the same published formulas evaluated term by term in mpmath at 40 digits, and the
mpmath Laplace-domain reference ``laplace_reference``.  Inputs are stated beside each
check; they are invented test values.
"""
from __future__ import annotations

import mpmath as mp
import numpy as np
import pytest
from click.testing import CliRunner

from reference import crank_slab_series, erfc_semi_infinite, laplace_reference, ogata_banks
from transport.verify import closed_forms as cf
from transport.verify import report as suite
from transport.cli.verify import verify
from transport.model.column import Boundary, Column, Layer

KAPPA, LENGTH = 5e-10, 0.5  # m2/s (D/R), m
Z = np.linspace(0.0, LENGTH, 11)
# kappa t / l^2 from 2e-4 to 1.6: both the image (early) and Fourier (late) branches
TIMES = np.array([1e5, 1e6, 1e7, 1e8, 8e8])


def test_slab_noflux_against_reference_series():
    """Crank (1975) ch. 4, sheet with one face held, sealed base (eq. 4.15 images /
    4.17 Fourier, numbers from memory) vs the Fourier series of tests/reference.py."""
    got = cf.slab_noflux(Z, TIMES, LENGTH, KAPPA, surface=2.0, initial=0.5)
    want = crank_slab_series(Z, TIMES, LENGTH, KAPPA, surface=2.0, initial=0.5)
    assert np.max(np.abs(got - want)) < 1e-14


def test_slab_two_faces_against_reference_series():
    """Crank (1975) ch. 4, both faces held (eq. 4.16, M), top 1, base 0.3, initial 0.5,
    vs tests/reference.py."""
    got = cf.slab_two_faces(Z, TIMES, LENGTH, KAPPA, top=1.0, bottom=0.3, initial=0.5)
    want = crank_slab_series(Z, TIMES, LENGTH, KAPPA, bottom="concentration",
                             bottom_value=0.3, initial=0.5)
    assert np.max(np.abs(got - want)) < 1e-14


def test_half_space_decay_against_reference_and_mpmath():
    """Danckwerts (1951) half-space with decay mu = 2e-9 1/s: vs tests/reference.py and
    vs the formula in mpmath at 40 digits (no overflow limit), including deep points
    where the first term's erfc argument is large."""
    z = np.array([0.0, 0.01, 0.1, 0.3, 1.0, 3.0])
    mu = 2e-9
    got = cf.half_space_decay(z, TIMES, KAPPA, mu, surface=1.0)
    assert np.max(np.abs(got - erfc_semi_infinite(z, TIMES, KAPPA, decay_rate=mu))) < 1e-15
    with mp.workdps(40):
        for i, t in enumerate(TIMES):
            for j, x in enumerate(z):
                a, b = x / (2 * mp.sqrt(KAPPA * t)), mp.sqrt(mu * t)
                k = x * mp.sqrt(mu / mp.mpf(KAPPA))
                want = (mp.exp(-k) * mp.erfc(a - b) + mp.exp(k) * mp.erfc(a + b)) / 2
                assert abs(got[i, j] - want) <= 1e-15 + 1e-13 * want


def _vga_third_mp(x, t, v, d, mu):
    """van Genuchten & Alves (1982) third-type inlet with decay, in mpmath."""
    x, t, v, d, mu = (mp.mpf(a) for a in (x, t, v, d, mu))
    r = 2 * mp.sqrt(d * t)
    if mu == 0:
        return (mp.erfc((x - v * t) / r) / 2 + mp.sqrt(v * v * t / (mp.pi * d))
                * mp.exp(-(x - v * t) ** 2 / (4 * d * t))
                - (1 + v * x / d + v * v * t / d) * mp.exp(v * x / d) * mp.erfc((x + v * t) / r) / 2)
    u = mp.sqrt(v * v + 4 * mu * d)
    return (v / (v + u) * mp.exp((v - u) * x / (2 * d)) * mp.erfc((x - u * t) / r)
            + v / (v - u) * mp.exp((v + u) * x / (2 * d)) * mp.erfc((x + u * t) / r)
            + v * v / (2 * mu * d) * mp.exp(v * x / d - mu * t) * mp.erfc((x + v * t) / r))


@pytest.mark.parametrize("mu", [0.0, 1e-16, 2e-9])
def test_third_type_inlet_against_mpmath(mu):
    """van Genuchten & Alves (1982), third-type inlet, v = 2/3e-8 m/s, D = 2/3e-9 m2/s;
    mu = 1e-16 1/s makes 4 mu D / v^2 ~ 6e-9, where the textbook form cancels badly:
    the erfcx Taylor difference must keep full accuracy.  mpmath at 60 digits."""
    v, d = 2e-8 / 3, 2e-9 / 3
    z = np.array([0.0, 0.05, 0.3, 0.8, 2.0])
    t = np.array([1e6, 1e7, 1e8])
    got = cf.third_type_inlet(z, t, v, d, mu)
    with mp.workdps(60):
        want = np.array([[float(_vga_third_mp(x, tt, v, d, mu)) for x in z] for tt in t])
    assert np.max(np.abs(got - want)) < 1e-14


def test_third_type_inlet_against_laplace_reference():
    """Same inlet on a deep layered column (3 m, free outflow) solved by the mpmath
    Laplace reference: the semi-infinite closed form must agree at z <= 0.6 m while the
    front is far from the base (van Genuchten & Alves 1982)."""
    theta, ret, q, mu = 0.3, 1.5, 3e-9, 2e-9
    col = Column(tuple(Layer(h, theta, 1e-9, ret, mu) for h in (0.4, 0.6, 2.0)),
                 Boundary("inlet", 1.0), Boundary("free-outflow"), darcy_flux=q)
    z, t = np.array([0.0, 0.1, 0.3, 0.6]), np.array([1e7, 5e7])
    got = cf.third_type_inlet(z, t, q / (theta * ret), 1e-9 / ret, mu)
    assert np.max(np.abs(got - laplace_reference(col, z, t))) < 1e-12


def test_first_type_inlet_against_reference_high_peclet():
    """Ogata & Banks (1961) / van Genuchten & Alves (1982) first-type inlet, column
    Peclet number up to 1e5 (exp(v z / D) overflows a double), vs tests/reference.py."""
    z = np.array([0.0, 0.3, 0.5, 1.0, 1.01])
    for v, d, mu in ((1e-5, 1e-10, 0.0), (1e-8, 5e-10, 2e-9)):
        t = np.array([1e5, 3e7])
        got = cf.first_type_inlet(z, t, v, d, mu)
        assert np.all(np.isfinite(got))
        assert np.max(np.abs(got - ogata_banks(z, t, v, d, decay_rate=mu))) < 1e-14


def test_time_lag_and_uptake_against_mpmath_series():
    """Crank (1975) ch. 4: through-flux of a held slab (time lag, eq. 4.24a, M) and
    uptake of a slab with a sealed base (eq. 4.18, M), both Fourier series summed in
    mpmath at 40 digits; capacity theta R = 1.05, l = 0.3 m, kappa = 4/3e-10 m2/s.  The
    early-time image forms must match too (times from 1e-3 to 10 time lags)."""
    l, kap, cap = 0.3, 4e-10 / 3, 1.05
    lag = cf.time_lag(l, kap)
    t = lag * np.array([1e-3, 0.03, 0.3, 1.0, 3.0, 10.0])
    q = cf.time_lag_through(t, l, kap, capacity=cap)
    m = cf.uptake_noflux(t, l, kap, capacity=cap)
    with mp.workdps(40):
        for i, tt in enumerate(t):
            f = kap * tt / l ** 2
            q_ref = cap * l * (f - mp.mpf(1) / 6 - 2 / mp.pi ** 2 * mp.nsum(
                lambda n: (-1) ** n / n ** 2 * mp.exp(-f * n ** 2 * mp.pi ** 2), [1, mp.inf]))
            m_ref = cap * l * (1 - mp.nsum(lambda n: 8 / ((2 * n + 1) ** 2 * mp.pi ** 2)
                                           * mp.exp(-f * (2 * n + 1) ** 2 * mp.pi ** 2 / 4),
                                           [0, mp.inf]))
            assert abs(q[i] - q_ref) <= 1e-15 * cap * l + 1e-12 * abs(q_ref)
            assert abs(m[i] - m_ref) <= 1e-15 * cap * l + 1e-12 * abs(m_ref)
    assert abs(lag - 0.3 ** 2 / (6 * kap)) == 0  # l^2 / (6 kappa), Crank (1975) sec. 4.3


def test_travelling_wave_widths_against_mpmath_quadrature():
    """van der Zee (1990) travelling wave: width = int theta D / |q C - c (theta C +
    rho_b S(C))| dC over (0.1 C0, 0.9 C0), evaluated with mpmath.quad at 30 digits, for
    Langmuir (closed form here) and Freundlich n = 0.6 (scipy QUADPACK here)."""
    q, th, d, rho, c0 = 1e-7, 0.4, 2e-9, 1600.0, 0.01
    cases = [(lambda c: 1e-6 * 1000 * c / (1 + 1000 * c),
              cf.langmuir_front_width(q, th, d, rho, 1e-6, 1000.0, c0)),
             (lambda c: 2e-4 * c ** 0.6, cf.freundlich_front_width(q, th, d, rho, 2e-4, 0.6, c0))]
    with mp.workdps(30):
        for s, got in cases:
            speed = q * c0 / (th * c0 + rho * s(mp.mpf(c0)))
            want = mp.quad(lambda c: th * d / abs(q * c - speed * (th * c + rho * s(c))),
                           [0.1 * c0, 0.9 * c0])
            assert abs(got / want - 1) < 1e-11


def test_verify_quick_cli_report(tmp_path):
    """``stratiflux verify --quick`` (click CliRunner): exit status 0, the report lists
    every case with its source and tolerance, all pass, figures and the caution are
    written, machine and versions are recorded."""
    out = tmp_path / "report"
    result = CliRunner().invoke(verify, ["--quick", "--out", str(out)])
    assert result.exit_code == 0, result.output
    text = (out / "verification.md").read_text()
    names = suite.case_names(quick=True)
    assert len(names) >= 20
    for name in names:
        assert f"| {name} | pass |" in text
        assert f"### {name}: pass" in text
    assert "FAIL" not in text
    assert "CAUTION" in text and "licensed professionals" in text
    assert "numpy" in text and "python" in text
    assert (out / "errors-published.png").stat().st_size > 1000
    assert (out / "errors-cross-engine.png").stat().st_size > 1000
    assert not list(out.glob(".*.tmp"))  # atomic writes leave no temporary files


def test_verify_reports_a_failing_case(tmp_path, monkeypatch):
    """A case above its tolerance is reported as FAIL and the exit status is 1; a case
    that raises is a failure too (common practice: a verification run must not hide
    errors)."""
    bad = [suite.Case("too-far", "deliberately wrong", "none", "test", 1e-3,
                      lambda quick: (1.0, "", ())),
           suite.Case("crashes", "raises", "none", "test", 1e-3,
                      lambda quick: 1 / 0)]
    monkeypatch.setattr(suite, "cases", lambda: bad)
    result = CliRunner().invoke(verify, ["--quick", "--out", str(tmp_path)])
    assert result.exit_code == 1
    text = (tmp_path / "verification.md").read_text()
    assert "| too-far | FAIL |" in text and "| crashes | FAIL |" in text
    assert "ZeroDivisionError" in text


def test_every_demo_scenario_passes_its_verification_case(monkeypatch):
    """The demo scenarios are found only in a source checkout (an installed package has
    none), so CI points the suite at them: every one has its case and passes it within
    the case's tolerance -- modal against finite volumes (Patankar 1980), or, for a
    source zone, which neither engine takes, the zone's mass balance on the Laplace
    engine (conservation of mass)."""
    from pathlib import Path

    from transport.verify import cases as vc

    folder = Path(__file__).resolve().parents[1] / "scenarios"
    monkeypatch.setattr(vc, "scenario_dir", lambda: folder)
    found = {c.name: c for c in vc.cases() if c.name.startswith("scenario-")}
    assert set(found) == {f"scenario-{p.stem}" for p in folder.glob("*.toml")}
    assert found["scenario-spill-finite-source"].engine == "laplace"
    for name, case in found.items():
        error, _, _ = case.run(True)
        assert error <= case.tolerance, (name, error)
