"""Site throughput and memory: column solves per second in one process, in local worker
processes and on a Dask cluster of real scheduler and worker processes started from the
command line, against the previous implementation run in the same process; peak memory
of runs streamed to disk as the borings grow.

    python benchmarks/bench_site.py                  # about 15 minutes on 2 cores
    python benchmarks/bench_site.py --borings 64 --realizations 1000
    python benchmarks/bench_site.py --memory 1000 10000 20000 --no-dask --no-previous
    python benchmarks/bench_site.py --phases            # where a run's time goes

The site is the invented demo yard (data/site-demo/site.toml) on a regular 10 m grid of
borings, each with a FIVE-layer log (made ground, silty sand, clay, silty sand, clay)
whose thicknesses differ from boring to boring (no two stacks alike, so the per-stack
cache does not help; ``--repeat-logs`` cycles 48 stacks instead), 100 log-spaced output
times and the demo's three uncertain parameters (``--realizations`` Monte Carlo
realizations per boring, Latin hypercube, seed 7; 128 by default: an ordinary
uncertainty study runs hundreds to a thousand realizations per boring, and a site's
throughput is then that of its realizations).

A column solve is one boring's deterministic column (fields on the grid, both time
windows, checked by the Laplace engine at every output time) or one Monte Carlo
realization's column (receptor metrics, checked by the Laplace engine at the
breakthrough and the peak, or read on the Laplace engine alone where the curve cannot
fall and ends below the level); rates are column solves per wall second of
:func:`transport.site.run.run_site`, every output written (NetCDF, GeoPackage,
GeoJSON, CSV, map). Each configuration runs the current code and the previous one
(``benchmarks/legacy_site``, the site modules before this work) on the same site,
interleaved, ``--repeat`` times each; the fastest run counts (the machine may be
shared: other load only ever slows a run).

The cluster is ``python -m distributed.cli.dask_scheduler`` and ``python -m
distributed.cli.dask_worker --nworkers N --nthreads 1`` started with subprocess on
127.0.0.1 (the ``dask scheduler`` / ``dask worker`` commands; the workers' profiler off
as in the recipe of docs/site.md, unless DASK_DISTRIBUTED__WORKER__PROFILE__ENABLED is
set), warmed on a small site,
its caches emptied before each timed run, and stopped afterwards; its rate excludes its
start-up. Per core it is compared with the same number of local processes.

Memory: each size runs in a fresh Python process (workers=1, 48 repeated stacks so that
10,000 borings take minutes, not hours: the streaming path is the same); its resident
set size is reported once the site is loaded (the site itself, about 1.3 KB per boring,
and the libraries), at its peak while chunks are streamed (sampled with psutil at every
finished chunk, when installed) and at its peak over the whole run (``ru_maxrss``,
loading, GIS files and map included).
"""
from __future__ import annotations

import argparse
import json
import math
import os
import resource
import shutil
import socket
import subprocess
import sys
import tempfile
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))  # legacy_site: the previous implementation

from transport.site.chunks import clear_caches  # noqa: E402
from transport.site.config import load_site  # noqa: E402

DEMO = HERE.parent / "data" / "site-demo"
STACK = ("made ground", "silty sand", "clay", "silty sand", "clay")
RECEPTOR_ELEVATION = 36.0  # m, as in the demo site file
SEED = 7


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


def _implementations():
    """{"current": run_site, "previous": run_site of benchmarks/legacy_site} and the
    functions that empty each one's per-process caches."""
    import legacy_site.chunks
    import legacy_site.run

    from transport.site.run import run_site

    return {"current": (run_site, clear_caches),
            "previous": (legacy_site.run.run_site, legacy_site.chunks.clear_caches)}


def _cpu_seconds() -> float:
    """User + system CPU time of this process and of its finished children."""
    return sum(r.ru_utime + r.ru_stime for r in (resource.getrusage(resource.RUSAGE_SELF),
                                                 resource.getrusage(resource.RUSAGE_CHILDREN)))


def timed_run(run_site, clear, site, out, realizations, client=None, **options):
    """(wall time, CPU time) of one site run, with the column caches of this process
    emptied first (local workers are forked from it and would inherit them), and those
    of the cluster's workers when ``client`` is given. The CPU time counts this process,
    its local worker processes and, on the cluster, the scheduler and worker processes:
    unlike the wall time it hardly changes when other programs load the machine."""
    clear()
    cluster_cpu = 0.0
    if client is not None:
        client.run(clear)
        cluster_cpu = -_cluster_cpu(client)
    cpu, start = _cpu_seconds(), time.perf_counter()
    run_site(site, out, realizations=realizations, seed=SEED, sampling="latin-hypercube",
             **options)
    wall = time.perf_counter() - start
    cpu = _cpu_seconds() - cpu
    if client is not None:
        cluster_cpu += _cluster_cpu(client)
    return wall, cpu + cluster_cpu


