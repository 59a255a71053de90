"""Columns of a site's borings built directly from SI floats.

A site defines each material once. :func:`material_properties` converts a material's
table to SI floats ONCE (through the scenario module's readers, so units, ranges and
messages are those of a scenario file, with key paths ``materials.<name>.<key>``);
:func:`material_layers` turns the properties in force (the file's values, or one Monte
Carlo draw applied by arithmetic on these floats) into one
:class:`~transport.model.column.Layer` per material with :func:`transport.model.media.derive_layer`
(the same formulas, hence the same floats, as a scenario file's layer), and
:func:`boring_column` stacks them with the thicknesses of a boring's log. No text is
parsed per boring or per realization.

The range of every drawn value is checked once for the whole sample matrix
(:func:`check_draws`), with the limits a scenario file puts on the same key.
"""
from __future__ import annotations

import dataclasses
import math

import numpy as np

from transport.model import media
from transport.model.column import Column, InputError
from transport.scenario.reader import DIMENSION_RANGES, KEY_RANGES, ScenarioError

__all__ = ["MATERIAL_DIMENSIONS", "DRAW_LIMITS", "material_properties", "properties_in_force",
           "derive_material", "material_layers", "boring_column", "check_draws"]

#: Numeric material keys and their dimension (``tortuosity`` may also be the text
#: "millington-quirk", ``half_life`` the text "none").
MATERIAL_DIMENSIONS = {
    "porosity": "dimensionless", "water_content": "dimensionless",
    "bulk_density": "density", "organic_carbon_fraction": "dimensionless",
    "distribution_coefficient": "specific_volume", "retardation_factor": "dimensionless",
    "tortuosity": "dimensionless", "pore_diffusivity": "diffusivity",
    "dispersivity": "length", "half_life": "time", "source_rate": "mass_rate_density",
    "partition_to_next": "dimensionless",
}
#: Allowed range of a drawn value: (low, high, low excluded), as a scenario file's key.
DRAW_LIMITS = {
    "porosity": (0.0, 1.0, True), "water_content": (0.0, 1.0, True),
    "bulk_density": (0.0, None, True), "organic_carbon_fraction": (0.0, 1.0, False),
    "distribution_coefficient": (0.0, None, False), "retardation_factor": (0.0, None, True),
    "tortuosity": (0.0, 1.0, True), "pore_diffusivity": (0.0, None, True),
    "dispersivity": (0.0, None, False), "half_life": (0.0, None, True),
    "source_rate": (0.0, None, False), "free_water_diffusivity": (0.0, None, True),
    "organic_carbon_partition": (0.0, None, False), "darcy_flux": (None, None, False),
}
_KWARG = {"retardation_factor": "retardation_factor_value"}  # media.derive_layer names


def material_properties(r, name: str, table: dict) -> dict:
    """SI floats of one material's table (validated already): {key: value}.

    ``half_life`` is present only when the material gives one (None: no decay); else
    the chemical's applies. ``tortuosity`` is a float or "millington-quirk".
    """
    key = f"materials.{name}"
    props = {}
    for k, dim in MATERIAL_DIMENSIONS.items():
        if k not in table:
            continue
        value = table[k]
        if k == "half_life":
            props[k] = r.half_life(table, key)
        elif k == "tortuosity" and isinstance(value, str):
            props[k] = value.strip().lower()
        else:
            props[k] = r.quantity(value, dim, f"{key}.{k}")
    return props


def properties_in_force(site, overrides: dict | None = None) -> tuple:
    """The site's SI values with ``overrides`` applied by arithmetic on floats.

    Parameters
    ----------
    site : transport.site.config.Site
    overrides : dict, optional
        Parameter paths to SI values, e.g. ``{"materials.clay.distribution_coefficient":
        2e-4, "chemical.half_life": 6e7, "flow.darcy_flux": 3e-9}`` (one Monte Carlo draw).

    Returns
    -------
    tuple
        (materials {name: {key: SI value}}, chemical {free_water_diffusivity,
        organic_carbon_partition, half_life}, Darcy flux in m s-1).
    """
    chem = {"free_water_diffusivity": site.chemical.free_water_diffusivity,
            "organic_carbon_partition": site.chemical.organic_carbon_partition,
            "half_life": site.chemical.half_life}
    q = site.darcy_flux
    mats = site.materials
    if overrides:
        mats = {m: dict(p) for m, p in mats.items()}
        for target, value in overrides.items():
            parts = target.split(".")
            if parts[0] == "materials":
                mats[parts[1]][parts[2]] = float(value)
            elif parts[0] == "chemical":
                chem[parts[1]] = float(value)
            else:
                q = float(value)
    return mats, chem, q


