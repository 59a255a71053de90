"""Finite-volume engine: the third, independent path (method of lines).

``mesh`` (planned, graded meshes) -> ``assembly`` (conservative semi-discretisation) ->
``signals`` (scheduled boundaries and sources, linear time marching) -> ``stepping``
(time integration) -> ``richardson`` (error estimates from three meshes) -> ``engine``
(:func:`solve_fv`, :func:`solve_fv_result`).

The names below are loaded on first use (PEP 562), so that naming a submodule such as
``transport.solvers.fv.defaults`` does not load the engine and ``scipy.integrate``.
"""
from __future__ import annotations

import importlib
from typing import TYPE_CHECKING

#: public name -> submodule that defines it
_PUBLIC = {
    "System": "assembly", "assemble": "assembly", "build_storage": "assembly",
    "FVAccuracyWarning": "engine", "solve_fv": "engine", "solve_fv_result": "engine",
    "Mesh": "mesh", "MeshPlan": "mesh", "build_mesh": "mesh", "fixed_plan": "mesh",
    "plan_mesh": "mesh", "FVIntegrationError": "stepping",
}

__all__ = list(_PUBLIC)

if TYPE_CHECKING:  # pragma: no cover - for static analysis and IDEs only
    from transport.solvers.fv.assembly import System, assemble, build_storage
    from transport.solvers.fv.engine import FVAccuracyWarning, solve_fv, solve_fv_result
    from transport.solvers.fv.mesh import Mesh, MeshPlan, build_mesh, fixed_plan, plan_mesh
    from transport.solvers.fv.stepping import FVIntegrationError


def __getattr__(name: str):
    try:
        module = _PUBLIC[name]
    except KeyError:
        raise AttributeError(f"module 'transport.solvers.fv' has no attribute {name!r}") \
            from None
    value = getattr(importlib.import_module(f"transport.solvers.fv.{module}"), name)
    globals()[name] = value
    return value


def __dir__():
    return sorted(__all__)
