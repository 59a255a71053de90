"""A site run to files: resumable chunks, then NetCDF, GeoPackage, GeoJSON, CSV, map.

Finished chunks are saved as ``.npz`` files in ``.<stem>.chunks/`` and listed in the
sidecar ``<stem>.nc.progress.json`` next to the output; both are written through a
temporary name and :func:`os.replace`, so an interrupted run (Ctrl-C, a lost worker, a
power cut) continues from the last finished chunk when started again with the same
inputs (same files, realizations, seed, sampling and chunk size: a fingerprint is
stored). The NetCDF file is then assembled one chunk at a time (memory flat in the
number of borings) and renamed into place only when complete; the sidecar and the
chunk folder are removed after success.
"""
from __future__ import annotations

import contextlib
import hashlib
import json
import os
import shutil
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from .site_batch import DEFAULT_CHUNK, draw_samples, iter_chunks, plan_chunks

__all__ = ["run_site", "SiteRunFiles"]


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


def _write_json(path, data):
    tmp = f"{path}.tmp{os.getpid()}"
    with open(tmp, "w", encoding="utf-8") as fh:
        json.dump(data, fh)
    os.replace(tmp, path)


def _fingerprint(site, realizations, seed, sampling, chunk_size) -> str:
    from transport.io.netcdf import _version

    text = json.dumps([site.fingerprint, realizations, seed, sampling, chunk_size,
                       _version()])
    return hashlib.sha256(text.encode()).hexdigest()


def _save_chunk(folder: Path, index: int, result: dict):
    path = folder / f"chunk-{index:06d}.npz"
    tmp = folder / f".chunk-{index:06d}.{os.getpid()}.npz"
    arrays = {k: v for k, v in result.items() if k != "warnings"}
    arrays["warnings"] = np.array(["\t".join(w) for w in result["warnings"]], dtype=str)
    np.savez(tmp, **arrays)
    os.replace(tmp, path)


def _load_chunk(folder: Path, index: int) -> dict:
    with np.load(folder / f"chunk-{index:06d}.npz") as data:
        out = {k: data[k] for k in data.files if k != "warnings"}
        out["warnings"] = [tuple(w.split("\t", 1)) for w in data["warnings"]]
    return out


def run_site(site, out_dir, *, realizations=None, seed=None, sampling=None, workers=None,
             scheduler=None, chunk_size=DEFAULT_CHUNK, progress=None, history=None,
             stem=None) -> SiteRunFiles:
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
    """
    from transport.io.mapping import (plot_site_map, station_table, write_geojson,
                                      write_geopackage, write_metrics_csv)
    from transport.io.site_netcdf import SiteNetCDFWriter

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
    done = set()
    if previous.get("fingerprint") == key:
        done = {i for i in previous.get("done", []) if (folder / f"chunk-{i:06d}.npz").exists()}
    elif folder.exists():
        shutil.rmtree(folder)
    folder.mkdir(exist_ok=True)
    state = {"fingerprint": key, "seed": seed, "seed_drawn": drawn, "chunks": len(chunks),
             "chunk_size": chunk_size, "done": sorted(done)}
    _write_json(sidecar, state)
    samples = draw_samples(site, n_real, seed, sampling) if mc else None
    todo = [i for i in range(len(chunks)) if i not in done]
    if progress and done:
        progress(sum(chunks[i][1] - chunks[i][0] for i in done))
    notes = {}
    mc_info = {"realizations": n_real, "seed": seed, "sampling": sampling} if mc else None
    # the NetCDF file (a temporary until complete) takes each chunk as it arrives, so its
    # compression overlaps the solving; the .npz copies are what a resumed run reuses
    with SiteNetCDFWriter(nc_path, site, monte_carlo=mc_info, history=history) as writer:
        for index in sorted(done):
            result = _load_chunk(folder, index)
            writer.write_chunk(chunks[index][0], result)
            notes[index] = result["warnings"]
        for j, result in iter_chunks(site, [chunks[i] for i in todo], samples,
                                     workers=workers, scheduler=scheduler):
            index = todo[j]
            _save_chunk(folder, index, result)
            done.add(index)
            state["done"] = sorted(done)
            _write_json(sidecar, state)
            writer.write_chunk(chunks[index][0], result)
            writer.flush()
            notes[index] = result["warnings"]
            if progress:
                progress(chunks[index][1] - chunks[index][0])
    notes = [w for index in sorted(notes) for w in notes[index]]
    table = station_table(nc_path)
    files = SiteRunFiles(
        netcdf=str(nc_path),
        geopackage=write_geopackage(table, out / f"{stem}.gpkg"),
        geojson=write_geojson(table, out / f"{stem}.geojson"),
        csv=write_metrics_csv(table, out / f"{stem}_borings.csv", site.epsg),
        map=plot_site_map(table, out / f"{stem}_map.png"),
        chunks_computed=len(todo), chunks_reused=len(chunks) - len(todo),
        seed=seed if mc else None, warnings=tuple(notes))
    shutil.rmtree(folder, ignore_errors=True)
    with contextlib.suppress(OSError):
        sidecar.unlink()
    return files




