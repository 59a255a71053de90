"""Batch solution of a site: chunks of borings, run locally or on a Dask cluster.

Work is cut into chunks of consecutive borings (:func:`plan_chunks`). A chunk is solved
by :func:`transport.site.chunks.solve_chunk` (a pure function of the site, the chunk
bounds and the Monte Carlo draws), in this process (``workers=1``), in a local process
pool (:class:`concurrent.futures.ProcessPoolExecutor`, the default) or on a
``dask.distributed`` cluster (``scheduler=ADDRESS``): the same function and inputs, so
the three give identical numbers. :func:`solve_site` gathers the chunks in memory;
:func:`transport.site.run.run_site` writes them to files as they finish, from results
packed by the workers (:func:`transport.site.chunks.solve_packed`: the bytes of the
chunk file and their checksum, so the writing process only stores them).

A cluster task carries only its own borings (:func:`chunk_site`) and the Monte Carlo
draws (scattered once instead when they are large), so a worker that joins or replaces
a lost one needs nothing but the task. A lost worker's chunks are run again by the
scheduler; a chunk that keeps killing its workers, a cluster left without workers for
``worker_wait`` seconds or a scheduler that goes away end the run with one
:class:`ClusterError` (finished chunks are kept for the next run).
"""
from __future__ import annotations

import contextlib
import ctypes
import dataclasses
import logging
import os
import select
import signal
import sys
import threading
import time
from concurrent.futures import FIRST_COMPLETED, CancelledError, ProcessPoolExecutor
from concurrent.futures import wait as futures_wait
from concurrent.futures.process import BrokenProcessPool
from dataclasses import dataclass

import numpy as np

from transport.site.chunks import (MC_KEYS, METRIC_KEYS, draw_samples, solve_chunk,
                                   solve_packed)
from transport.solvers.laplace import kernel
from transport.solvers.modal import kernel as modal_kernel

__all__ = ["DEFAULT_CHUNK", "SCHEDULER_TIMEOUT", "WORKER_WAIT", "plan_chunks", "chunk_site",
           "iter_chunks", "solve_site", "SiteResult", "ClusterError"]

DEFAULT_CHUNK = 16
#: Seconds a Dask run waits while no worker is connected (all lost, or none started
#: yet) before it stops with ClusterError; 0 or None: wait indefinitely.
WORKER_WAIT = 300
#: Monte Carlo draws up to this size travel with every cluster task; larger ones are
#: scattered to the workers once.
INLINE_SAMPLES = 8 * 2 ** 20
_POLL = 2.0  # s between checks of a cluster's workers while waiting for chunks


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


def _pool_chunk(start, stop, packed=False):
    solve = solve_packed if packed else solve_chunk
    return solve(_WORKER["site"], start, stop, _WORKER["samples"])


def chunk_site(site, start: int, stop: int):
    """``site`` with only the borings ``start:stop``: all one chunk's task needs (the
    common grid, times and settings are the site's own fields)."""
    return dataclasses.replace(site, borings=tuple(site.borings[start:stop]))


def iter_chunks(site, chunks, samples=None, *, workers: int | None = None,
                scheduler: str | None = None, packed: bool = False,
                worker_wait: float | None = WORKER_WAIT):
    """Yield (index into ``chunks``, result of :func:`solve_chunk`) as chunks finish.

    ``scheduler``: a dask.distributed scheduler address (``tcp://host:8786``, or an
    in-process LocalCluster's address); else ``workers`` local processes (default: CPU
    count; 1 runs in this process). ``packed``: yield the
    :class:`~transport.site.chunks.PackedChunk` made by the worker instead.
    ``worker_wait``: seconds a cluster run waits while no worker is connected.
    """
    if not chunks:
        return
    solve = solve_packed if packed else solve_chunk
    window = max(2, 2 * (workers or os.cpu_count() or 1))
    if scheduler is not None:
        yield from _on_cluster(site, chunks, samples, scheduler, window, solve, worker_wait)
        return
    workers = workers or os.cpu_count() or 1
    if workers == 1 or len(chunks) == 1:
        for i, (a, b) in enumerate(chunks):
            yield i, solve(site, a, b, samples)
        return
    # the compiled kernels made (or loaded from numba's cache) once, here: the forked
    # workers inherit them instead of each compiling or loading them
    kernel.available()
    modal_kernel.available()
    modal_kernel.modes_available()
    try:
        with ProcessPoolExecutor(max_workers=min(workers, len(chunks)),
                                 initializer=_init_worker,
                                 initargs=(site, samples, os.getpid())) as pool:
            yield from _windowed(
                lambda a, b: pool.submit(_pool_chunk, a, b, packed), chunks, window,
                lambda pending: futures_wait(pending, return_when=FIRST_COMPLETED).done,
                lambda fut: fut.result())
    except BrokenProcessPool:
        raise ClusterError(
            "a local worker process died while solving (killed, or out of memory); "
            "chunks already finished are kept: run the same command again to resume, "
            "with fewer --workers or a smaller --chunk-size if memory is short") from None


#: Seconds to reach a Dask scheduler before the run is refused.
SCHEDULER_TIMEOUT = 10


class ClusterError(ValueError):
    """The Dask cluster cannot be reached, stopped answering or lost its workers, or a
    local worker process died (one paragraph, with the address and the fix)."""


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


