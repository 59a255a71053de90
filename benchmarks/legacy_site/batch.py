"""Batch solution of a site: chunks of borings, run locally or on a Dask cluster.

Work is cut into chunks of consecutive borings (:func:`plan_chunks`). A chunk is solved
by :func:`transport.site.chunks.solve_chunk` (a pure function of the site, the chunk
bounds and the Monte Carlo draws), in this process (``workers=1``), in a local process
pool (:class:`concurrent.futures.ProcessPoolExecutor`, the default) or on a
``dask.distributed`` cluster (``scheduler=ADDRESS``): the same function and inputs, so
the three give identical numbers. :func:`solve_site` gathers the chunks in memory;
:func:`transport.site.run.run_site` writes them to files as they finish.
"""
from __future__ import annotations

import contextlib
import ctypes
import logging
import os
import select
import signal
import sys
import threading
import time
from concurrent.futures import FIRST_COMPLETED, CancelledError, ProcessPoolExecutor
from concurrent.futures import wait as futures_wait
from dataclasses import dataclass

import numpy as np

from .chunks import MC_KEYS, METRIC_KEYS, draw_samples, solve_chunk

__all__ = ["DEFAULT_CHUNK", "SCHEDULER_TIMEOUT", "plan_chunks", "iter_chunks", "solve_site",
           "SiteResult", "ClusterError"]

DEFAULT_CHUNK = 16


def plan_chunks(n: int, size: int = DEFAULT_CHUNK) -> list:
    """[(start, stop), ...] covering range(n) in consecutive chunks of ``size``."""
    size = max(1, int(size))
    return [(a, min(a + size, n)) for a in range(0, n, size)]


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
            ctypes.CDLL(None, use_errno=True).prctl(1, int(signal.SIGKILL), 0, 0, 0)
    if not exists(parent) or (direct and os.getppid() != parent):
        os._exit(1)  # the parent died before the guard was set

    def watch():
        with contextlib.suppress(Exception):
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
    from distributed import Client, wait  # optional and slow to import: only for a cluster

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