def _cluster_cpu(client) -> float:
    return (sum(client.run(_cpu_seconds).values()) + client.run_on_scheduler(_cpu_seconds))


# ------------------------------------------------------------------ command-line cluster
def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


class CommandLineCluster:
    """``dask scheduler`` and ``dask worker`` as separate processes on 127.0.0.1
    (through ``python -m distributed.cli...``, the modules behind those commands), with
    this folder on the workers' PYTHONPATH so that they can run the previous
    implementation too; stopped (SIGTERM, then SIGKILL) on exit."""

    def __init__(self, workers: int, log_dir: Path):
        self.n, self.log_dir, self.procs = workers, log_dir, []
        self.address = f"tcp://127.0.0.1:{_free_port()}"

    def __enter__(self):
        env = dict(os.environ)
        env["PYTHONPATH"] = os.pathsep.join([str(HERE), env.get("PYTHONPATH", "")])
        # the workers' statistical profiler samples the task thread's stack every 10 ms
        # and costs these GIL-bound tasks about 15 % of their CPU time (measured); the
        # site recipe (docs/site.md) turns it off the same way
        env.setdefault("DASK_DISTRIBUTED__WORKER__PROFILE__ENABLED", "False")
        port = self.address.rsplit(":", 1)[1]
        commands = [
            [sys.executable, "-m", "distributed.cli.dask_scheduler", "--host", "127.0.0.1",
             "--port", port, "--no-dashboard"],
            [sys.executable, "-m", "distributed.cli.dask_worker", self.address,
             "--nworkers", str(self.n), "--nthreads", "1", "--no-dashboard",
             "--memory-limit", "0"]]
        try:
            for k, cmd in enumerate(commands):
                log = open(self.log_dir / f"dask-{k}.log", "w")  # noqa: SIM115
                self.procs.append(subprocess.Popen(cmd, stdout=log, stderr=log, env=env))
                log.close()
                if k == 0:
                    self._wait_for_port(int(port))
            from distributed import Client

            with Client(self.address, timeout="30s") as client:
                client.wait_for_workers(self.n, timeout=120)
        except BaseException:
            self.__exit__(None, None, None)
            raise
        return self

    def _wait_for_port(self, port, limit=60.0):
        t0 = time.monotonic()
        while time.monotonic() - t0 < limit:
            if self.procs[0].poll() is not None:
                raise RuntimeError(f"dask scheduler exited; see {self.log_dir}/dask-0.log")
            with socket.socket() as s:
                if s.connect_ex(("127.0.0.1", port)) == 0:
                    return
            time.sleep(0.2)
        raise RuntimeError("dask scheduler did not start listening within 60 s")

    def __exit__(self, *exc):
        for p in reversed(self.procs):
            if p.poll() is None:
                p.terminate()
        for p in reversed(self.procs):
            try:
                p.wait(20)
            except subprocess.TimeoutExpired:
                p.kill()
                p.wait(10)
        self.procs = []
        return False


# ------------------------------------------------------------------------- memory
def memory_child(n: int, chunk: int, folder: Path):
    """One streamed run of n borings in this (fresh) process; prints a JSON line."""
    from transport.site.run import run_site

    try:
        import psutil
        proc = psutil.Process()
    except ImportError:  # pragma: no cover - optional
        proc = None
    site = make_site(folder, n, distinct=False)
    loaded = proc.memory_info().rss if proc is not None else 0
    streaming = {"rss": 0}

    def progress(_):
        if proc is not None:
            streaming["rss"] = max(streaming["rss"], proc.memory_info().rss)
    t0 = time.perf_counter()
    run_site(site, folder / "out", realizations=0, workers=1, chunk_size=chunk,
             progress=progress)
    wall = time.perf_counter() - t0
    size = (folder / "out" / "site.nc").stat().st_size
    print(json.dumps({"borings": n, "wall": wall, "loaded_rss": loaded,
                      "streaming_rss": streaming["rss"],
                      "maxrss": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024,
                      "netcdf": size}))


