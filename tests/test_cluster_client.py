"""A failed connection to a Dask scheduler must leave nothing behind in the process.

distributed registers a client as the process's default unless told otherwise; xarray's
NetCDF writer then asks that client for a lock, so a client left behind by a failed
``--scheduler`` connection made every later file write in the same process time out
("Timed out trying to connect to tcp://..."), as the comparison tests did after the
cluster fault tests. (Behaviour of distributed's ``Client(set_as_default=...)`` and
xarray's scheduler detection: common practice, from their documentation.)
"""
from __future__ import annotations

import socket
import threading

import numpy as np
import pytest
import xarray as xr

from test_cluster_faults import _site
from transport.site import batch as site_batch
from transport.site.batch import ClusterError, iter_chunks

distributed = pytest.importorskip("distributed")


def test_failed_connection_leaves_no_default_client(monkeypatch, tmp_path):
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
        with pytest.raises(ClusterError):
            list(iter_chunks(_site(), [(0, 2)],
                             scheduler=f"tcp://127.0.0.1:{srv.getsockname()[1]}"))
    finally:
        stop.set()
        th.join(2)
        srv.close()
    with pytest.raises(ValueError):  # no default client in this process
        distributed.default_client()
    # and a NetCDF write does not go looking for one
    xr.Dataset({"c": ("x", np.arange(3.0))}).to_netcdf(tmp_path / "after.nc")
    assert (tmp_path / "after.nc").stat().st_size > 0


def test_a_result_lost_with_the_last_worker_stops_instead_of_hanging():
    """A chunk reported finished whose worker dies before its result is fetched is
    computed again, which needs a worker: fetching it waited forever when the last
    worker went at that moment (seen once in a full test run, the site run hanging in
    Future.result). The fetch is now watched like the wait: no worker for the
    ``--worker-wait`` limit stops the run with a ClusterError (common practice: a wait
    that cannot end must stop with a clear error). Fake client and future: the race
    itself cannot be forced on a real cluster."""
    import time

    from transport.site.batch import _WorkerWatch

    class Lost:
        calls = 0

        def result(self, timeout=None):
            Lost.calls += 1
            raise TimeoutError("the result is being recomputed")

    class NoWorkers:
        def nthreads(self):
            return {}
    watch = _WorkerWatch(NoWorkers(), wait=None, scheduler="tcp://127.0.0.1:1", limit=0.05)
    start = time.monotonic()
    with pytest.raises(ClusterError, match="no Dask worker has been connected"):
        watch.result(Lost())
    assert Lost.calls >= 2 and time.monotonic() - start < 5.0
