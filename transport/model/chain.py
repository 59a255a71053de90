"""A straight decay chain: species 1 -> species 2 -> ... in one layered column (SI).

Each species moves through the same layers with the same water flow, with its own
diffusivity, retardation and first-order decay per layer (a
:class:`transport.model.column.Column` per species), and each daughter is produced by
its parent's decay with a yield, the mass of daughter formed per mass of parent
decayed (the ratio of molar masses for a one-to-one transformation, common practice):

    theta R_i dC_i/dt = d/dz(theta D_i dC_i/dz) - q dC_i/dz - theta R_i mu_i C_i
                        + y_i theta R_{i-1} mu_{i-1} C_{i-1} + sigma_i

(decay acts on dissolved and sorbed mass alike, as for one species; the sequential
first-order system of Sun, Petersen & Clement 1999, J. Contam. Hydrol. 35:429, in one
dimension; volume and page from memory).
"""
from __future__ import annotations

import math
from dataclasses import dataclass

from transport.model.column import Column, InputError

__all__ = ["Chain", "molar_yield"]


def molar_yield(parent_molar_mass: float, daughter_molar_mass: float) -> float:
    """Mass of daughter formed per mass of parent decayed, one molecule to one
    molecule: M_daughter / M_parent (common practice)."""
    if not (parent_molar_mass > 0 and daughter_molar_mass > 0):
        raise InputError("molar masses must be > 0")
    return float(daughter_molar_mass) / float(parent_molar_mass)


@dataclass(frozen=True)
class Chain:
    """Species of a straight chain, parent first.

    Parameters
    ----------
    columns : tuple of Column
        One per species, with the species' layer properties and boundaries; the layer
        thicknesses, water contents and the Darcy flux must be the same in all.
    names : tuple of str
        Species names (for messages and outputs).
    yields : tuple of float
        ``yields[i]`` (i >= 1): kg of species i formed per kg of species i - 1 decayed;
        ``yields[0]`` is unused (0).
    """

    columns: tuple
    names: tuple
    yields: tuple

    def __post_init__(self):
        cols = tuple(self.columns)
        object.__setattr__(self, "columns", cols)
        object.__setattr__(self, "names", tuple(str(n) for n in self.names))
        object.__setattr__(self, "yields", tuple(float(y) for y in self.yields))
        if len(cols) < 2:
            raise InputError("a decay chain needs at least two species")
        if not (len(self.names) == len(cols) == len(self.yields)):
            raise InputError("give one name and one yield per species")
        if len(set(self.names)) != len(self.names):
            raise InputError(f"species names must differ, got {self.names}")
        first = cols[0]
        for name, col in zip(self.names[1:], cols[1:]):
            if not isinstance(col, Column):
                raise InputError(f"species {name!r}: expected a Column")
            if len(col.layers) != len(first.layers) or col.darcy_flux != first.darcy_flux:
                raise InputError(f"species {name!r}: the layers and the Darcy flux must be "
                                 "the same for every species of a chain")
            for a, b in zip(first.layers, col.layers):
                if a.thickness != b.thickness or a.water_content != b.water_content:
                    raise InputError(f"species {name!r}, layer {b.name!r}: thickness and "
                                     "water content must equal the parent's")
        for name, y in zip(self.names[1:], self.yields[1:]):
            if not (math.isfinite(y) and y >= 0):
                raise InputError(f"species {name!r}: yield must be a number >= 0, got {y!r}")
        for col, name in zip(cols, self.names):
            if "source-zone" in (col.top.kind, col.bottom.kind):
                raise InputError(f"species {name!r}: a source zone is not available in a "
                                 "decay chain yet; give the source as a boundary value")
