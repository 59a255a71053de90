"""stratiflux: dissolved contaminants through layered soil columns (1-D).

Diffusion, linear sorption, first-order decay, zero-order sources and steady
advection in a stack of homogeneous layers, with SI floats inside and units only at
the edges (``transport.units``, ``transport.scenario.schema``).

A screening-level model under stated assumptions (see ``transport.caution``);
decisions rest with regulators, local codes and licensed professionals.
"""

__version__ = "0.1.0"

__all__ = ["__version__"]
