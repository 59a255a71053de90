"""The Laplace-domain transfer of :class:`~transport.solvers.laplace.transfer.LaplaceTransfer`
compiled to machine code (numba): one loop over the s values, per s the roots and
anchors of every segment, the banded system, its LU with partial pivoting, the fields
at the asked depths and the stored mass per segment.

The same equations as the array code of transfer.py, in the same order, for the cases
the site's Monte Carlo columns need (an initial state linear on each segment, layer
sources, every boundary kind, a semi-infinite bottom); a decay chain's forcing and a
piecewise-cubic carried state take the array code.  The numbers agree with the array
code to rounding (the LU is LAPACK's unblocked gbtf2/gbtrs algorithm written out, with
its pivot choice |re| + |im|; the elementary functions are those of LLVM's math library
instead of numpy's), checked on the regime-matrix columns and more in
tests/test_laplace_kernel.py.

It serves the many small transforms of a site run, where the array code spends most of
its time in numpy's per-call overhead on arrays of a few dozen s values (measured: 8x
on a five-layer column's 52 values).  numba is imported the first time it is asked for
(0.2-0.3 s, never in a single-column run); its compiled code is kept in numba's on-disk
cache (beside this file; NUMBA_CACHE_DIR moves it), so only the first run on a machine
compiles it (about 4 s).  ``STRATIFLUX_JIT=0`` in the environment, or numba failing to
import or to compile, leaves every transform to the array code.
"""
from __future__ import annotations

import functools

import numpy as np

from transport.solvers.jit import load

__all__ = ["available", "evaluate"]

_STATE = {}


def available() -> bool:
    """True when the compiled transfer can be used (numba imports, not switched off)."""
    return load(_STATE, _load) is not None


def _load():
    from transport.solvers.laplace._compiled import transfer

    _warm(transfer)
    return transfer


def evaluate(model, s, signals, depths, stored=True):
    """:meth:`~transport.solvers.laplace.transfer.LaplaceTransfer.evaluate`, compiled:
    C^ and F^ at ``depths`` ((ns, nz) each), the stored mass per segment (nseg, ns;
    without ``stored`` an empty (0, ns) array, not computed) and capped (ns,) bool (an
    exponent cut at 600, a singular system or non-finite coefficients: those s carry
    no value)."""
    s = np.asarray(s, dtype=complex)
    top_hat, bot_hat, src_hat, with_initial = signals
    g, ns, n, q = model.seg, s.size, model.n, model.q
    # each boundary row as C, F, dC/dz or F + h C = target (LaplaceTransfer.end_row)
    kinds = np.zeros(2, np.int64)
    h = np.zeros((2, ns), complex)
    target = np.zeros((2, ns), complex)
    for row, (end, val) in enumerate((("top", top_hat), ("bottom", bot_hat))):
        kinds[row], h[row], target[row] = model.end_row(end, val, s, with_initial)
    a0 = np.broadcast_to((g["a"] * with_initial)[:, None], (n, ns))
    b0 = np.broadcast_to((g["b"] * with_initial)[:, None], (n, ns))
    src = np.broadcast_to(np.asarray(src_hat, complex), (n, ns))
    idx, zeta = model.locate(depths)
    C = np.empty((ns, idx.size), np.complex128)
    F = np.empty((ns, idx.size), np.complex128)
    st = np.empty((n if stored else 0, ns), np.complex128)
    capped = np.zeros(ns, np.bool_)
    f = _arg
    _STATE["kernel"](f(s, np.complex128), f(g["k"], float), f(g["c"], float),
                     f(g["mu"], float), f(g["l"], float), f(g["K"], float), f(a0, np.complex128),
                     f(b0, np.complex128), f(src, np.complex128), float(q),
                     bool(model.semi), bool(_last_clean(g)), kinds, h, target,
                     f(idx, np.int64), f(zeta, float), C, F, st, capped)
    return C, F, st, capped


def _arg(x, dtype):
    """x as a C-contiguous, writable array of dtype: the one argument type the kernel is
    compiled for (a read-only or strided array would compile another)."""
    if (type(x) is np.ndarray and x.dtype == dtype and x.flags.c_contiguous
            and x.flags.writeable):  # as np.require: the array itself (it costs 2 us)
        return x
    return np.require(x, dtype, ["C", "W"])


def _warm(transfer):
    """Compile (or load from numba's cache) and run the kernel once on a one-layer
    column with the argument types evaluate() passes: a failure shows here, where the
    array code can still take over, and a site run's parent does this before it starts
    its worker processes (they inherit the compiled code)."""
    one, c1 = np.ones(1), np.ones((1, 1), np.complex128)
    C, F, st = (np.empty((1, 1), np.complex128) for _ in range(3))
    capped = np.zeros(1, np.bool_)
    transfer(np.array([1.0 + 1.0j]), one, one, 0 * one, one, one, 0 * c1, 0 * c1, 0 * c1,
             0.0, False, True, np.array([0, 2], np.int64), np.zeros((2, 1), np.complex128),
             np.ones((2, 1), np.complex128), np.zeros(1, np.int64), 0.5 * one, C, F, st,
             capped)
    if not (np.isfinite(C).all() and not capped.any()):
        raise RuntimeError("the compiled Laplace transfer gave no value on its check column")


