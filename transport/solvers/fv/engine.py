"""Finite-volume reference engine (method of lines) for the layered column.

The third, independent path of the project (beside the modal and the Laplace
engines): cell-centred finite volumes on a mesh planned from the scales of the problem
(decay and dispersion lengths, the boundary layer of the first output time), face
fluxes in conservative form, stiff time stepping.  Every result carries an error
estimate from three meshes of the same map (Richardson), and the mesh is doubled until
the estimate meets the tolerance, or a warning says it did not.  It is the converged
yardstick of the multilayer tests and the place for nonlinear sorption.

Equation on each layer (SI, z positive down):

    theta R dC/dt = d/dz(theta D dC/dz) - q dC/dz - theta R mu C + sigma,

total flux F = q C - theta D dC/dz (positive downward), continuous at faces; C
continuous or C_below = K C_above (partition, q = 0 only).

References
----------
Patankar, S. V. (1980). *Numerical Heat Transfer and Fluid Flow*. Hemisphere, ch. 4-5
    (harmonic face conductances, exponential and power-law schemes).
Scharfetter, D. L. & Gummel, H. K. (1969). IEEE Trans. Electron Devices 16:64
    (exponentially fitted flux, Bernoulli function form).
Freundlich, H. (1906). Z. Phys. Chem. 57:385 (power-law isotherm S = K_F C^n).
Langmuir, I. (1918). J. Am. Chem. Soc. 40:1361 (S = S_max K_L C / (1 + K_L C)).
Shampine, L. F. & Reichelt, M. W. (1997). SIAM J. Sci. Comput. 18:1 (the NDF/BDF
    integrator behind ``scipy.integrate.solve_ivp(method="BDF")``).
Deuflhard, P. (1985). SIAM Rev. 27:505 (extrapolation of the implicit Euler method).
Richardson, L. F. (1911). Phil. Trans. R. Soc. A 210:307; Roache, P. J. (1998).
    *Verification and Validation in Computational Science and Engineering*, ch. 5
    (error estimates from systematic mesh refinement).
"""
from __future__ import annotations

import warnings

import numpy as np

from transport.model.column import Column, InitialState, InputError, has_source_zone
from transport.solvers.fv.assembly import face_values, initial_at, initial_cells
from transport.solvers.fv.defaults import DEFAULT_TOLERANCE, MAX_CELLS
from transport.solvers.fv.mesh import fixed_plan, plan_mesh
from transport.solvers.fv.richardson import estimate
from transport.solvers.fv.stepping import DEFAULT_RTOL, integrate
from transport.solvers.result import Solution

__all__ = ["solve_fv", "solve_fv_result", "FVAccuracyWarning", "DEFAULT_TOLERANCE",
           "MAX_CELLS"]


class FVAccuracyWarning(UserWarning):
    """The finite-volume error estimate did not reach the tolerance within the cell
    cap, or the mesh sequence is not yet in its asymptotic range (the estimate may then
    not bound the error).  The message gives the reached estimate."""


def _profile(column, res, depths, scheme):
    """C at output depths: piecewise linear through cell centres and face values."""
    times, mesh, cells = res["times"], res["mesh"], res["cells"]
    depths = np.atleast_1d(np.asarray(depths, dtype=float))
    L = column.length
    if depths.size == 0 or np.any(depths < 0) or np.any(depths > L * (1 + 1e-12)):
        raise InputError(f"finite-volume engine: depths must lie in [0, {L}] m")
    above, below = face_values(column, res["system"], cells, scheme, times, res["signals"])
    out = np.empty((times.size, depths.size))
    lay_of = np.clip(np.searchsorted(column.interfaces, depths, side="right") - 1,
                     0, len(column.layers) - 1)
    for i in range(len(column.layers)):
        sel = lay_of == i
        if not np.any(sel):
            continue
        f0, f1 = mesh.first[i], mesh.first[i + 1]
        x = np.concatenate([[column.interfaces[i]], mesh.centres[f0:f1],
                            [column.interfaces[i + 1]]])
        for it in range(times.size):
            y = np.concatenate([[below[it, i]], cells[it, f0:f1], [above[it, i + 1]]])
            out[it, sel] = np.interp(depths[sel], x, y)
    at_zero = times == 0
    if np.any(at_zero):
        out[at_zero] = initial_at(column, depths, res["initial"])
    return out, depths


