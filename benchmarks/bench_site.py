"""Site throughput and memory: borings per second, in-process vs local processes vs a
Dask LocalCluster, and peak memory of a run streamed to disk as the borings grow.

    python benchmarks/bench_site.py                # about 1-2 minutes on 2 cores
    python benchmarks/bench_site.py --borings 2000 --memory 1000 5000 20000
    python benchmarks/bench_site.py --repeat-logs  # borings share layer stacks

The site is the invented demo yard (data/site-demo/site.toml) on a regular 10 m grid of
borings, each with a FIVE-layer log (made ground, silty sand, clay, silty sand, clay)
whose thicknesses differ from boring to boring (no two stacks alike, so the per-stack
cache does not help; ``--repeat-logs`` cycles 48 stacks instead), and 100 log-spaced
output times (deterministic runs, no Monte Carlo unless ``--realizations``).

Rates are wall time of :func:`transport.site.run.run_site`, including writing every
output (NetCDF, GeoPackage, GeoJSON, CSV, map) and, for the cluster, excluding its
start-up. Peak memory is measured two ways for in-process runs (workers=1): the
tracemalloc peak (Python and numpy allocations) and the growth of the process's peak
resident set size (``ru_maxrss``); both should stay flat as the borings grow, because
chunks are streamed to disk.
"""
from __future__ import annotations

import argparse
import math
import resource
import shutil
import tempfile
import time
import tracemalloc
from pathlib import Path

from transport.site.chunks import clear_caches
from transport.site.config import load_site

DEMO = Path(__file__).resolve().parents[1] / "data" / "site-demo"
STACK = ("made ground", "silty sand", "clay", "silty sand", "clay")
RECEPTOR_ELEVATION = 36.0  # m, as in the demo site file


def _log_rows(bid: str, k: int, elevation: float, distinct: bool) -> list:
    """Five intervals from 0 m to 1 m below the receptor; thicknesses vary with k
    (a deterministic pattern: every boring distinct, or 48 stacks cycled)."""
    j = k if distinct else k % 48
    bottom = round(elevation - RECEPTOR_ELEVATION + 1.0, 2)
    weights = [1.0 + 0.5 * math.sin(1.3 * j + 2.1 * i) ** 2 + 0.001 * (j % 97) * (i + 1)
               for i in range(len(STACK))]
    faces = [0.0]
    for w in weights[:-1]:
        faces.append(round(faces[-1] + bottom * w / sum(weights), 3))
    faces.append(bottom)
    return [f"{bid},{a:g},{b:g},{m}" for a, b, m in zip(faces, faces[1:], STACK)]


def make_site(folder: Path, n: int, *, times: int = 100, distinct: bool = True):
    """The demo site with n five-layer borings and ``times`` output times."""
    text = (DEMO / "site.toml").read_text(encoding="utf-8")
    text = text.replace('count = 12, spacing = "log"', f'count = {times}, spacing = "log"')
    elevations = [ln.split(",")[3] for ln in
                  (DEMO / "borings.csv").read_text().splitlines()[2:] if ln]
    side = int(n ** 0.5) + 1
    rows, log_rows = [], []
    for k in range(n):
        bid = f"B{k:06d}"
        elev = float(elevations[k % len(elevations)])
        rows.append(f"{bid},{500000 + 10.0 * (k % side):.2f},"
                    f"{5700000 + 10.0 * (k // side):.2f},{elev:.2f}")
        log_rows += _log_rows(bid, k, elev, distinct)
    (folder / "borings.csv").write_text("id,x [m],y [m],ground_elevation [m]\n"
                                        + "\n".join(rows) + "\n")
    (folder / "layer-log.csv").write_text("id,top [m],bottom [m],material\n"
                                          + "\n".join(log_rows) + "\n")
    (folder / "site.toml").write_text(text)
    return load_site(folder / "site.toml")


