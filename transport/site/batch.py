"""Batch solution of a site: chunks of borings, Monte Carlo, local or Dask execution.

Work is cut into chunks of consecutive borings. A chunk is solved by
:func:`solve_chunk` (a pure function of the site, the chunk bounds and the Monte Carlo
draws), in this process (``workers=1``), in a local process pool
(:class:`concurrent.futures.ProcessPoolExecutor`, the default) or on a
``dask.distributed`` cluster (``scheduler=ADDRESS``): the same function and inputs, so
the three give identical numbers.

Per boring: the column is built from SI floats (:mod:`transport.site.columns`: material
properties converted once, a Monte Carlo draw applied by arithmetic) and its modal
series built once (:func:`site_series`: :func:`transport.solvers.modal.series.build_series` without
the quadrature a clean column does not need). Concentration and cumulative mass are
evaluated only on the written grid, in one pass with the receptor depth (depth
functions evaluated once), giving the numbers of :func:`transport.solvers.modal.series.solve` on the
same column. At the receptor depth: the first crossing of the screening level within
the design life (Brent's method on the continuous series after a bracketing scan; Brent
1973, *Algorithms for Minimization without Derivatives*, ch. 4), the peak
concentration and its time (bounded Brent minimisation around the best scan sample),
and the cumulative mass per unit area through the receptor depth at the end of the
design life (closed form in time, :meth:`transport.solvers.modal.series.ModalSeries.cumulative_mass`).
Monte Carlo realizations need only the receptor curve. Borings with identical stacks
are solved once per process (bounded caches); BLAS runs on one thread per process.
"""
from __future__ import annotations

import contextlib
import math
import os
import warnings
from concurrent.futures import FIRST_COMPLETED, ProcessPoolExecutor
from concurrent.futures import wait as futures_wait
from dataclasses import dataclass

from collections import OrderedDict

import numpy as np
from scipy.optimize import brentq, minimize_scalar

from transport.solvers.checks import (QUANTITIES, UnreliableResultError, choose, concentration_bounds,
                     describe_refusal, own_errors, quantities)
from transport.solvers.laplace import solve_laplace
from transport.solvers.modal.series import AccuracyWarning, build_series, earliest_time_after_change
from transport.solvers.modal.projection import initial_profile
from transport.model.column import InitialState
from transport.scenario.schema import ScenarioError
from transport.site.columns import boring_column, check_draws, material_layers
from transport.site.uncertainty import sample_matrix

__all__ = ["SCAN_SAMPLES", "QUANTILES", "receptor_metrics", "site_series", "solve_chunk",
           "plan_chunks",
           "iter_chunks", "solve_site", "SiteResult", "draw_samples", "METRIC_KEYS",
           "MC_KEYS", "ClusterError"]

#: Samples of the receptor curve used to bracket the crossing and the peak: log-spaced
#: from the earliest output time plus uniform to the design life (SCAN_SAMPLES uniform
#: and SCAN_SAMPLES // 2 log-spaced; 128 gives 0.4 yr steps over a 50 yr life, receptor
#: curves of a metre-scale column vary over years). A spike narrower than
#: the spacing can be missed (the series itself is continuous in time).
SCAN_SAMPLES = 128
MAX_MODES = 4000  # the mode cap of transport.solvers.modal.series.solve
FIELD_CACHE_SIZE = 128  # columns whose fields are kept (each nt x nz x 2 floats: 17 MB
#                        at 100 times x 84 depths)
METRIC_CACHE_SIZE = 100_000  # Monte Carlo columns whose two metrics are kept
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


# ------------------------------------------------------------------------ series
def site_series(column, t_min: float, tolerance: float, max_modes: int = MAX_MODES,
                initial=None):
    """The :class:`~transport.solvers.modal.series.ModalSeries` of a boring's column: for a clean
    column without the quadrature of the projections (zero) and of the layer masses (not
    written for sites): ``build_series(..., masses=False)``; with a measured ``initial``
    state its projections are computed as in a single-column run."""
    return build_series(column, initial or InitialState.clean(), t_min, tolerance,
                        max_modes, masses=False)


