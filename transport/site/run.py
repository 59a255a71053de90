"""A site run to files: resumable chunks, then NetCDF, GeoPackage, GeoJSON, CSV, map.

Finished chunks are saved as ``.npz`` files in ``.<stem>.chunks/`` and listed, with the
SHA-256 of each, in the sidecar ``<stem>.nc.progress.json`` next to the output; both are
written through a temporary name and :func:`os.replace`, the sidecar only after the
chunk file is complete. An interrupted run (Ctrl-C, SIGKILL, a lost worker, a power
cut) continues from the finished chunks when started again with the same inputs (same
files, realizations, seed, sampling and chunk size: a fingerprint is stored); a chunk
whose file is missing, truncated, empty or otherwise differs from its checksum is
computed again. The NetCDF file is assembled one chunk at a time (memory flat in the
number of borings) under a temporary name; the GIS files and the map are produced from
it, and only then are all five renamed into place together
(:class:`transport.io.atomic.OutputSet`), so a failure at any step leaves the previous
outputs as they were. The sidecar and the chunk folder are removed after success.
Temporary files of a killed earlier run of the same outputs are removed on the way.

The workers hand over each chunk with the bytes of its chunk file and their checksum
already made (:class:`transport.site.chunks.PackedChunk`): this process stores the
bytes as they are, and writes the NetCDF file in blocks of consecutive
chunks (at most BLOCK_BYTES of fields, or what arrived within BLOCK_SECONDS), with one
flush and one sidecar update per block; the sidecar is also written when the run is
interrupted (a SIGKILL loses at most the last BLOCK_SECONDS of chunks, computed again).
"""
from __future__ import annotations

import contextlib
import hashlib
import json
import re
import shutil
import time
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from transport.io.atomic import STARTED, OutputSet, atomic_write, clean_stale, process_alive
from transport.io.gis import station_table, write_geojson, write_geopackage, write_metrics_csv
from transport.io.netcdf import package_version
from transport.io.site_netcdf import SiteNetCDFWriter
from transport.site.batch import DEFAULT_CHUNK, WORKER_WAIT, iter_chunks, plan_chunks
from transport.site.chunks import draw_samples, unpack_result

__all__ = ["run_site", "SiteRunFiles", "BLOCK_BYTES", "BLOCK_SECONDS"]

#: Fields (bytes) of finished chunks held before they are written into the NetCDF file
#: as one block, and the longest time a finished chunk waits for its block (s).
BLOCK_BYTES = 32 * 2 ** 20
BLOCK_SECONDS = 2.0
_FIELDS = ("concentration", "cumulative_mass")


@dataclass(frozen=True)
class SiteRunFiles:
    """Paths written by :func:`run_site` and what the run did."""

    netcdf: str
    geopackage: str
    geojson: str
    csv: str
    map: str
    chunks_computed: int
    chunks_reused: int
    seed: int | None
    warnings: tuple
    chunks_damaged: int = 0  # resumable chunks found damaged and computed again


def _write_json(path, data):
    def write(tmp):
        with open(tmp, "w", encoding="utf-8") as fh:
            json.dump(data, fh)
    atomic_write(path, write)


def _fingerprint(site, realizations, seed, sampling, chunk_size) -> str:
    text = json.dumps([site.fingerprint, realizations, seed, sampling, chunk_size,
                       package_version()])
    return hashlib.sha256(text.encode()).hexdigest()


def _chunk_path(folder: Path, index: int) -> Path:
    return folder / f"chunk-{index:06d}.npz"


def _sha256(path) -> str:
    digest = hashlib.sha256()
    with open(path, "rb") as fh:
        for block in iter(lambda: fh.read(1 << 20), b""):
            digest.update(block)
    return digest.hexdigest()


def _store_chunk(folder: Path, index: int, packed) -> str:
    """Store one finished chunk (its packed bytes) atomically; returns their SHA-256."""
    def write(tmp):
        with open(tmp, "wb") as fh:
            fh.write(packed.data)
    atomic_write(_chunk_path(folder, index), write)
    return packed.sha256


def _load_chunk(folder: Path, index: int) -> dict:
    return unpack_result(_chunk_path(folder, index))


def _runs(held: dict):
    """(start, result) of each run of consecutive stations among the held chunk
    results {start: result}, arrays concatenated along the station axis."""
    run, end = [], None
    for start in sorted(held):
        if run and start != end:
            yield _joined(run)
            run = []
        run.append((start, held[start]))
        end = start + len(held[start]["breakthrough_time"])
    if run:
        yield _joined(run)


def _joined(run):
    if len(run) == 1:
        return run[0]
    parts = [r for _, r in run]
    return run[0][0], {k: np.concatenate([p[k] for p in parts]) for k in parts[0]
                       if k != "warnings"}


