"""Derived properties of a porous layer: sorption, tortuosity, dispersion, decay.

Pure functions of SI floats (or numpy arrays). They turn what an engineer measures
or looks up (porosity, bulk density, Koc and organic carbon, half-life, Darcy flux)
into the coefficients of the transport equation solved by stratiflux::

    theta R dC/dt = d/dz(theta D dC/dz) - q dC/dz - theta R mu C + sigma

References
----------
.. [FC79] Freeze, R.A. and Cherry, J.A. (1979). Groundwater. Prentice-Hall.
   Retardation R = 1 + rho_b Kd / n, eq. 9.14 (equation number from memory).
.. [KBS79] Karickhoff, S.W., Brown, D.S. and Scott, T.A. (1979). Sorption of
   hydrophobic pollutants on natural sediments. Water Res. 13:241-248. Kd = Koc foc.
.. [MQ61] Millington, R.J. and Quirk, J.P. (1961). Permeability of porous solids.
   Trans. Faraday Soc. 57:1200-1207. Pore-water tortuosity theta^(7/3) / n^2.
.. [Bear72] Bear, J. (1972). Dynamics of Fluids in Porous Media. Elsevier.
   Mechanical dispersion alpha_L |v|.
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from transport.model.column import Layer

__all__ = [
    "retardation_factor",
    "kd_from_koc",
    "millington_quirk_tortuosity",
    "pore_velocity",
    "effective_diffusivity",
    "decay_rate_from_half_life",
    "peclet_number",
    "diffusion_time",
    "advection_time",
    "derive_layer",
    "DerivedLayer",
]

LN2 = math.log(2.0)


def retardation_factor(bulk_density, porosity, kd):
    """Retardation factor of linear, equilibrium sorption.

    Parameters
    ----------
    bulk_density : float or array
        Dry bulk density rho_b, kg m-3.
    porosity : float or array
        Water-filled porosity theta (equal to the total porosity n when saturated).
    kd : float or array
        Distribution coefficient Kd, m3 kg-1 (1 L/kg = 1e-3 m3/kg).

    Returns
    -------
    float or array
        R = 1 + rho_b Kd / theta (dimensionless).

    Notes
    -----
    Freeze & Cherry (1979) [FC79] write R = 1 + rho_b Kd / n for saturated media;
    with water-filled porosity theta the same form holds in unsaturated media.
    """
    if np.ndim(bulk_density) or np.ndim(porosity) or np.ndim(kd):
        bulk_density, porosity, kd = map(np.asarray, (bulk_density, porosity, kd))
    return 1.0 + bulk_density * kd / porosity


def kd_from_koc(koc, foc):
    """Distribution coefficient from organic carbon: Kd = Koc foc [KBS79].

    Parameters
    ----------
    koc : float or array
        Organic carbon-water partition coefficient, m3 kg-1 of organic carbon.
    foc : float or array
        Mass fraction of organic carbon in the solids (0..1).

    Returns
    -------
    float or array
        Kd, m3 kg-1.
    """
    return koc * foc


def millington_quirk_tortuosity(water_content, porosity=None):
    """Pore-water tortuosity factor of Millington & Quirk (1961) [MQ61].

    Parameters
    ----------
    water_content : float or array
        Volumetric water content theta (water-filled porosity), 0 < theta <= n.
    porosity : float or array, optional
        Total porosity n. Omitted: the medium is saturated, n = theta.

    Returns
    -------
    float or array
        tau = theta^(7/3) / n^2, so that the pore-water diffusion coefficient is
        D_w tau. Saturated (theta = n) this is n^(1/3).

    Notes
    -----
    Millington & Quirk give the bulk effective coefficient D_w theta^(10/3) / n^2
    (flux per total area per gradient of pore-water concentration); dividing by theta
    gives the pore-water form used here. It tends to overpredict diffusion in clays
    (from memory); give a measured diffusivity there.
    """
    theta = np.asarray(water_content, dtype=float)
    n = theta if porosity is None else np.asarray(porosity, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore", over="ignore", under="ignore"):
        tau = theta ** (7.0 / 3.0) / n ** 2  # NaN/inf for degenerate input; callers validate
    return float(tau) if tau.ndim == 0 else tau


def pore_velocity(darcy_flux, water_content):
    """Average linear (pore) velocity v = q / theta, m s-1."""
    return darcy_flux / water_content


def effective_diffusivity(free_water_diffusivity, tortuosity, dispersivity=0.0,
                          pore_velocity=0.0):
    """Pore-water diffusion plus mechanical dispersion.

    Parameters
    ----------
    free_water_diffusivity : float
        D_w, m2 s-1.
    tortuosity : float
        tau, dimensionless (see :func:`millington_quirk_tortuosity`).
    dispersivity : float
        Longitudinal dispersivity alpha_L, m.
    pore_velocity : float
        v = q / theta, m s-1.

    Returns
    -------
    float
        D = D_w tau + alpha_L |v|, m2 s-1 [Bear72].
    """
    return free_water_diffusivity * tortuosity + dispersivity * abs(pore_velocity)


def decay_rate_from_half_life(half_life):
    """First-order rate from a half-life: mu = ln 2 / t_half (s-1).

    ``None`` or an infinite half-life means no decay (mu = 0). A half-life that is
    zero, negative or NaN raises ``ValueError``.
    """
    if half_life is None:
        return 0.0
    half_life = float(half_life)
    if math.isinf(half_life) and half_life > 0:
        return 0.0
    if not half_life > 0:
        raise ValueError(f"half-life must be > 0 s (or infinite for no decay), got {half_life!r}")
    return LN2 / half_life


def peclet_number(pore_velocity, thickness, diffusivity):
    """Layer Peclet number Pe = |v| L / D (dimensionless).

    Pe >> 1: advection dominates across the layer; Pe << 1: diffusion dominates.
    """
    return abs(pore_velocity) * thickness / diffusivity


def diffusion_time(thickness, diffusivity, retardation=1.0):
    """Characteristic diffusion time of a layer, R L^2 / D (s).

    A time scale, not a breakthrough time: a diffusing front crosses a layer in a
    fraction of it (e.g. the time lag of a membrane is L^2 R / (6 D), Crank 1975,
    ch. 4).
    """
    return retardation * thickness * thickness / diffusivity


def advection_time(thickness, pore_velocity, retardation=1.0):
    """Retarded advective travel time across a layer, R L / |v| (s); inf when v = 0."""
    if pore_velocity == 0:
        return math.inf
    return retardation * thickness / abs(pore_velocity)


@dataclass(frozen=True)
class DerivedLayer:
    """A :class:`~transport.model.column.Layer` and the derived numbers behind it (SI).

    Returned by :func:`derive_layer`; :meth:`details` gives the per-layer table of a
    scenario (``Scenario.derived_table``).

    Attributes
    ----------
    layer : Layer
        The layer the engines solve.
    porosity : float
        Total porosity n.
    bulk_density : float or None
        rho_b, kg m-3, as given.
    distribution_coefficient : float or None
        Kd, m3 kg-1 (given, or Koc foc); None when R is given directly or absent.
    tortuosity : float
        tau; NaN when the pore diffusivity was given directly.
    pore_diffusivity : float
        Molecular part D_w tau, m2 s-1.
    dispersion : float
        alpha_L |v|, m2 s-1.
    pore_velocity : float
        v = q / theta, m s-1.
    half_life : float or None
        s; None: no decay.
    sorption : str
        How R was obtained: "none", "retardation_factor", "distribution_coefficient" or
        "organic_carbon_fraction".
    diffusion : str
        How the molecular part was obtained: "pore_diffusivity", "millington-quirk" or
        "tortuosity" (a given factor).
    """

    layer: Layer
    porosity: float
    bulk_density: float | None
    distribution_coefficient: float | None
    tortuosity: float
    pore_diffusivity: float
    dispersion: float
    pore_velocity: float
    half_life: float | None
    sorption: str
    diffusion: str

    @property
    def peclet_number(self) -> float:
        """|v| L / D of the layer (:func:`peclet_number`)."""
        return peclet_number(self.pore_velocity, self.layer.thickness, self.layer.diffusivity)

    @property
    def diffusion_time(self) -> float:
        """R L^2 / D, s (:func:`diffusion_time`)."""
        return diffusion_time(self.layer.thickness, self.layer.diffusivity,
                              self.layer.retardation)

    @property
    def advection_time(self) -> float:
        """R L / |v|, s; inf without flow (:func:`advection_time`)."""
        return advection_time(self.layer.thickness, self.pore_velocity, self.layer.retardation)

    def details(self) -> dict:
        """The derived numbers as a dict (SI floats, None where not given), keyed by
        the spelled-out names of a scenario's derived table: thickness, porosity,
        water_content, bulk_density, distribution_coefficient, retardation_factor,
        tortuosity, pore_diffusivity, dispersion, diffusivity, half_life, decay_rate,
        pore_velocity, peclet_number, diffusion_time, advection_time, source_rate,
        partition_to_next."""
        layer = self.layer
        return {
            "thickness": layer.thickness, "porosity": self.porosity,
            "water_content": layer.water_content, "bulk_density": self.bulk_density,
            "distribution_coefficient": self.distribution_coefficient,
            "retardation_factor": layer.retardation, "tortuosity": self.tortuosity,
            "pore_diffusivity": self.pore_diffusivity, "dispersion": self.dispersion,
            "diffusivity": layer.diffusivity, "half_life": self.half_life,
            "decay_rate": layer.decay_rate, "pore_velocity": self.pore_velocity,
            "peclet_number": self.peclet_number, "diffusion_time": self.diffusion_time,
            "advection_time": self.advection_time, "source_rate": layer.source_rate,
            "partition_to_next": layer.partition_to_next,
        }


def derive_layer(*, thickness, porosity, darcy_flux=0.0, water_content=None,
                 free_water_diffusivity=None, tortuosity="millington-quirk",
                 pore_diffusivity=None, dispersivity=0.0, bulk_density=None,
                 distribution_coefficient=None, organic_carbon_fraction=None,
                 organic_carbon_partition=None, retardation_factor_value=None,
                 half_life=None, source_rate=0.0, partition_to_next=1.0,
                 name="") -> DerivedLayer:
    """A layer from user-facing properties (SI): the one place where R, tau, D and mu
    are derived.

    Parameters
    ----------
    thickness : float
        m.
    porosity : float
        Total porosity n.
    darcy_flux : float
        q, m s-1 (the same in every layer).
    water_content : float, optional
        Water-filled porosity theta <= n; default n (saturated).
    free_water_diffusivity : float, optional
        D_w, m2 s-1; needed unless ``pore_diffusivity`` is given.
    tortuosity : "millington-quirk" or float
        Tortuosity model or factor tau.
    pore_diffusivity : float, optional
        D_w tau given directly (pore-water, molecular part), m2 s-1; overrides
        ``free_water_diffusivity`` and ``tortuosity``.
    dispersivity : float
        alpha_L, m.
    bulk_density : float, optional
        rho_b, kg m-3; needed with a Kd or organic carbon.
    distribution_coefficient, organic_carbon_fraction, organic_carbon_partition, \
