"""The two-shot angle mismatch of :func:`transport.solvers.modal.spectrum._mismatch`
compiled to machine code (numba): per lambda, one loop over the layers does the layer
transfers, both shots, the angle changes, the matching face and the lambda derivative.

The same equations as the array code of transfer.py and spectrum.py, in the same order,
one lambda at a time; a shot whose rescaling norm is not finite is redone with a
rescaling at every face for that lambda alone (the array code redoes its whole chunk).
The eigenvalues agree with the array code's to rounding (checked in
tests/test_modal_kernel.py).  It serves the many small passes of a site's shared
eigen-solve (:func:`~transport.solvers.modal.spectrum.eigenvalues_many` with
``compiled=True``), where the array code spends most of its time in numpy's per-call
overhead: a polish pass over a few dozen lambdas costs about as much as one over a
thousand.  The eigenfunctions of those columns (:func:`modes`: the shots, the matching
face and the closed-form norms of eigenfunctions._shot_modes, one mode at a time) agree
with the array code's to 1e-12 of each mode's size; a site uses them for its Monte Carlo
columns only (a boring's own column keeps the array code: its fields are written).
Loading and the switch: :mod:`transport.solvers.jit`.
"""
from __future__ import annotations

import numpy as np

from transport.solvers.jit import load

__all__ = ["available", "mismatch", "modes_available", "modes"]

_STATE = {}
_MODES_STATE = {}
_COLUMNS = ("k", "l", "a", "s", "kl", "lk", "mkl", "hl", "hl3", "l2")
_ENDS = ("kl_last", "kl0", "theta0", "d_v", "d_p")


def available() -> bool:
    """True when the compiled mismatch can be used (numba imports, not switched off)."""
    return load(_STATE, _load) is not None


def _load():
    from transport.solvers.modal._compiled import mismatch as kernel

    _warm(kernel)
    return kernel


def mismatch(prep, lam, face, slopes: bool, owner=None):
    """(G, dG, face) of ``lam`` for ``prep`` (one operator's, or a stack's with lambda
    i belonging to its operator ``owner[i]``), as spectrum._mismatch."""
    lam = _arg(lam, float)
    m = lam.size
    face = np.full(m, -1, np.int64) if face is None else _arg(face, np.int64)
    owner = np.zeros(m, np.int64) if owner is None else _arg(owner, np.int64)
    G, dG = np.empty(m), np.empty(m)
    FACE = np.empty(m, np.int64)
    args = prep.__dict__.get("_kernel_args")
    if args is None:  # the operators' constants, made once per Prep
        args = prep._kernel_args = (
            [_arg(getattr(prep, name), float) for name in _COLUMNS]
            + [_arg(prep.ends, float)]
            + [_arg(np.atleast_1d(getattr(prep, name)), float) for name in _ENDS])
    _STATE["kernel"](lam, face, owner, bool(slopes), *args, G, dG, FACE)
    return G, dG, FACE


def _arg(x, dtype):
    """x as a C-contiguous, writable array of dtype (the one type compiled for)."""
    return np.require(x, dtype, ["C", "W"])


def _warm(kernel):
    """Compile (or load from numba's cache) and run the kernel once on a one-layer
    operator, v'' + lambda v = 0 on (0, 1) with v = 0 at both ends: at lambda =
    (pi/2)^2 the angle has turned by sqrt(lambda) = pi/2 of the pi it needs for the
    first eigenvalue, so G = -pi/2 and dG/dlambda = 1 / (2 sqrt(lambda)) = 1/pi (exact).
    A failure shows here, where the array code can still take over."""
    one = np.ones((1, 1))
    G, dG, face = np.empty(1), np.empty(1), np.empty(1, np.int64)
    ends = np.array([[[0.0], [1.0]], [[0.0], [-1.0]]])
    kernel(np.array([(np.pi / 2) ** 2]), np.array([-1], np.int64), np.zeros(1, np.int64),
           True, one, one, one, 0 * one, one, one, -one, 0.5 * one, 0.5 * one, one, ends,
           np.ones(1), np.ones(1), np.zeros(1), np.ones(1), np.zeros(1), G, dG, face)
    if not (abs(G[0] + np.pi / 2) <= 1e-12 and abs(dG[0] - 1 / np.pi) <= 1e-12):
        raise RuntimeError("the compiled mismatch gave a wrong value on its check operator")


def modes_available() -> bool:
    """True when the compiled eigenfunction kernel can be used."""
    return load(_MODES_STATE, _load_modes) is not None


def _load_modes():
    from transport.solvers.modal._compiled import modes as kernel

    _warm_modes(kernel)
    return kernel


def modes(prep, lam, owner=None):
    """(V, P, Ls) (N+1, m) of eigenfunctions._shot_modes for ``lam`` of ``prep`` (one
    operator's, or a stack's with lambda i of operator ``owner[i]``), one lambda at a
    time in the compiled kernel."""
    lam = _arg(lam, float)
    m = lam.size
    owner = np.zeros(m, np.int64) if owner is None else _arg(owner, np.int64)
    args = prep.__dict__.get("_kernel_args")
    if args is None:
        args = prep._kernel_args = (
            [_arg(getattr(prep, name), float) for name in _COLUMNS]
            + [_arg(prep.ends, float)]
            + [_arg(np.atleast_1d(getattr(prep, name)), float) for name in _ENDS])
    la = prep.__dict__.get("_log_a")
    if la is None:
        la = prep._log_a = _arg(np.log(prep.a), float)
    shape = (prep.n_layers + 1, m)
    V, P, Ls = np.empty(shape), np.empty(shape), np.empty(shape)
    _MODES_STATE["kernel"](lam, owner, *args[:11], la, V, P, Ls)
    return V, P, Ls


def _warm_modes(kernel):
    """Compile (or load from numba's cache) and run the kernel on one layer, v'' +
    lambda v = 0 on (0, 1) with v = 0 at both ends, at its first eigenvalue pi^2: the
    normalised eigenfunction sqrt(2) sin(pi z) has k v' = sqrt(2) pi at the top and
    -sqrt(2) pi at the bottom (exact)."""
    one = np.ones((1, 1))
    ends = np.array([[[0.0], [1.0]], [[0.0], [-1.0]]])
    V, P, Ls = np.empty((2, 1)), np.empty((2, 1)), np.empty((2, 1))
    kernel(np.array([np.pi ** 2]), np.zeros(1, np.int64), one, one, one, 0 * one, one,
           one, -one, 0.5 * one, 0.5 * one, one, ends, 0 * one, V, P, Ls)
    p = P[:, 0] * np.exp(Ls[:, 0])
    want = np.sqrt(2) * np.pi * np.array([1.0, -1.0])
    if not (np.all(np.abs(p - want) <= 1e-12 * np.pi) and np.all(np.abs(V) <= 1e-12)):
        raise RuntimeError("the compiled eigenfunctions gave a wrong value on their check "
                           "operator")