def _face_fluxes(res, depths):
    """Total flux F (nt, nz) at depths: the discrete face fluxes F = Fmat C + f0 (the
    state before a change at a change time), linear in depth between faces."""
    mesh = res["mesh"]
    faces = (res["system"].Fmat @ res["cells"].T
             + res["signals"].f0(res["times"], left=True).T)  # (n+1, nt)
    return np.vstack([np.interp(depths, mesh.faces, f) for f in faces.T])


def _stored(column, res):
    """Stored mass per area (nt,) and the initial stored mass, kg m-2."""
    vol = res["vol"]
    initial_stored = float(res["store"].mass(initial_cells(column, res["mesh"],
                                                           res["initial"])) @ vol)
    return res["mass"] @ vol, initial_stored


def _fields(column, res, depths, scheme):
    """C, F, cumulative mass (nt, nz) and the budget terms of one run."""
    conc, depths = _profile(column, res, depths, scheme)
    times, mesh, vol = res["times"], res["mesh"], res["vol"]
    n = mesh.centres.size
    cum = res["aux"][:, :n + 1]
    flux = _face_fluxes(res, depths)
    cmass = np.vstack([np.interp(depths, mesh.faces, c) for c in cum])
    stored, initial_stored = _stored(column, res)
    produced = res["signals"].produced(times, vol)
    decayed = res["aux"][:, n + 1]
    budget = {"stored": stored, "initial_stored": np.full(times.size, initial_stored),
              "entered_top": cum[:, 0], "left_bottom": cum[:, n], "decayed": decayed,
              "produced": produced,
              "residual": stored - initial_stored - cum[:, 0] + cum[:, n] + decayed - produced}
    scale = np.maximum(np.max(np.abs(conc), axis=1), np.max(np.abs(res["cells"]), axis=1))
    return dict(concentration=conc, total_flux=flux, cumulative_mass=cmass, budget=budget,
                depths=depths, times=times, scale=scale)