def _last_clean(seg) -> bool:
    """A semi-infinite last segment holds no initial mass and no source (as
    LaplaceTransfer.stored: else its stored mass is infinite, NaN)."""
    return seg["a"][-1] == 0 and seg["b"][-1] == 0 and seg["sigma"][-1] == 0


_POINTS = {}


def points_available() -> bool:
    """True when the compiled lone-time inversion (:func:`talbot_points`) can be used."""
    return available() and load(_POINTS, _load_points) is not None


def _load_points():
    from transport.solvers.laplace._compiled import talbot_points as points

    _warm_points(points)
    return points


class PointsPrep:
    """A column's constants for :func:`talbot_points`: its transfer ``model``, the node
    counts n and n2 and their Talbot nodes, ``steps`` = (top, bottom, per-segment
    source amplitude) of signals that are steps switched on at 0, and ``s0`` (the
    growth parabola of the advective branch, 0 without flow)."""

    def __init__(self, model, n, n2, steps, s0):
        self.model, self.n, self.n2, self.s0 = model, n, n2, s0
        g = model.seg
        kinds = np.zeros(2, np.int64)
        h = np.zeros(2, np.complex128)
        amp = np.zeros(2, np.complex128)
        one = np.ones(1, np.complex128)
        for row, (end, value) in enumerate((("top", steps[0]), ("bottom", steps[1]))):
            kind, h_row, target = model.end_row(end, value * one, one, 1.0)
            kinds[row] = kind
            h[row] = complex(np.ravel(h_row)[0])  # a scalar or one value
            amp[row] = complex(np.ravel(target)[0])
        self.nodes = _node_args(n, n2)
        self.segments = tuple(_arg(g[name], float) for name in ("k", "c", "mu", "l", "K",
                                                                 "a", "b"))
        self.rest = (_arg(steps[2], np.complex128), float(model.q), kinds, h, amp)


@functools.lru_cache(maxsize=16)
def _node_args(n, n2):
    """The Talbot shapes and weights of n and n2 nodes as the kernel takes them (made
    once per pair; the kernel only reads them)."""
    from transport.solvers.laplace.contour import talbot_nodes

    (shape1, w1), (shape2, w2) = talbot_nodes(n), talbot_nodes(n2)
    return tuple(_arg(x, np.complex128) for x in (shape1, w1, shape2, w2))


def talbot_points(prep, times, depth):
    """C at one ``depth`` at ``times`` (> 0, each a lone time) and its estimate, on
    Talbot contours of prep.n and prep.n2 nodes, compiled: the transforms of
    :meth:`LaplaceTransfer.evaluate` and the sums and estimate of
    :func:`transport.solvers.laplace.contour.invert`, one time at a time (the same
    equations; the sums in another order, so the same numbers to rounding)."""
    idx, zeta = prep.model.locate(np.array([depth]))
    f, e = np.empty(times.size), np.empty(times.size)
    _POINTS["kernel"](_arg(times, float), *prep.nodes, *prep.segments, *prep.rest,
                      _arg(idx, np.int64), _arg(zeta, float), f, e)
    return f, e


def _warm_points(points):
    """Compile (or load from numba's cache) and run the lone-time inversion on one
    clean 10 m layer with a unit top concentration, no flow and a free-outflow bottom,
    at a time its front has entered 0.5 m: C at 0.5 m against the closed form of a
    semi-infinite medium, erfc(z / (2 sqrt(D t))) (Crank 1975, eq. 2.45; the bottom,
    19 diffusion lengths away, changes it by less than 1e-100)."""
    import math

    t, z, D = 6.25e7, 0.5, 1e-9
    s1, w1 = _nodes(32)
    s2, w2 = _nodes(40)
    f, e = np.empty(1), np.empty(1)
    one = np.ones(1)
    points(np.array([t]), s1, w1, s2, w2, D * one, one, 0 * one, 10 * one, one, 0 * one,
           0 * one, np.zeros(1, np.complex128), 0.0, np.array([0, 2], np.int64),
           np.zeros(2, np.complex128), np.array([1.0, 0.0], np.complex128),
           np.zeros(1, np.int64), np.array([z]), f, e)
    want = math.erfc(z / (2 * math.sqrt(D * t)))
    if not (abs(f[0] - want) <= 1e-12 and e[0] <= 1e-10):
        raise RuntimeError("the compiled lone-time inversion gave a wrong value on its "
                           "check column")


def _nodes(n):
    from transport.solvers.laplace.contour import talbot_nodes

    shape, w = talbot_nodes(n)
    return _arg(shape, np.complex128), _arg(w, np.complex128)