#: Seconds beyond SCHEDULER_TIMEOUT that creating the Dask client may take before the
#: run gives up on it (the client enforces its own timeout; this bounds the rare case
#: where it does not return at all, e.g. its event-loop thread starved on a busy machine)
CONNECT_GRACE = 20


def _connect(Client, scheduler):
    """``Client(scheduler)`` (not the process default), created in a helper thread so
    that the run never waits longer than SCHEDULER_TIMEOUT + CONNECT_GRACE seconds for
    it: a TimeoutError (an OSError) then, the thread left behind as a daemon."""
    box = {}

    def connect():
        try:
            box["client"] = Client(scheduler, timeout=f"{SCHEDULER_TIMEOUT}s",
                                   set_as_default=False)
        except BaseException as exc:  # noqa: BLE001 - handed to the caller below
            box["error"] = exc
    thread = threading.Thread(target=connect, daemon=True, name="stratiflux-dask-connect")
    thread.start()
    thread.join(SCHEDULER_TIMEOUT + CONNECT_GRACE)
    if thread.is_alive():
        raise TimeoutError(f"no connection and no error from the Dask client within "
                           f"{SCHEDULER_TIMEOUT + CONNECT_GRACE} s")
    if "error" in box:
        raise box["error"]
    return box["client"]


def _on_cluster(site, chunks, samples, scheduler, window, solve, worker_wait):
    """The chunks on a dask.distributed cluster; a scheduler that cannot be reached, or
    that speaks another protocol, or dies during the run becomes one ClusterError
    (within SCHEDULER_TIMEOUT seconds), never a traceback or a hang; so do a chunk that
    killed its workers (``distributed.KilledWorker``) and a cluster left without any
    worker for ``worker_wait`` seconds."""
    # optional and slow to import: only for a cluster
    from distributed import Client, KilledWorker, wait

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
        # not the process's default client: a client left behind by a failed connection
        # would otherwise be picked up by every later dask or xarray call in the process
        # (xarray's NetCDF writer asks for a distributed lock and times out)
        client = _connect(Client, scheduler)
    except (OSError, MemoryError, ValueError, TypeError) as exc:
        restore()
        raise _cluster_failure(scheduler, exc, started) from None
    try:
        # current only inside this block (distributed.wait asks for the current client)
        with client, client.as_current():
            started = True
            draws = samples
            if samples is not None and samples.nbytes > INLINE_SAMPLES:
                draws = client.scatter(samples, broadcast=True)
            window = max(window, 2 * max(1, sum(client.nthreads().values())))
            watch = _WorkerWatch(client, wait, scheduler, worker_wait)
            yield from _windowed(
                lambda a, b: client.submit(solve, chunk_site(site, a, b), 0, b - a, draws,
                                           pure=False),
                chunks, window, watch.done, lambda fut: (watch.result(fut), fut.release())[0])
    except KilledWorker as exc:
        raise ClusterError(
            f"a chunk of the run stopped every Dask worker that ran it at {scheduler!r} "
            f"({str(exc).strip().splitlines()[0] if str(exc).strip() else 'KilledWorker'}): "
            "a worker process died while solving it (out of memory, or killed); chunks "
            "already finished are kept: run the same command again to resume, with more "
            "memory per worker or a smaller --chunk-size") from None
    except (OSError, MemoryError, CancelledError) as exc:
        raise _cluster_failure(scheduler, exc, started) from None
    finally:
        restore()


class _WorkerWatch:
    """Waits for the first of the pending futures, checking every _POLL seconds that
    the cluster still has a worker; none for ``limit`` seconds raises ClusterError."""

    def __init__(self, client, wait, scheduler, limit):
        self.client, self.wait, self.scheduler = client, wait, scheduler
        self.limit = limit if limit and limit > 0 else None
        self.alone_since = None

    def done(self, pending):
        while True:
            try:
                return self.wait(pending, timeout=_POLL, return_when="FIRST_COMPLETED").done
            except TimeoutError:
                self._check()

    def result(self, fut):
        """``fut.result()``, watched the same way: a finished chunk whose worker died
        before its result was fetched is computed again, which needs a worker (this
        waited forever when the last worker went at that moment)."""
        while True:
            try:
                return fut.result(timeout=_POLL)
            except TimeoutError:
                self._check()

    def _check(self):
        """Raise ClusterError once no worker has been connected for ``limit`` s."""
        if self.client.nthreads():
            self.alone_since = None
            return
        now = time.monotonic()
        self.alone_since = self.alone_since or now
        if self.limit is not None and now - self.alone_since >= self.limit:
            raise ClusterError(
                f"no Dask worker has been connected to the scheduler at "
                f"{self.scheduler!r} for {self.limit:g} s (workers lost, or none "
                "started); chunks already finished are kept: start workers (`dask "
                "worker ADDRESS`) and run the same command again to resume, or run "
                "it without --scheduler to use local worker processes") from None


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
               progress=None, worker_wait: float | None = WORKER_WAIT) -> SiteResult:
    """Solve all borings in memory (for files, see :func:`transport.site.run.run_site`).

    ``realizations``/``seed``/``sampling`` default to the site file's [uncertainty];
    0 realizations: deterministic only. ``progress(n_done_borings)`` is called as
    chunks finish. ``worker_wait``: see :func:`iter_chunks`.
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
    for i, res in iter_chunks(site, chunks, samples, workers=workers, scheduler=scheduler,
                              worker_wait=worker_wait):
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
