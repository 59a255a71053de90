"""The public entry point: from a scenario, a column or a timeline to one checked solution.

``solve`` is what a notebook user calls; the command line (``stratiflux run``,
``compare``, ``site``) calls the same engines through :func:`solve_scenario`.
"""
from __future__ import annotations

import warnings

import numpy as np

from transport.model.column import Column, InitialState, InputError
from transport.scenario.schema import Scenario
from transport.solvers.engines import FV_TOLERANCE, solve_column
from transport.solvers.stages import Timeline

__all__ = ["solve", "solve_scenario"]


def solve(target, times=None, depths=None, *, initial: InitialState = None,
          engine: str = "auto", tolerance: float = None, on_unreliable: str = "raise"):
    """Solve a scenario, a column or a remediation timeline; every number checked.

    Parameters
    ----------
    target : Scenario, Column or Timeline
        A scenario from :func:`transport.load_scenario` (its output grid, initial state,
        tolerance and [[actions]] are used unless overridden here), a
        :class:`transport.Column` in SI units, or a
        :class:`transport.solvers.timeline.Timeline` of stages.
    times : array_like of float, optional
        Output times, s (> 0). Required for a Column or a Timeline.
    depths : array_like of float, optional
        Output depths, m, inside the column. Required for a Column or a Timeline.
    initial : InitialState, optional
        Initial pore-water concentration (default: the scenario's, else clean).
    engine : {"auto", "modal", "laplace", "finite-volume"}
        ``"auto"`` serves each output time from the modal engine where the Laplace
        engine confirms it, else from the Laplace engine where its own bound meets the
        tolerance. Staged runs take ``"auto"``, ``"modal"`` or ``"laplace"``.
    tolerance : float, optional
        Relative tolerance of every number (default: the scenario's ``[output]
        tolerance``, else 1e-8; 1e-3 for the finite-volume engine).
    on_unreliable : {"raise", "flag"}
        Where no engine can vouch for a time: raise
        :class:`transport.solvers.checks.UnreliableResultError` (default), or return
        NaN there with ``reliable`` False.

    Returns
    -------
    Solution (a tuple of Solution, parent first, for a scenario with a decay chain)
        Fields on the (time, depth) grid in SI units (kg m-3, kg m-2 s-1, kg m-2), the
        mass budget, the engine and the error bound of every quantity per time;
        ``to_dataset()`` gives the CF layout of ``stratiflux run``.

    Warns
    -----
    Degraded but valid runs warn with the engines' warning classes (for example
    :class:`transport.solvers.modal.series.ModeCapWarning`), so callers can filter them.

    Examples
    --------
    >>> import transport
    >>> sc = transport.load_scenario("scenarios/spill-layered-column.toml")  # doctest: +SKIP
    >>> sol = transport.solve(sc)  # doctest: +SKIP
    >>> sol.concentration.shape == (sc.times.size, sc.depths.size)  # doctest: +SKIP
    True
    """
    if isinstance(target, Scenario):
        return _solve_scenario(target, depths, times, engine, tolerance, on_unreliable,
                               initial)
    if times is None or depths is None:
        raise TypeError("solve(column or timeline, times, depths): give the output times "
                        "(s) and depths (m); only a scenario carries its own output grid")
    times = np.asarray(times, dtype=float)
    depths = np.asarray(depths, dtype=float)
    tol = _tolerance(tolerance, engine, default=None)
    if isinstance(target, Timeline):
        from transport.solvers.timeline import solve_timeline  # staged runs: when asked for
        extra = {} if tol is None else {"tolerance": tol}
        return solve_timeline(target, times, depths, initial=initial, engine=engine,
                              on_unreliable=on_unreliable, **extra)
    if isinstance(target, Column):
        return solve_column(target, times, depths, initial=initial, engine=engine,
                            tolerance=tol, on_unreliable=on_unreliable)
    raise TypeError(f"solve() takes a Scenario, a Column or a Timeline, not "
                    f"{type(target).__name__}; read a scenario file with "
                    "transport.load_scenario(path)")


def solve_scenario(scenario, depths=None, times=None, engine: str = "auto",
                   tolerance: float = None, on_unreliable: str = "raise",
                   species: bool = False):
    """Solve ``scenario`` on its output grid; returns ``(solution, warnings)``.

    As :func:`solve`, except that the warnings raised while solving are caught and
    returned (a list of :class:`Warning` instances: ``str(w)`` is the message,
    ``type(w)`` its class) for the command line to print.  A scenario with a decay chain
    is solved only by a caller that takes one solution per species (``species=True``:
    the first item is then a tuple); others get an :class:`InputError` saying so.
    """
    if getattr(scenario, "chain", None) is not None and not species:
        raise InputError(f"{scenario.path or 'the scenario'} has a decay chain ([[chain]]); "
                         "this command takes one species: run the chain with stratiflux "
                         "run, or remove the [[chain]] tables to study the parent alone")
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        solution = _solve_scenario(scenario, depths, times, engine, tolerance,
                                   on_unreliable, None)
    return solution, [w.message for w in caught]


def _tolerance(tolerance, engine, default):
    """The tolerance asked for, else ``default``; the finite-volume engine cannot go
    below its own default (1e-3) unless asked explicitly."""
    if tolerance is not None:
        return float(tolerance)
    if engine == "finite-volume" and default is not None:
        return max(default, FV_TOLERANCE)
    return default


def _solve_scenario(scenario, depths, times, engine, tolerance, on_unreliable, initial):
    out = scenario.output
    times = np.asarray(out.times if times is None else times, float)
    depths = np.asarray(out.depths if depths is None else depths, float)
    tol = _tolerance(tolerance, engine, default=out.tolerance)
    initial = scenario.initial if initial is None else initial
    if scenario.chain is not None:
        if engine not in ("auto", "laplace"):
            raise InputError(f"a decay chain is solved by the Laplace engine; use engine "
                             f"auto or laplace, not {engine!r}")
        from transport.solvers.chain import solve_chain  # a decay chain: when asked for
        initials = (initial,) + (InitialState.clean(),) * (len(scenario.chain.columns) - 1)
        return solve_chain(scenario.chain, times, depths, initials=initials, tolerance=tol,
                           on_unreliable=on_unreliable)
    if scenario.timeline is not None and len(scenario.timeline.stages) > 1:
        from transport.solvers.timeline import solve_timeline  # staged runs: when asked for
        return solve_timeline(scenario.timeline, times, depths, initial=initial,
                              tolerance=tol, engine=engine, on_unreliable=on_unreliable)
    return solve_column(scenario.column, times, depths, initial=initial, engine=engine,
                        tolerance=tol, on_unreliable=on_unreliable)
