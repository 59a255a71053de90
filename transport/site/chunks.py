"""A chunk of a site's borings solved in one process: caches, Monte Carlo draws and
their summaries.

A chunk of consecutive borings is solved by :func:`solve_chunk`, a pure function of
the site, the chunk bounds and the Monte Carlo draws, so that this process, a local
process pool and a Dask cluster (:mod:`transport.site.batch`) give identical numbers.
Per boring the column is built from SI floats (:mod:`transport.site.columns`: material
properties converted once, a Monte Carlo draw applied by arithmetic) and solved by
:func:`transport.site.boring.solve_boring`; each realization's column gives its
breakthrough time and peak (:func:`transport.site.boring.realization_metrics`),
summarised as the exceedance probability and empirical quantiles. Borings with
identical stacks are solved once per process (bounded caches); BLAS runs on one thread
per process.
"""
from __future__ import annotations

import contextlib
import hashlib
import io
from collections import OrderedDict
from dataclasses import dataclass

import numpy as np
from threadpoolctl import threadpool_limits

from transport.scenario.reader import ScenarioError
from transport.model.column import InputError
from transport.site.boring import MAX_MODES, realization_metrics, solve_boring
from transport.site.laplace_checks import stays_below
from transport.site.columns import boring_column, check_draws, material_layers
from transport.site.uncertainty import sample_matrix
from transport.solvers.checks import UnreliableResultError
from transport.solvers.modal.operator import SpectrumError, build_operator
from transport.solvers.modal.many import clean_series_many
from transport.solvers.modal.series import earliest_time_after_change
from transport.solvers.modal.sizing import required_modes
from transport.solvers.modal.eigenfunctions import modes_many
from transport.solvers.modal.spectrum import eigenvalues_many

__all__ = ["QUANTILES", "METRIC_KEYS", "MC_KEYS", "draw_samples", "clear_caches",
           "solve_chunk", "PackedChunk", "pack_result", "unpack_result", "solve_packed"]

FIELD_CACHE_SIZE = 128  # columns whose fields are kept (each nt x nz x 2 floats: 17 MB
#                        at 100 times x 84 depths)
METRIC_CACHE_SIZE = 100_000  # Monte Carlo columns whose two metrics are kept
QUANTILES = (0.05, 0.5, 0.95)
METRIC_KEYS = ("breakthrough_time", "peak_time", "peak_concentration", "receptor_mass",
               "receptor_depth", "n_modes", "boring_depth",
               # the design life and the whole run (transport.site.boring.views_metrics)
               "time_above_level", "peak_after_design_life", "run_breakthrough_time",
               "run_time_above_level", "run_peak_time", "run_peak_concentration",
               "run_receptor_mass", "peak_after_run_end", "run_end")
MC_KEYS = ("exceedance_probability", "breakthrough_time_p5", "breakthrough_time_p50",
           "breakthrough_time_p95", "peak_concentration_p5", "peak_concentration_p50",
           "peak_concentration_p95")



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


_DRAWN = {"key": None, "layers": None}  # the last sample matrix's material layers


def clear_caches():
    """Forget the columns solved so far in this process (and in local worker processes
    forked from it later); for benchmarks that must not reuse an earlier run."""
    _FIELDS_CACHE.bind(None)
    _METRICS_CACHE.bind(None)
    _DRAWN.update(key=None, layers=None)


def _drawn_layers(site, samples) -> list:
    """[(material layers, Darcy flux)] of every realization: derived once per process
    for a site and sample matrix (every chunk of a run shares them), not once per chunk.
    A draw the materials cannot take raises ScenarioError naming the realization."""
    if samples is None:
        return []
    samples = np.ascontiguousarray(samples, dtype=float)
    key = (site.fingerprint, site.path, samples.shape,
           hashlib.sha256(samples.tobytes()).hexdigest())
    if _DRAWN["key"] == key:
        return _DRAWN["layers"]
    names = [d.parameter for d in site.distributions]
    drawn = []
    for j, draw in enumerate(samples):
        try:
            drawn.append(material_layers(site, dict(zip(names, draw))))
        except ScenarioError as exc:
            raise ScenarioError(exc.file, f"realization {j + 1}: {exc.key}",
                                problem=exc.problem, fix="bound the distribution "
                                "(lower/upper) so that draws stay valid") from None
    _DRAWN.update(key=key, layers=drawn)
    return drawn


def shared_modes(cols, times, tolerance: float, compiled_modes: bool = False) -> list:
    """The modes each Monte Carlo column's series will ask for (the ``required_modes``
    first ones), computed for all the columns in shared passes over the layers
    (:func:`~transport.solvers.modal.spectrum.eigenvalues_many`, then
    :func:`~transport.solvers.modal.eigenfunctions.modes_many`: the same numbers as
    one column at a time, 2-3x cheaper for five-layer columns; the eigenvalue passes in
    the compiled kernel where it is available, also for a lone column: a boring's own).  None for a column this
    cannot size (no positive output time, an operator that cannot be built): its own
    solve then reports why, under its own name; all None if the shared solve fails, so
    that each column fails or succeeds on its own."""
    ops, ns, where = [], [], []
    for i, col in enumerate(cols):
        t_min = earliest_time_after_change(col, times)
        if t_min is None or t_min <= 0:
            continue
        try:
            op = build_operator(col)
        except InputError:
            continue
        ops.append(op)
        ns.append(required_modes(op, t_min, tolerance, MAX_MODES))
        where.append(i)
    out = [None] * len(cols)
    if not ops:
        return out
    try:
        found = modes_many(ops, eigenvalues_many(ops, ns, compiled=True),
                           compiled=compiled_modes)
    except SpectrumError:
        return out
    for i, md in zip(where, found):
        out[i] = md
    return out