def solve_fv(column: Column, times, depths, *, initial: InitialState | None = None,
             tolerance: float | None = None, cells_per_layer=None, atol: float | None = None,
             scheme: str = "exponential", grading: float = 0.5, isotherm=None) -> Solution:
    """Finite volumes on ONE mesh (no error estimate).

    The raw discretisation, for convergence studies; :func:`solve_fv_result` reports
    the same engine with an error estimate, refined to a tolerance.

    Parameters
    ----------
    column : Column; boundary values and layer sources may follow schedules (the
        integration restarts at each change time; at a change time the state just
        before the change is reported)
    times : array_like (nt,), s, >= 0
    depths : array_like (nz,), m in [0, L]; at a layer face the value just below it
    initial : InitialState, default clean
    cells_per_layer : None (default: the mesh of :func:`plan_mesh`, at the refinement
        :func:`solve_fv_result` reports first), or an int or one int per layer (the
        fixed mesh of :func:`build_mesh`)
    tolerance : relative tolerance of the time integration (the only accuracy setting of
        one mesh), default :data:`transport.solvers.fv.stepping.DEFAULT_RTOL`
    atol : absolute tolerance of the time integration (kg m-3), default ``tolerance``
        times the concentration scale of the problem (boundary and initial values,
        source build-up)
    scheme : "exponential" (Scharfetter-Gummel fitting, default) or "upwind"
    grading : mesh grading toward faces of a fixed mesh, 1 = uniform (see
        :func:`build_mesh`)
    isotherm : None (linear sorption through each layer's retardation factor), one dict
        for every layer, or a sequence with one entry (dict or None) per layer:
        ``{"kind": "freundlich", "coefficient": K_F, "exponent": n, "bulk_density": rho_b}``
        with S = K_F C^n, K_F in (kg/kg)/(kg/m3)^n (Freundlich 1906), or
        ``{"kind": "langmuir", "capacity": S_max, "affinity": K_L, "bulk_density": rho_b}``
        with S = S_max K_L C / (1 + K_L C), S_max kg/kg, K_L m3/kg (Langmuir 1918);
        rho_b in kg m-3.  The isotherm ADDS to the layer's linear storage: the mass per
        bulk volume is theta R C + rho_b S(C), so give R = 1 for a purely nonlinear layer.
        Decay acts on dissolved and sorbed mass alike: -mu (theta R C + rho_b S(C)).

    Returns
    -------
    Solution
        ``engine="finite-volume"``, ``concentration`` C (kg m-3), ``total_flux`` (the
        discrete face fluxes), ``error`` None; the time integrals of the fluxes are not
        carried on one mesh, so ``cumulative_mass`` and the budget terms entered_top,
        left_bottom, decayed and residual are NaN (stored, initial_stored and produced
        are given); :func:`solve_fv_result` carries them all.

    Notes
    -----
    Space: second order for smooth solutions on the graded mesh (centred limit of the
    fitted flux at small cell Peclet number); first order with ``upwind`` when
    advection dominates.  Output values are piecewise-linear in each layer through the
    cell centres and the reconstructed face values.  Time: see :func:`transport.solvers.fv.stepping.integrate`.
    """
    rtol = DEFAULT_RTOL if tolerance is None else tolerance
    if has_source_zone(column):
        raise InputError("the finite-volume engine does not model a source-zone boundary "
                         "(finite inventory) yet; use engine auto or laplace")
    if cells_per_layer is None:
        mesh = plan_mesh(column, times, initial).mesh(column, 2.0)
    else:
        mesh = fixed_plan(column, cells_per_layer, grading).mesh(column)
    res = integrate(column, times, initial, mesh, rtol, atol, scheme, isotherm, augment=False)
    conc, depths = _profile(column, res, depths, scheme)
    times = res["times"]
    stored, initial_stored = _stored(column, res)
    unknown = np.full(times.size, np.nan)
    budget = {"stored": stored, "initial_stored": np.full(times.size, initial_stored),
              "entered_top": unknown, "left_bottom": unknown.copy(),
              "decayed": unknown.copy(), "produced": res["signals"].produced(times, res["vol"]),
              "residual": unknown.copy()}
    return Solution(column=column, times=times, depths=depths, concentration=conc,
                    total_flux=_face_fluxes(res, depths),
                    cumulative_mass=np.full(conc.shape, np.nan), budget=budget,
                    engine="finite-volume",
                    engine_by_time=np.where(times > 0, "finite-volume", "initial").astype(object),
                    diagnostics={"cells": mesh.centres.size})


