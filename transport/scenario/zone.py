"""A source zone of finite inventory at one end of the column (``kind = "source-zone"``).

The zone is well mixed; its pore-water concentration starts at ``concentration`` and
falls as mass leaves it into the column (and with water passing through it, and by
decay), :class:`transport.model.column.Boundary`.  Its capacity Gamma (mass per plan area
per unit pore-water concentration) is given either by its ``inventory`` (the mass per
area it holds at the start, dissolved and sorbed) or by its ``thickness``, ``water_content``
and, for a sorbing zone, ``bulk_density`` with ``distribution_coefficient`` or
``organic_carbon_fraction``: Gamma = H (theta_w + rho_b Kd), the mass per bulk volume of
linear equilibrium sorption, theta_w C + rho_b Kd C (Freeze & Cherry 1979, sec. 9.2).  A
soil concentration (``"250 mg/kg"``) is converted to pore water with the same
properties (:func:`transport.scenario.layers.pore_water_from_soil`).
"""
from __future__ import annotations

from transport.model import media
from transport.model.column import Boundary, InputError
from transport.scenario.layers import is_soil_concentration, pore_water_from_soil
from transport.scenario.reader import MISSING, Reader

__all__ = ["ZONE_KEYS", "read_source_zone"]

#: Keys of a ``[top]`` / ``[bottom]`` table of kind "source-zone".
ZONE_KEYS = ("concentration", "inventory", "thickness", "water_content", "bulk_density",
             "distribution_coefficient", "organic_carbon_fraction", "half_life")


def read_source_zone(r: Reader, t: dict, where: str, chem=None) -> Boundary:
    """The source zone of table ``t`` at key path ``where`` as a Boundary (SI).

    ``chem`` (a :class:`transport.scenario.layers.ChemicalSpec`) gives the organic-carbon
    partition coefficient and the half-life the zone takes unless it gives its own
    (``half_life = "none"`` switches decay in the zone off).
    """
    if "concentration" not in t:
        raise r.error(f"{where}.concentration", problem="missing for kind 'source-zone'",
                      fix='add concentration = "120 mg/L" (the zone\'s pore water at the '
                      'start), or a soil concentration such as "250 mg/kg"')
    by_inventory = "inventory" in t
    by_size = "thickness" in t
    if by_inventory == by_size:
        raise r.error(f"{where}.inventory" if by_inventory else f"{where}.thickness",
                      problem=("inventory and thickness are both given" if by_inventory
                               else "the zone's size is missing"),
                      fix='give inventory = "40 g/m^2" (mass per plan area at the start) OR '
                      'thickness = "0.5 m" with water_content (and bulk_density with '
                      'distribution_coefficient for a sorbing zone)')
    if by_inventory:
        extra = [k for k in ("water_content", "bulk_density", "distribution_coefficient",
                             "organic_carbon_fraction") if k in t]
        if extra:
            raise r.error(f"{where}.{extra[0]}", t[extra[0]], "not used with inventory",
                          fix="remove it, or describe the zone by thickness instead of "
                          "inventory")
    soil = is_soil_concentration(t["concentration"])
    kd, rho_b, theta, height = 0.0, None, None, None
    if by_size:
        height = r.quantity(t["thickness"], "length", f"{where}.thickness", low=0,
                            low_open=True)
        if "water_content" not in t:
            raise r.error(f"{where}.water_content", problem="missing",
                          fix='add water_content = 0.3 (volumetric, 0-1)')
        theta = r.quantity(t["water_content"], "dimensionless", f"{where}.water_content",
                           low=0, low_open=True, high=1)
        rho_b = r.optional(t, "bulk_density", "density", where, low=0, low_open=True)
        kd = _zone_kd(r, t, where, chem, rho_b)
    elif soil:
        raise r.error(f"{where}.concentration", t["concentration"], "a soil concentration "
                      "needs the zone's bulk density, water content and sorption to be "
                      "read as pore water", fix="describe the zone by thickness, "
                      "water_content, bulk_density and distribution_coefficient, or give "
                      "the pore-water concentration (mg/L)")
    if soil:
        if rho_b is None:
            raise r.error(f"{where}.bulk_density", problem="missing for a soil "
                          "concentration", fix='add bulk_density = "1.7 g/cm^3"')
        total = r.quantity(t["concentration"], "mass_fraction", f"{where}.concentration",
                           low=0, high=1)
        c0 = pore_water_from_soil(total, rho_b, theta, kd)
    else:
        c0 = r.quantity(t["concentration"], "concentration", f"{where}.concentration", low=0)
    if by_inventory:
        inventory = r.quantity(t["inventory"], "areal_mass", f"{where}.inventory", low=0,
                               low_open=True)
        if not c0 > 0:
            raise r.error(f"{where}.concentration", t["concentration"], "must be > 0 with "
                          "an inventory (the capacity is inventory / concentration)",
                          fix="give the zone's starting concentration")
        capacity = inventory / c0
    else:
        capacity = height * (theta + (rho_b or 0.0) * kd)
    half_life = r.half_life(t, where)
    if half_life is MISSING:
        half_life = getattr(chem, "half_life", None)
    rate = 0.0 if half_life is None else media.decay_rate_from_half_life(half_life)
    try:
        return Boundary("source-zone", c0, capacity=capacity, decay_rate=rate)
    except InputError as exc:
        raise r.error(where, problem=str(exc), fix="correct the zone's values") from None


def _zone_kd(r, t, where, chem, rho_b):
    """Kd (m3 kg-1) of the zone: given, from f_oc and the chemical's K_oc, or 0."""
    given = [k for k in ("distribution_coefficient", "organic_carbon_fraction") if k in t]
    if len(given) > 1:
        raise r.error(f"{where}.organic_carbon_fraction", t["organic_carbon_fraction"],
                      "given together with distribution_coefficient", fix="keep one")
    if not given:
        return 0.0
    if rho_b is None:
        raise r.error(f"{where}.bulk_density", problem=f"missing: {given[0]} needs the "
                      "zone's bulk density", fix='add bulk_density = "1.7 g/cm^3"')
    if given[0] == "distribution_coefficient":
        return r.quantity(t["distribution_coefficient"], "specific_volume",
                          f"{where}.distribution_coefficient", low=0)
    foc = r.quantity(t["organic_carbon_fraction"], "dimensionless",
                     f"{where}.organic_carbon_fraction", low=0, high=1)
    koc = getattr(chem, "organic_carbon_partition", None)
    if koc is None:
        raise r.error(f"{where}.organic_carbon_fraction", t["organic_carbon_fraction"],
                      "the chemical's organic-carbon partition coefficient is not known",
                      fix="name a chemical from the table, give [chemical] "
                      "organic_carbon_partition, or give distribution_coefficient")
    return media.kd_from_koc(koc, foc)