def _shared_series(site, cols, times, known, initial, depth) -> list:
    """The series of a boring's Monte Carlo columns built side by side, with their
    fields at the receptor (:func:`~transport.solvers.modal.many.clean_series_many`:
    the numbers of each column's own build); None for a column built on its own (a
    measured initial state: every column)."""
    if initial is not None and initial.kind != "clean":
        return [None] * len(cols)
    t_mins = [earliest_time_after_change(col, times) for col in cols]
    return clean_series_many(cols, t_mins, site.tolerance, MAX_MODES, known, [depth])


@contextlib.contextmanager
def _naming(what):
    """Puts the boring (and realization) in front of a refusal's message: which column
    of the site no engine could vouch for, or which one the engines cannot take (a
    column Peclet number beyond what double precision represents)."""
    try:
        yield
    except UnreliableResultError as exc:
        raise UnreliableResultError(f"boring {what}: {exc}", exc.times,
                                    exc.quantities) from None
    except InputError as exc:
        raise InputError(f"boring {what}: {exc}") from None


def _one_blas_thread():
    """BLAS limited to one thread while a chunk is solved: the products are small
    (modes x depths), and one thread per worker process keeps the cores from being
    oversubscribed (measured: 2-3x faster with two workers on two cores)."""
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
    layers, q = material_layers(site)
    drawn = _drawn_layers(site, samples)
    for k, boring in enumerate(site.borings[start:stop]):
        col = boring_column(site, boring, layers, q)
        initial = boring.initial_state
        key = (col, boring.receptor_depth, boring.initial)
        found = _FIELDS_CACHE.get(key)
        if found is None:
            with _naming(boring.id):
                own = shared_modes([col], times, site.tolerance)[0]
                found = solve_boring(site, col, boring.receptor_depth, times, grid, initial,
                                     known=own)
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
        cols = [boring_column(site, boring, layers_j, q_j) for layers_j, q_j in drawn]
        keys = [(col_j, boring.receptor_depth, boring.initial) for col_j in cols]
        found_all = [_METRICS_CACHE.get(key) for key in keys]
        # a curve that cannot fall and ends below the level: the Laplace engine alone
        # (as realization_metrics reads it), without modes or a series
        for j, f in enumerate(found_all):
            if f is None:
                fast = stays_below(cols[j], initial, boring.receptor_depth, t_start,
                                   site.design_life, site.screening_level,
                                   site.tolerance)
                if fast is not None:
                    found_all[j] = fast + ((),)
                    _METRICS_CACHE.put(keys[j], found_all[j])
        todo = [j for j, f in enumerate(found_all) if f is None]
        known = dict(zip(todo, shared_modes([cols[j] for j in todo], times,
                                            site.tolerance, compiled_modes=True)))
        built = dict(zip(todo, _shared_series(site, [cols[j] for j in todo], times,
                                              [known[j] for j in todo], initial,
                                              boring.receptor_depth)))
        for j, col_j in enumerate(cols):
            found = found_all[j]
            if found is None:
                with _naming(f"{boring.id}, Monte Carlo realization {j + 1}"):
                    found = realization_metrics(site, col_j, boring.receptor_depth,
                                                t_start, times, initial, known[j],
                                                built[j], shortcut=False)
                _METRICS_CACHE.put(keys[j], found)
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


# ------------------------------------------------------------------ packed results
@dataclass(frozen=True, eq=False)
class PackedChunk:
    """A solved chunk with the bytes of its resumable chunk file (an uncompressed
    ``.npz`` of the arrays of :func:`solve_chunk`, warnings as ``id<TAB>message``
    strings) and their SHA-256, made by the worker: the process that writes the outputs
    stores the bytes as they are and writes ``result`` (the arrays) into the NetCDF
    file, without serialising, hashing or parsing anything."""

    data: bytes
    sha256: str
    result: dict


def pack_result(result: dict) -> PackedChunk:
    """The :class:`PackedChunk` of a :func:`solve_chunk` result."""
    arrays = {k: v for k, v in result.items() if k != "warnings"}
    arrays["warnings"] = np.array(["\t".join(w) for w in result["warnings"]], dtype=str)
    buffer = io.BytesIO()
    np.savez(buffer, **arrays)
    data = buffer.getvalue()
    return PackedChunk(data, hashlib.sha256(data).hexdigest(), result)


def unpack_result(data) -> dict:
    """The arrays and warnings ([(boring id, message)]) of packed chunk bytes, or of a
    path to a chunk file."""
    with np.load(io.BytesIO(data) if isinstance(data, bytes) else data) as npz:
        out = {k: npz[k] for k in npz.files if k != "warnings"}
        out["warnings"] = [tuple(w.split("\t", 1)) for w in npz["warnings"]]
    return out


def solve_packed(site, start: int, stop: int, samples=None) -> PackedChunk:
    """:func:`solve_chunk`, packed by :func:`pack_result` in the process that solved it."""
    return pack_result(solve_chunk(site, start, stop, samples))

