"""Dask cluster faults end in one paragraph within seconds: a closed port, a port that
speaks another protocol, a scheduler killed during the run (issue: nothing hangs,
never a traceback). A worker killed during a run of a cluster started from the command
line (``dask scheduler`` and ``dask worker`` processes): the run completes, or stops
with one paragraph and resumes, to the numbers of an uninterrupted local run
(identity); a cluster left without workers stops within ``--worker-wait`` seconds and
the same command without ``--scheduler`` resumes it. Only loopback addresses are used.
The sites are invented test inputs."""
import os
import signal
import socket
import subprocess
import sys
import threading
import time
from pathlib import Path

import netCDF4
import numpy as np
import pytest

from transport.site import batch as site_batch
from transport.site.batch import ClusterError, iter_chunks

pytest.importorskip("distributed")

SITE = Path(__file__).resolve().parents[1] / "data" / "site-demo" / "site.toml"


def _free_port():
    s = socket.socket()
    s.bind(("127.0.0.1", 0))
    port = s.getsockname()[1]
    s.close()
    return port


def _site():
    from transport.site.config import load_site
    return load_site(SITE)


def test_closed_port_is_one_error_within_the_timeout(monkeypatch):
    monkeypatch.setattr(site_batch, "SCHEDULER_TIMEOUT", 2)
    t0 = time.monotonic()
    with pytest.raises(ClusterError, match="cannot reach a Dask scheduler") as err:
        list(iter_chunks(_site(), [(0, 2)], scheduler=f"tcp://127.0.0.1:{_free_port()}"))
    assert time.monotonic() - t0 < 20
    assert "--scheduler" in str(err.value)


def test_a_client_that_never_returns_is_one_error_in_bounded_time(monkeypatch):
    """Creating the Dask client hung once in CI (its own timeout never fired); the run
    gives up after SCHEDULER_TIMEOUT + CONNECT_GRACE seconds with the usual paragraph."""
    import distributed

    release = threading.Event()

    class Stuck:
        def __init__(self, *args, **kwargs):
            release.wait(60)

    monkeypatch.setattr(distributed, "Client", Stuck)
    monkeypatch.setattr(site_batch, "SCHEDULER_TIMEOUT", 1)
    monkeypatch.setattr(site_batch, "CONNECT_GRACE", 1)
    t0 = time.monotonic()
    try:
        with pytest.raises(ClusterError, match="cannot reach a Dask scheduler") as err:
            list(iter_chunks(_site(), [(0, 2)], scheduler="tcp://127.0.0.1:9"))
        assert time.monotonic() - t0 < 15
        assert "within 2 s" in str(err.value) and "--scheduler" in str(err.value)
    finally:
        release.set()


def test_port_speaking_another_protocol_is_refused(monkeypatch):
    """A server that answers with HTTP text made the client try to allocate exabytes."""
    monkeypatch.setattr(site_batch, "SCHEDULER_TIMEOUT", 2)
    srv = socket.socket()
    srv.bind(("127.0.0.1", 0))
    srv.listen(4)
    stop = threading.Event()

    def serve():
        srv.settimeout(0.2)
        while not stop.is_set():
            try:
                conn, _ = srv.accept()
            except OSError:
                continue
            with conn:
                conn.sendall(b"HTTP/1.1 400 Bad Request\r\n\r\n" * 4)
    th = threading.Thread(target=serve, daemon=True)
    th.start()
    try:
        t0 = time.monotonic()
        with pytest.raises(ClusterError, match="not in the Dask protocol"):
            list(iter_chunks(_site(), [(0, 2)],
                             scheduler=f"tcp://127.0.0.1:{srv.getsockname()[1]}"))
        assert time.monotonic() - t0 < 20
    finally:
        stop.set()
        th.join(2)
        srv.close()


def _said(err, *phrases) -> bool:
    """Whether the command's message holds every phrase (it is wrapped to the terminal
    width, so a phrase may break across lines)."""
    flat = " ".join(err.split())
    return all(p in flat for p in phrases)


