"""A tolerance run's chunks on dask.distributed — an existing cluster (``--scheduler
tcp://HOST:8786``) or a local one started for the run (``--scheduler local``).

dask is an optional extra (``pip install -e ".[cluster]"``), imported only here and
only when a scheduler is asked for.  What goes to the workers: the chain (pickled,
a few kB), the chunk's slice of the draws (samples × inputs floats) and the
corner list; what comes back: the chunk's figures and pass/fail arrays.  The
draws are made in the calling process, from the run's seed and one stream per
source, exactly as in-process, and every chunk is computed by the same function
(``montecarlo._chunk``), whose results do not depend on the chunk's size or
position; the results are gathered in chunk order.  So the same seed gives
bit-identical numbers whatever the number of workers or chunks
(tests/test_cluster.py checks it against the in-process run)."""
from __future__ import annotations

import os
from contextlib import contextmanager

from ..errors import UsageError

INSTALL = "pip install -e \".[cluster]\" (dask.distributed)"


@contextmanager
def connect(scheduler: str, workers: int | None = None):
    """A dask client for ``scheduler`` ('local': a local cluster of ``workers`` processes,
    one thread each, closed afterwards; else the address of a running scheduler)."""
    try:
        from dask.distributed import Client, LocalCluster
    except ImportError:
        raise UsageError(f"--scheduler needs dask: {INSTALL}") from None
    if scheduler == "local":
        cluster = LocalCluster(n_workers=workers or os.cpu_count() or 1, threads_per_worker=1,
                               processes=True, dashboard_address=None)
        client = Client(cluster)
        try:
            yield client
        finally:
            client.close()
            cluster.close()
        return
    try:
        client = Client(scheduler, timeout="10s")
    except (OSError, TimeoutError) as exc:
        raise UsageError(f"--scheduler: no dask scheduler answers at '{scheduler}' ({exc})") from None
    try:
        yield client
    finally:
        client.close()


def map_in_order(client, fn, items: list, **kw):
    """``fn(item, **kw)`` for every item on the cluster; yields the results in order, each as
    soon as it and those before it have arrived."""
    for fut in client.map(fn, items, pure=False, **kw):
        yield fut.result()