class _Probe:
    """Concentration and cumulative mass of a series at fixed depths, for any times,
    with the depth functions evaluated once (the sums of
    :meth:`ModalSeries.concentration` and :meth:`ModalSeries.cumulative_mass`)."""

    def __init__(self, series, z, _parent=None):
        self.series, self.z = series, np.atleast_1d(np.asarray(z, dtype=float))
        if _parent is None:
            self.c_modes, self.f_modes, self.c_lift, self.f_lift = series._fields(self.z)
        self.clean = not np.any(series.proj0)
        self._tail, self._parent = None, _parent

    def rows(self, sel: slice):
        """The probe at depths ``z[sel]`` only (the receptor row for the metrics, whose
        root finding calls it many times), sharing the evaluated depth functions."""
        sub = _Probe(self.series, self.z[sel], _parent=(self, sel))
        sub.c_modes, sub.f_modes, sub.c_lift, sub.f_lift = (
            m[sel] for m in (self.c_modes, self.f_modes, self.c_lift, self.f_lift))
        return sub

    def tail(self):
        if self._tail is None:
            if self._parent is not None:
                probe, sel = self._parent
                self._tail = {k: (v[sel] if k != "D" else v) for k, v in probe.tail().items()}
            else:
                self._tail = self.series._tail_corrections(self.z)
        return self._tail

    def coefficients(self, t):
        return self.series.coefficients(t)

    def concentration(self, t):
        s = self.series
        out = (self.c_modes @ self.coefficients(t) + self.c_lift @ s.signal_values(t)).T
        drive = s._drive(t)
        if np.any(drive):
            out = out + (self.tail()["C"][:, 1:] @ drive).T
        return out

    def cumulative_mass(self, t):
        s = self.series
        t = np.atleast_1d(np.asarray(t, dtype=float))
        out = (self.f_modes @ s.integrated_coefficients(t)
               + self.f_lift @ s.signal_integrals(t)).T
        out = out + s._integrated_correction(self.tail()["F"], t)
        return np.where(t[:, None] == 0, 0.0, out)

    def roundoff_bound(self, t, rows=slice(None)):
        """:meth:`ModalSeries.roundoff_bound` at the probe's depths ``rows``, with the
        depth functions already evaluated."""
        return self.series.roundoff_bound(self.z[rows], t, c_modes=self.c_modes[rows])


def _curve_metrics(conc, t_start, t_end, level, n_scan):
    """Breakthrough, peak time and peak of a continuous curve ``conc(times) -> array``."""
    def one(s):
        return float(conc(np.array([s]))[0])

    t = _scan_times(t_start, t_end, n_scan)
    c = conc(t)
    above = np.flatnonzero(c >= level)
    if above.size == 0:
        t_cross = math.nan
    elif above[0] == 0:
        t_cross = float(t[0])
    else:
        i = int(above[0])
        t_cross, info = brentq(lambda s: one(s) - level, t[i - 1], t[i], rtol=TIME_RTOL,
                               full_output=True)
        if not info.converged:  # pragma: no cover - a valid bracket always converges
            raise RuntimeError(f"breakthrough root did not converge: {info.flag}")
    i = int(np.argmax(c))
    t_peak, c_peak = float(t[i]), float(c[i])
    if 0 < i < t.size - 1:
        res = minimize_scalar(lambda s: -one(s), bounds=(t[i - 1], t[i + 1]),
                              method="bounded", options={"xatol": TIME_RTOL * t_end})
        if res.success and -res.fun > c_peak:
            t_peak, c_peak = float(res.x), float(-res.fun)
    return float(t_cross), t_peak, c_peak