def timed_run(site, out, realizations=0, **options):
    """Wall time of one site run, with the per-process column caches emptied first (local
    workers are forked from this process and would inherit them)."""
    # imported on the first run: the output libraries' import is part of the cold time
    from transport.site.run import run_site

    clear_caches()
    start = time.perf_counter()
    run_site(site, out, realizations=realizations, **options)
    return time.perf_counter() - start


def _maxrss_mib() -> float:
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0  # Linux: KiB


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--borings", type=int, default=600, help="borings for the rates")
    parser.add_argument("--memory", type=int, nargs="+", default=[500, 2000, 8000],
                        help="boring counts for the memory runs (in-process)")
    parser.add_argument("--workers", type=int, default=2)
    parser.add_argument("--chunk-size", type=int, default=64)
    parser.add_argument("--realizations", type=int, default=0,
                        help="Monte Carlo realizations per boring (rates only)")
    parser.add_argument("--repeat-logs", action="store_true",
                        help="cycle 48 layer stacks (the per-stack cache then applies)")
    parser.add_argument("--no-dask", action="store_true")
    args = parser.parse_args()
    distinct = not args.repeat_logs
    work = Path(tempfile.mkdtemp(prefix="bench-site-"))
    chunk = args.chunk_size
    try:
        site = make_site(work, args.borings, distinct=distinct)
        print(f"site: {len(site.borings)} borings, {len(site.borings[0].intervals)} layers, "
              f"{site.times.size} times x {site.depths.size} depths, "
              f"{'distinct' if distinct else '48 repeated'} stacks, "
              f"{args.realizations} realizations, chunks of {chunk}")
        mc = {"realizations": args.realizations}
        rates = {}
        # the first run in a process pays for importing the output libraries (NetCDF,
        # GeoPackage, matplotlib): measured on a small site, reported apart
        warm_dir = work / "warm"
        warm_dir.mkdir()
        t_cold = timed_run(make_site(warm_dir, 16, distinct=distinct), warm_dir / "out",
                           workers=1, chunk_size=chunk)
        print(f"first run in the process (16 borings, imports included): {t_cold:.2f} s")
        t_one = timed_run(site, work / "one", workers=1, chunk_size=chunk, **mc)
        rates["in-process (1 worker)"] = t_one
        t_local = timed_run(site, work / "local", workers=args.workers, chunk_size=chunk,
                            **mc)
        rates[f"local processes ({args.workers})"] = t_local
        if not args.no_dask:
            from distributed import LocalCluster

            with LocalCluster(n_workers=args.workers, threads_per_worker=1, processes=True,
                              dashboard_address=None) as cluster:
                # warm the workers (imports) on the small site, as for the in-process run
                timed_run(make_site(warm_dir, 16, distinct=distinct), warm_dir / "dask",
                          scheduler=cluster.scheduler_address, chunk_size=chunk)
                t_dask = timed_run(site, work / "dask", scheduler=cluster.scheduler_address,
                                   chunk_size=chunk, **mc)
            rates[f"dask LocalCluster ({args.workers})"] = t_dask
        for label, t in rates.items():
            print(f"{label:28s}: {args.borings / t:8.1f} borings/s "
                  f"({1e3 * t / args.borings:.2f} ms per boring)")
        for n in args.memory:
            folder = work / f"mem{n}"
            folder.mkdir()
            big = make_site(folder, n, distinct=distinct)
            rss0 = _maxrss_mib()
            tracemalloc.start()
            t = timed_run(big, folder / "out", workers=1, chunk_size=chunk)
            _, peak = tracemalloc.get_traced_memory()
            tracemalloc.stop()
            size = (folder / "out" / "site.nc").stat().st_size
            print(f"streamed {n:6d} borings (in-process): tracemalloc peak "
                  f"{peak / 2**20:6.1f} MiB, max RSS {_maxrss_mib():6.0f} MiB (+"
                  f"{_maxrss_mib() - rss0:.0f}), {n / t:6.1f} borings/s under the tracer, "
                  f"NetCDF {size / 2**20:.1f} MiB")
            shutil.rmtree(folder, ignore_errors=True)
    finally:
        shutil.rmtree(work, ignore_errors=True)


if __name__ == "__main__":
    main()
