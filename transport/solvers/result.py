"""The one result type of every engine: :class:`Solution`.

The modal series (:func:`transport.solvers.modal.series.solve`), the Laplace engine
(:func:`transport.solvers.laplace.solve_laplace`), the finite-volume engine
(:func:`transport.solvers.fv.engine.solve_fv`, :func:`~transport.solvers.fv.engine.solve_fv_result`),
the checked choice between engines (:func:`transport.solvers.engines.solve_column`) and the
staged runs (:func:`transport.solvers.timeline.solve_timeline`) all return it, filled as far
as the engine can: a bare engine leaves ``reliable`` and ``tolerance`` unset, an engine
without modes has ``n_modes = 0`` and no eigenvalues.
"""
from __future__ import annotations

import functools
from dataclasses import dataclass, field

import numpy as np

from transport.model.column import Column

__all__ = ["Solution", "checked_arithmetic"]


def checked_arithmetic(solve):
    """Run ``solve`` with numpy's floating-point warnings off (overflow, underflow,
    invalid, divide).  For the checked entry points only (solve_column, the staged and
    chain runs, a site's columns): there an overflow is an expected, handled event (an
    exponentially small mode's shot, an exponential far out on a contour), and every
    returned number has passed the finiteness, bounds and cross-engine checks, or was
    refused.  Without this a user saw numpy's "Warning: overflow encountered in
    multiply", which says nothing about the results."""
    @functools.wraps(solve)
    def run(*args, **kwargs):
        with np.errstate(over="ignore", under="ignore", invalid="ignore", divide="ignore"):
            return solve(*args, **kwargs)
    return run