def receptor_metrics(series, depth: float, level: float, t_start: float, t_end: float,
                     n_scan: int = SCAN_SAMPLES, probe=None):
    """(breakthrough time or NaN, peak time, peak concentration, cumulative mass).

    Times in s, concentration kg m-3, mass kg m-2; the window is [t_start, t_end]
    (earliest resolved output time to the end of the design life). A breakthrough equal
    to ``t_start`` means the level is already reached at the earliest resolved time.
    The crossing is polished by Brent's root finder and the peak by bounded Brent
    minimisation to a relative time tolerance TIME_RTOL, both on the continuous series.
    """
    probe = probe or _Probe(series, [depth])
    m = _curve_metrics(lambda t: probe.concentration(t)[:, 0], t_start, t_end, level, n_scan)
    return m + (float(probe.cumulative_mass(np.array([t_end]))[0, 0]),)


def plan_chunks(n: int, size: int = DEFAULT_CHUNK) -> list:
    """[(start, stop), ...] covering range(n) in consecutive chunks of ``size``."""
    size = max(1, int(size))
    return [(a, min(a + size, n)) for a in range(0, n, size)]


def draw_samples(site, realizations: int, seed: int, sampling: str) -> np.ndarray:
    """The (realizations, parameters) SI draws shared by all borings, each checked
    against its key's allowed range (:func:`transport.site.columns.check_draws`)."""
    samples = sample_matrix(site.distributions, realizations, seed, sampling)
    check_draws(site, samples)
    return samples


def _quantiles(values: np.ndarray) -> np.ndarray:
    """Empirical quantiles (inverted CDF, no interpolation: a quantile is a drawn value;
    Hyndman and Fan 1996, Am. Stat. 50:361, definition 1). NaN (never) sorts as +inf."""
    v = np.where(np.isnan(values), np.inf, values)
    q = np.quantile(v, QUANTILES, method="inverted_cdf")
    return np.where(np.isinf(q), np.nan, q)


# ------------------------------------------------------------------------- caches
class _Cache:
    """Results of columns already solved in this process, keyed by the SI column and
    the receptor depth (identical layer stacks are solved once); bounded (LRU) so that
    memory stays flat, and cleared when the site settings change."""

    def __init__(self, size):
        self.size, self.key, self.data = size, None, OrderedDict()

    def bind(self, key):
        if key != self.key:
            self.key, self.data = key, OrderedDict()

    def get(self, key):
        try:
            value = self.data[key]
        except (KeyError, TypeError):  # TypeError: unhashable (a schedule), no caching
            return None
        self.data.move_to_end(key)
        return value

    def put(self, key, value):
        try:
            self.data[key] = value
        except TypeError:
            return
        while len(self.data) > self.size:
            self.data.popitem(last=False)


_FIELDS_CACHE = _Cache(FIELD_CACHE_SIZE)
_METRICS_CACHE = _Cache(METRIC_CACHE_SIZE)


def clear_caches():
    """Forget the columns solved so far in this process (and in local worker processes
    forked from it later); for benchmarks that must not reuse an earlier run."""
    _FIELDS_CACHE.bind(None)
    _METRICS_CACHE.bind(None)


