"""One entry point from a validated scenario to a solution (engine choice, stages)."""
from __future__ import annotations

import warnings

import numpy as np


__all__ = ["solve_scenario"]


def solve_scenario(scenario, depths=None, times=None, engine: str = "auto",
                   tolerance: float = None, on_unreliable: str = "raise"):
    """Solve ``scenario`` on its output grid; returns (solution, warning messages).

    :func:`transport.solvers.engines.solve_column` (or :func:`transport.solvers.timeline.solve_timeline`
    for a scenario with [[actions]]) picks the engine per output time and vouches for
    every number within ``tolerance`` (default: the scenario's ``[output] tolerance``),
    or raises :class:`transport.solvers.checks.UnreliableResultError` (``on_unreliable="flag"``:
    NaN and ``reliable`` False at the refused times instead).
    """
    out = scenario.output
    times = np.asarray(out.times if times is None else times, float)
    depths = np.asarray(out.depths if depths is None else depths, float)
    tol = out.tolerance if tolerance is None else float(tolerance)
    if tolerance is None and engine == "finite-volume":
        from transport.solvers.engines import FV_TOLERANCE
        tol = max(tol, FV_TOLERANCE)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        if scenario.timeline is not None and len(scenario.timeline.stages) > 1:
            from transport.solvers.timeline import solve_timeline
            solution = solve_timeline(scenario.timeline, times, depths, scenario.initial,
                                      tolerance=tol, engine=engine,
                                      on_unreliable=on_unreliable)
        else:
            from transport.solvers.engines import solve_column
            solution = solve_column(scenario.column, times, depths, scenario.initial,
                                    engine=engine, tolerance=tol,
                                    on_unreliable=on_unreliable)
    return solution, [str(w.message) for w in caught]