class _Blocks:
    """Finished chunks gathered for the NetCDF ``writer`` and written as blocks of
    consecutive stations, with one flush and ``on_flush()`` (the sidecar) per block:
    when BLOCK_BYTES of fields are held, BLOCK_SECONDS after the block's first chunk,
    and at :meth:`flush`. Memory stays at one block."""

    def __init__(self, writer, on_flush):
        self.writer, self.on_flush = writer, on_flush
        self.held, self.size, self.since = {}, 0, None

    def add(self, start: int, result: dict):
        self.held[start] = result
        self.size += sum(np.asarray(result[k]).nbytes for k in _FIELDS)
        self.since = self.since or time.monotonic()
        if self.size >= BLOCK_BYTES or time.monotonic() - self.since >= BLOCK_SECONDS:
            self.flush()

    def flush(self):
        if self.held:
            for start, block in _runs(self.held):
                self.writer.write_chunk(start, block)
            self.writer.flush()
        self.held, self.size, self.since = {}, 0, None
        self.on_flush()


def _chunk_intact(folder: Path, index: int, sha256: str | None, n_stations: int) -> bool:
    """True when the saved chunk is the one the sidecar vouches for.

    With a recorded checksum the file must match it byte for byte; a sidecar of an
    older version without checksums is checked by reading the chunk back."""
    path = _chunk_path(folder, index)
    try:
        if not path.is_file() or path.stat().st_size == 0:
            return False
        if sha256:
            return _sha256(path) == sha256
        result = _load_chunk(folder, index)
        return all(np.shape(result[k])[:1] == (n_stations,)
                   for k in ("concentration", "cumulative_mass", "breakthrough_time"))
    except Exception:  # noqa: BLE001 - any failure to read back means "compute again"
        return False


#: temporaries of earlier versions: chunks (``.chunk-000001.<pid>.npz``), sidecar
#: (``<stem>.nc.progress.json.tmp<pid>``), GIS files (``<stem>.part<pid>.gpkg``); the
#: NetCDF ones are found by :func:`transport.io.atomic.clean_stale`
_LEGACY_CHUNK_TMP = re.compile(r"^\.chunk-\d{6}\.(?P<pid>\d+)\.npz$")
_CHUNK = re.compile(r"^chunk-(?P<index>\d{6})\.npz$")


def _stale_legacy(path: Path, pid: int | None) -> bool:
    try:
        return path.stat().st_mtime < STARTED and not (pid is not None
                                                        and process_alive(pid))
    except OSError:
        return False


def _clean_chunk_folder(folder: Path, keep: set, n_chunks: int):
    """Remove from the tool's own chunk folder what a resumed run cannot use: chunk
    files the sidecar does not vouch for and temporaries of killed earlier runs."""
    if not folder.is_dir():
        return
    for entry in list(folder.iterdir()):
        chunk, legacy = _CHUNK.match(entry.name), _LEGACY_CHUNK_TMP.match(entry.name)
        if (chunk and int(chunk["index"]) not in keep) or (
                legacy and _stale_legacy(entry, int(legacy["pid"]))):
            with contextlib.suppress(OSError):
                entry.unlink()
    clean_stale([_chunk_path(folder, i) for i in range(n_chunks)])


def _clean_legacy_outputs(out: Path, stem: str):
    """Temporaries of earlier versions of this tool for the same outputs."""
    patterns = (re.compile(rf"^{re.escape(stem)}\.nc\.progress\.json\.tmp(?P<pid>\d+)$"),
                re.compile(rf"^{re.escape(stem)}(_borings|_map)?\.part(?P<pid>\d+)"
                           r"\.(gpkg|geojson|csv|png)$"))
    with contextlib.suppress(OSError):
        for entry in list(out.iterdir()):
            for pattern in patterns:
                match = pattern.match(entry.name)
                if match and entry.is_file():
                    pid = match.groupdict().get("pid")
                    if _stale_legacy(entry, int(pid) if pid else None):
                        with contextlib.suppress(OSError):
                            entry.unlink()