def _solve_column(site, col, depth, times, grid, initial=None):
    """Fields on the grid (cut at the bottom), metrics and warnings of one column:
    the numbers of :func:`transport.solvers.modal.series.solve` on the same column and depths."""
    initial = initial or InitialState.clean()
    keep = grid <= col.length * (1 + 1e-12)
    z = np.minimum(grid[keep], col.length)
    t_end = site.design_life
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        t_min = earliest_time_after_change(col, times)
        series = site_series(col, t_min, site.tolerance, initial=initial)
        probe = _Probe(series, np.append(z, depth))
        conc = probe.concentration(times)
        cum = probe.cumulative_mass(np.append(times, t_end))
        positive = times > 0
        scale = max(float(np.max(np.abs(conc[:, :-1]))), 1e-300)
        bound = probe.roundoff_bound(times[positive], slice(0, z.size))
        if bound.max() > site.tolerance * scale:
            bad_t = times[positive][np.any(bound > site.tolerance * scale, axis=1)]
            warnings.warn(
                f"rounding error of the modal series (up to {bound.max():.3g} kg/m3, the "
                f"column Peclet number is about "
                f"{2 * (series.op.A.max() - series.op.A.min()):.0f}) exceeds the tolerance "
                f"at {bad_t.size} output time(s), the latest {bad_t.max():.4g} s; use later "
                "output times or cross-check with another engine", AccuracyWarning)
    conc[times == 0] = initial_profile(col, initial, np.append(z, depth))  # the state itself
    receptor = probe.rows(slice(-1, None))
    conc, cum, conc_at = _checked(site, col, initial, times, np.append(z, depth), t_end,
                                  conc, cum, lambda t: receptor.concentration(t)[:, 0])
    t_start = float(times[positive].min())
    m = _curve_metrics(conc_at, t_start, t_end, site.screening_level, SCAN_SAMPLES)
    metrics = m + (float(cum[-1, -1]), depth, series.eigenvalues.size, col.length)
    return (keep, conc[:, :-1], cum[:-1, :-1], metrics,
            tuple(str(w.message) for w in caught))


def _checked(site, col, initial, times, z, t_end, conc, cum, modal_at):
    """The modal fields of a boring vouched for by the Laplace engine (as
    :func:`transport.solvers.engines.solve_column`): per output time the modal values where the
    two agree within the tolerance for C and the cumulative mass, else the Laplace
    values; a time neither can vouch for refuses the boring.  Returns the fields and
    the receptor curve C(t) the metrics are read from (modal only where every output
    time from the first positive one on was served by it)."""
    tol = site.tolerance
    t_all = np.append(times, t_end)
    lap = solve_laplace(col, t_all, z, initial)
    lq = quantities(lap)
    le = own_errors(lap)
    # the last row of cum is the design life at every depth; C there is not asked for
    mq = {"concentration": np.vstack([conc, lq["concentration"][-1:]]),
          "total_flux": lq["total_flux"], "cumulative_mass": cum,
          "budget": np.zeros((t_all.size, 0))}
    nan = {q: np.full(t_all.size, np.nan) for q in QUANTITIES}
    nan["total_flux"] = le["total_flux"]  # not a modal output here: taken from Laplace
    nan["budget"] = np.zeros(t_all.size)
    lq["budget"] = np.zeros((t_all.size, 0))
    le = dict(le, budget=np.zeros(t_all.size))
    bounds = concentration_bounds(col, initial, float(t_all.max()))
    choice = choose(t_all, [("modal", mq, nan), ("laplace", lq, le)], tol, bounds, col, z)
    if not choice.reliable.all():
        raise UnreliableResultError(
            f"boring column of {col.length:g} m: "
            + describe_refusal(t_all, choice, tol, "modal and laplace"),
            t_all[~choice.reliable])
    modal = choice.engine == "modal"
    conc = np.where(modal[:-1, None], conc, lq["concentration"][:-1])
    cum = np.where(modal[:, None], cum, lq["cumulative_mass"])
    if modal[:-1][times > 0].all():
        return conc, cum, modal_at
    depth = float(z[-1])

    def laplace_at(t):
        t = np.atleast_1d(np.asarray(t, float))
        return solve_laplace(col, t, [depth], initial).concentration[:, 0]
    return conc, cum, laplace_at