retardation_factor_value : float, optional
        Sorption: Kd (m3 kg-1), or foc with Koc (m3 kg-1), or R directly; at most
        one route. None of them: no sorption, R = 1.
    half_life : float, optional
        s; None or inf: no decay.
    source_rate : float
        sigma, kg m-3 s-1 per bulk volume.
    partition_to_next : float
        K at the lower face.
    name : str

    Returns
    -------
    DerivedLayer
        Its ``layer`` has water_content = theta, diffusivity = D_w tau + alpha_L |q/theta|
        [Bear72] with tau of [MQ61] unless given, retardation = 1 + rho_b Kd / theta
        [FC79] with Kd = Koc foc [KBS79] where organic carbon is given, and
        decay_rate = ln 2 / half_life.

    Raises
    ------
    ValueError
        Missing or contradictory inputs (message names the layer);
        :class:`~transport.model.column.InputError` (a ValueError) when the layer is
        not valid.

    Examples
    --------
    >>> d = derive_layer(thickness=1.0, porosity=0.4, darcy_flux=1e-8,
    ...                  free_water_diffusivity=1e-9, dispersivity=0.1,
    ...                  bulk_density=1600.0, distribution_coefficient=1e-4)
    >>> round(d.layer.retardation, 12), round(d.pore_velocity, 20)
    (1.4, 2.5e-08)
    """
    label = f"layer {name!r}" if name else "layer"
    theta = porosity if water_content is None else water_content
    if not (0 < porosity <= 1):
        raise ValueError(f"{label}: porosity must be in (0, 1], got {porosity!r}")
    if not (0 < theta <= porosity):
        raise ValueError(f"{label}: water_content must be in (0, porosity], got {theta!r}")

    if pore_diffusivity is not None:
        molecular, tau, diffusion = pore_diffusivity, math.nan, "pore_diffusivity"
    else:
        if free_water_diffusivity is None:
            raise ValueError(f"{label}: needs a free-water diffusivity (chemical) or a "
                             "pore_diffusivity")
        if isinstance(tortuosity, str):
            if tortuosity != "millington-quirk":
                raise ValueError(f"{label}: unknown tortuosity model {tortuosity!r}; use "
                                 "'millington-quirk' or a number")
            tau, diffusion = millington_quirk_tortuosity(theta, porosity), "millington-quirk"
        else:
            tau, diffusion = float(tortuosity), "tortuosity"
        molecular = free_water_diffusivity * tau
    v = pore_velocity(darcy_flux, theta)
    dispersion = dispersivity * abs(v)

    routes = [x is not None for x in (distribution_coefficient, organic_carbon_fraction,
                                      retardation_factor_value)]
    if sum(routes) > 1:
        raise ValueError(f"{label}: give only one of distribution_coefficient, "
                         "organic_carbon_fraction, retardation_factor")
    kd = None
    if retardation_factor_value is not None:
        retardation, sorption = retardation_factor_value, "retardation_factor"
    elif distribution_coefficient is not None or organic_carbon_fraction is not None:
        if organic_carbon_fraction is not None:
            if organic_carbon_partition is None:
                raise ValueError(f"{label}: organic_carbon_fraction needs the chemical's "
                                 "organic-carbon partition coefficient (Koc)")
            kd = kd_from_koc(organic_carbon_partition, organic_carbon_fraction)
            sorption = "organic_carbon_fraction"
        else:
            kd, sorption = distribution_coefficient, "distribution_coefficient"
        if bulk_density is None:
            raise ValueError(f"{label}: sorption from Kd or organic carbon needs bulk_density")
        retardation = retardation_factor(bulk_density, theta, kd)
    else:
        retardation, sorption = 1.0, "none"

    layer = Layer(thickness=thickness, water_content=theta, diffusivity=molecular + dispersion,
                  retardation=retardation, decay_rate=decay_rate_from_half_life(half_life),
                  source_rate=source_rate, partition_to_next=partition_to_next, name=name)
    return DerivedLayer(layer=layer, porosity=porosity, bulk_density=bulk_density,
                        distribution_coefficient=kd, tortuosity=tau,
                        pore_diffusivity=molecular, dispersion=dispersion, pore_velocity=v,
                        half_life=half_life, sorption=sorption, diffusion=diffusion)
