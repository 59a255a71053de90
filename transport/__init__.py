"""stratiflux: dissolved contaminants through layered soil columns (1-D).

Diffusion, linear sorption, first-order decay, zero-order sources and steady
advection in a stack of homogeneous layers, with SI floats inside and units only at
the edges (``transport.units``, ``transport.scenario``).

The public API, for scripts and notebooks::

    import transport
    sc = transport.load_scenario("scenarios/spill-layered-column.toml")
    sol = transport.solve(sc)                 # one checked Solution, SI units
    m = transport.receptor_metrics(sol, 2.0, 5e-6, sol.times[-1])
    sol.to_dataset()                           # the CF layout of ``stratiflux run``

``Column``, ``Layer``, ``Boundary`` and ``InitialState`` describe a column in SI units
for ``transport.solve(column, times, depths)``. See docs/api.md.

A screening-level model under stated assumptions (see ``transport.caution``);
decisions rest with regulators, local codes and licensed professionals.
"""
from __future__ import annotations

import importlib
from typing import TYPE_CHECKING

__version__ = "0.1.0"

# public name -> module that defines it; imported on first use (PEP 562), so that
# ``import transport`` stays light and the command line starts quickly
_PUBLIC = {
    "load_scenario": "transport.scenario.schema",
    "Scenario": "transport.scenario.schema",
    "ScenarioError": "transport.scenario.reader",
    "solve": "transport.api",
    "Solution": "transport.solvers.result",
    "UnreliableResultError": "transport.solvers.checks",
    "Column": "transport.model.column",
    "Layer": "transport.model.column",
    "Boundary": "transport.model.column",
    "InitialState": "transport.model.column",
    "InputError": "transport.model.column",
    "receptor_metrics": "transport.analysis.metrics",
}

__all__ = ["__version__", *_PUBLIC]

if TYPE_CHECKING:  # pragma: no cover - for static analysis and IDEs only
    from transport.analysis.metrics import receptor_metrics
    from transport.api import solve
    from transport.model.column import Boundary, Column, InitialState, InputError, Layer
    from transport.scenario.reader import ScenarioError
    from transport.scenario.schema import Scenario, load_scenario
    from transport.solvers.checks import UnreliableResultError
    from transport.solvers.result import Solution


def __getattr__(name: str):
    try:
        module = _PUBLIC[name]
    except KeyError:
        raise AttributeError(f"module 'transport' has no attribute {name!r}") from None
    value = getattr(importlib.import_module(module), name)
    globals()[name] = value
    return value


def __dir__():
    return sorted(__all__)
