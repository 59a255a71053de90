"""Scenario files: the ``[chemical]`` table and the ``[[layers]]`` tables.

The readers here only read and validate values (units to SI floats, ranges, one clear
:class:`~transport.scenario.reader.ScenarioError` per problem); every derived property
of a layer (retardation, tortuosity, dispersion, decay, Peclet number and time scales)
comes from :func:`transport.model.media.derive_layer`, the one place they are computed.
"""
from __future__ import annotations

from dataclasses import dataclass, field

from transport.model import chemicals
from transport.model import media
from transport.model.column import InputError, Layer
from transport.scenario.reader import MISSING, Reader, range_error
from transport.units import UnitError, to_si

__all__ = ["ChemicalSpec", "read_chemical", "read_layer", "layer_detail", "CHEMICAL_KEYS",
           "is_soil_concentration", "pore_water_from_soil", "read_concentration",
           "SOIL_CONVERSION_SOURCE", "LAYER_KEYS", "MAX_LAYER_DIFFUSIVITY", "MAX_RETARDATION"]

CHEMICAL_KEYS = ("name", "free_water_diffusivity", "organic_carbon_partition", "half_life")
LAYER_KEYS = ("name", "thickness", "porosity", "water_content", "bulk_density",
              "organic_carbon_fraction", "distribution_coefficient", "retardation_factor",
              "tortuosity", "pore_diffusivity", "dispersivity", "half_life", "source_rate",
              "partition_to_next", "initial_concentration")
SORPTION_KEYS = ("organic_carbon_fraction", "distribution_coefficient", "retardation_factor")
#: Largest layer diffusivity D = D_w tau + alpha |v| the engines are asked to handle
#: (m2 s-1); dispersion alone reaches it only at absurd velocities.
MAX_LAYER_DIFFUSIVITY = 1.0
#: Largest retardation factor a Kd or organic carbon may give (common practice).
MAX_RETARDATION = 1e8

#: Where the soil-to-pore-water partitioning equation comes from (cited from memory).
SOIL_CONVERSION_SOURCE = ("C_T = C_w (theta_w + Kd rho_b) / rho_b: US EPA 1996, Soil Screening "
                          "Guidance: Technical Background Document, EPA/540/R-95/128, eq. 22 "
                          "(from memory), without its air term (no Henry constant is used)")

_SORPTION_SOURCES = {"none": "none given: R = 1",
                     "retardation_factor": "retardation_factor from scenario file",
                     "distribution_coefficient": "distribution_coefficient from scenario file"}
_DIFFUSION_SOURCES = {"pore_diffusivity": "pore_diffusivity from scenario file",
                      "millington-quirk": "Millington & Quirk 1961 tortuosity",
                      "tortuosity": "tortuosity factor from scenario file"}


@dataclass(frozen=True)
class ChemicalSpec:
    """Chemical properties in force (SI) and where each came from."""

    name: str | None
    free_water_diffusivity: float | None
    organic_carbon_partition: float | None
    half_life: float | None  # s; None: no decay unless a layer gives one
    sources: dict = field(default_factory=dict)
    table_entry: chemicals.Chemical | None = None


def read_chemical(r: Reader, data) -> ChemicalSpec:
    """The ``[chemical]`` table: a name looked up in the property table, and values
    given in the file (which override the table's).

    Parameters
    ----------
    r : Reader
    data : dict
        The parsed file (its ``chemical`` table is read; absent: nothing known).

    Returns
    -------
    ChemicalSpec
        SI values (None where unknown) and the provenance text of each.
    """
    table = r.table(data.get("chemical"), "chemical")
    r.keys(table, CHEMICAL_KEYS, "chemical")
    name = r.text(table, "name", "chemical")
    entry, sources = None, {}
    if name is not None:
        try:
            entry = chemicals.lookup(name)
        except chemicals.ChemicalError as exc:
            raise r.error("chemical.name", name, str(exc),
                          fix="correct the name or give the properties directly") from None
    dw = r.optional(table, "free_water_diffusivity", "diffusivity", "chemical", low=0, low_open=True)
    if dw is not None:
        sources["free_water_diffusivity"] = "scenario file"
    elif entry is not None:
        dw, sources["free_water_diffusivity"] = (entry.free_water_diffusivity,
                                                 entry.diffusivity_source)
    koc = r.optional(table, "organic_carbon_partition", "specific_volume", "chemical", low=0)
    if koc is not None:
        sources["organic_carbon_partition"] = "scenario file"
    elif entry is not None:
        koc, sources["organic_carbon_partition"] = entry.organic_carbon_partition, entry.koc_source
    half_life = r.half_life(table, "chemical")
    half_life = None if half_life is MISSING else half_life
    sources["half_life"] = "scenario file" if "half_life" in table else "not given: no decay"
    return ChemicalSpec(entry.name if entry else None, dw, koc, half_life, sources, entry)


