"""Site throughput and memory: borings per second, local processes vs a Dask cluster,
and peak memory of a run streamed to disk as the number of borings grows.

    python benchmarks/bench_site.py                # about 2-3 minutes on 2 cores
    python benchmarks/bench_site.py --borings 400 --memory 500 2000 10000

The site is the invented demo yard (data/site-demo/site.toml) with its borings repeated
on a larger grid (deterministic runs, no Monte Carlo). Peak memory is the tracemalloc
peak of this process for an in-process run (workers=1), where every solve happens
under the tracer; it should not grow with the number of borings (chunks are streamed
to disk). Rates include writing all outputs.
"""
from __future__ import annotations

import argparse
import shutil
import tempfile
import time
import tracemalloc
from pathlib import Path

DEMO = Path(__file__).resolve().parents[1] / "data" / "site-demo"


def make_site(folder: Path, n: int):
    """The demo site with n borings: demo logs cycled over a regular 10 m grid."""
    from transport.site import load_site

    text = (DEMO / "site.toml").read_text(encoding="utf-8")
    borings = [ln for ln in (DEMO / "borings.csv").read_text().splitlines()[2:] if ln]
    logs = [ln for ln in (DEMO / "layer-log.csv").read_text().splitlines()[2:] if ln]
    by_id = {}
    for ln in logs:
        by_id.setdefault(ln.split(",")[0], []).append(ln.split(",", 1)[1])
    src = [b.split(",") for b in borings]
    side = int(n ** 0.5) + 1
    rows, log_rows = [], []
    for k in range(n):
        bid, _, _, elev = src[k % len(src)]
        new = f"B{k:05d}"
        rows.append(f"{new},{500000 + 10.0 * (k % side):.2f},"
                    f"{5700000 + 10.0 * (k // side):.2f},{elev}")
        log_rows += [f"{new},{rest}" for rest in by_id[bid]]
    (folder / "borings.csv").write_text("id,x [m],y [m],ground_elevation [m]\n"
                                        + "\n".join(rows) + "\n")
    (folder / "layer-log.csv").write_text("id,top [m],bottom [m],material\n"
                                          + "\n".join(log_rows) + "\n")
    (folder / "site.toml").write_text(text)
    return load_site(folder / "site.toml")


def timed_run(site, out, **options):
    from transport.site_run import run_site

    start = time.perf_counter()
    run_site(site, out, realizations=0, **options)
    return time.perf_counter() - start


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--borings", type=int, default=200, help="borings for the rates")
    parser.add_argument("--memory", type=int, nargs="+", default=[200, 1000],
                        help="boring counts for the memory runs")
    parser.add_argument("--workers", type=int, default=2)
    args = parser.parse_args()
    work = Path(tempfile.mkdtemp(prefix="bench-site-"))
    try:
        site = make_site(work, args.borings)
        print(f"site: {len(site.borings)} borings, {site.times.size} times x "
              f"{site.depths.size} depths")
        t_one = timed_run(site, work / "one", workers=1, chunk_size=16)
        print(f"in-process (1 worker)       : {args.borings / t_one:8.1f} borings/s "
              f"({1e3 * t_one / args.borings:.1f} ms per boring)")
        t_local = timed_run(site, work / "local", workers=args.workers, chunk_size=16)
        print(f"local processes ({args.workers} workers) : {args.borings / t_local:8.1f} "
              f"borings/s ({1e3 * t_local / args.borings:.1f} ms per boring)")
        from distributed import LocalCluster

        with LocalCluster(n_workers=args.workers, threads_per_worker=1, processes=True,
                          dashboard_address=None) as cluster:
            t_dask = timed_run(site, work / "dask", scheduler=cluster.scheduler_address,
                               chunk_size=16)
        print(f"dask LocalCluster ({args.workers} procs): {args.borings / t_dask:8.1f} "
              f"borings/s ({1e3 * t_dask / args.borings:.1f} ms per boring, incl. "
              "cluster start-up outside the timing)")
        for n in args.memory:
            folder = work / f"mem{n}"
            folder.mkdir()
            big = make_site(folder, n)
            tracemalloc.start()
            t = timed_run(big, folder / "out", workers=1, chunk_size=64)
            _, peak = tracemalloc.get_traced_memory()
            tracemalloc.stop()
            size = (folder / "out" / "site.nc").stat().st_size
            print(f"streamed {n:6d} borings: peak traced memory {peak / 2**20:7.1f} MiB, "
                  f"{n / t:6.1f} borings/s, NetCDF {size / 2**20:.1f} MiB")
    finally:
        shutil.rmtree(work, ignore_errors=True)


if __name__ == "__main__":
    main()