def measure_memory(n: int, chunk: int, work: Path) -> dict:
    folder = work / f"mem{n}"
    folder.mkdir()
    out = subprocess.run([sys.executable, __file__, "--memory-child", str(n),
                          "--chunk-size", str(chunk), "--work", str(folder)],
                         capture_output=True, text=True, check=True)
    shutil.rmtree(folder, ignore_errors=True)
    return json.loads(out.stdout.strip().splitlines()[-1])


# --------------------------------------------------------------------------- main
#: Steps of a site run timed by --phases (module, function, what it is); indented steps
#: run inside the ones above them, so their times overlap.
PHASES = (
    ("transport.site.chunks", "solve_boring", "a boring's column (its eigen-solve below)"),
    ("transport.site.chunks", "stays_below",
     "a realization below the level (Laplace alone)"),
    ("transport.site.chunks", "shared_modes", "eigen-solves (realizations, then the column)"),
    ("transport.site.chunks", "required_modes", "  mode counts"),
    ("transport.site.chunks", "eigenvalues_many", "  eigenvalues"),
    ("transport.site.chunks", "modes_many", "  eigenfunctions"),
    ("transport.site.chunks", "realization_metrics", "a Monte Carlo realization (the rest)"),
    ("transport.site.boring", "site_series", "  series set-up"),
    ("transport.site.boring", "modal_scan", "  modal scan and rounding bound"),
    ("transport.site.boring", "curve_metrics", "  receptor curve: scan and polish"),
    ("transport.site.boring", "verified_metrics", "  Laplace check of breakthrough, peak"),
    ("transport.site.boring", "early_metrics", "  window before the earliest output time"),
    ("transport.site.laplace_checks", "laplace_concentration",
     "  Laplace engine, receptor curves"),
    ("transport.site.boring", "solve_laplace", "  Laplace engine, fields and curves"),
    ("transport.plot.site_map", "plot_site_map", "the site map (drawn after the chunks)"),
)


def phases(site, out, realizations, chunk):
    """Where the time of one site run in this process goes: each step of
    :data:`PHASES` timed with time.perf_counter around every call (a profiler would
    inflate the many small calls of these steps several times over)."""
    import importlib

    totals, calls, saved = {}, {}, []
    for module, name, _ in PHASES:
        mod = importlib.import_module(module)
        if not hasattr(mod, name):
            continue
        fn = getattr(mod, name)

        def timed(*a, _fn=fn, _key=(module, name), **k):
            start = time.perf_counter()
            try:
                return _fn(*a, **k)
            finally:
                totals[_key] = totals.get(_key, 0.0) + time.perf_counter() - start
                calls[_key] = calls.get(_key, 0) + 1
        saved.append((mod, name, fn))
        setattr(mod, name, timed)
    try:
        clear_caches()
        start = time.perf_counter()
        from transport.site.run import run_site

        run_site(site, out, realizations=realizations, seed=SEED,
                 sampling="latin-hypercube", workers=1, chunk_size=chunk)
        wall = time.perf_counter() - start
    finally:
        for mod, name, fn in saved:
            setattr(mod, name, fn)
    print(f"where the time goes (one process, {wall:.2f} s wall, steps timed around each "
          "call):")
    for module, name, label in PHASES:
        key = (module, name)
        if key in calls:
            print(f"  {label:44s} {calls[key]:6d} calls {1e3 * totals[key] / calls[key]:8.3f} "
                  f"ms each {totals[key]:7.3f} s {totals[key] / wall:5.0%}")


