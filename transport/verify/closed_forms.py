"""Published closed-form solutions, in double precision, for verification.

Each function is the textbook formula for a homogeneous medium, evaluated with numpy and
``scipy.special`` so that nothing overflows (scaled complementary error function erfcx
where an exponential multiplies an erfc) and series are summed to double precision
(image series at early times, Fourier series at late times).  They serve
``stratiflux verify`` and the tests; they are not the engines.

Conventions: z positive down from the surface where the boundary value is applied;
``kappa`` = D / R and ``velocity`` = q / (theta R) are the retarded diffusivity and
velocity of  dC/dt = kappa C'' - v C' - mu C  (the layer equation of
:mod:`transport.model.column` divided by theta R; mu acts on both phases).

References
----------
Crank, J. (1975). *The Mathematics of Diffusion*, 2nd ed., Oxford, ch. 4 (plane sheet;
    equation numbers quoted from memory: 4.15-4.18 sheet, 4.24a time lag).
Danckwerts, P. V. (1951). Trans. Faraday Soc. 47:1014 (half-space with first-order
    reaction).
Ogata, A. & Banks, R. B. (1961). USGS Prof. Paper 411-A (advection-dispersion, fixed inlet).
van Genuchten, M. Th. & Alves, W. J. (1982). USDA Tech. Bull. 1661 (first- and
    third-type inlets with first-order decay; their decay constant is R times ours).
van der Zee, S. E. A. T. M. (1990). Water Resour. Res. 26:2563 (travelling waves for
    nonlinear equilibrium sorption).
"""
from __future__ import annotations

import math

import numpy as np
from scipy import integrate
from scipy.special import erfc, erfcx

__all__ = ["slab_noflux", "slab_two_faces", "half_space_decay", "first_type_inlet",
           "third_type_inlet", "time_lag_through", "uptake_noflux", "time_lag",
           "langmuir_front_width", "freundlich_front_width", "front_speed"]

_EPS = 1e-17  # series truncation: terms below this relative size are dropped
_SQPI = math.sqrt(math.pi)


def _grid(depths, times, name):
    z = np.atleast_1d(np.asarray(depths, dtype=float))[None, :]
    t = np.atleast_1d(np.asarray(times, dtype=float))[:, None]
    if np.any(t <= 0):
        raise ValueError(f"{name}: times must be > 0 s")
    return z, t


def _images(z, t, length, kappa, sign):
    """sum_{n>=0} s^n [erfc((2nl + z)/(2 sqrt(kt))) + sign erfc((2(n+1)l - z)/(2 sqrt(kt)))]
    with s = -1 when sign = +1 (no-flux far face) and s = +1 when sign = -1 (held far face)."""
    root = 2 * np.sqrt(kappa * t)
    n_terms = int(math.ceil(6.5 * float(np.max(root)) / (2 * length))) + 2
    out = np.zeros(np.broadcast(z, t).shape)
    for n in range(n_terms):
        s = (-1.0) ** n if sign > 0 else 1.0
        out += s * (erfc((2 * n * length + z) / root)
                    + sign * erfc((2 * (n + 1) * length - z) / root))
    return out


def _fourier_terms(rate, t):
    return int(math.ceil(math.sqrt(-math.log(_EPS) / (rate * float(np.min(t)))))) + 2


