"""One entry point from a validated scenario to a solution (engine choice, stages)."""
from __future__ import annotations

import warnings

import numpy as np

from .model import InputError

__all__ = ["solve_scenario"]


def solve_scenario(scenario, depths=None, times=None, engine: str = "auto"):
    """Solve ``scenario`` on its output grid; returns (solution, warning messages).

    A scenario with [[actions]] runs as a staged timeline on the modal engine; otherwise
    :func:`transport.engines.solve_column` picks the engine (``auto``: modal where it
    meets the tolerance, Laplace at earlier times or high Peclet numbers).
    """
    out = scenario.output
    times = np.asarray(out.times if times is None else times, float)
    depths = np.asarray(out.depths if depths is None else depths, float)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        if scenario.timeline is not None and len(scenario.timeline.stages) > 1:
            if engine not in ("auto", "modal"):
                raise InputError(f"a scenario with [[actions]] runs on the modal engine; "
                                 f"--engine {engine} is not available for staged runs")
            from .timeline import solve_timeline
            solution = solve_timeline(scenario.timeline, times, depths, scenario.initial,
                                      tolerance=out.tolerance)
        else:
            from .engines import solve_column
            solution = solve_column(scenario.column, times, depths, scenario.initial,
                                    engine=engine, tolerance=out.tolerance)
    return solution, [str(w.message) for w in caught]
