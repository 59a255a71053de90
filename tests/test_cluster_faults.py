"""Dask cluster faults end in one paragraph within seconds: a closed port, a port that
speaks another protocol, a scheduler killed during the run (issue: nothing hangs,
never a traceback). Only loopback addresses are used."""
import socket
import subprocess
import sys
import threading
import time
from pathlib import Path

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
        assert "stopped answering" in err and "run the same command again" in err
    finally:
        for p in (run, worker, sched):
            if p is not None and p.poll() is None:
                p.kill()
                p.wait(10)