def run_site(site, out_dir, *, realizations=None, seed=None, sampling=None, workers=None,
             scheduler=None, chunk_size=DEFAULT_CHUNK, progress=None, history=None,
             stem=None, worker_wait=WORKER_WAIT) -> SiteRunFiles:
    """Solve ``site`` and write all outputs into ``out_dir`` (created if needed).

    Parameters
    ----------
    realizations, seed, sampling : Monte Carlo settings (default: the site file's)
    workers : local processes (default: CPU count; 1 runs in this process)
    scheduler : dask.distributed scheduler address; the chunks run on that cluster
    chunk_size : borings per chunk (the unit of work, of resumption and of writing)
    progress : callable(n_borings_done), e.g. a click progress bar's ``update``
    history : command line stored in the NetCDF ``history``
    stem : output file stem (default: the site file's stem)
    worker_wait : seconds a cluster run waits while no Dask worker is connected before
        it stops (finished chunks kept); 0 or None: indefinitely
    """
    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    stem = stem or Path(site.path).stem
    nc_path = out / f"{stem}.nc"
    sidecar = out / f"{stem}.nc.progress.json"
    folder = out / f".{stem}.chunks"
    n_real = site.realizations if realizations is None else int(realizations)
    sampling = sampling or site.sampling
    seed = site.seed if seed is None else seed
    mc = bool(n_real and site.distributions)
    previous = {}
    if sidecar.exists():
        with contextlib.suppress(OSError, ValueError):
            previous = json.loads(sidecar.read_text(encoding="utf-8"))
        if not isinstance(previous, dict):  # a damaged sidecar: start afresh
            previous = {}
    if mc and seed is None:  # reuse the seed of an interrupted run, else draw one
        seed = previous.get("seed") if previous.get("seed_drawn") else None
        drawn = True
        if seed is None:
            seed = int(np.random.SeedSequence().entropy % (2 ** 63))
    else:
        drawn = False
    key = _fingerprint(site, n_real if mc else 0, None if drawn else seed, sampling,
                       chunk_size)
    chunks = plan_chunks(len(site.borings), chunk_size)
    _clean_legacy_outputs(out, stem)
    done, checksums, damaged = set(), {}, 0
    if previous.get("fingerprint") == key:
        recorded = previous.get("sha256")
        recorded = recorded if isinstance(recorded, dict) else {}
        listed = previous.get("done")
        for i in listed if isinstance(listed, list) else []:
            if not (isinstance(i, int) and 0 <= i < len(chunks)):
                continue
            sha = recorded.get(str(i))
            if _chunk_intact(folder, i, sha, chunks[i][1] - chunks[i][0]):
                done.add(i)
                checksums[str(i)] = sha or _sha256(_chunk_path(folder, i))
            elif _chunk_path(folder, i).exists():
                damaged += 1
        _clean_chunk_folder(folder, done, len(chunks))
    elif folder.exists():
        shutil.rmtree(folder)
    folder.mkdir(exist_ok=True)
    state = {"fingerprint": key, "seed": seed, "seed_drawn": drawn, "chunks": len(chunks),
             "chunk_size": chunk_size, "done": sorted(done), "sha256": checksums}
    _write_json(sidecar, state)
    samples = draw_samples(site, n_real, seed, sampling) if mc else None
    todo = [i for i in range(len(chunks)) if i not in done]
    if progress and done:
        progress(sum(chunks[i][1] - chunks[i][0] for i in done))
    notes = {}
    mc_info = {"realizations": n_real, "seed": seed, "sampling": sampling} if mc else None
    paths = {"geopackage": out / f"{stem}.gpkg", "geojson": out / f"{stem}.geojson",
             "csv": out / f"{stem}_borings.csv", "map": out / f"{stem}_map.png"}
    # every output is produced under a temporary name and all five are renamed together
    # at the end of the block: a failure at any step leaves the previous files as they were
    with OutputSet() as stage:
        # the NetCDF file (a temporary until complete) takes the chunks in blocks as they
        # arrive, so its compression overlaps the solving; the .npz copies are what a
        # resumed run reuses, each vouched for by its checksum in the sidecar
        with SiteNetCDFWriter(nc_path, site, monte_carlo=mc_info, history=history,
                              stage=stage) as writer:
            vouched = dict(state)

            def vouch():  # the sidecar lists a chunk only after its file is complete
                if vouched["done"] != sorted(done):
                    state["done"] = sorted(done)
                    _write_json(sidecar, state)
                    vouched.update(state)
            blocks = _Blocks(writer, vouch)
            for index in sorted(done):
                result = _load_chunk(folder, index)
                blocks.add(chunks[index][0], result)
                notes[index] = result["warnings"]
            try:
                for j, packed in iter_chunks(site, [chunks[i] for i in todo], samples,
                                             workers=workers, scheduler=scheduler,
                                             packed=True, worker_wait=worker_wait):
                    index = todo[j]
                    checksums[str(index)] = _store_chunk(folder, index, packed)
                    done.add(index)
                    result = packed.result
                    notes[index] = result["warnings"]
                    blocks.add(chunks[index][0], result)
                    if progress:
                        progress(chunks[index][1] - chunks[index][0])
                blocks.flush()
            finally:
                vouch()  # also when interrupted: the next run reuses every stored chunk
        table = station_table(writer.tmp)
        write_geopackage(table, paths["geopackage"], stage=stage)
        write_geojson(table, paths["geojson"], stage=stage)
        write_metrics_csv(table, paths["csv"], site.epsg, stage=stage)
        # matplotlib is imported lazily: a site run starts without it
        from transport.plot.site_map import plot_site_map

        plot_site_map(table, paths["map"], stage=stage)
    notes = [w for index in sorted(notes) for w in notes[index]]
    files = SiteRunFiles(
        netcdf=str(nc_path), geopackage=str(paths["geopackage"]),
        geojson=str(paths["geojson"]), csv=str(paths["csv"]), map=str(paths["map"]),
        chunks_computed=len(todo), chunks_reused=len(chunks) - len(todo),
        seed=seed if mc else None, warnings=tuple(notes), chunks_damaged=damaged)
    shutil.rmtree(folder, ignore_errors=True)
    with contextlib.suppress(OSError):
        sidecar.unlink()
    return files