@dataclass(frozen=True)
class Solution:
    """Fields of one column on a (time, depth) grid, SI units.

    Attributes
    ----------
    column : Column
        The column solved (the first stage's column for a staged run).
    times : ndarray (nt,)
        Output times, s.
    depths : ndarray (nz,)
        Output depths, m (below the original top for a staged run).
    concentration : ndarray (nt, nz)
        Pore-water concentration C, kg m-3.
    total_flux : ndarray (nt, nz)
        Total (advective + dispersive) flux F, positive downward, kg m-2 s-1.
    cumulative_mass : ndarray (nt, nz)
        Mass per area that crossed each depth downward during (0, t), kg m-2 (NaN
        where the engine run did not integrate it: the single-mesh finite-volume run).
    budget : dict
        Mass budget per area (kg m-2) per time: "stored", "initial_stored",
        "entered_top", "left_bottom", "decayed", "produced" (and "removed" for staged
        runs), and "residual".
    engine : str
        What produced the result: "modal", "laplace", "finite-volume", or the engines
        that served a checked run joined by "+" ("none" when every time was refused).
    engine_by_time : ndarray (nt,) of str, optional
        The engine that served each output time ("initial" at t = 0, "" where refused).
    error : dict, optional
        Quantity ("concentration", "total_flux", "cumulative_mass", "budget") -> (nt,)
        absolute error bounds (largest over depths / budget terms); None for an engine
        that gives no bound (the modal series alone, a single finite-volume mesh).
    error_estimate : ndarray (nt,), optional
        ``error["concentration"]``, kg m-3, where an error dict is given.
    reliable : ndarray (nt,) of bool, optional
        False where no engine could vouch for a time (checked runs only; the values
        there are NaN).
    tolerance : float, optional
        The relative tolerance a checked run was asked for.
    scale : dict, optional
        Scale of each quantity the tolerance refers to (checked runs only).
    n_modes : int
        Modes of the modal series that serves the result (0 when none).
    eigenvalues : ndarray
        Eigenvalues of that series, 1/s (empty when none).
    timeline : Timeline, optional
        The stages of a staged run.
    diagnostics : dict
        Engine-specific details, e.g. for the finite-volume engine "cells" (on the
        reported mesh), "observed_order" (nt,) and "resolved" (nt,) of its mesh
        sequence.
    series, evaluator, mass_at
        Continuous evaluators (not compared): the modal series (``ModalSeries`` or a
        staged ``TimelineSeries``), C(depth, times) from the engine that serves those
        times, and the vouched cumulative mass (depth, t) -> (value, bound).
    bounds : Bounds, optional
        The physical bounds of C (:func:`transport.solvers.checks.concentration_bounds`)
        the concentrations of a checked run were moved onto where they lay outside by
        no more than their error bound (None: unbounded, or not a checked run).
    """

    column: Column
    times: np.ndarray
    depths: np.ndarray
    concentration: np.ndarray
    total_flux: np.ndarray
    cumulative_mass: np.ndarray
    budget: dict
    engine: str
    engine_by_time: np.ndarray = field(default=None, repr=False, compare=False)
    error: dict = field(default=None, repr=False, compare=False)
    error_estimate: np.ndarray = field(default=None, repr=False, compare=False)
    reliable: np.ndarray = field(default=None, repr=False, compare=False)
    tolerance: float = None
    scale: dict = field(default=None, repr=False, compare=False)
    n_modes: int = 0
    eigenvalues: np.ndarray = field(default_factory=lambda: np.empty(0), repr=False,
                                    compare=False)
    timeline: object = field(default=None, repr=False, compare=False)
    diagnostics: dict = field(default_factory=dict, repr=False, compare=False)
    series: object = field(default=None, repr=False, compare=False)
    evaluator: object = field(default=None, repr=False, compare=False)
    mass_at: object = field(default=None, repr=False, compare=False)
    bounds: object = field(default=None, repr=False, compare=False)

    def concentration_at(self, depth, times):
        """C (kg m-3) at one depth for any times (s), continuous in time.

        Served by the evaluator of the engine that was vouched for at those times, else
        by the modal series.

        Parameters
        ----------
        depth : float
            Depth, m.
        times : array_like
            Times, s.

        Returns
        -------
        ndarray (times.size,)
        """
        if self.evaluator is not None:
            return self.evaluator(float(depth), times)
        if self.series is None:
            raise AttributeError(f"this {self.engine} result holds only its output grid; "
                                 "solve again at the times wanted")
        return self.series.concentration_at(depth, times)

    def cumulative_mass_at(self, depth: float, t: float):
        """Vouched cumulative mass (kg m-2) through ``depth`` during (0, t), and its bound.

        The modal value where it agrees with the Laplace engine within the tolerance,
        else the Laplace value with its own bound.  Only checked runs
        (:func:`transport.solvers.engines.solve_column`,
        :func:`transport.solvers.timeline.solve_timeline`) carry it.

        Returns
        -------
        (float, float)
            Value and absolute error bound.
        """
        if self.mass_at is None:
            raise AttributeError(f"this {self.engine} result carries no vouched cumulative "
                                 "mass at other depths and times; use solve_column or "
                                 "solve_timeline")
        lap_v, lap_e = self.mass_at(float(depth), float(t))
        if self.series is not None:
            try:
                m = float(self.series.cumulative_mass(np.array([float(depth)]),
                                                      np.array([float(t)]))[0, 0])
            except (AttributeError, ValueError):
                m = np.nan
            diff = abs(m - lap_v) + lap_e
            if np.isfinite(diff) and diff <= self.tolerance * self.scale["cumulative_mass"]:
                return m, diff
        return lap_v, lap_e

    def to_dataset(self, title: str = "stratiflux column", **kw):
        """The fields as an xarray.Dataset (CF layout, units in the attributes).

        Parameters
        ----------
        title : str
            Short title of the run.
        **kw
            Further keywords of :func:`transport.io.netcdf.column_dataset`.
        """
        # the one crossing from solvers/ to io/, lazily, as xarray's to_netcdf hands over
        from transport.io.netcdf import column_dataset
        return column_dataset(self, title=title, **kw)
