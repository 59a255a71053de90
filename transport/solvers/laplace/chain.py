"""A straight decay chain solved exactly in the Laplace domain.

The chain is triangular: a daughter is a one-species column driven by a source, its
parent's decay.  On each segment the parent's transformed field is a cubic plus a sum
of exponentials (its own two and those it inherited), so the daughter's source is of
the same form and its particular solution is exact
(:meth:`transport.solvers.laplace.transfer.LaplaceTransfer.solve`, ``forcing``); the
species are solved in order for every s of the contour and inverted together.

Budget of a daughter: ``produced`` holds what it gained from its parent (the yield
times the parent's decayed mass) besides any layer source, so each species' budget
closes on its own.
"""
from __future__ import annotations

import numpy as np

from transport.model.chain import Chain
from transport.model.column import InitialState, InputError, check_output_grid
from transport.solvers.laplace.contour import default_nodes
from transport.solvers.laplace.inversion import invert_best
from transport.solvers.laplace.engine import (laplace_solution, signal_components,
                                              signals_for)
from transport.solvers.laplace.transfer import LaplaceTransfer

__all__ = ["solve_chain_laplace"]


def solve_chain_laplace(chain: Chain, times, depths, *, initials=None,
                        nodes: int = None) -> tuple:
    """Every species of ``chain`` at ``times`` (s) and ``depths`` (m).

    Parameters
    ----------
    chain : Chain
    times, depths : as :func:`transport.solvers.laplace.engine.solve_laplace`
    initials : sequence of InitialState (one per species), default all clean; measured
        profiles must share their sample depths
    nodes : Talbot nodes, default the largest :func:`default_nodes` of the species

    Returns
    -------
    tuple of Solution (one per species, parent first), engine "laplace", each with its
    error estimates and its own mass budget.
    """
    cols = chain.columns
    n_sp = len(cols)
    initials = tuple(initials) if initials is not None else (InitialState.clean(),) * n_sp
    if len(initials) != n_sp:
        raise InputError(f"give one initial state per species ({n_sp}), got {len(initials)}")
    times, depths = check_output_grid(cols[0], times, depths)
    models = [LaplaceTransfer(c, i) for c, i in zip(cols, initials)]
    tops = models[0].seg["top"]
    for name, m in zip(chain.names[1:], models[1:]):
        if m.seg["top"].shape != tops.shape or not np.array_equal(m.seg["top"], tops):
            raise InputError(f"species {name!r}: its measured initial profile is sampled at "
                             "other depths than the parent's; sample every species at the "
                             "same depths")
    n_nodes = nodes or max(default_nodes(c) for c in cols)
    seg_layer = np.clip(np.searchsorted(cols[0].interfaces, tops, side="right") - 1, 0,
                        len(cols[0].layers) - 1)
    comps = [signal_components(c, seg_layer) for c in cols]
    starts = sorted(set().union(*[set(c) for c in comps]))
    nz, nt = depths.size, times.size
    width = 3 * nz + 4
    ends = np.array([0.0, cols[0].length])
    out = np.zeros((nt, n_sp * width))
    est = np.zeros((nt, n_sp * width))
    parts = [np.arange(j * width + a, j * width + b) for j in range(n_sp)
             for a, b in ((0, nz), (nz, 2 * nz), (2 * nz, 3 * nz), (3 * nz, width))]
    s0 = max(float(np.max(m.q ** 2 / (4 * m.seg["k"] * m.seg["c"]))) for m in models)
    for t0 in starts:
        tau = times - t0
        on = tau > 0
        if not on.any():
            continue

        def transform(s, t0=t0):
            blocks, capped, forcing = [], np.zeros(s.size, bool), None
            for j, (m, comp) in enumerate(zip(models, comps)):
                coef = m.solve(s, signals_for(comp.get(t0), s, m.n, t0 == 0.0), forcing)
                C, F = m.fields(coef, np.concatenate([depths, ends]))
                st = m.stored(coef)
                decayed = (m.seg["mu"][:, None] * st).sum(axis=0) / s
                blocks.append(np.concatenate([C[:, :nz], F[:, :nz], F / s[:, None],
                                              st.sum(axis=0)[:, None], decayed[:, None]],
                                             axis=1))
                capped |= m.capped
                if j + 1 < n_sp:  # the daughter's source: y mu_p c_p C^_p
                    gain = (chain.yields[j + 1] * m.seg["mu"] * m.seg["c"])[:, None]
                    poly, rho, anchor, amp = m.representation(coef)
                    forcing = (gain * poly, rho, anchor, gain * amp)
            return np.concatenate(blocks, axis=1), capped

        with np.errstate(over="ignore", invalid="ignore", divide="ignore"):
            f, e = invert_best(transform, tau[on], n_nodes, s0, parts)
        out[on] += f
        est[on] += e
    sols = []
    for j, (col, m, init) in enumerate(zip(cols, models, initials)):
        block = slice(j * width, (j + 1) * width)
        extra = None
        if j:  # gained from the parent: yield times the parent's decayed mass
            parent = out[:, (j - 1) * width + width - 1]
            extra = chain.yields[j] * np.where(times > 0, parent, 0.0)
            est[:, block][:, -1] += chain.yields[j] * est[:, (j - 1) * width + width - 1]
        sols.append(laplace_solution(col, m, init, times, depths, out[:, block].copy(),
                                     est[:, block].copy(), False, extra))
    return tuple(sols)