def layer_detail(derived: media.DerivedLayer, top: float, chem: ChemicalSpec) -> dict:
    """One row of a scenario's derived table (``Scenario.derived_table``).

    Parameters
    ----------
    derived : transport.model.media.DerivedLayer
        The layer and its derived numbers.
    top : float
        Depth of its top, m.
    chem : ChemicalSpec
        The chemical, for the provenance of Koc and D_w.

    Returns
    -------
    dict
        name, top, bottom, the numbers of :meth:`DerivedLayer.details` (SI), and the
        provenance texts sorption_source and diffusion_source.
    """
    layer = derived.layer
    if derived.sorption == "organic_carbon_fraction":
        sorption = "Kd = Koc foc, Koc: " + chem.sources.get("organic_carbon_partition", "")
    else:
        sorption = _SORPTION_SOURCES[derived.sorption]
    diffusion = _DIFFUSION_SOURCES[derived.diffusion]
    if derived.diffusion != "pore_diffusivity":
        diffusion += "; D_w: " + chem.sources.get("free_water_diffusivity", "")
    return {"name": layer.name, "top": top, "bottom": top + layer.thickness,
            **derived.details(), "sorption_source": sorption, "diffusion_source": diffusion}


def read_layer(r: Reader, raw, i, chem: ChemicalSpec, q: float, top: float, last: bool,
               key: str | None = None):
    """One ``[[layers]]`` table: its values read and validated, then derived by
    :func:`transport.model.media.derive_layer`.

    Parameters
    ----------
    r : Reader
    raw : dict
        The layer table as written.
    i : int or str
        Its number (from 1, top first) or label, for messages and the default name.
    chem : ChemicalSpec
        The chemical (D_w, Koc and half-life unless the layer gives its own).
    q : float
        Darcy flux, m s-1.
    top : float
        Depth of the layer's top, m.
    last : bool
        Whether it is the bottom layer (which has no partition to a next layer).
    key : str, optional
        Key path of the table; default ``layers[i]``.

    Returns
    -------
    tuple
        (:class:`~transport.model.column.Layer`, its row of the derived table
        (:func:`layer_detail`), its ``initial_concentration`` in kg m-3 or None).
    """
    key = key or f"layers[{i}]"
    t = r.table(raw, key, required=True)
    r.keys(t, LAYER_KEYS, key)
    name = r.text(t, "name", key, default=f"layer {i}")
    if "thickness" not in t or "porosity" not in t:
        missing = "thickness" if "thickness" not in t else "porosity"
        raise r.error(f"{key}.{missing}", problem="missing", fix=f"add {missing} to layer {i}")
    thickness = r.quantity(t["thickness"], "length", f"{key}.thickness", low=0, low_open=True)
    n = r.quantity(t["porosity"], "dimensionless", f"{key}.porosity", low=0, high=1,
                   low_open=True)
    theta = r.optional(t, "water_content", "dimensionless", key, default=n, low=0, high=n,
                       low_open=True)
    rho_b = r.optional(t, "bulk_density", "density", key, low=0, low_open=True)
    sorption = _read_sorption(r, t, key, chem, rho_b)
    diffusion = _read_diffusion(r, t, key, chem)
    alpha = r.optional(t, "dispersivity", "length", key, default=0.0, low=0)
    half_life = r.half_life(t, key)
    half_life = chem.half_life if half_life is MISSING else half_life
    source = r.optional(t, "source_rate", "mass_rate_density", key, default=0.0)
    if source < 0:
        raise r.error(f"{key}.source_rate", t["source_rate"], "a negative zero-order source "
                      "is a sink that keeps removing mass where none is left (the stored "
                      "mass and the concentration turn negative)", allowed=">= 0",
                      fix="model a loss by first-order decay (half_life) instead")
    partition = r.optional(t, "partition_to_next", "dimensionless", key, default=1.0, low=0,
                           low_open=True)
    if last and partition != 1.0:
        raise r.error(f"{key}.partition_to_next", t["partition_to_next"], "the last layer has "
                      "no layer below", fix="remove it, or model the outside with the bottom "
                      "boundary")
    if partition != 1.0 and q != 0:
        raise r.error(f"{key}.partition_to_next", t["partition_to_next"],
                      f"a partition jump with nonzero Darcy flux ({q} m/s) is not physical in "
                      "this 1-D model", fix="set flow.darcy_flux to 0 or partition_to_next to 1")
    try:
        derived = media.derive_layer(
            thickness=thickness, porosity=n, water_content=theta, darcy_flux=q,
            bulk_density=rho_b, dispersivity=alpha, half_life=half_life, source_rate=source,
            partition_to_next=partition, name=name,
            organic_carbon_partition=chem.organic_carbon_partition, **sorption, **diffusion)
    except (InputError, ValueError) as exc:
        raise r.error(key, problem=str(exc), fix="correct the layer's properties") from None
    _check_derived(r, t, key, derived)
    detail = layer_detail(derived, top, chem)
    initial = None
    if "initial_concentration" in t:
        initial = read_concentration(r, t["initial_concentration"],
                                     f"{key}.initial_concentration", detail, key)
    return derived.layer, detail, initial