def slab_noflux(depths, times, length, kappa, surface=1.0, initial=0.0):
    """Slab 0 <= z <= l, C = ``surface`` at z = 0, no flux at z = l, uniform initial C_i.

    (C - C_i)/(C_s - C_i) = 1 - 4/pi sum (-1)^n/(2n+1) exp(-kappa (2n+1)^2 pi^2 t/(4 l^2))
    cos((2n+1) pi (l - z)/(2l))   [Crank 1975, eq. 4.17 (M)], or at early times
    (kappa t < l^2) the image form sum (-1)^n [erfc((2nl + z)/2 sqrt(kt)) +
    erfc((2(n+1)l - z)/2 sqrt(kt))]   [Crank 1975, eq. 4.15 (M)].
    """
    z, t = _grid(depths, times, "slab_noflux")
    early = (kappa * t[:, 0] < length ** 2)
    out = np.empty((t.size, z.size))
    if early.any():
        out[early] = _images(z, t[early], length, kappa, +1)
    if (~early).any():
        tl = t[~early]
        rate = kappa * math.pi ** 2 / (4 * length ** 2)
        m = 2 * np.arange(_fourier_terms(rate, tl))[:, None, None] + 1
        terms = ((-1.0) ** ((m - 1) // 2) / m * np.exp(-rate * m ** 2 * tl[None])
                 * np.cos(m * math.pi * (length - z[None]) / (2 * length)))
        out[~early] = 1 - 4 / math.pi * terms.sum(axis=0)
    return initial + (surface - initial) * out


def slab_two_faces(depths, times, length, kappa, top=1.0, bottom=0.0, initial=0.0):
    """Slab 0 <= z <= l with C = ``top`` at z = 0, C = ``bottom`` at z = l, uniform C_i.

    Superposition of unit responses u(z) to each face and the decay of the initial state:
    C = C_i + (top - C_i) u(z) + (bottom - C_i) u(l - z),
    u = z-complement series 1 - z/l - 2/pi sum sin(n pi z/l)/n exp(-kappa n^2 pi^2 t/l^2)
    [Crank 1975, eq. 4.16/4.17 (M)], or at early times the image series
    u = sum_{n>=0} [erfc((2nl + z)/2 sqrt(kt)) - erfc((2(n+1)l - z)/2 sqrt(kt))].
    """
    z, t = _grid(depths, times, "slab_two_faces")

    def unit(x):
        early = kappa * t[:, 0] < length ** 2
        out = np.empty((t.size, x.size))
        if early.any():
            out[early] = _images(x, t[early], length, kappa, -1)
        if (~early).any():
            tl = t[~early]
            rate = kappa * math.pi ** 2 / length ** 2
            n = np.arange(1, _fourier_terms(rate, tl) + 1)[:, None, None]
            terms = np.sin(n * math.pi * x[None] / length) / n * np.exp(-rate * n ** 2 * tl[None])
            out[~early] = 1 - x / length - 2 / math.pi * terms.sum(axis=0)
        return out

    return initial + (top - initial) * unit(z) + (bottom - initial) * unit(length - z)


def half_space_decay(depths, times, kappa, decay_rate=0.0, surface=1.0):
    """Clean half-space, C = ``surface`` at z = 0, first-order decay mu (Danckwerts 1951):

    C/C_s = 1/2 e^{-z sqrt(mu/kappa)} erfc(z/(2 sqrt(kappa t)) - sqrt(mu t))
          + 1/2 e^{+z sqrt(mu/kappa)} erfc(z/(2 sqrt(kappa t)) + sqrt(mu t)).
    A term whose erfc argument y is >= 0 is written erfcx(y) exp(-z^2/(4 kappa t) - mu t).
    """
    z, t = _grid(depths, times, "half_space_decay")
    x = z / (2 * np.sqrt(kappa * t))
    rt = np.sqrt(decay_rate * t)
    gauss = np.exp(-x * x - decay_rate * t)
    y1, y2 = x - rt, x + rt
    with np.errstate(over="ignore", invalid="ignore"):
        t1 = np.where(y1 >= 0, erfcx(np.abs(y1)) * gauss,
                      np.exp(-np.sqrt(decay_rate / kappa) * z) * erfc(y1))
    return 0.5 * surface * (t1 + erfcx(y2) * gauss)


def _first_term(z, t, v, u, d, du=None):
    """e^{(v-u) z/(2d)} erfc((z - u t)/(2 sqrt(d t))) without overflow; du = u - v when
    known more accurately than the difference."""
    du = (u - v) if du is None else du
    y = (z - u * t) / (2 * np.sqrt(d * t))
    gauss = np.exp(-((z - v * t) ** 2) / (4 * d * t) - du * (u + v) * t / (4 * d))
    with np.errstate(over="ignore", invalid="ignore"):
        return np.where(y >= 0, erfcx(np.abs(y)) * gauss, np.exp(-du * z / (2 * d)) * erfc(y))


def first_type_inlet(depths, times, velocity, dispersion, decay_rate=0.0, surface=1.0):
    """Semi-infinite clean column, C = ``surface`` held at z = 0 (first-type inlet).

    C/C_s = 1/2 e^{(v-u)z/2D} erfc((z - ut)/2 sqrt(Dt)) + 1/2 e^{(v+u)z/2D}
    erfc((z + ut)/2 sqrt(Dt)),  u = sqrt(v^2 + 4 mu D)  [Ogata & Banks 1961 (mu = 0);
    van Genuchten & Alves 1982, first-type inlet with decay].  Second term:
    erfcx(y2) exp(-(z - vt)^2/(4Dt) - mu t) (the exponent identity removes the overflow).
    """
    z, t = _grid(depths, times, "first_type_inlet")
    v, d, mu = float(velocity), float(dispersion), float(decay_rate)
    u = math.sqrt(v * v + 4 * mu * d)
    du = 4 * mu * d / (v + u) if v + u > 0 else u - v  # u - v without cancellation
    gauss = np.exp(-((z - v * t) ** 2) / (4 * d * t) - mu * t)
    y2 = (z + u * t) / (2 * np.sqrt(d * t))
    return 0.5 * surface * (_first_term(z, t, v, u, d, du) + erfcx(y2) * gauss)


_TAYLOR_ORDER = 14
_TAYLOR_MAX_STEP = 0.1  # truncation h^15/15! f^(15) < 1e-17 relative below this step


def _erfcx_difference(y2, h):
    """erfcx(y2 - h) - erfcx(y2) without cancellation for small h: Taylor series to order
    14 with f^(k+1) = 2k f^(k-1) + 2y f^(k) (f = erfcx, f' = 2y f - 2/sqrt(pi)); relative
    accuracy about eps max(1, y^2) from the first derivative.  Direct difference for
    |h| >= 0.1, where no significant cancellation occurs."""
    f_prev, f = erfcx(y2), 2 * y2 * erfcx(y2) - 2 / _SQPI
    total = np.zeros_like(f)
    term = np.ones_like(f)
    for k in range(1, _TAYLOR_ORDER + 1):
        term = term * (-h) / k
        total = total + term * f
        f_prev, f = f, 2 * k * f_prev + 2 * y2 * f
    return np.where(np.abs(h) < _TAYLOR_MAX_STEP, total, erfcx(y2 - h) - erfcx(y2))


def third_type_inlet(depths, times, velocity, dispersion, decay_rate=0.0, surface=1.0):
    """Semi-infinite clean column with a flux-type inlet v C - D C' = v C_in at z = 0.

    van Genuchten & Alves (1982), third-type inlet with decay (M for the layout):
    C/C_in = v/(v+u) e^{(v-u)z/2D} erfc((z-ut)/2 sqrt(Dt))
           + v/(v-u) e^{(v+u)z/2D} erfc((z+ut)/2 sqrt(Dt))
           + v^2/(2 mu D) e^{vz/D - mu t} erfc((z+vt)/2 sqrt(Dt)),
    and for mu = 0 (Lindstrom et al. 1967 form) 1/2 erfc((z-vt)/2 sqrt(Dt)) +
    sqrt(v^2 t/(pi D)) e^{-(z-vt)^2/4Dt} - 1/2 (1 + vz/D + v^2 t/D) e^{vz/D} erfc((z+vt)/2 sqrt(Dt)).
    The last two terms share the factor G = exp(-(z-vt)^2/4Dt - mu t) times erfcx; with
    v - u = -4 mu D/(v + u) they combine into
    G [v^2/(2 mu D) (erfcx(y3) - erfcx(y2)) - v/(v+u) erfcx(y2)], free of cancellation.
    """
    z, t = _grid(depths, times, "third_type_inlet")
    v, d, mu = float(velocity), float(dispersion), float(decay_rate)
    if v <= 0:
        raise ValueError("third_type_inlet: velocity must be > 0")
    root = 2 * np.sqrt(d * t)
    gauss = np.exp(-((z - v * t) ** 2) / (4 * d * t) - mu * t)
    y3 = (z + v * t) / root
    if mu == 0:
        return surface * (0.5 * erfc((z - v * t) / root) + np.sqrt(v * v * t / (math.pi * d))
                          * gauss - 0.5 * (1 + v * z / d + v * v * t / d) * gauss * erfcx(y3))
    u = math.sqrt(v * v + 4 * mu * d)
    du = 4 * mu * d / (v + u)  # u - v without cancellation
    h = du * t / root  # y2 - y3
    y2 = y3 + h
    tail = gauss * (v * v / (2 * mu * d) * _erfcx_difference(y2, h) - v / (v + u) * erfcx(y2))
    return surface * (v / (v + u) * _first_term(z, t, v, u, d, du) + tail)


def _ierfc(y):
    """First repeated integral of erfc, ierfc(y) = e^{-y^2}/sqrt(pi) - y erfc(y), written
    with erfcx so that large y does not underflow early (Abramowitz & Stegun 1964,
    sec. 7.2)."""
    return np.exp(-y * y) * (1 / _SQPI - y * erfcx(y))


def time_lag_through(times, length, kappa, capacity=1.0, surface=1.0):
    """Mass per area through the far face of a clean slab, C = ``surface`` at z = 0,
    C = 0 at z = l (Crank 1975, eq. 4.24a (M)):

    Q = capacity C_s l [kappa t/l^2 - 1/6 - 2/pi^2 sum (-1)^n/n^2 exp(-kappa n^2 pi^2 t/l^2)]

    (capacity = theta R, the storage per unit pore-water concentration).  At early times
    (kappa t < l^2) the image form Q = 4 capacity C_s sqrt(kappa t) sum ierfc((2n+1) l /
    (2 sqrt(kappa t))), ierfc(y) = e^{-y^2} (1/sqrt(pi) - y erfcx(y)).  Lag l^2/(6 kappa).
    """
    t = np.atleast_1d(np.asarray(times, dtype=float))
    if np.any(t <= 0):
        raise ValueError("time_lag_through: times must be > 0 s")
    out = np.empty(t.size)
    early = kappa * t < length ** 2
    if early.any():
        te = t[early][None, :]
        n = np.arange(6)[:, None]
        y = (2 * n + 1) * length / (2 * np.sqrt(kappa * te))
        ierfc = _ierfc(y)
        out[early] = 4 * np.sqrt(kappa * te[0]) * ierfc.sum(axis=0)
    if (~early).any():
        tl = t[~early][None, :]
        rate = kappa * math.pi ** 2 / length ** 2
        n = np.arange(1, _fourier_terms(rate, tl) + 1)[:, None]
        series = ((-1.0) ** n / n ** 2 * np.exp(-rate * n ** 2 * tl)).sum(axis=0)
        out[~early] = length * (kappa * tl[0] / length ** 2 - 1 / 6 - 2 / math.pi ** 2 * series)
    return capacity * surface * out


def time_lag(length, kappa):
    """Time lag l^2 / (6 kappa) of the through-flux (Crank 1975, sec. 4.3.2 (M))."""
    return length ** 2 / (6 * kappa)


def uptake_noflux(times, length, kappa, capacity=1.0, surface=1.0):
    """Mass per area taken up by a clean slab with C = ``surface`` at z = 0 and no flux at
    z = l (half of a sheet of thickness 2l, Crank 1975, eq. 4.18 (M)):

    M_t = M_inf [1 - sum 8/((2n+1)^2 pi^2) exp(-kappa (2n+1)^2 pi^2 t / (4 l^2))],
    M_inf = capacity C_s l; early times (kappa t < l^2): M_t/M_inf =
    2 sqrt(kappa t/l^2) [1/sqrt(pi) + 2 sum_{n>=1} (-1)^n ierfc(n l/sqrt(kappa t))].
    """
    t = np.atleast_1d(np.asarray(times, dtype=float))
    if np.any(t <= 0):
        raise ValueError("uptake_noflux: times must be > 0 s")
    out = np.empty(t.size)
    early = kappa * t < length ** 2
    if early.any():
        te = t[early][None, :]
        n = np.arange(1, 8)[:, None]
        y = n * length / np.sqrt(kappa * te)
        ierfc = _ierfc(y)
        out[early] = 2 * np.sqrt(kappa * te[0] / length ** 2) * (
            1 / _SQPI + 2 * ((-1.0) ** n * ierfc).sum(axis=0))
    if (~early).any():
        tl = t[~early][None, :]
        rate = kappa * math.pi ** 2 / (4 * length ** 2)
        m = 2 * np.arange(_fourier_terms(rate, tl))[:, None] + 1
        out[~early] = 1 - (8 / (m ** 2 * math.pi ** 2) * np.exp(-rate * m ** 2 * tl)).sum(axis=0)
    return capacity * surface * length * out


def front_speed(darcy_flux, porosity, bulk_density, inlet, sorbed_at_inlet):
    """Speed of a self-sharpening front into clean soil: q C0 / (theta C0 + rho_b S(C0))
    (mass balance across the front; van der Zee 1990)."""
    return darcy_flux * inlet / (porosity * inlet + bulk_density * sorbed_at_inlet)


def langmuir_front_width(darcy_flux, porosity, dispersion, bulk_density, capacity,
                         affinity, inlet, low=0.1, high=0.9):
    """Distance between C = high C0 and C = low C0 in the Langmuir travelling wave.

    Travelling-wave reduction (van der Zee 1990): with xi = z - c t and C(+inf) = 0,
    theta D dC/dxi = q C - c (theta C + rho_b S(C)) = alpha K C (C - C0)/(1 + K C),
    alpha = q - c theta.  Partial fractions give in closed form
    xi(low) - xi(high) = theta D / (alpha K C0) [ln(high/low) + (1 + K C0)
    ln((1 - low)/(1 - high))]  (= theta D (2 + K C0) ln 9 / (alpha K C0) for 10-90 %).
    """
    K, C0 = affinity, inlet
    s0 = capacity * K * C0 / (1 + K * C0)
    c = front_speed(darcy_flux, porosity, bulk_density, C0, s0)
    alpha = darcy_flux - c * porosity
    return porosity * dispersion / (alpha * K * C0) * (
        math.log(high / low) + (1 + K * C0) * math.log((1 - low) / (1 - high)))


def freundlich_front_width(darcy_flux, porosity, dispersion, bulk_density, coefficient,
                           exponent, inlet, low=0.1, high=0.9):
    """Freundlich (n < 1) travelling wave: xi(low) - xi(high) = int theta D / |g(C)| dC
    over (low C0, high C0), g(C) = (q - c theta) C - c rho_b K_F C^n (van der Zee 1990);
    the integrand is smooth there and integrated by adaptive Gauss-Kronrod (QUADPACK)."""
    if not 0 < exponent < 1:
        raise ValueError("freundlich_front_width: a travelling wave needs 0 < exponent < 1")
    C0 = inlet
    c = front_speed(darcy_flux, porosity, bulk_density, C0, coefficient * C0 ** exponent)
    alpha = darcy_flux - c * porosity

    def integrand(x):
        return porosity * dispersion / (c * bulk_density * coefficient * x ** exponent - alpha * x)

    val, err = integrate.quad(integrand, low * C0, high * C0, epsabs=0, epsrel=1e-12)
    if not err < 1e-9 * abs(val):
        raise RuntimeError(f"freundlich_front_width: quadrature error {err:g} too large")
    return val