def _row(label, results, columns):
    """One configuration: rate (column solves per wall second), wall and CPU ms per
    column solve, for the current and the previous implementation, and the speed-up."""
    cur = results.get(("current", label))
    old = results.get(("previous", label))
    text = f"{label:34s}"
    for r in (cur, old):
        text += (f" {columns / r[0]:7.1f} {1e3 * r[0] / columns:7.1f} {1e3 * r[1] / columns:7.1f}"
                 if r else f" {'-':>23s}")
    if cur and old:
        text += f"   x{old[0] / cur[0]:4.2f} x{old[1] / cur[1]:4.2f}"
    print(text)


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--borings", type=int, default=64, help="borings for the rates")
    parser.add_argument("--realizations", type=int, default=128,
                        help="Monte Carlo realizations per boring (rates)")
    parser.add_argument("--memory", type=int, nargs="*", default=[1000, 10000],
                        help="boring counts for the memory runs (fresh processes)")
    parser.add_argument("--workers", type=int, default=2)
    parser.add_argument("--chunk-size", type=int, default=2)
    parser.add_argument("--repeat-logs", action="store_true",
                        help="cycle 48 layer stacks (the per-stack cache then applies)")
    parser.add_argument("--repeat", type=int, default=2,
                        help="runs of each configuration; the fastest counts")
    parser.add_argument("--no-dask", action="store_true")
    parser.add_argument("--no-previous", action="store_true",
                        help="skip the previous implementation")
    parser.add_argument("--phases", action="store_true",
                        help="only time the steps of one run in this process")
    parser.add_argument("--memory-child", type=int, help=argparse.SUPPRESS)
    parser.add_argument("--work", type=Path, help=argparse.SUPPRESS)
    args = parser.parse_args()
    if args.memory_child:
        memory_child(args.memory_child, args.chunk_size, args.work)
        return
    distinct = not args.repeat_logs
    work = Path(tempfile.mkdtemp(prefix="bench-site-"))
    chunk, nw, real = args.chunk_size, args.workers, args.realizations
    impls = _implementations()
    if args.no_previous or args.phases:
        impls.pop("previous")
    try:
        site = make_site(work, args.borings, distinct=distinct)
        columns = args.borings * (1 + real)
        print(f"site: {len(site.borings)} borings x {len(site.borings[0].intervals)} "
              f"layers, {site.times.size} times x {site.depths.size} depths, "
              f"{'distinct' if distinct else '48 repeated'} stacks, {real} realizations "
              f"({columns} column solves), chunks of {chunk}; load average "
              f"{os.getloadavg()[0]:.2f} on {os.cpu_count()} CPUs")
        warm = work / "warm"
        warm.mkdir()
        small = make_site(warm, 4, distinct=distinct)
        for name, (run, clear) in impls.items():  # imports of the output libraries
            t_cold, _ = timed_run(run, clear, small, warm / name, 2, workers=1)
            print(f"first run in the process ({name}, 4 borings, imports included): "
                  f"{t_cold:.2f} s")
        if args.phases:
            phases(site, work / "phases", real, chunk)
            return
        results = {}
        labels = {"one": "1 process", "local": f"{nw} local processes",
                  "dask": f"{nw}-worker command-line Dask cluster"}

        def best(label, options, client=None):
            """The fastest of --repeat runs of each implementation, interleaved (the
            machine may be shared: other load slows runs, it never speeds them up)."""
            for rep in range(args.repeat):
                for name, (run, clear) in impls.items():
                    t, c = timed_run(run, clear, site, work / f"{label}-{name}-{rep}",
                                     real, client, chunk_size=chunk, **options)
                    key = (name, labels[label])
                    results[key] = min(results.get(key, (math.inf, math.inf)), (t, c))
        best("one", {"workers": 1})
        best("local", {"workers": nw})
        if not args.no_dask:
            with CommandLineCluster(nw, work) as cluster:
                from distributed import Client

                with Client(cluster.address) as client:
                    for name, (run, clear) in impls.items():  # imports on the workers
                        timed_run(run, clear, small, warm / f"dask-{name}", 2, client,
                                  scheduler=cluster.address, chunk_size=1)
                    best("dask", {"scheduler": cluster.address}, client)
        print(f"{'':34s} {'current':^23s} {'previous':^23s}   speed-up")
        print(f"{'':34s}" + " {:>7s} {:>7s} {:>7s}".format("col/s", "wall ms", "CPU ms") * 2
              + "   wall   CPU")
        for label in labels.values():
            _row(label, results, columns)
        if not args.no_dask:
            local = results[("current", labels["local"])]
            dask = results[("current", labels["dask"])]
            print(f"command-line cluster per core vs local processes: {local[0] / dask[0]:.0%}"
                  f" of the throughput, {local[1] / dask[1]:.0%} of the work per CPU second "
                  f"(target >= 80 %)")
        print(f"load average at the end: {os.getloadavg()[0]:.2f}")
        for n in args.memory:
            m = measure_memory(n, 16, work)
            stream = (f"{m['loaded_rss'] / 2**20:4.0f} MiB with the site loaded, peak "
                      f"{m['streaming_rss'] / 2**20:4.0f} MiB while streaming (+"
                      f"{(m['streaming_rss'] - m['loaded_rss']) / 2**20:.0f}), "
                      if m["streaming_rss"] else "peak ")
            print(f"memory, {n:6d} borings (fresh process, 48 stacks): RSS {stream}"
                  f"{m['maxrss'] / 2**20:4.0f} MiB whole run (GIS files and map "
                  f"included); {m['wall']:.0f} s, NetCDF {m['netcdf'] / 2**20:.0f} MiB")
    finally:
        shutil.rmtree(work, ignore_errors=True)


if __name__ == "__main__":
    main()
