"""Batch solution of a site: chunks of borings, Monte Carlo, local or Dask execution.

Work is cut into chunks of consecutive borings. A chunk is solved by
:func:`solve_chunk` (a pure function of the site, the chunk bounds and the Monte Carlo
draws), in this process (``workers=1``), in a local process pool
(:class:`concurrent.futures.ProcessPoolExecutor`, the default) or on a
``dask.distributed`` cluster (``scheduler=ADDRESS``): the same function and inputs, so
the three give identical numbers.

Per boring: the column of :func:`transport.site.boring_scenario` solved by
:func:`transport.modal.solve` on the common depth grid; at the receptor depth the first
crossing of the screening level within the design life (Brent's method on the
continuous series after a bracketing scan; Brent 1973, *Algorithms for Minimization
without Derivatives*, ch. 4), the peak concentration and its time (bounded Brent
minimisation around the best scan sample), and the cumulative mass per unit area
through the receptor depth at the end of the design life (closed form in time,
:meth:`transport.modal.ModalSeries.cumulative_mass`).
"""
from __future__ import annotations

import math
import os
import warnings
from concurrent.futures import ProcessPoolExecutor, as_completed
from dataclasses import dataclass

import numpy as np
from scipy.optimize import brentq, minimize_scalar

from .modal import build_series, solve
from .scenario import ScenarioError
from .uncertainty import sample_matrix

__all__ = ["SCAN_SAMPLES", "QUANTILES", "receptor_metrics", "solve_chunk", "plan_chunks",
           "iter_chunks", "solve_site", "SiteResult", "draw_samples", "METRIC_KEYS",
           "MC_KEYS"]

#: Samples of the receptor curve used to bracket the crossing and the peak: log-spaced
#: from the earliest output time plus uniform to the design life. A spike narrower than
#: the spacing can be missed (the series itself is continuous in time).
SCAN_SAMPLES = 512
TIME_RTOL = 1e-10  # Brent tolerance on time, relative
QUANTILES = (0.05, 0.5, 0.95)
DEFAULT_CHUNK = 16
METRIC_KEYS = ("breakthrough_time", "peak_time", "peak_concentration", "receptor_mass",
               "receptor_depth", "n_modes", "boring_depth")
MC_KEYS = ("exceedance_probability", "breakthrough_time_p5", "breakthrough_time_p50",
           "breakthrough_time_p95", "peak_concentration_p5", "peak_concentration_p50",
           "peak_concentration_p95")


