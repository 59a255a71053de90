"""The caution that travels with every user-facing result.

This is the one place where the wording lives. The CLI, the figures, the NetCDF
global and variable ``comment`` attributes and the README all take it from here, so a
reviewer reads the same sentence wherever a number appears.
"""
from __future__ import annotations

__all__ = ["CAUTION", "CAUTION_SHORT", "ASSUMPTIONS"]

#: The modelling assumptions behind every result, in the order a reviewer checks them.
ASSUMPTIONS = (
    "one-dimensional (vertical) transport",
    "instantaneous sorption, linear unless the finite-volume engine is given an isotherm",
    "steady flow within each stage",
    "homogeneous layers",
)

#: Full caution: NetCDF ``comment`` attributes, CLI summaries, documentation.
CAUTION = (
    "CAUTION: stratiflux is a screening-level model under stated assumptions ("
    + "; ".join(ASSUMPTIONS)
    + "). Its results are estimates for those assumptions only and do not establish "
    "that any concentration, exposure or site is safe. Decisions rest with the "
    "regulator, local codes and licensed professionals."
)

#: One-line form for figure footers, where space is short; same content.
CAUTION_SHORT = (
    "Screening-level model (1-D, instantaneous sorption, steady flow per stage, homogeneous "
    "layers). "
    "Results do not establish that any concentration is safe; decisions rest with the "
    "regulator, local codes and licensed professionals."
)
