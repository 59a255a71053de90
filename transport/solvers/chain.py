"""A decay chain, every species checked: the Laplace engine's values vouched for by its
own bound, the physical bounds and each species' mass budget (as a single column served
by the Laplace engine alone, :func:`transport.solvers.engines.solve_column`).

Bounds: the parent obeys the maximum principle of a single species; a daughter, fed by
its parent's decay, has no upper bound from the inputs but stays >= 0 when every input
of the chain is >= 0 (a positive source), so only that side is checked for it.
"""
from __future__ import annotations

import numpy as np

from transport.model.chain import Chain
from transport.model.column import InitialState, InputError
from transport.solvers.checks import (QUANTITIES, Bounds, UnreliableResultError, assemble,
                                      budget_onto_bounds, choose, clip_to_bounds,
                                      concentration_bounds, describe_refusal, own_errors,
                                      quantities)
from transport.solvers.engines import checked_fields, own_bound_at
from transport.solvers.laplace.chain import solve_chain_laplace
from transport.solvers.modal.sizing import DEFAULT_TOLERANCE
from transport.solvers.result import Solution, checked_arithmetic

__all__ = ["solve_chain"]


def _bounds(chain, initials, t_end):
    out, lo_ok = [], True
    for j, (col, init) in enumerate(zip(chain.columns, initials)):
        b = concentration_bounds(col, init, t_end)
        if j == 0:
            out.append(b)
        else:
            out.append(Bounds(0.0 if lo_ok else None, None, b.kappa))
        lo_ok = lo_ok and b.lo is not None and b.lo >= 0.0
    return out


@checked_arithmetic
def solve_chain(chain: Chain, times, depths, *, initials=None, tolerance: float = None,
                on_unreliable: str = "raise") -> tuple:
    """Every species of ``chain`` on the (time, depth) grid, checked.

    Parameters
    ----------
    chain : Chain
    times : (nt,) s; depths : (nz,) m
    initials : one InitialState per species (default clean)
    tolerance : relative tolerance of every quantity (default 1e-8)
    on_unreliable : "raise" (:class:`UnreliableResultError` naming the species) or "flag"

    Returns
    -------
    tuple of Solution, parent first, engine "laplace", each with ``reliable``, its
    error bounds and its own mass budget (a daughter's ``produced`` is what it gained
    from its parent).
    """
    tolerance = DEFAULT_TOLERANCE if tolerance is None else float(tolerance)
    if not 0 < tolerance < 1:
        raise InputError(f"tolerance must be a number between 0 and 1, got {tolerance!r}")
    if on_unreliable not in ("raise", "flag"):
        raise InputError(f"on_unreliable {on_unreliable!r} is unknown; use raise or flag")
    n_sp = len(chain.columns)
    initials = tuple(initials) if initials is not None else (InitialState.clean(),) * n_sp
    raw = solve_chain_laplace(chain, times, depths, initials=initials)
    times, depths = raw[0].times, raw[0].depths
    bounds = _bounds(chain, initials, float(times.max()) if times.size else 0.0)
    out = []
    for name, col, sol, b in zip(chain.names, chain.columns, raw, bounds):
        cand = [("laplace", quantities(sol), own_errors(sol))]
        choice = choose(times, cand, tolerance, b, col, depths, budgets=[sol.budget],
                        selectable=1)
        if not choice.reliable.all() and on_unreliable == "raise":
            raise UnreliableResultError(
                f"species {name!r}: " + describe_refusal(times, choice, tolerance, "laplace"),
                times[~choice.reliable],
                [q for q in QUANTITIES if np.any(choice.failed[q] & ~choice.reliable)])
        vals, budget = assemble(cand, choice, [sol.budget])
        vals["concentration"] = clip_to_bounds(col, b, depths, vals["concentration"],
                                               choice.error["concentration"])
        budget = budget_onto_bounds(b, budget, choice.error["budget"])
        j = len(out)
        out.append(Solution(column=col, times=times, depths=depths,
                            evaluator=_evaluator(chain, initials, j),
                            mass_at=_mass_at(chain, initials, j),
                            diagnostics={"species": name},
                            **checked_fields(choice, vals, budget, tolerance, b)))
    return tuple(out)


def _evaluator(chain, initials, j):
    """C (kg m-3) of species j at one depth for any times: the chain solved there."""
    def at(depth, t):
        t = np.atleast_1d(np.asarray(t, float))
        sol = solve_chain_laplace(chain, t, [float(depth)], initials=initials)[j]
        return np.asarray(sol.concentration[:, 0], float)
    # the Laplace engine's own bound of species j's C, as the run's check reads it
    at.laplace_bound = lambda depth, t: own_bound_at(t, lambda s: solve_chain_laplace(
        chain, s, [float(depth)], initials=initials)[j])
    return at


def _mass_at(chain, initials, j):
    """(cumulative mass of species j through ``depth`` up to ``t``, its error bound)."""
    def at(depth, t):
        if t <= 0:
            return 0.0, 0.0
        sol = solve_chain_laplace(chain, [t], [float(depth)], initials=initials)[j]
        err = own_errors(sol)["cumulative_mass"][0]
        return float(sol.cumulative_mass[0, 0]), float(np.nan_to_num(err, nan=np.inf))
    return at
