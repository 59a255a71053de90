"""Derived layer properties (transport.model.media) against the published formulas."""
import math

import mpmath
import numpy as np
import pytest

from transport.model import media
from transport.model.column import Layer

mpmath.mp.dps = 30


@pytest.mark.parametrize("theta, n", [(0.35, 0.35), (0.2, 0.4), (0.05, 0.5), (0.45, 0.6)])
def test_millington_quirk_pore_water_form(theta, n):
    """tau = theta^(7/3) / n^2: Millington & Quirk 1961, Trans. Faraday Soc. 57:1200
    (bulk form theta^(10/3)/n^2 divided by theta); reference computed with mpmath at 30 digits."""
    t, p = mpmath.mpf(str(theta)), mpmath.mpf(str(n))
    expected = float(t ** (mpmath.mpf(10) / 3) / p ** 2 / t)
    assert media.millington_quirk_tortuosity(theta, n) == pytest.approx(expected, rel=1e-14)


@pytest.mark.parametrize("n", [0.25, 0.35, 0.5, 0.7])
def test_millington_quirk_saturated(n):
    """Saturated: tau = n^(1/3) (Millington & Quirk 1961), mpmath reference."""
    expected = float(mpmath.cbrt(mpmath.mpf(str(n))))
    assert media.millington_quirk_tortuosity(n) == pytest.approx(expected, rel=1e-14)


def test_millington_quirk_vectorised():
    """Array input gives the element-wise formula (Millington & Quirk 1961)."""
    theta = np.array([0.1, 0.2, 0.3])
    out = media.millington_quirk_tortuosity(theta, 0.4)
    expected = [float(mpmath.mpf(str(x)) ** (mpmath.mpf(7) / 3) / mpmath.mpf("0.4") ** 2)
                for x in theta]
    np.testing.assert_allclose(out, expected, rtol=1e-14)


def test_retardation_freeze_cherry():
    """R = 1 + rho_b Kd / n (Freeze & Cherry 1979, retardation equation).
    Inputs: rho_b = 1700 kg/m3, Kd = 0.5 L/kg = 5e-4 m3/kg, n = 0.35 -> R = 1 + 0.85/0.35."""
    assert media.retardation_factor(1700.0, 0.35, 5e-4) == pytest.approx(1 + 0.85 / 0.35,
                                                                         rel=1e-15)


def test_retardation_no_sorption_is_one():
    """Kd = 0 gives R = 1 exactly (Freeze & Cherry 1979 form)."""
    assert media.retardation_factor(1800.0, 0.3, 0.0) == 1.0


def test_kd_from_koc():
    """Kd = Koc foc (Karickhoff et al. 1979, Water Res. 13:241): TCE Koc 94.3 L/kg (US EPA
    1996, Table K-1), foc 0.002 -> Kd = 0.1886 L/kg = 1.886e-4 m3/kg."""
    assert media.kd_from_koc(94.3e-3, 0.002) == pytest.approx(1.886e-4, rel=1e-14)


def test_decay_rate_from_half_life():
    """mu = ln 2 / t_half (first-order kinetics); mpmath ln 2 at 30 digits."""
    t_half = 5 * 365.25 * 86400.0
    assert media.decay_rate_from_half_life(t_half) == pytest.approx(
        float(mpmath.log(2) / t_half), rel=1e-15)


def test_decay_rate_absent_or_infinite_is_zero():
    assert media.decay_rate_from_half_life(None) == 0.0
    assert media.decay_rate_from_half_life(math.inf) == 0.0


@pytest.mark.parametrize("bad", [0.0, -1.0, math.nan, -math.inf])
def test_decay_rate_rejects_nonpositive(bad):
    with pytest.raises(ValueError):
        media.decay_rate_from_half_life(bad)


def test_effective_diffusivity_with_dispersion():
    """D = D_w tau + alpha_L |v| (Bear 1972): D_w = 1e-9, tau = 0.5, alpha = 0.1 m,
    v = -2e-8 m/s (upward flow, |v| used) -> D = 5e-10 + 2e-9."""
    assert media.effective_diffusivity(1e-9, 0.5, 0.1, -2e-8) == pytest.approx(2.5e-9, rel=1e-15)


def test_peclet_and_time_scales():
    """Pe = |v| L / D; diffusion time R L^2 / D; advection time R L / |v| (definitions)."""
    assert media.peclet_number(1e-8, 2.0, 1e-9) == pytest.approx(20.0, rel=1e-15)
    assert media.diffusion_time(2.0, 1e-9, 3.0) == pytest.approx(1.2e10, rel=1e-15)
    assert media.advection_time(2.0, -1e-8, 3.0) == pytest.approx(6e8, rel=1e-15)
    assert media.advection_time(2.0, 0.0) == math.inf


def _mp(x):
    return mpmath.mpf(repr(float(x)))


