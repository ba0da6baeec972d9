"""A local Dask cluster that survives lost workers, and the worker running a study's point: what the
tests that kill a worker share."""

from __future__ import annotations

import time


def forgiving_cluster():
    """Two single-thread worker processes on 127.0.0.1 whose tasks may be lost ten times over."""
    import dask
    from distributed import LocalCluster

    with dask.config.set({"distributed.scheduler.allowed-failures": 10}):
        return LocalCluster(
            n_workers=2, threads_per_worker=1, processes=True, host="127.0.0.1", dashboard_address=None
        )


def busy_worker(client, timeout: float = 120.0):
    """The address of a worker running a study point (``mottle-point`` task) as soon as one does,
    or None after ``timeout`` seconds."""
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        busy = [w for w, keys in client.processing().items() if any("mottle-point" in k for k in keys)]
        if busy:
            return sorted(busy)[0]
        time.sleep(0.01)
    return None