@pytest.mark.skipif(not sys.platform.startswith("linux"), reason="process control")
def test_scheduler_killed_during_the_run(tmp_path):
    port = _free_port()
    dask = [sys.executable, "-m", "distributed.cli.dask_scheduler"]
    sched = subprocess.Popen(dask + ["--host", "127.0.0.1", "--port", str(port),
                                     "--no-dashboard"],
                             stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    worker = subprocess.Popen([sys.executable, "-m", "distributed.cli.dask_worker",
                               f"tcp://127.0.0.1:{port}", "--nthreads", "1",
                               "--no-dashboard"],
                              stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    run = None
    try:
        time.sleep(6)
        run = subprocess.Popen(["stratiflux", "site", str(SITE), "-o", str(tmp_path / "out"),
                                "--realizations", "64", "--seed", "7", "--scheduler",
                                f"tcp://127.0.0.1:{port}"],
                               stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
        time.sleep(6)
        sched.kill()
        out, err = run.communicate(timeout=120)
        if run.returncode == 0:
            pytest.skip("the run finished before the scheduler was killed")
        assert run.returncode == 2
        assert "Traceback" not in err
        assert _said(err, "stopped answering", "run the same command again"), err
    finally:
        for p in (run, worker, sched):
            if p is not None and p.poll() is None:
                p.kill()
                p.wait(10)


# ------------------------------------------------- a cluster started from the command line
def _start_cluster(n_workers):
    """A scheduler and ``n_workers`` single-threaded workers, each its own process
    (``--no-nanny``: killing one kills that worker, nothing restarts it)."""
    port = _free_port()
    address = f"tcp://127.0.0.1:{port}"
    procs = [subprocess.Popen([sys.executable, "-m", "distributed.cli.dask_scheduler",
                               "--host", "127.0.0.1", "--port", str(port), "--no-dashboard"],
                              stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)]
    for _ in range(n_workers):
        procs.append(subprocess.Popen(
            [sys.executable, "-m", "distributed.cli.dask_worker", address, "--nthreads", "1",
             "--no-nanny", "--no-dashboard", "--death-timeout", "30"],
            stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL))
    from distributed import Client

    try:
        with Client(address, timeout="30s") as client:
            client.wait_for_workers(n_workers, timeout=60)
    except BaseException:
        _stop(procs)
        raise
    return address, procs


def _stop(procs):
    for p in procs:
        if p is not None and p.poll() is None:
            p.kill()
            p.wait(10)


FAULT_BORINGS = 12


def _fault_site(folder):
    """The invented test yard of test_site.py with 12 borings of three layers and eight
    output times, and 6 Monte Carlo realizations (a few tenths of a second per boring)."""
    from test_site import SITE_TOML, write_small_site

    rows = ["id,x [m],y [m],ground_elevation [m]"]
    log = ["id,top [m],bottom [m],material"]
    for k in range(FAULT_BORINGS):
        rows.append(f"F-{k:02d},{500000 + 12.5 * k:.1f},{5600000 + 7.5 * k:.1f},20.0")
        a, b = round(0.6 + 0.05 * k, 3), round(1.2 + 0.04 * k, 3)
        log += [f"F-{k:02d},0,{a},sand", f"F-{k:02d},{a},{b},clay",
                f"F-{k:02d},{b},{b + 1.1},sand"]
    toml = SITE_TOML.replace('times = ["1 yr", "5 yr", "20 yr"]',
                             'times = { start = "0.5 yr", stop = "30 yr", count = 8, '
                             'spacing = "log" }')
    extra = """
[uncertainty]
realizations = 6
seed = 3
[[uncertainty.parameters]]
parameter = "materials.clay.distribution_coefficient"
distribution = "lognormal"
median = "1.0 L/kg"
log_sd = 0.5
"""
    return write_small_site(folder, extra=extra, borings="\n".join(rows) + "\n",
                            log="\n".join(log) + "\n", toml=toml)


@pytest.fixture(scope="module")
def fault_reference(tmp_path_factory):
    """The site file and the NetCDF file of an uninterrupted run in this process."""
    from transport.site.config import load_site
    from transport.site.run import run_site

    folder = tmp_path_factory.mktemp("fault-site")
    path = _fault_site(folder)
    files = run_site(load_site(path), folder / "reference", workers=1, chunk_size=1)
    return path, files.netcdf


def _same_numbers(a, b):
    """Every variable of two site NetCDF files holds the same values (the history and
    creation date attributes differ)."""
    with netCDF4.Dataset(a) as x, netCDF4.Dataset(b) as y:
        assert set(x.variables) == set(y.variables)
        for name in y.variables:
            u, v = x[name][:], y[name][:]
            if np.ma.isMaskedArray(v) and v.dtype.kind == "f":
                np.testing.assert_array_equal(u.filled(np.nan), v.filled(np.nan), name)
            else:
                np.testing.assert_array_equal(u, v, name)


def _site_command(path, out, *options):
    # faulthandler on: a run that outlives its test's limit is stopped with SIGABRT,
    # which prints every thread's stack (see _finish)
    return subprocess.Popen(["stratiflux", "site", str(path), "-o", str(out),
                             "--chunk-size", "1", *options],
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
                            env=dict(os.environ, PYTHONFAULTHANDLER="1"))


def _finish(run, timeout):
    """(stdout, stderr) of a finished run; a run still going after ``timeout`` seconds
    fails the test with the stacks of all its threads (where it hangs)."""
    try:
        return run.communicate(timeout=timeout)
    except subprocess.TimeoutExpired:
        run.send_signal(signal.SIGABRT)
        try:
            _, err = run.communicate(timeout=30)
        except subprocess.TimeoutExpired:
            run.kill()
            _, err = run.communicate()
        pytest.fail(f"the site run did not end within {timeout} s; its threads:\n"
                    f"{(err or '')[-6000:]}")


def _kill_after_first_chunk(run, out, victims, limit=120):
    """SIGKILL ``victims`` once the run has stored its first chunk; returns the number
    of chunks stored at that moment (the run must still be going)."""
    folder = out / ".site.chunks"
    t0 = time.monotonic()
    while time.monotonic() - t0 < limit:
        stored = len(list(folder.glob("chunk-*.npz"))) if folder.is_dir() else 0
        if stored or run.poll() is not None:
            break
        time.sleep(0.02)
    assert run.poll() is None, "the run ended before a worker could be killed"
    for p in victims:
        os.kill(p.pid, signal.SIGKILL)
    return stored


@pytest.mark.skipif(not sys.platform.startswith("linux"), reason="process control")
def test_worker_killed_mid_run_completes_or_resumes_identically(tmp_path, fault_reference):
    """Two command-line workers, one SIGKILLed after the first stored chunk: the
    scheduler gives its chunks to the other worker and the run completes to the numbers
    of the uninterrupted local run; or it stops with one paragraph (exit 2, no
    traceback) and the same command without --scheduler resumes to them."""
    path, reference = fault_reference
    address, procs = _start_cluster(2)
    run = None
    try:
        out = tmp_path / "out"
        run = _site_command(path, out, "--scheduler", address, "--worker-wait", "20")
        stored = _kill_after_first_chunk(run, out, procs[1:2])
        assert stored < FAULT_BORINGS  # the kill came mid-run
        _, err = _finish(run, 180)
        if run.returncode != 0:
            assert run.returncode == 2 and "Traceback" not in err
            assert _said(err, "run the same command again"), err
            again = _site_command(path, out)
            _, err = _finish(again, 180)
            assert again.returncode == 0, err
            assert "Resumed" in err
        assert "Traceback" not in err
        _same_numbers(out / "site.nc", reference)
        assert not (out / ".site.chunks").exists()
    finally:
        if run is not None and run.poll() is None:
            run.kill()
        _stop(procs)


@pytest.mark.skipif(not sys.platform.startswith("linux"), reason="process control")
def test_cluster_without_workers_stops_and_resumes_locally(tmp_path, fault_reference):
    """The only command-line worker SIGKILLed after the first stored chunk: the run
    stops within --worker-wait seconds (plus the poll) with one paragraph naming the
    cause and the fix, keeps its finished chunks, and the same command without
    --scheduler reuses them and writes the numbers of the uninterrupted run."""
    path, reference = fault_reference
    address, procs = _start_cluster(1)
    run = None
    try:
        out = tmp_path / "out"
        run = _site_command(path, out, "--scheduler", address, "--worker-wait", "3")
        _kill_after_first_chunk(run, out, procs[1:])
        t_kill = time.monotonic()
        _, err = _finish(run, 120)
        assert run.returncode == 2, err
        assert time.monotonic() - t_kill < 60
        assert "Traceback" not in err
        assert _said(err, "no Dask worker has been connected", "run the same command"), err
        assert not (out / "site.nc").exists() and (out / "site.nc.progress.json").exists()
        again = _site_command(path, out, "--workers", "1")
        _, err = _finish(again, 180)
        assert again.returncode == 0, err
        assert "Resumed" in err
        _same_numbers(out / "site.nc", reference)
    finally:
        if run is not None and run.poll() is None:
            run.kill()
        _stop(procs)
