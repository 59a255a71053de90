"""Finite-volume engine: the third, independent path (method of lines).

``mesh`` (planned, graded meshes) -> ``assembly`` (conservative semi-discretisation) ->
``signals`` (scheduled boundaries and sources, linear time marching) -> ``stepping``
(time integration) -> ``richardson`` (error estimates from three meshes) -> ``engine``
(:func:`solve_fv`, :func:`solve_fv_result`).
"""
from transport.solvers.fv.assembly import System, assemble, build_storage
from transport.solvers.fv.engine import FVAccuracyWarning, solve_fv, solve_fv_result
from transport.solvers.fv.mesh import Mesh, MeshPlan, build_mesh, fixed_plan, plan_mesh
from transport.solvers.fv.stepping import FVIntegrationError

__all__ = ["System", "assemble", "build_storage", "FVAccuracyWarning", "solve_fv",
           "solve_fv_result", "Mesh", "MeshPlan", "build_mesh", "fixed_plan", "plan_mesh",
           "FVIntegrationError"]