def solve_fv_result(column: Column, times, depths, *, initial: InitialState | None = None,
                    tolerance: float | None = None, cells_per_layer=None,
                    time_tolerance: float = DEFAULT_RTOL, atol: float | None = None,
                    scheme: str = "exponential", grading: float = 0.5, isotherm=None,
                    max_cells: int = MAX_CELLS, refine: bool = True) -> Solution:
    """Finite-volume solution with fluxes, cumulative mass, budget and error estimates.

    Same parameters as :func:`solve_fv` (``atol``, ``scheme``, ``grading``,
    ``isotherm``, ``cells_per_layer``), and

    tolerance : relative accuracy of C wanted at each output time (of the largest |C| in
        the column then), default :data:`DEFAULT_TOLERANCE` (1e-3); the mesh is doubled
        until the estimate meets it, or the finest mesh would exceed ``max_cells`` (then
        :class:`FVAccuracyWarning` with the reached estimate)
    time_tolerance : relative tolerance of the time integration on the finest mesh
    max_cells : cap on the cells of the finest mesh
    refine : False: one refinement, no loop (warns only where unresolved; ``tolerance``
        is then not used)

    The run solves on three meshes of the same map (cells x1/2, x1, x2 of the plan of
    :func:`plan_mesh` or of the fixed mesh of ``cells_per_layer``; time tolerance
    16, 4 and 1 times ``time_tolerance``), reports the finest, and estimates its error from
    the differences (:func:`transport.solvers.fv.richardson.richardson`).  Returns a
    :class:`transport.solvers.result.Solution` with ``engine="finite-volume"``,

    * ``total_flux`` F (kg m-2 s-1): the discrete face fluxes F = Fmat C + f0,
      interpolated linearly in depth between faces;
    * ``cumulative_mass`` (kg m-2): the time integral of the face fluxes, carried as extra
      ODE states, same depth interpolation;
    * ``budget``: stored (dissolved + sorbed, sum V m), initial_stored, entered_top,
      left_bottom, decayed (an extra ODE state), produced, residual = stored - initial -
      entered + left + decayed - produced (closes to rounding for every mesh);
    * ``error`` the absolute estimates (nt,) of "concentration", "total_flux",
      "cumulative_mass" and "budget" (max over depths; over the budget terms stored,
      entered_top, left_bottom, decayed), ``error_estimate`` that of C (kg m-3);
    * ``diagnostics``: "cells" on the reported mesh, "observed_order" (nt,) of C from the
      last three meshes, "resolved" (nt,) False where the mesh sequence is not in its
      asymptotic range;
    * ``concentration_at(depth, times)``: a run at those times on the reported mesh.
    """
    rtol = time_tolerance
    if tolerance is None:
        tolerance = DEFAULT_TOLERANCE
    if not (np.isfinite(tolerance) and tolerance > 0):
        raise InputError(f"finite-volume tolerance must be > 0, got {tolerance!r}")
    if cells_per_layer is None:
        plan, factors = plan_mesh(column, times, initial), [0.5, 1.0, 2.0]
    else:
        plan, factors = fixed_plan(column, cells_per_layer, grading), [0.5, 1.0, 2.0]
        if min(plan.counts) < 4:
            factors = [1.0, 2.0, 4.0]

    def run(factor, tol):
        res = integrate(column, times, initial, plan.mesh(column, factor), tol, atol, scheme,
                         isotherm, augment=True)
        return _fields(column, res, depths, scheme)
    rtols = [16 * rtol, 4 * rtol, rtol]
    levels = [run(f, r) for f, r in zip(factors, rtols)]
    while True:
        err, ok, order = estimate(levels, rtols[-1])
        fine = levels[-1]
        if not refine:
            bad = ~ok
            break
        bad = (err["concentration"] > tolerance * fine["scale"]) | ~ok
        if not bad.any() or plan.total(2 * factors[-1]) > max_cells:
            break
        factors.append(2 * factors[-1])
        rtols.append(max(rtols[-1] / 4, 1e-13))
        levels = levels[1:] + [run(factors[-1], rtols[-1])]
    if bad.any():
        rel = err["concentration"] / np.maximum(fine["scale"], 1e-300)
        i = int(np.argmax(np.where(bad, rel, -np.inf)))
        what = ("the mesh sequence is not yet in its asymptotic range (observed order "
                f"{order[i]:.2g}); the estimate may not bound the error" if not ok[i] else
                f"the tolerance {tolerance:g} was not met within {max_cells} cells")
        warnings.warn(f"finite-volume engine at t = {fine['times'][i]:.6g} s: estimated error "
                      f"of C {err['concentration'][i]:.3g} kg/m3 ({rel[i]:.3g} of the "
                      f"concentration scale) on {plan.total(factors[-1])} cells; {what}",
                      FVAccuracyWarning, stacklevel=2)
    mesh = plan.mesh(column, factors[-1])
    rtol_fine = rtols[-1]

    def evaluator(depth, t):
        t = np.atleast_1d(np.asarray(t, dtype=float))
        uniq, inv = np.unique(t, return_inverse=True)
        res = integrate(column, uniq, initial, mesh, rtol_fine, atol, scheme, isotherm,
                         augment=False)
        return _profile(column, res, [depth], scheme)[0][:, 0][inv]
    t_arr = fine["times"]
    return Solution(column=column, times=t_arr, depths=fine["depths"],
                    concentration=fine["concentration"], total_flux=fine["total_flux"],
                    cumulative_mass=fine["cumulative_mass"], budget=fine["budget"],
                    engine="finite-volume",
                    engine_by_time=np.where(t_arr > 0, "finite-volume", "initial").astype(object),
                    error=err, error_estimate=err["concentration"], evaluator=evaluator,
                    diagnostics={"observed_order": order, "cells": mesh.centres.size,
                                 "resolved": ok})
