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


def test_derive_layer_matches_formulas():
    """derive_layer combines the published forms: R (Freeze & Cherry 1979), Kd = Koc foc,
    Millington & Quirk 1961 tau, Bear 1972 dispersion, mu = ln2/t_half."""
    q, theta, n = 3e-9, 0.25, 0.4
    layer = media.derive_layer(thickness=1.5, porosity=n, water_content=theta, darcy_flux=q,
                               free_water_diffusivity=1e-9, dispersivity=0.05,
                               bulk_density=1600.0, organic_carbon_fraction=0.01,
                               organic_carbon_partition=0.1, half_life=1e8, name="silt")
    assert isinstance(layer, Layer)
    tau = theta ** (7 / 3) / n ** 2
    assert layer.water_content == theta
    assert layer.diffusivity == pytest.approx(1e-9 * tau + 0.05 * q / theta, rel=1e-14)
    assert layer.retardation == pytest.approx(1 + 1600.0 * 1e-3 / theta, rel=1e-14)
    assert layer.decay_rate == pytest.approx(math.log(2) / 1e8, rel=1e-15)


def test_derive_layer_rejects_two_sorption_routes():
    with pytest.raises(ValueError, match="only one"):
        media.derive_layer(thickness=1.0, porosity=0.3, pore_diffusivity=1e-10,
                           distribution_coefficient=1e-3, retardation_factor_value=2.0,
                           bulk_density=1700.0)


def test_derive_layer_needs_diffusivity():
    with pytest.raises(ValueError, match="diffusivity"):
        media.derive_layer(thickness=1.0, porosity=0.3)