def _verified_metrics(col, initial, depth, t_start, t_end, level, tol, bt, pk_t, pk,
                      scale):
    """Check a realization's breakthrough and peak against the Laplace engine; if the
    modal curve is off there, read both metrics from the Laplace curve instead."""
    probe_t = [t for t in (bt, pk_t) if np.isfinite(t) and t > 0]
    if not probe_t:
        return bt, pk
    lap = solve_laplace(col, probe_t, [depth], initial)
    c, e = lap.concentration[:, 0], own_errors(lap)["concentration"]
    want = ([level] if np.isfinite(bt) and bt > 0 else []) + [pk]
    if np.all(np.abs(c - np.array(want)) <= tol * scale + e):
        return bt, pk

    def laplace_at(t):
        return solve_laplace(col, np.atleast_1d(t), [depth], initial).concentration[:, 0]
    bt2, _, pk2 = _curve_metrics(laplace_at, t_start, t_end, level, SCAN_SAMPLES)
    return bt2, pk2


def _realization_metrics(site, col, depth, t_start, times, initial=None):
    """(breakthrough time, peak concentration) of one Monte Carlo column, warnings."""
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        series = site_series(col, earliest_time_after_change(col, times), site.tolerance,
                             initial=initial)
    probe = _Probe(series, [depth])
    bt, pk_t, pk = _curve_metrics(lambda t: probe.concentration(t)[:, 0], t_start,
                                  site.design_life, site.screening_level, SCAN_SAMPLES)
    scale = concentration_bounds(col, initial, site.design_life).scale or max(abs(pk), 1e-300)
    bt, pk = _verified_metrics(col, initial or InitialState.clean(), depth, t_start,
                               site.design_life, site.screening_level, site.tolerance, bt,
                               pk_t, pk, scale)
    return bt, pk, tuple(str(w.message) for w in caught)


def _one_blas_thread():
    """BLAS limited to one thread while a chunk is solved: the products are small
    (modes x depths), and one thread per worker process keeps the cores from being
    oversubscribed (measured: 2-3x faster with two workers on two cores). Uses
    threadpoolctl when installed, else leaves BLAS as it is."""
    try:
        from threadpoolctl import threadpool_limits
    except ImportError:  # pragma: no cover - optional
        return contextlib.nullcontext()
    return threadpool_limits(limits=1, user_api="blas")


def solve_chunk(site, start: int, stop: int, samples=None) -> dict:
    """Solve borings ``start:stop`` of ``site``: fields on the common grid, metrics, and
    with ``samples`` (realizations x parameters, SI) the Monte Carlo summaries.

    Returns a dict of arrays with a leading station axis (see METRIC_KEYS, MC_KEYS,
    ``concentration``/``cumulative_mass`` of shape (n, time, depth), NaN below a
    boring's bottom) and ``warnings``: [(boring id, message)]. Columns are built from
    SI floats (:mod:`transport.site.columns`); borings with the same layer stack and
    receptor depth are solved once per process.
    """
    with _one_blas_thread():
        return _solve_chunk(site, start, stop, samples)