def is_soil_concentration(value) -> bool:
    """Whether ``value`` is a soil concentration: text whose units are a mass over a
    mass (``"2.5 mg/kg"``, ``"40 ug/kg"``, ``"0.1 g/kg"``), per mass of dry soil.
    ``ppm``/``ppb`` are not (they are read as pore-water concentrations only)."""
    if not isinstance(value, str):
        return False
    try:
        to_si(value, "mass_fraction")
    except UnitError:
        return False
    return True


def pore_water_from_soil(total, bulk_density, water_content, distribution_coefficient):
    """The pore-water concentration in equilibrium with a total soil concentration.

    Two-phase (water and sorbed) linear partitioning of a non-volatile solute:
    ``C_T = C_w (theta_w / rho_b + Kd)``, so ``C_w = C_T rho_b / (theta_w + Kd rho_b)``
    (:data:`SOIL_CONVERSION_SOURCE`; the equation's air term ``H' theta_a / rho_b`` is
    left out: the chemical data here hold no Henry constant and the model has no gas
    phase).  Its defining property: the mass per bulk volume
    ``theta_w C_w + rho_b Kd C_w`` equals ``rho_b C_T``.

    Parameters
    ----------
    total : float
        C_T, mass of chemical per mass of dry soil (kg/kg).
    bulk_density : float
        rho_b, dry bulk density, kg m-3.
    water_content : float
        theta_w, volumetric water content.
    distribution_coefficient : float
        Kd, m3 kg-1.

    Returns
    -------
    float
        C_w, kg m-3.

    Examples
    --------
    >>> pore_water_from_soil(1e-6, 1600.0, 0.3, 0.0)  # 1 mg/kg, no sorption
    0.005333333333333333
    """
    return total * bulk_density / (water_content + distribution_coefficient * bulk_density)


def read_concentration(r: Reader, value, where: str, detail: dict, layer_key: str) -> float:
    """A concentration of a layer as pore water (kg m-3): a pore-water value as given
    (``"120 mg/L"``), or a soil concentration (``"25 mg/kg"``, :func:`is_soil_concentration`)
    converted with the layer's bulk density, water content and Kd
    (:func:`pore_water_from_soil`).

    Parameters
    ----------
    r : Reader
    value : str
        As written.
    where : str
        Key path of the value, for messages.
    detail : dict
        The layer's row of the derived table (:func:`layer_detail`).
    layer_key : str
        Key path of the layer (``layers[2]``), for the missing-bulk-density message.

    Returns
    -------
    float
        The pore-water concentration, kg m-3.
    """
    if not is_soil_concentration(value):
        return r.quantity(value, "concentration", where, low=0)
    total = r.quantity(value, "mass_fraction", where, low=0, high=1)
    rho_b = detail.get("bulk_density")
    if rho_b is None:
        raise r.error(where, value, f"a soil concentration (per mass of dry soil) needs the "
                      f"bulk density of {layer_key} ({detail.get('name')!r}) to be converted to "
                      "pore water, and it has none",
                      fix=f'add bulk_density to {layer_key}, e.g. "1.7 g/cm^3", or give the '
                      'pore-water concentration, e.g. "120 mg/L"')
    theta = detail["water_content"]
    kd = detail.get("distribution_coefficient")
    if kd is None:  # sorption given as R (or none): R = 1 + rho_b Kd / theta_w
        kd = (detail["retardation_factor"] - 1.0) * theta / rho_b
    c_w = pore_water_from_soil(total, rho_b, theta, kd)
    bad = range_error(where, "concentration", c_w)
    if bad is not None:
        raise r.error(where, value, f"gives a pore-water concentration of {c_w:.3g} kg/m^3, "
                      "outside what the model represents", allowed=bad[0],
                      fix="check the value, its units and the layer's bulk_density, "
                      "water_content and sorption")
    return c_w