def test_derive_layer_against_published_forms():
    """derive_layer against each published form, evaluated with mpmath at 30 digits:
    Kd = Koc foc (Karickhoff et al. 1979), R = 1 + rho_b Kd / theta (Freeze & Cherry 1979,
    eq. 9.14), tau = theta^(7/3) / n^2 (Millington & Quirk 1961), dispersion alpha_L |v|
    with v = q / theta (Bear 1972), mu = ln 2 / t_half, and the layer numbers
    Pe = |v| L / D, R L^2 / D, R L / |v| (their definitions)."""
    q, theta, n, dw, alpha, rho, foc, koc, half, L = (3e-9, 0.25, 0.4, 1e-9, 0.05, 1600.0,
                                                      0.01, 0.1, 1e8, 1.5)
    d = media.derive_layer(thickness=L, porosity=n, water_content=theta, darcy_flux=q,
                           free_water_diffusivity=dw, dispersivity=alpha, bulk_density=rho,
                           organic_carbon_fraction=foc, organic_carbon_partition=koc,
                           half_life=half, name="silt")
    q_, th, n_, dw_, al, rho_, foc_, koc_, half_, L_ = map(
        _mp, (q, theta, n, dw, alpha, rho, foc, koc, half, L))
    kd = koc_ * foc_
    R = 1 + rho_ * kd / th
    tau = th ** (mpmath.mpf(7) / 3) / n_ ** 2
    v = q_ / th
    D = dw_ * tau + al * abs(v)
    expected = {"distribution_coefficient": kd, "retardation_factor": R, "tortuosity": tau,
                "pore_velocity": v, "dispersion": al * abs(v), "pore_diffusivity": dw_ * tau,
                "diffusivity": D, "decay_rate": mpmath.log(2) / half_,
                "peclet_number": abs(v) * L_ / D, "diffusion_time": R * L_ ** 2 / D,
                "advection_time": R * L_ / abs(v)}
    details = d.details()
    for name, value in expected.items():
        assert details[name] == pytest.approx(float(value), rel=1e-14), name
    assert isinstance(d.layer, Layer) and d.layer.name == "silt"
    assert d.layer.water_content == theta and details["porosity"] == n
    assert (d.layer.diffusivity, d.layer.retardation) == (details["diffusivity"],
                                                          details["retardation_factor"])
    assert (d.sorption, d.diffusion) == ("organic_carbon_fraction", "millington-quirk")


def test_derive_layer_retardation_worked_example():
    """Freeze & Cherry 1979 form with rho_b = 1700 kg/m3, Kd = 0.5 L/kg = 5e-4 m3/kg,
    n = 0.35 (saturated): R = 1 + 0.85 / 0.35."""
    d = media.derive_layer(thickness=1.0, porosity=0.35, pore_diffusivity=1e-10,
                           bulk_density=1700.0, distribution_coefficient=5e-4)
    assert d.layer.retardation == pytest.approx(1 + 0.85 / 0.35, rel=1e-15)
    assert d.sorption == "distribution_coefficient"


def test_derive_layer_given_pore_diffusivity_and_retardation():
    """A given pore diffusivity is the molecular part itself (no tortuosity: NaN) and a
    given R is used as is; dispersion alpha_L |v| uses the magnitude of an upward
    velocity (Bear 1972): alpha = 0.1 m, q = -4e-9 m/s, theta = 0.2 -> 2e-9 m2/s."""
    d = media.derive_layer(thickness=2.0, porosity=0.2, darcy_flux=-4e-9,
                           pore_diffusivity=3e-10, dispersivity=0.1,
                           retardation_factor_value=2.5)
    assert math.isnan(d.tortuosity) and d.diffusion == "pore_diffusivity"
    assert d.dispersion == pytest.approx(2e-9, rel=1e-15)
    assert d.layer.diffusivity == pytest.approx(3e-10 + 2e-9, rel=1e-15)
    assert d.layer.retardation == 2.5 and d.sorption == "retardation_factor"
    assert d.distribution_coefficient is None


def test_derive_layer_without_flow_or_sorption():
    """q = 0: no dispersion, Pe = 0 and an infinite advection time; no sorption route:
    R = 1 (Freeze & Cherry 1979 with Kd = 0); no half-life: no decay."""
    d = media.derive_layer(thickness=1.0, porosity=0.3, free_water_diffusivity=1e-9,
                           tortuosity=0.5, dispersivity=0.2)
    assert d.dispersion == 0.0 and d.peclet_number == 0.0
    assert d.advection_time == math.inf
    assert d.layer.retardation == 1.0 and d.sorption == "none"
    assert d.layer.decay_rate == 0.0
    assert d.layer.diffusivity == pytest.approx(5e-10, rel=1e-15)


def test_derive_layer_rejects_two_sorption_routes():
    with pytest.raises(ValueError, match="only one"):
        media.derive_layer(thickness=1.0, porosity=0.3, pore_diffusivity=1e-10,
                           distribution_coefficient=1e-3, retardation_factor_value=2.0,
                           bulk_density=1700.0)


def test_derive_layer_needs_diffusivity():
    with pytest.raises(ValueError, match="diffusivity"):
        media.derive_layer(thickness=1.0, porosity=0.3)