def _solve_chunk(site, start, stop, samples):
    times = np.asarray(site.times, dtype=float)
    grid = np.asarray(site.depths, dtype=float)
    n, nt, nz = stop - start, times.size, grid.size
    t_start = float(times[times > 0].min())
    settings = (site.fingerprint, site.path)
    _FIELDS_CACHE.bind(settings)
    _METRICS_CACHE.bind(settings)
    out = {"concentration": np.full((n, nt, nz), np.nan),
           "cumulative_mass": np.full((n, nt, nz), np.nan)}
    out.update({k: np.full(n, np.nan) for k in METRIC_KEYS})
    if samples is not None:
        out.update({k: np.full(n, np.nan) for k in MC_KEYS})
    notes = []
    names = [d.parameter for d in site.distributions]
    layers, q = material_layers(site)
    drawn = []
    if samples is not None:
        for j, draw in enumerate(samples):
            try:
                drawn.append(material_layers(site, dict(zip(names, draw))))
            except ScenarioError as exc:
                raise ScenarioError(exc.file, f"realization {j + 1}: {exc.key}",
                                    problem=exc.problem, fix="bound the distribution "
                                    "(lower/upper) so that draws stay valid") from None
    for k, boring in enumerate(site.borings[start:stop]):
        col = boring_column(site, boring, layers, q)
        initial = boring.initial_state
        key = (col, boring.receptor_depth, boring.initial)
        found = _FIELDS_CACHE.get(key)
        if found is None:
            found = _solve_column(site, col, boring.receptor_depth, times, grid, initial)
            _FIELDS_CACHE.put(key, found)
        keep, conc, cum, metrics, msgs = found
        notes += [(boring.id, m) for m in msgs]
        out["concentration"][k][:, keep] = conc
        out["cumulative_mass"][k][:, keep] = cum
        for name, value in zip(METRIC_KEYS, metrics):
            out[name][k] = value
        if samples is None:
            continue
        bt = np.empty(len(samples))
        pk = np.empty(len(samples))
        for j, (layers_j, q_j) in enumerate(drawn):
            col_j = boring_column(site, boring, layers_j, q_j)
            key = (col_j, boring.receptor_depth, boring.initial)
            found = _METRICS_CACHE.get(key)
            if found is None:
                found = _realization_metrics(site, col_j, boring.receptor_depth, t_start,
                                             times, initial)
                _METRICS_CACHE.put(key, found)
            bt[j], pk[j], msgs = found
            notes += [(boring.id, f"realization {j + 1}: {m}") for m in msgs]
        out["exceedance_probability"][k] = float(np.mean(~np.isnan(bt)))
        for name, value in zip(MC_KEYS[1:4], _quantiles(bt)):
            out[name][k] = value
        for name, value in zip(MC_KEYS[4:], np.quantile(pk, QUANTILES,
                                                        method="inverted_cdf")):
            out[name][k] = value
    out["warnings"] = notes
    return out


# ------------------------------------------------------------------------ execution
_WORKER = {}


def _init_worker(site, samples, parent=None):
    """Pool worker set-up: the site and draws, and death with the parent process.

    A SIGKILL of the parent leaves no worker behind: on Linux the kernel sends
    SIGKILL to the worker when its parent dies (prctl PR_SET_PDEATHSIG); elsewhere, and
    as a second guard, a daemon thread ends the worker when the process ``parent`` is
    gone (waiting on a pidfd where available, else polling twice a second).
    """
    _WORKER["site"], _WORKER["samples"] = site, samples
    if parent is None:
        return
    import sys
    import threading
    import time

    def exists(pid):
        try:
            os.kill(pid, 0)
        except ProcessLookupError:
            return False
        except OSError:  # EPERM: it exists
            return True
        return True

    direct = os.getppid() == parent  # fork and spawn; not a forkserver's child
    if direct and sys.platform.startswith("linux"):
        with contextlib.suppress(Exception):
            import ctypes
            import signal

            ctypes.CDLL(None, use_errno=True).prctl(1, int(signal.SIGKILL), 0, 0, 0)
    if not exists(parent) or (direct and os.getppid() != parent):
        os._exit(1)  # the parent died before the guard was set

    def watch():
        with contextlib.suppress(Exception):
            import select

            pidfd = os.pidfd_open(parent)
            select.select([pidfd], [], [])  # readable once the parent has exited
            os._exit(1)
        while exists(parent) and (not direct or os.getppid() == parent):
            time.sleep(0.5)
        os._exit(1)

    threading.Thread(target=watch, daemon=True, name="stratiflux-parent-watch").start()


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
    window = max(2, 2 * (workers or os.cpu_count() or 1))
    if scheduler is not None:
        yield from _on_cluster(site, chunks, samples, scheduler, window)
        return
    workers = workers or os.cpu_count() or 1
    if workers == 1 or len(chunks) == 1:
        for i, (a, b) in enumerate(chunks):
            yield i, solve_chunk(site, a, b, samples)
        return
    with ProcessPoolExecutor(max_workers=min(workers, len(chunks)), initializer=_init_worker,
                             initargs=(site, samples, os.getpid())) as pool:
        yield from _windowed(lambda a, b: pool.submit(_pool_chunk, a, b), chunks, window,
                             lambda pending: futures_wait(pending,
                                                          return_when=FIRST_COMPLETED).done,
                             lambda fut: fut.result())