def _read_sorption(r: Reader, t, key: str, chem: ChemicalSpec, rho_b) -> dict:
    """The sorption route of a layer as keyword arguments of ``derive_layer``."""
    routes = [k for k in SORPTION_KEYS if k in t]
    if len(routes) > 1:
        raise r.error(f"{key}.{routes[1]}", t[routes[1]], f"given together with {routes[0]}",
                      fix="keep only one way of giving sorption")
    if not routes:
        return {}
    if routes == ["retardation_factor"]:
        return {"retardation_factor_value": r.quantity(
            t["retardation_factor"], "dimensionless", f"{key}.retardation_factor", low=0,
            low_open=True)}
    if routes[0] == "organic_carbon_fraction":
        foc = r.quantity(t["organic_carbon_fraction"], "dimensionless",
                         f"{key}.organic_carbon_fraction", low=0, high=1)
        if chem.organic_carbon_partition is None:
            why = (f"{chem.name} has no Koc ({chem.sources.get('organic_carbon_partition')})"
                   if chem.table_entry else "the chemical has no Koc")
            raise r.error(f"{key}.organic_carbon_fraction", t["organic_carbon_fraction"],
                          why, fix="give distribution_coefficient, or "
                          "chemical.organic_carbon_partition")
        route = {"organic_carbon_fraction": foc}
    else:
        route = {"distribution_coefficient": r.quantity(
            t["distribution_coefficient"], "specific_volume",
            f"{key}.distribution_coefficient", low=0)}
    if rho_b is None:
        raise r.error(f"{key}.bulk_density", problem=f"missing, needed with {routes[0]}",
                      fix='add bulk_density, e.g. "1.7 g/cm^3"')
    return route


def _read_diffusion(r: Reader, t, key: str, chem: ChemicalSpec) -> dict:
    """The molecular diffusion of a layer as keyword arguments of ``derive_layer``."""
    if "pore_diffusivity" in t:
        if "tortuosity" in t:
            raise r.error(f"{key}.tortuosity", t["tortuosity"], "given together with "
                          "pore_diffusivity", fix="keep one: pore_diffusivity already "
                          "includes the tortuosity")
        return {"pore_diffusivity": r.quantity(t["pore_diffusivity"], "diffusivity",
                                               f"{key}.pore_diffusivity", low=0, low_open=True)}
    tort = t.get("tortuosity", "millington-quirk")
    if isinstance(tort, str) and tort.strip().lower() == "millington-quirk":
        tau = "millington-quirk"
    elif isinstance(tort, str):
        raise r.error(f"{key}.tortuosity", tort, "unknown tortuosity model",
                      allowed='"millington-quirk" or a number in (0, 1]',
                      fix='write tortuosity = "millington-quirk" or e.g. 0.5')
    else:
        tau = r.quantity(tort, "dimensionless", f"{key}.tortuosity", low=0, high=1,
                         low_open=True)
    if chem.free_water_diffusivity is None:
        raise r.error(f"{key}.pore_diffusivity", problem="no diffusivity for this layer",
                      fix="give chemical.name or chemical.free_water_diffusivity, or "
                      "pore_diffusivity in this layer")
    return {"tortuosity": tau, "free_water_diffusivity": chem.free_water_diffusivity}


def _check_derived(r: Reader, t, key: str, derived: media.DerivedLayer):
    """Refuse a layer whose derived retardation or diffusivity the model cannot represent."""
    layer: Layer = derived.layer
    route = next((k for k in SORPTION_KEYS if k in t), None)
    if route is not None and route != "retardation_factor" and \
            layer.retardation > MAX_RETARDATION:
        raise r.error(f"{key}.{route}", t[route], f"gives a retardation factor of "
                      f"{layer.retardation:.3g}, outside what the model represents",
                      allowed="retardation factors up to 1e8 (common practice)",
                      fix="check the value and its units (and bulk_density)")
    if layer.diffusivity > MAX_LAYER_DIFFUSIVITY:
        v = derived.pore_velocity
        raise r.error(f"{key}.dispersivity", t.get("dispersivity"), f"dispersion alpha |v| = "
                      f"{derived.dispersion:.3g} m^2/s (pore velocity {abs(v):.3g} m/s), outside "
                      "what the model represents",
                      allowed=f"D up to {MAX_LAYER_DIFFUSIVITY:g} m^2/s",
                      fix="check dispersivity, water_content and flow.darcy_flux")