def derive_material(site, name: str, props: dict, chem: dict, q: float,
                    thickness: float = 1.0) -> media.DerivedLayer:
    """One material as a layer of ``thickness`` m, by :func:`transport.model.media.derive_layer`.

    Parameters
    ----------
    site : transport.site.config.Site
        For messages (its file).
    name : str
        The material.
    props, chem, q
        The material's SI properties, the chemical's and the Darcy flux in force
        (:func:`properties_in_force`).
    thickness : float
        m.

    Returns
    -------
    transport.model.media.DerivedLayer

    Raises
    ------
    ScenarioError
        Naming the material, when the combination is not valid (e.g. a drawn water
        content above the porosity).
    """
    kwargs = {_KWARG.get(k, k): v for k, v in props.items()}
    kwargs.setdefault("half_life", chem["half_life"])
    try:
        return media.derive_layer(
            thickness=thickness, darcy_flux=q,
            free_water_diffusivity=chem["free_water_diffusivity"],
            organic_carbon_partition=chem["organic_carbon_partition"], name=name, **kwargs)
    except (InputError, ValueError) as exc:
        raise ScenarioError(site.path, f"materials.{name}", problem=str(exc),
                            fix="correct the material's properties") from None


def material_layers(site, overrides: dict | None = None) -> tuple:
    """(Layers of thickness 1 m keyed by material, Darcy flux) for the site's values
    with ``overrides`` ({"materials.clay.distribution_coefficient": SI float, ...}).

    Raises ScenarioError naming the material when the combination is not valid (e.g. a
    drawn water content above the porosity).
    """
    mats, chem, q = properties_in_force(site, overrides)
    layers = {name: derive_material(site, name, props, chem, q).layer
              for name, props in mats.items()}
    return layers, q


def boring_column(site, boring, layers=None, darcy_flux=None) -> Column:
    """The :class:`~transport.model.column.Column` of ``boring`` (layers of its log, top
    first, named by material) from :func:`material_layers` output (default: the
    site's own values)."""
    if layers is None:
        layers, darcy_flux = material_layers(site)
    stack = tuple(_with_thickness(layers[m], b - a) for a, b, m in boring.intervals)
    return Column(stack, site.top, site.bottom, darcy_flux)


def _with_thickness(layer, thickness):
    """``dataclasses.replace(layer, thickness=thickness)`` without validating the
    layer's other properties again (a Monte Carlo run builds one layer per interval,
    realization and boring); a thickness that is not a positive finite float goes
    through ``replace`` and its checks."""
    if not (isinstance(thickness, float) and 0.0 < thickness < math.inf):
        return dataclasses.replace(layer, thickness=thickness)
    new = object.__new__(type(layer))
    new.__dict__.update(layer.__dict__)
    new.__dict__["thickness"] = float(thickness)
    return new


_DRAW_DIMENSIONS = {**MATERIAL_DIMENSIONS, "free_water_diffusivity": "diffusivity",
                    "organic_carbon_partition": "specific_volume", "darcy_flux": "velocity"}


def _unrepresentable(name: str, x: np.ndarray) -> np.ndarray:
    """Draws outside what the model represents (the limits a scenario file's value of
    the same key meets: :data:`transport.scenario.reader.KEY_RANGES`)."""
    tiny, huge, _ = DIMENSION_RANGES[_DRAW_DIMENSIONS[name]]
    low, high, _ = KEY_RANGES.get(name, (None, None, ""))
    a = np.abs(x)
    with np.errstate(invalid="ignore"):
        bad = (a > 0) & (a < max(tiny, low or 0.0))
        bad |= a > min(huge if huge is not None else np.inf, high if high is not None else np.inf)
    return bad


def check_draws(site, samples: np.ndarray):
    """Raise ScenarioError for the first drawn value outside its key's allowed range
    (the limits of a scenario file), naming the parameter and the realization."""
    for j, dist in enumerate(site.distributions):
        name = dist.parameter.rsplit(".", 1)[-1]
        low, high, low_open = DRAW_LIMITS[name]
        x = samples[:, j]
        bad = ~np.isfinite(x)
        if low is not None:
            bad |= (x <= low) if low_open else (x < low)
        if high is not None:
            bad |= x > high
        bad |= _unrepresentable(name, x)
        if dist.parameter == "flow.darcy_flux":
            # an inlet needs water entering at its end (see scenario.check_inlet)
            if site.top.kind == "inlet":
                bad |= ~(x > 0)
            if site.bottom.kind == "inlet":
                bad |= ~(x < 0)
        if bad.any():
            k = int(np.flatnonzero(bad)[0])
            limit = ("" if low is None else f"{'>' if low_open else '>='} {low:g}") + (
                "" if high is None else f"{' and ' if low is not None else ''}<= {high:g}")
            raise ScenarioError(site.path, f"uncertainty.parameters[{j + 1}]",
                                float(x[k]), f"realization {k + 1} draws {dist.parameter} = "
                                f"{x[k]:g} (SI), outside the allowed range {limit or 'nonzero'}"
                                f" ({int(bad.sum())} of {x.size} draws)",
                                fix="bound the distribution (lower/upper) so that draws "
                                "stay valid")