#: Seconds to reach a Dask scheduler before the run is refused.
SCHEDULER_TIMEOUT = 10


class ClusterError(ValueError):
    """The Dask cluster cannot be reached or stopped answering (one paragraph, with the
    address and the fix)."""


def _cluster_failure(scheduler, exc, started):
    what = ("cannot reach a Dask scheduler at" if not started
            else "the Dask cluster stopped answering at")
    reason = str(exc).strip().splitlines()[0] if str(exc).strip() else type(exc).__name__
    if isinstance(exc, MemoryError):
        reason = "the address answers, but not in the Dask protocol"
    elif not isinstance(exc, OSError):  # cancelled futures: the scheduler went away
        reason = "its tasks were cancelled: the scheduler went away"
    fix = ("check that `dask scheduler` runs there and that the address and port are "
           "right (e.g. tcp://host:8786), or leave out --scheduler to use local worker "
           "processes" if not started else
           "chunks already finished are kept: run the same command again to resume, on "
           "a working cluster or with local worker processes (no --scheduler)")
    return ClusterError(f"{what} {scheduler!r} ({reason}); {fix}.")


def _on_cluster(site, chunks, samples, scheduler, window):
    """The chunks on a dask.distributed cluster; a scheduler that cannot be reached, or
    that speaks another protocol, or dies during the run becomes one ClusterError
    (within SCHEDULER_TIMEOUT seconds), never a traceback or a hang."""
    import logging
    from concurrent.futures import CancelledError

    from distributed import Client, wait
    started = False
    # the client logs its own tracebacks when the scheduler goes away; the run reports
    # the failure itself, in one paragraph
    logs = [logging.getLogger(name) for name in list(logging.root.manager.loggerDict)
            if name == "distributed" or name.startswith("distributed.")]
    levels = [log.level for log in logs]

    def restore():
        for log, level in zip(logs, levels):
            log.setLevel(level)
    for log in logs:
        log.setLevel(logging.CRITICAL)
    try:
        client = Client(scheduler, timeout=f"{SCHEDULER_TIMEOUT}s")
    except (OSError, MemoryError, ValueError, TypeError) as exc:
        restore()
        raise _cluster_failure(scheduler, exc, started) from None
    try:
        with client:
            started = True
            site_f, samples_f = client.scatter([site, samples], broadcast=True)
            window = max(window, 2 * max(1, sum(client.nthreads().values())))
            yield from _windowed(
                lambda a, b: client.submit(solve_chunk, site_f, a, b, samples_f, pure=False),
                chunks, window,
                lambda pending: wait(pending, return_when="FIRST_COMPLETED").done,
                lambda fut: (fut.result(), fut.release())[0])
    except (OSError, MemoryError, CancelledError) as exc:
        raise _cluster_failure(scheduler, exc, started) from None
    finally:
        restore()


def _windowed(submit, chunks, window, wait_done, result):
    """Keep at most ``window`` chunks in flight; yield (index, result) as they finish,
    dropping each future once read (memory flat in the number of chunks)."""
    pending, todo = {}, iter(enumerate(chunks))
    try:
        while True:
            for i, (a, b) in todo:
                pending[submit(a, b)] = i
                if len(pending) >= window:
                    break
            if not pending:
                return
            for fut in list(wait_done(set(pending))):
                yield pending.pop(fut), result(fut)
    except BaseException:
        for fut in pending:
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
    """Solve all borings in memory (for files, see :func:`transport.site.run.run_site`).

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
