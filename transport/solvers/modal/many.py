"""A boring's Monte Carlo series built side by side (:func:`clean_series_many`): the
same numbers, to the bit, as each column's own :func:`transport.solvers.modal.series.
build_series`, in a fraction of the calls."""
from __future__ import annotations

import math
import warnings

import numpy as np

from transport.model.column import InitialState
from transport.solvers.modal.eigenfunctions import evaluate_many
from transport.solvers.modal.lifting import evaluate_many as lifting_many
from transport.solvers.modal.lifting import steady_responses_many, steady_shift
from transport.solvers.modal.projection import green_terms
from transport.solvers.modal.series import clean_series
from transport.solvers.modal.sizing import column_signals, mode_count

__all__ = ["clean_series_many"]


def clean_series_many(columns, t_mins, tolerance: float, max_modes: int, known_modes,
                      depths=None) -> list:
    """[``build_series(col, clean, t_min, tolerance, max_modes, masses=False,
    known_modes=known)``] of a boring's Monte Carlo columns (one log: the same layer
    faces), built side by side: the steady responses in one block-diagonal solve
    (:func:`~transport.solvers.modal.lifting.steady_responses_many`), the modes at the
    two ends and at ``depths`` (kept as the series' :meth:`~transport.solvers.modal.series.ModalSeries.fields`) in one
    pass (:func:`~transport.solvers.modal.eigenfunctions.evaluate_many`): the same
    numbers, to the bit, as each column's own build, in a fraction of the calls.

    An entry is None where the column is not served here, and its own build must run
    (it then reports its own warnings and errors): a column with a source, without
    known modes or whose mode count is not the known one, a mode-count warning, no
    positive ``t_min``; and every entry when the shared steps warn or fail."""
    out = [None] * len(columns)
    todo = []
    for i, (col, t_min, md) in enumerate(zip(columns, t_mins, known_modes)):
        if md is None or t_min is None or t_min <= 0 or np.any(md.op.source):
            continue
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            signals = column_signals(col, md.op)
            rates = [r for sig in signals for kind, _, _, r in sig.atoms if kind == "decay"]
            floor = max(rates, default=0.0) / math.sqrt(tolerance)
            lam = mode_count(md.op, t_min, tolerance, max_modes, floor, md.lam)
        if caught or lam is not md.lam:
            continue
        todo.append((i, col, md, signals))
    if len(todo) < 2:  # nothing to share
        return out
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        try:
            mds = [md for _, _, md, _ in todo]
            lifts = steady_responses_many([md.op for md in mds],
                                          [steady_shift(md.lam) for md in mds])
            ends = evaluate_many(mds, np.array([0.0, mds[0].op.z[-1]]), 0)
            if depths is not None:
                z = np.atleast_1d(np.asarray(depths, dtype=float))
                at_z = zip(evaluate_many(mds, z, +1), lifting_many(lifts, z))
        except (ArithmeticError, np.linalg.LinAlgError, ValueError):
            return out
    if caught:
        return out
    for k, ((i, col, md, signals), lift) in enumerate(zip(todo, lifts)):
        green = green_terms(md.op, md.lam, len(signals), *ends[k])
        out[i] = clean_series(col, md.op, md, lift, signals, green, InitialState.clean())
    if depths is not None:
        for (i, *_), ((psi, dpsi), (u_l, du_l)) in zip(todo, at_z):
            out[i]._keep_fields(z, psi, dpsi, u_l, du_l)
    return out
