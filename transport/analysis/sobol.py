"""Variance-based sensitivity indices: the Saltelli (2010) design and its estimators.

For a model Y = f(X_1, ..., X_d) with independent inputs, the first-order index
S_i = V[E(Y | X_i)] / V(Y) is the share of the variance of Y that X_i explains alone,
and the total-effect index S_Ti = E[V(Y | X_~i)] / V(Y) the share it takes part in,
alone or through interactions (Sobol' 1993; Homma & Saltelli 1996).

Design (Saltelli et al. 2010, Comput. Phys. Commun. 181:259-270, sec. 3): two
independent N x d sample matrices A and B (the first and last d columns of one
scrambled Sobol' sequence of dimension 2d, :class:`scipy.stats.qmc.Sobol`, mapped
through the inverse CDF of each input), and for each input i the matrix A_B^(i): A
with its column i taken from B. The model is evaluated N (d + 2) times.

Estimators (Saltelli et al. 2010, Table 2):

* first order, Table 2 (b):
  V[E(Y | X_i)] ~ (1/N) sum_j (f(B)_j - f0) (f(A_B^(i))_j - f(A)_j), with f0 the mean of
  f(A) and f(B). Subtracting f0 leaves the estimator's expectation unchanged (the
  differences have mean zero) and removes the noise a large mean of Y adds to it
  (Sobol' 2001, Math. Comput. Simul. 55:271-280, cited from memory); without it a
  metric whose mean is far above its spread gets needlessly wide bootstrap intervals
* total effect, Table 2 (f) (Jansen 1999, Comput. Phys. Commun. 117:35-43):
  E[V(Y | X_~i)] ~ (1/(2N)) sum_j (f(A)_j - f(A_B^(i))_j)^2
* V(Y) from the 2N values of f(A) and f(B) together.

Confidence intervals: percentile bootstrap (Efron & Tibshirani 1993, An Introduction
to the Bootstrap, ch. 13) over the N rows j, the same rows for A, B and every
A_B^(i), so that the estimators and V(Y) are resampled together. The rows of a
scrambled Sobol' sequence are not independent draws; the intervals are the usual
approximation (as in common practice) and widen correctly as N shrinks.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.stats import qmc

__all__ = ["SobolIndices", "saltelli_design", "sobol_indices", "estimate",
           "MIN_SAMPLES", "MAX_SAMPLES", "METHOD_REFERENCES"]

#: Base sample sizes N allowed (powers of two keep the balance of the Sobol' sequence).
MIN_SAMPLES, MAX_SAMPLES = 8, 65536

#: The method as printed and written into every output that carries indices.
METHOD_REFERENCES = (
    "Variance-based indices: Saltelli et al. 2010 sampling design (Comput. Phys. Commun. "
    "181:259-270) on a scrambled Sobol' sequence; first-order estimator of Saltelli et "
    "al. 2010 (Table 2 b, outputs centred), total-effect estimator of Jansen 1999 (Comput. Phys. Commun. "
    "117:35-43; Saltelli et al. 2010 Table 2 f); percentile bootstrap intervals (Efron "
    "& Tibshirani 1993).")


@dataclass(frozen=True)
class SobolIndices:
    """First-order and total-effect indices of d inputs, with bootstrap intervals.

    ``first_order``, ``total_effect``: shape (d,); ``*_interval``: shape (d, 2), the
    lower and upper ends of the percentile interval at ``confidence``; ``variance``: V(Y)
    of the sample; ``samples``: N; ``resamples``: bootstrap resamples. All NaN when Y
    does not vary over the sample (the indices are undefined).
    """

    first_order: np.ndarray
    total_effect: np.ndarray
    first_order_interval: np.ndarray
    total_effect_interval: np.ndarray
    variance: float
    samples: int
    resamples: int
    confidence: float


def saltelli_design(ppfs, n: int, seed: int):
    """Sample matrices A and B, shape (n, d), for the Saltelli (2010) scheme.

    Parameters
    ----------
    ppfs : sequence of callables
        One inverse CDF per input, ``ppf(u) -> values`` for u in (0, 1) (e.g.
        :meth:`transport.site.uncertainty.Distribution.ppf`).
    n : int
        Base sample size N, a power of two from :data:`MIN_SAMPLES` to
        :data:`MAX_SAMPLES`.
    seed : int
        Seed of the scrambling (:func:`numpy.random.default_rng`); the same seed gives
        the same design on any machine.

    Returns
    -------
    (numpy.ndarray, numpy.ndarray)
        A and B in the inputs' own values. The first row of an unscrambled Sobol'
        sequence is 0, which an inverse CDF cannot take; scrambling moves it inside.
    """
    d = len(ppfs)
    if d < 1:
        raise ValueError("the Saltelli design needs at least one input")
    if n < MIN_SAMPLES or n > MAX_SAMPLES or n & (n - 1):
        raise ValueError(f"the base sample size must be a power of two from {MIN_SAMPLES} "
                         f"to {MAX_SAMPLES}, got {n}")
    sobol = qmc.Sobol(d=2 * d, scramble=True, rng=np.random.default_rng(seed))
    u = sobol.random_base2(int(np.log2(n)))
    values = np.column_stack([ppfs[k % d](u[:, k]) for k in range(2 * d)])
    return values[:, :d], values[:, d:]


def estimate(y_a, y_b, y_ab):
    """First-order and total-effect indices from one design's model values.

    Parameters
    ----------
    y_a, y_b : array_like, shape (N,)
        f(A) and f(B).
    y_ab : array_like, shape (d, N)
        f(A_B^(i)) for each input i.

    Returns
    -------
    (numpy.ndarray, numpy.ndarray, float)
        S_i and S_Ti, shape (d,), and V(Y); the indices are NaN where V(Y) is 0.

    Notes
    -----
    Saltelli et al. (2010), Table 2 (b) and (f), as in the module docstring.
    """
    y_a, y_b, y_ab = (np.asarray(v, dtype=float) for v in (y_a, y_b, y_ab))
    pooled = np.concatenate([y_a, y_b])
    variance = float(np.var(pooled))
    first = np.mean((y_b - pooled.mean()) * (y_ab - y_a), axis=-1)
    total = 0.5 * np.mean((y_a - y_ab) ** 2, axis=-1)
    if not variance > 0:
        nan = np.full(y_ab.shape[0], np.nan)
        return nan, nan.copy(), variance
    return first / variance, total / variance, variance


def _batched(y_a, y_b, y_ab, rows):
    """:func:`estimate` for many resamples at once: ``rows`` has shape (R, N)."""
    a, b = y_a[rows], y_b[rows]                       # (R, N)
    ab = y_ab[:, rows]                                # (d, R, N)
    pooled = np.concatenate([a, b], axis=1)
    variance = np.var(pooled, axis=1)                 # (R,)
    centre = pooled.mean(axis=1)[:, None]
    first = np.mean((b - centre) * (ab - a), axis=-1)  # (d, R)
    total = 0.5 * np.mean((a - ab) ** 2, axis=-1)
    with np.errstate(invalid="ignore", divide="ignore"):
        return (np.where(variance > 0, first / variance, np.nan),
                np.where(variance > 0, total / variance, np.nan))


def sobol_indices(y_a, y_b, y_ab, *, resamples: int = 1000, confidence: float = 0.95,
                  seed: int = 0) -> SobolIndices:
    """Indices with percentile-bootstrap intervals.

    Parameters
    ----------
    y_a, y_b : array_like, shape (N,)
        Model values at the rows of A and B.
    y_ab : array_like, shape (d, N)
        Model values at the rows of A_B^(i).
    resamples : int
        Bootstrap resamples (>= 0; 0 gives no interval, NaN).
    confidence : float
        Coverage of the intervals, in (0, 1).
    seed : int
        Seed of the resampling.

    Returns
    -------
    SobolIndices
    """
    y_a, y_b = np.asarray(y_a, dtype=float), np.asarray(y_b, dtype=float)
    y_ab = np.atleast_2d(np.asarray(y_ab, dtype=float))
    n = y_a.size
    if y_b.size != n or y_ab.shape[1] != n:
        raise ValueError("f(A), f(B) and every f(A_B^(i)) need the same number of rows")
    if not np.all(np.isfinite(y_a)) or not np.all(np.isfinite(y_b)) \
            or not np.all(np.isfinite(y_ab)):
        raise ValueError("the model values hold NaN or infinite values")
    if not 0 < confidence < 1:
        raise ValueError(f"confidence must lie in (0, 1), got {confidence}")
    first, total, variance = estimate(y_a, y_b, y_ab)
    d = y_ab.shape[0]
    lo_q, hi_q = 0.5 * (1 - confidence), 0.5 * (1 + confidence)
    f_int = np.full((d, 2), np.nan)
    t_int = np.full((d, 2), np.nan)
    if resamples > 0 and variance > 0:
        rng = np.random.default_rng(seed)
        f_all, t_all = [], []
        batch = max(1, min(resamples, 2_000_000 // max(n * (d + 2), 1)))
        done = 0
        while done < resamples:
            k = min(batch, resamples - done)
            rows = rng.integers(0, n, size=(k, n))
            f_b, t_b = _batched(y_a, y_b, y_ab, rows)
            f_all.append(f_b)
            t_all.append(t_b)
            done += k
        f_all, t_all = np.concatenate(f_all, axis=1), np.concatenate(t_all, axis=1)
        # resamples that drew one row only have V(Y) = 0: left out (NaN)
        f_int = np.column_stack([np.nanquantile(f_all, lo_q, axis=1),
                                 np.nanquantile(f_all, hi_q, axis=1)])
        t_int = np.column_stack([np.nanquantile(t_all, lo_q, axis=1),
                                 np.nanquantile(t_all, hi_q, axis=1)])
    return SobolIndices(first, total, f_int, t_int, variance, n, int(resamples),
                        float(confidence))