def _scan_times(t_start: float, t_end: float, n: int) -> np.ndarray:
    return np.union1d(np.linspace(t_start, t_end, n), np.geomspace(t_start, t_end, n // 2))


def receptor_metrics(series, depth: float, level: float, t_start: float, t_end: float,
                     n_scan: int = SCAN_SAMPLES):
    """(breakthrough time or NaN, peak time, peak concentration, cumulative mass).

    Times in s, concentration kg m-3, mass kg m-2; the window is [t_start, t_end]
    (earliest resolved output time to the end of the design life). A breakthrough equal
    to ``t_start`` means the level is already reached at the earliest resolved time.
    """
    z = np.array([float(depth)])

    def conc(s):
        return float(series.concentration(z, np.array([s]))[0, 0])

    t = _scan_times(t_start, t_end, n_scan)
    c = series.concentration(z, t)[:, 0]
    above = np.flatnonzero(c >= level)
    if above.size == 0:
        t_cross = math.nan
    elif above[0] == 0:
        t_cross = float(t[0])
    else:
        i = int(above[0])
        t_cross, info = brentq(lambda s: conc(s) - level, t[i - 1], t[i], rtol=TIME_RTOL,
                               full_output=True)
        if not info.converged:  # pragma: no cover - a valid bracket always converges
            raise RuntimeError(f"breakthrough root did not converge: {info.flag}")
    i = int(np.argmax(c))
    t_peak, c_peak = float(t[i]), float(c[i])
    if 0 < i < t.size - 1:
        res = minimize_scalar(lambda s: -conc(s), bounds=(t[i - 1], t[i + 1]),
                              method="bounded", options={"xatol": TIME_RTOL * t_end})
        if res.success and -res.fun > c_peak:
            t_peak, c_peak = float(res.x), float(-res.fun)
    mass = float(series.cumulative_mass(z, np.array([t_end]))[0, 0])
    return float(t_cross), t_peak, c_peak, mass


def plan_chunks(n: int, size: int = DEFAULT_CHUNK) -> list:
    """[(start, stop), ...] covering range(n) in consecutive chunks of ``size``."""
    size = max(1, int(size))
    return [(a, min(a + size, n)) for a in range(0, n, size)]


def draw_samples(site, realizations: int, seed: int, sampling: str) -> np.ndarray:
    """The (realizations, parameters) SI draws shared by all borings."""
    return sample_matrix(site.distributions, realizations, seed, sampling)


def _quantiles(values: np.ndarray) -> np.ndarray:
    """Empirical quantiles (inverted CDF, no interpolation: a quantile is a drawn value;
    Hyndman and Fan 1996, Am. Stat. 50:361, definition 1). NaN (never) sorts as +inf."""
    v = np.where(np.isnan(values), np.inf, values)
    q = np.quantile(v, QUANTILES, method="inverted_cdf")
    return np.where(np.isinf(q), np.nan, q)


def solve_chunk(site, start: int, stop: int, samples=None) -> dict:
    """Solve borings ``start:stop`` of ``site``: fields on the common grid, metrics, and
    with ``samples`` (realizations x parameters, SI) the Monte Carlo summaries.

    Returns a dict of arrays with a leading station axis (see METRIC_KEYS, MC_KEYS,
    ``concentration``/``cumulative_mass`` of shape (n, time, depth), NaN below a
    boring's bottom) and ``warnings``: [(boring id, message)].
    """
    from .site import boring_scenario

    times = np.asarray(site.times, dtype=float)
    grid = np.asarray(site.depths, dtype=float)
    n, nt, nz = stop - start, times.size, grid.size
    t_start = float(times[times > 0].min())
    out = {"concentration": np.full((n, nt, nz), np.nan),
           "cumulative_mass": np.full((n, nt, nz), np.nan)}
    out.update({k: np.full(n, np.nan) for k in METRIC_KEYS})
    if samples is not None:
        out.update({k: np.full(n, np.nan) for k in MC_KEYS})
    notes = []
    names = [d.parameter for d in site.distributions]
    for k, boring in enumerate(site.borings[start:stop]):
        sc = boring_scenario(site, boring)
        col = sc.column
        keep = grid <= col.length * (1 + 1e-12)
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            sol = solve(col, times, np.minimum(grid[keep], col.length), initial=sc.initial,
                        tolerance=site.tolerance)
        notes += [(boring.id, str(w.message)) for w in caught]
        out["concentration"][k][:, keep] = sol.concentration
        out["cumulative_mass"][k][:, keep] = sol.cumulative_mass
        m = receptor_metrics(sol.series, boring.receptor_depth, site.screening_level,
                             t_start, site.design_life)
        for key, value in zip(METRIC_KEYS, m + (boring.receptor_depth, sol.n_modes,
                                                col.length)):
            out[key][k] = value
        if samples is None:
            continue
        bt = np.empty(len(samples))
        pk = np.empty(len(samples))
        for j, draw in enumerate(samples):
            try:
                scj = boring_scenario(site, boring, dict(zip(names, draw)))
            except ScenarioError as exc:
                raise ScenarioError(exc.file, f"realization {j + 1}, boring {boring.id}: "
                                    f"{exc.key}", problem=exc.problem,
                                    fix="bound the distribution (lower/upper) so that draws "
                                    "stay valid") from None
            with warnings.catch_warnings(record=True) as caught:
                warnings.simplefilter("always")
                series = build_series(scj.column, scj.initial, t_start, site.tolerance)
            notes += [(boring.id, f"realization {j + 1}: {w.message}") for w in caught]
            bt[j], _, pk[j], _ = receptor_metrics(series, boring.receptor_depth,
                                                  site.screening_level, t_start,
                                                  site.design_life)
        out["exceedance_probability"][k] = float(np.mean(~np.isnan(bt)))
        for key, q in zip(MC_KEYS[1:4], _quantiles(bt)):
            out[key][k] = q
        for key, q in zip(MC_KEYS[4:], np.quantile(pk, QUANTILES, method="inverted_cdf")):
            out[key][k] = q
    out["warnings"] = notes
    return out


# ------------------------------------------------------------------------ execution
_WORKER = {}


def _init_worker(site, samples):
    _WORKER["site"], _WORKER["samples"] = site, samples


def _pool_chunk(start, stop):
    return solve_chunk(_WORKER["site"], start, stop, _WORKER["samples"])


def iter_chunks(site, chunks, samples=None, *, workers: int | None = None,
                scheduler: str | None = None):
    """Yield (index into ``chunks``, result of :func:`solve_chunk`) as chunks finish.

    ``scheduler``: a dask.distributed scheduler address (``tcp://host:8786``, or an
    in-process LocalCluster's address); else ``workers`` local processes (default: CPU
    count; 1 runs in this process).
    """
    if not chunks:
        return
    if scheduler is not None:
        from distributed import Client, as_completed as dask_completed

        with Client(scheduler) as client:
            site_f, samples_f = client.scatter([site, samples], broadcast=True)
            futures = {client.submit(solve_chunk, site_f, a, b, samples_f, pure=False): i
                       for i, (a, b) in enumerate(chunks)}
            for fut in dask_completed(futures):
                yield futures[fut], fut.result()
                fut.release()
        return
    workers = workers or os.cpu_count() or 1
    if workers == 1 or len(chunks) == 1:
        for i, (a, b) in enumerate(chunks):
            yield i, solve_chunk(site, a, b, samples)
        return
    with ProcessPoolExecutor(max_workers=min(workers, len(chunks)), initializer=_init_worker,
                             initargs=(site, samples)) as pool:
        futures = {pool.submit(_pool_chunk, a, b): i for i, (a, b) in enumerate(chunks)}
        try:
            for fut in as_completed(futures):
                yield futures[fut], fut.result()
        except BaseException:
            for fut in futures:
                fut.cancel()
            raise


@dataclass(frozen=True, eq=False)
class SiteResult:
    """In-memory results of a site (station axis first, SI units)."""

    ids: tuple
    fields: dict  # concentration, cumulative_mass: (station, time, depth)
    metrics: dict  # METRIC_KEYS (+ MC_KEYS): (station,)
    warnings: tuple
    realizations: int = 0
    seed: int | None = None
    sampling: str | None = None


def solve_site(site, *, realizations: int | None = None, seed: int | None = None,
               sampling: str | None = None, workers: int | None = None,
               scheduler: str | None = None, chunk_size: int = DEFAULT_CHUNK,
               progress=None) -> SiteResult:
    """Solve all borings in memory (for files, see :func:`transport.site_run.run_site`).

    ``realizations``/``seed``/``sampling`` default to the site file's [uncertainty];
    0 realizations: deterministic only. ``progress(n_done_borings)`` is called as
    chunks finish.
    """
    n_real = site.realizations if realizations is None else int(realizations)
    seed = site.seed if seed is None else seed
    sampling = sampling or site.sampling
    samples = None
    if n_real and site.distributions:
        if seed is None:
            seed = int(np.random.SeedSequence().entropy % (2 ** 63))
        samples = draw_samples(site, n_real, seed, sampling)
    chunks = plan_chunks(len(site.borings), chunk_size)
    nt, nz = site.times.size, site.depths.size
    fields = {k: np.full((len(site.borings), nt, nz), np.nan)
              for k in ("concentration", "cumulative_mass")}
    keys = METRIC_KEYS + (MC_KEYS if samples is not None else ())
    metrics = {k: np.full(len(site.borings), np.nan) for k in keys}
    notes = []
    for i, res in iter_chunks(site, chunks, samples, workers=workers, scheduler=scheduler):
        a, b = chunks[i]
        for k in fields:
            fields[k][a:b] = res[k]
        for k in keys:
            metrics[k][a:b] = res[k]
        notes += res["warnings"]
        if progress:
            progress(b - a)
    return SiteResult(tuple(site.ids), fields, metrics, tuple(notes),
                      n_real if samples is not None else 0,
                      seed if samples is not None else None,
                      sampling if samples is not None else None)
